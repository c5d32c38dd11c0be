"""Invented scenario: rainfall totals of a fictional hill farm, in millimetres."""

import numpy as np
import pymc as pm

rain = np.array([12.0, 30.5, 8.2, 19.9, 25.1])

with pm.Model() as model:
    level = pm.Normal("level", mu=20, sigma=10)
    spread = pm.HalfNormal("spread", sigma=10)
    share = pm.Uniform("share", lower=0, upper=1)
    pm.Normal("rain", mu=level * share, sigma=spread, observed=rain)
