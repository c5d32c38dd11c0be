"""Invented scenario: rainfall totals of a fictional hill farm, in millimetres."""

import numpy as np
import pymc as pm

rain = np.array([12.0, 30.5, 8.2, 19.9, 25.1])

with pm.Model() as model:
    level = pm.Flat("level")  # expect: priors.flat
    spread = pm.HalfFlat("spread")  # expect: priors.flat
    skew = pm.Uniform("skew", lower=-250, upper=250)  # expect: priors.flat
    pm.SkewNormal("rain", mu=level, sigma=spread, alpha=skew, observed=rain)
