"""Honey harvested per hive over the season (kg), against flowering days near the yard."""

import json
from pathlib import Path

import numpy as np
import pymc as pm

DATA = json.loads((Path(__file__).resolve().parent.parent / "data" / "harvest.json").read_text())

with pm.Model(coords={"hive": np.arange(DATA["N"])}) as model:
    bloom = pm.Data("bloom", np.asarray(DATA["bloom"]), dims="hive")
    a = pm.Normal("a", mu=0, sigma=10)
    b = pm.Normal("b", mu=0, sigma=10)
    s = pm.HalfNormal("s", sigma=5)
    pm.LogNormal("y", mu=a + b * bloom, sigma=s, observed=np.asarray(DATA["y"]), dims="hive")
