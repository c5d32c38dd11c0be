"""Invented scenario: melon weight (kg) against days of growth, PyMC version."""

import numpy as np
import pymc as pm

days = np.array([60, 64, 68, 72, 76, 80])
weight = np.array([2.1, 2.4, 2.5, 2.9, 3.0, 3.4])

with pm.Model() as model:
    alpha = pm.Normal("alpha", mu=0, sigma=5)
    beta = pm.Normal("beta", mu=0, sigma=1000)  # expect: priors.vague
    sigma = pm.HalfNormal("sigma", sigma=1)
    pm.Normal("weight", mu=alpha + beta * days, sigma=sigma, observed=weight)
