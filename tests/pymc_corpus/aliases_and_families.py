"""Loaf weights from two ovens of an invented bakery (Ashcombe), written with an
unusual module alias and a directly imported distribution."""

import numpy as np
import pymc as bayes
from pymc import HalfNormal as PositiveNormal

dough = np.linspace(0.4, 0.9, 20)
loaf = 1.1 * dough + 0.05
burnt = np.zeros(20, dtype=int)
batches = np.full(20, 12)
rejects = np.zeros(20, dtype=int)

with bayes.Model() as bakery:
    x = bayes.MutableData("dough", dough)
    alpha = bayes.Flat("alpha")
    scale_free = bayes.HalfFlat("scale_free")
    beta = bayes.StudentT("beta", 3, 0, 2.5)
    sigma = PositiveNormal("sigma", sigma=1)
    share = bayes.Uniform("share", lower=-1, upper=1.5)
    shape = bayes.Gamma("shape", alpha=2, beta=0.5)
    var_oven = bayes.InverseGamma("var_oven", 0.001, 0.001)
    rate = bayes.Exponential("rate", lam=1)
    spread = bayes.LogNormal("spread", 0, 1)
    p_burn = bayes.Beta("p_burn", alpha=1, beta=1)
    loc_c = bayes.Cauchy("loc_c", alpha=0, beta=2)
    mu = bayes.Deterministic("mu", alpha + beta * x)
    bayes.Normal("loaf", mu, sigma, observed=loaf)
    bayes.Bernoulli("burnt", logit_p=alpha + shape * x, observed=burnt)
    bayes.Binomial("rejects", n=batches, p=p_burn, observed=rejects)
    bayes.NegativeBinomial("crumbs", mu=rate, alpha=shape, observed=rejects)
    bayes.Poisson("chips", mu=rate, observed=rejects)
