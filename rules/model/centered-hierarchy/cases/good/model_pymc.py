"""Invented scenario: the four fictional bakeries' tasting-event uplift, non-centered PyMC."""

import numpy as np
import pymc as pm

uplift = np.array([6.0, -1.5, 3.2, 9.8])
se = np.array([8.0, 10.0, 12.0, 9.0])

with pm.Model() as model:
    mu = pm.Normal("mu", mu=0, sigma=5)
    tau = pm.HalfNormal("tau", sigma=5)
    z = pm.Normal("z", mu=0, sigma=1, shape=4)
    theta = pm.Deterministic("theta", mu + tau * z)
    pm.Normal("uplift", mu=theta, sigma=se, observed=uplift)
