"""Log-prior per draw from a program's prior statements (auditor/logprior.py).

Sources of the numbers checked here:
- scipy.stats densities, term by term, for small Stan programs written here;
- the Stan Functions Reference (version 2.36, "Continuous distributions"): each family's log
  density written out from its formula, to check the mapping of Stan's parametrization to
  scipy's;
- the Stan Reference Manual ("Arithmetic and matrix operations on expressions": ``int / int``
  is integer division, rounding toward zero);
- the example project (examples/demo, see examples/README.md): its Stan programs with their
  CmdStan CSV draws, and its PyMC programs, whose fits hold PyMC's own ``log_prior`` group.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import special, stats

from auditor.loaders import load_draws
from auditor.loaders.stan_data import read_stan_data
from auditor.logprior import FAMILIES, evaluate_log_prior
from auditor.programs.pymc_source import read_pymc
from auditor.programs.stan.reader import read_stan, read_stan_text

DEMO = Path(__file__).resolve().parent.parent / "examples" / "demo"
# scipy against the same scipy calls summed in another order: rounding only.
TOL = 1e-10
C, D = 2, 50


def _program(text: str):
    summary = read_stan_text(text, Path("model.stan"))
    assert not summary.syntax_errors
    return summary


def _rng(seed: int = 0) -> np.random.Generator:
    return np.random.default_rng(seed)


def test_vectorized_statements_with_data_arguments() -> None:
    program = _program("""
data { int K; vector[K] m; real<lower=0> s; }
parameters { vector[K] beta; real<lower=0> sigma; real<lower=0, upper=1> p; real z; }
model {
  beta ~ normal(m, s);
  sigma ~ student_t(3, 0, 2 * s);
  p ~ beta(2, 5);
  z ~ std_normal();
}
""")
    rng = _rng(1)
    k = 4
    data = {"K": k, "m": np.array([0.0, 1.0, -1.0, 2.0]), "s": 1.5}
    post = {"beta": rng.normal(size=(C, D, k)), "sigma": rng.exponential(size=(C, D)),
            "p": rng.uniform(size=(C, D)), "z": rng.normal(size=(C, D))}
    res = evaluate_log_prior(program, post, data)
    assert res.left_out == [] and res.without_statement == []
    # scipy, term by term: the vector statement is the sum over its elements.
    terms = [
        stats.norm.logpdf(post["beta"], data["m"], 1.5).sum(axis=-1),
        stats.t.logpdf(post["sigma"], 3, 0, 3.0),
        stats.beta.logpdf(post["p"], 2, 5),
        stats.norm.logpdf(post["z"]),
    ]
    assert [e.variable for e in res.evaluated] == ["beta", "sigma", "p", "z"]
    assert [e.line for e in res.evaluated] == [5, 6, 7, 8]
    for got, want in zip(res.evaluated, terms, strict=True):
        np.testing.assert_allclose(got.values, want, rtol=0, atol=TOL)
    np.testing.assert_allclose(res.values, sum(terms), rtol=0, atol=TOL)


def test_hierarchical_and_truncated_statements() -> None:
    program = _program("""
data { int J; }
parameters {
  real mu; real<lower=0> tau; vector[J] theta; real<lower=0> lam; real<lower=-1, upper=3> c;
  real d;
}
model {
  mu ~ normal(0, 5);
  tau ~ cauchy(0, 2.5) T[0, ];
  theta ~ normal(mu, tau);
  lam ~ gamma(2, 0.5);
  c ~ normal(mu, 1) T[-1, 3];
  d ~ normal(-mu, tau / 2);
  target += exponential_lpdf(lam | 1);
}
""")
    rng = _rng(2)
    j = 5
    mu = rng.normal(size=(C, D))
    tau = rng.exponential(size=(C, D))
    post = {"mu": mu, "tau": tau, "theta": rng.normal(size=(C, D, j)),
            "lam": rng.gamma(2.0, size=(C, D)), "c": rng.uniform(-0.9, 2.9, size=(C, D)),
            "d": rng.normal(size=(C, D))}
    res = evaluate_log_prior(program, post, {"J": j})
    assert res.left_out == []
    terms = [
        stats.norm.logpdf(mu, 0, 5),
        # T[0, ]: minus the log probability of the truncation interval (Stan Reference
        # Manual, "Truncated distributions"); constant here.
        stats.cauchy.logpdf(tau, 0, 2.5) - stats.cauchy.logsf(0, 0, 2.5),
        stats.norm.logpdf(post["theta"], mu[..., None], tau[..., None]).sum(axis=-1),
        stats.gamma.logpdf(post["lam"], 2, scale=1 / 0.5),
        # T[-1, 3] with a location per draw: the normalizer differs per draw.
        stats.norm.logpdf(post["c"], mu, 1)
        - np.log(stats.norm.cdf(3, mu, 1) - stats.norm.cdf(-1, mu, 1)),
        stats.norm.logpdf(post["d"], -mu, tau / 2),
        stats.expon.logpdf(post["lam"]),
    ]
    for got, want in zip(res.evaluated, terms, strict=True):
        np.testing.assert_allclose(got.values, want, rtol=0, atol=TOL)
    np.testing.assert_allclose(res.values, sum(terms), rtol=0, atol=TOL)
    # The constant-argument truncation is the half-Cauchy density (scipy's halfcauchy).
    np.testing.assert_allclose(res.evaluated[1].values,
                               stats.halfcauchy.logpdf(tau, scale=2.5), rtol=0, atol=TOL)


def test_declared_bounds_add_no_term() -> None:
    # real<lower=0> sigma; sigma ~ normal(0, 1): Stan's target holds the normal density only
    # (the half-normal's log 2 is a constant Stan leaves out too).
    program = _program("parameters { real<lower=0> sigma; } model { sigma ~ normal(0, 1); }")
    sigma = _rng(3).exponential(size=(C, D))
    res = evaluate_log_prior(program, {"sigma": sigma})
    np.testing.assert_allclose(res.values, stats.norm.logpdf(sigma), rtol=0, atol=TOL)
    np.testing.assert_allclose(res.values, stats.halfnorm.logpdf(sigma) - math.log(2),
                               rtol=0, atol=TOL)


def test_integer_division_truncates_as_in_stan() -> None:
    # Stan Reference Manual: int / int is integer division; 5 / 2 is 2.
    program = _program("""
data { int N; real r; }
parameters { real y; }
model { y ~ normal(0, N / 2); y ~ normal(0, r / 2); }
""")
    y = _rng(4).normal(size=(C, D))
    res = evaluate_log_prior(program, {"y": y}, {"N": 5, "r": 5.0})
    np.testing.assert_allclose(res.evaluated[0].values, stats.norm.logpdf(y, 0, 2), atol=TOL)
    np.testing.assert_allclose(res.evaluated[1].values, stats.norm.logpdf(y, 0, 2.5), atol=TOL)


def _lgamma(x: float) -> float:
    return math.lgamma(x)


# (family, argument text, a value of y in the support, the Stan Functions Reference log density
# at y written out from its formula). Half-forms and flat: PyMC's (pymc.distributions docs).
_FORMULAS = [
    ("normal", "1, 2", 0.3,
     lambda y: -0.5 * math.log(2 * math.pi) - math.log(2) - 0.5 * ((y - 1) / 2) ** 2),
    ("std_normal", "", 0.3, lambda y: -0.5 * math.log(2 * math.pi) - 0.5 * y * y),
    ("student_t", "4, 1, 2", 0.3,
     lambda y: _lgamma(2.5) - _lgamma(2) - 0.5 * math.log(4 * math.pi) - math.log(2)
     - 2.5 * math.log1p(((y - 1) / 2) ** 2 / 4)),
    ("cauchy", "1, 2", 0.3,
     lambda y: -math.log(math.pi) - math.log(2) - math.log1p(((y - 1) / 2) ** 2)),
    ("double_exponential", "1, 2", 0.3,
     lambda y: -math.log(2) - math.log(2) - abs(y - 1) / 2),
    ("logistic", "1, 2", 0.3,
     lambda y: -(y - 1) / 2 - math.log(2) - 2 * math.log1p(math.exp(-(y - 1) / 2))),
    ("gumbel", "1, 2", 0.3,
     lambda y: -math.log(2) - (y - 1) / 2 - math.exp(-(y - 1) / 2)),
    ("skew_normal", "1, 2, 3", 0.3,
     lambda y: -math.log(2 * math.sqrt(2 * math.pi)) - 0.5 * ((y - 1) / 2) ** 2
     + math.log(math.erfc(-3 * ((y - 1) / 2) / math.sqrt(2)))),
    ("exp_mod_normal", "1, 2, 3", 0.3,
     lambda y: math.log(3 / 2) + 3 / 2 * (2 * 1 + 3 * 4 - 2 * y)
     + math.log(math.erfc((1 + 3 * 4 - y) / (math.sqrt(2) * 2)))),
    ("lognormal", "1, 2", 0.7,
     lambda y: -math.log(2 * math.sqrt(2 * math.pi) * y) - (math.log(y) - 1) ** 2 / 8),
    ("chi_square", "3", 0.7,
     lambda y: 0.5 * math.log(y) - y / 2 - 1.5 * math.log(2) - _lgamma(1.5)),
    ("inv_chi_square", "3", 0.7,
     lambda y: -1.5 * math.log(2) - _lgamma(1.5) - 2.5 * math.log(y) - 1 / (2 * y)),
    ("scaled_inv_chi_square", "3, 2", 0.7,
     lambda y: 1.5 * math.log(1.5) - _lgamma(1.5) + 3 * math.log(2) - 2.5 * math.log(y)
     - 3 * 4 / (2 * y)),
    ("exponential", "3", 0.7, lambda y: math.log(3) - 3 * y),
    ("gamma", "2, 3", 0.7,
     lambda y: 2 * math.log(3) - _lgamma(2) + math.log(y) - 3 * y),
    ("inv_gamma", "2, 3", 0.7,
     lambda y: 2 * math.log(3) - _lgamma(2) - 3 * math.log(y) - 3 / y),
    ("weibull", "2, 3", 0.7,
     lambda y: math.log(2) - math.log(3) + math.log(y / 3) - (y / 3) ** 2),
    ("frechet", "2, 3", 0.7,
     lambda y: math.log(2) - math.log(3) - 3 * math.log(y / 3) - (y / 3) ** -2),
    ("rayleigh", "2", 0.7, lambda y: math.log(y) - 2 * math.log(2) - y * y / 8),
    ("pareto", "0.5, 3", 0.7,
     lambda y: math.log(3) + 3 * math.log(0.5) - 4 * math.log(y)),
    ("pareto_type_2", "0.1, 2, 3", 0.7,
     lambda y: math.log(3) - math.log(2) - 4 * math.log1p((y - 0.1) / 2)),
    ("loglogistic", "2, 3", 0.7,
     lambda y: math.log(3) - math.log(2) + 2 * math.log(y / 2)
     - 2 * math.log1p((y / 2) ** 3)),
    ("beta", "2, 3", 0.7,
     lambda y: _lgamma(5) - _lgamma(2) - _lgamma(3) + math.log(y) + 2 * math.log(1 - y)),
    ("beta_proportion", "0.4, 5", 0.7,
     lambda y: _lgamma(5) - _lgamma(2) - _lgamma(3) + math.log(y) + 2 * math.log(1 - y)),
    ("uniform", "-1, 3", 0.7, lambda y: -math.log(4)),
    ("von_mises", "1, 2", 0.7,
     lambda y: 2 * math.cos(y - 1) - math.log(2 * math.pi * special.i0(2))),
    ("half_normal", "2", 0.7,
     lambda y: math.log(2) - 0.5 * math.log(2 * math.pi) - math.log(2) - y * y / 8),
    ("half_cauchy", "2", 0.7,
     lambda y: math.log(2) - math.log(math.pi) - math.log(2) - math.log1p((y / 2) ** 2)),
    ("half_student_t", "4, 2", 0.7,
     lambda y: math.log(2) + _lgamma(2.5) - _lgamma(2) - 0.5 * math.log(4 * math.pi)
     - math.log(2) - 2.5 * math.log1p((y / 2) ** 2 / 4)),
    ("flat", "", 0.7, lambda y: 0.0),
    ("half_flat", "", 0.7, lambda y: 0.0),
]


def test_every_mapped_family_is_checked() -> None:
    assert {f for f, *_ in _FORMULAS} == set(FAMILIES)


@pytest.mark.parametrize(("family", "args", "y", "formula"), _FORMULAS,
                         ids=[f for f, *_ in _FORMULAS])
def test_family_matches_stan_functions_reference(family: str, args: str, y: float,
                                                 formula) -> None:
    program = _program(f"parameters {{ real y; }} model {{ y ~ {family}({args}); }}")
    res = evaluate_log_prior(program, {"y": np.full((1, 2), y)})
    assert res.left_out == []
    np.testing.assert_allclose(res.values, formula(y), rtol=1e-12, atol=1e-12)


def test_dirichlet_on_a_simplex() -> None:
    # Functions Reference, "Dirichlet distribution": log Gamma(sum a) - sum log Gamma(a_k)
    # + sum (a_k - 1) log theta_k; compared with scipy.stats.dirichlet draw by draw.
    program = _program("""
data { vector[3] a; }
parameters { simplex[3] w; }
model { w ~ dirichlet(a); }
""")
    a = np.array([1.5, 2.0, 3.0])
    w = _rng(5).dirichlet(a, size=(C, D))
    res = evaluate_log_prior(program, {"w": w}, {"a": a})
    want = np.array([[stats.dirichlet.logpdf(w[c, d], a) for d in range(D)] for c in range(C)])
    np.testing.assert_allclose(res.values, want, rtol=0, atol=TOL)


def test_statements_that_cannot_be_evaluated_are_named_with_line_and_reason() -> None:
    program = _program("""
data { int J; vector[J] x; }
transformed data { real c = 2; }
parameters {
  real mu; real<lower=0> tau; vector[J] theta; real<lower=0> sigma; vector[3] b;
  vector[J] g; real e; real h; real q; cov_matrix[2] S;
}
model {
  mu ~ normal(0, 1);
  for (j in 1:J) theta[j] ~ normal(mu, tau);
  tau ~ normal(0, c);
  S ~ wishart(4, diag_matrix(rep_vector(1, 2)));
  log(sigma) ~ normal(0, 1);
  g ~ normal(x, exp(mu));
  b ~ normal(x, 1);
  h ~ normal(0, 1);
  target += normal_lpdf(e | 0, 1) - 0.5;
  q ~ normal(mu, -1);
  e ~ normal(0, undefined_name);
}
""")
    rng = _rng(6)
    j = 4
    post = {"mu": rng.normal(size=(C, D)), "tau": rng.exponential(size=(C, D)),
            "theta": rng.normal(size=(C, D, j)), "sigma": rng.exponential(size=(C, D)),
            "b": rng.normal(size=(C, D, 3)), "g": rng.normal(size=(C, D, j)),
            "e": rng.normal(size=(C, D)), "q": rng.normal(size=(C, D)),
            "S": np.broadcast_to(np.eye(2), (C, D, 2, 2))}
    res = evaluate_log_prior(program, post, {"J": j, "x": np.arange(j, dtype=float)})
    assert [e.line for e in res.evaluated] == [9]
    np.testing.assert_allclose(res.values, stats.norm.logpdf(post["mu"]), rtol=0, atol=TOL)
    reasons = {(s.line, s.variable): s.reason for s in res.left_out}
    expected = {
        (10, "theta"): "indexed",
        (11, "tau"): "`c` is transformed data not found in the data",
        (12, "S"): "family `wishart` is not mapped",
        (13, "sigma"): "is not the variable `sigma` itself",
        (14, "g"): "not a simple expression",
        (15, "b"): "shape (4), the left-hand side shape (3)",
        (16, "h"): "`h` is not in the draws",
        (17, "e"): "part of a larger `target +=` expression",
        (18, "q"): "not finite at 100 of 100 draws",
        (19, "e"): "`undefined_name` is neither data nor a variable in the draws",
    }
    assert set(reasons) == set(expected)
    for key, words in expected.items():
        assert words in reasons[key], (key, reasons[key])
    assert {s.text for s in res.left_out} >= {"theta[j] ~ normal(mu, tau);",
                                             "log(sigma) ~ normal(0, 1);"}


def test_nothing_evaluated_gives_no_values_and_flat_parameters_are_listed() -> None:
    program = _program("""
parameters { real a; vector[2] b; }
model { b[1] ~ normal(0, 1); }
""")
    res = evaluate_log_prior(program, {"a": np.zeros((C, D)), "b": np.zeros((C, D, 2))})
    assert res.values is None
    assert res.without_statement == ["a"]
    assert [s.line for s in res.left_out] == [3]


def test_xarray_dataset_with_chain_and_draw_not_first() -> None:
    xr = pytest.importorskip("xarray")
    program = _program("parameters { vector[3] t; } model { t ~ normal(1, 2); }")
    t = _rng(7).normal(size=(3, C, D))
    ds = xr.Dataset({"t": (("t_dim", "chain", "draw"), t)})
    res = evaluate_log_prior(program, ds)
    want = stats.norm.logpdf(np.moveaxis(t, 0, -1), 1, 2).sum(axis=-1)
    np.testing.assert_allclose(res.values, want, rtol=0, atol=TOL)


# --- the example project ------------------------------------------------------------------


_STAN_DEMO = [
    ("counts_negbin", "counts"), ("counts_poisson", "counts"), ("wax_flat", "wax"),
    ("yards_centered", "yards"), ("yards_noncentered", "yards"),
]


@pytest.mark.parametrize(("model", "data"), _STAN_DEMO, ids=[m for m, _ in _STAN_DEMO])
def test_demo_stan_programs_evaluate(model: str, data: str) -> None:
    program = read_stan(DEMO / "models" / f"{model}.stan")
    loaded = load_draws(sorted((DEMO / "fits").glob(f"{model}-*.csv")))
    values, problems = read_stan_data(DEMO / "data" / f"{data}.json")
    assert loaded.tree is not None and not problems
    post = loaded.tree["posterior"].ds
    res = evaluate_log_prior(program, post, values)
    # Every prior statement of the demo's programs is simple (examples/demo/models).
    assert res.left_out == []
    assert res.values is not None and res.values.shape == (4, 1000)
    assert np.all(np.isfinite(res.values))
    if model == "wax_flat":
        assert res.without_statement == ["beta"]  # built without a prior (examples/README.md)
    if model == "yards_centered":
        mu, tau = post["mu"].values, post["tau"].values
        theta = post["theta"].transpose("chain", "draw", ...).values
        want = (stats.norm.logpdf(mu, 0, 5) + stats.norm.logpdf(tau, 0, 5)
                + stats.norm.logpdf(theta, mu[..., None], tau[..., None]).sum(axis=-1))
        np.testing.assert_allclose(res.values, want, rtol=0, atol=TOL)


@pytest.mark.parametrize("model", ["harvest_informed", "harvest_vague", "wax_vague"])
def test_demo_pymc_programs_equal_pymc_log_prior(model: str) -> None:
    xr = pytest.importorskip("xarray")
    program = read_pymc(DEMO / "models" / f"{model}.py")
    tree = xr.open_datatree(DEMO / "fits" / f"{model}.nc")
    res = evaluate_log_prior(program, tree["posterior"].ds)
    assert res.left_out == []
    # PyMC's own log_prior group (written by pymc at sampling time), in float32: about 7
    # significant digits of values near -5.
    lp = tree["log_prior"].ds
    want = sum(lp[v].values.astype(np.float64) for v in lp.data_vars)
    np.testing.assert_allclose(res.values, want, rtol=0, atol=5e-6)
