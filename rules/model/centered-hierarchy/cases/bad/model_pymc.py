"""Invented scenario: the four fictional bakeries' tasting-event uplift, PyMC version."""

import numpy as np
import pymc as pm

uplift = np.array([6.0, -1.5, 3.2, 9.8])
se = np.array([8.0, 10.0, 12.0, 9.0])

with pm.Model() as model:
    mu = pm.Normal("mu", mu=0, sigma=5)
    tau = pm.HalfNormal("tau", sigma=5)
    theta = pm.Normal("theta", mu=mu, sigma=tau, shape=4)  # expect: model.centered-hierarchy
    pm.Normal("uplift", mu=theta, sigma=se, observed=uplift)
