"""Centered hierarchical model of mean pear yield per tree in eight invented
villages of the Fennick valley, written the way PyMC users write it."""

import numpy as np
import pymc as pm

yield_obs = np.array([12.1, 9.4, 15.0, 11.2, 8.7, 10.9, 14.3, 9.9])
se_obs = np.array([2.1, 1.8, 2.5, 2.0, 1.7, 1.9, 2.4, 1.6])

with pm.Model(coords={"village": range(8)}) as orchard:
    se = pm.Data("se", se_obs)
    mu = pm.Normal("mu", mu=0, tau=1e-6)
    tau = pm.HalfCauchy("tau", beta=5)
    theta = pm.Normal("theta", mu=mu, sigma=tau, dims="village")
    pm.Normal("yield", mu=theta, sigma=se, observed=yield_obs)
    idata = pm.sample(draws=500)
