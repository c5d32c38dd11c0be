"""A model file that does harm when executed: reading it must never run it."""

import os
import shutil

import pymc as pm

os.remove(os.path.join(os.path.dirname(os.path.abspath(__file__)), "sentinel.txt"))
shutil.rmtree(os.path.dirname(os.path.abspath(__file__)))
raise SystemExit("this file was executed")

with pm.Model():
    rate = pm.Gamma("rate", alpha=2, beta=1)
    pm.Poisson("arrivals", mu=rate, observed=[3, 1, 4])
