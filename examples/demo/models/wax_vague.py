"""Beeswax rendered per hive over the season (hundreds of grams), against forage distance."""

import json
from pathlib import Path

import numpy as np
import pymc as pm

DATA = json.loads((Path(__file__).resolve().parent.parent / "data" / "wax.json").read_text())

with pm.Model(coords={"hive": np.arange(DATA["N"])}) as model:
    distance = pm.Data("distance", np.asarray(DATA["distance"]), dims="hive")
    alpha = pm.Normal("alpha", mu=5, sigma=2)
    beta = pm.Normal("beta", mu=0, sigma=1000)
    sigma = pm.Exponential("sigma", lam=1)
    pm.Normal(
        "y", mu=alpha + beta * distance, sigma=sigma, observed=np.asarray(DATA["y"]), dims="hive"
    )
