"""Sample the demo's PyMC models and save each run as a DataTree netCDF file.

Each model source ``demo/models/<stem>.py`` builds a ``pm.Model`` named
``model`` from the demo's data; this module runs it (the sources are ours, the
generator may execute them), samples the prior and the posterior, adds the
pointwise log-likelihood and log-prior, and writes ``demo/fits/<stem>.nc``.
"""

from __future__ import annotations

import runpy
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import xarray as xr

# stem -> (NUTS implementation, seed)
PYMC_RUNS: dict[str, tuple[str, int]] = {
    "wax_vague": ("pymc", 52003),
    "harvest_vague": ("pymc", 52001),
    "harvest_informed": ("nutpie", 52002),
}

GROUPS = (
    "posterior",
    "sample_stats",
    "observed_data",
    "constant_data",
    "log_likelihood",
    "log_prior",
    "prior",
    "prior_predictive",
    "posterior_predictive",
)


def _single_precision(ds: xr.Dataset) -> xr.Dataset:
    """Store floating draws as float32 (about 7 significant digits) to keep files small.

    A variable with values beyond float32's range (vague priors make such prior
    predictive draws) stays float64 so that no value turns into infinity.
    """
    out = ds.copy()
    for name, var in ds.data_vars.items():
        if var.dtype.kind == "f" and var.dtype.itemsize > 4:
            values = np.asarray(var.values)
            finite = values[np.isfinite(values)]
            if finite.size == 0 or np.abs(finite).max() < 1e38:
                out[name] = var.astype("float32")
    return out


def run_one(demo: Path, stem: str, sampler: str, seed: int) -> Path:
    """Sample ``models/<stem>.py`` and write ``fits/<stem>.nc``; return its path."""
    import pymc as pm
    import xarray as xr

    source = demo / "models" / f"{stem}.py"
    model = runpy.run_path(str(source), run_name=f"demo_{stem}")["model"]
    with model:
        tree = pm.sample(
            draws=1000,
            tune=1000,
            chains=4,
            cores=2,
            random_seed=seed,
            nuts_sampler=sampler,
            progressbar=False,
        )
        prior = pm.sample_prior_predictive(draws=1000, random_seed=seed + 1)
        pm.sample_posterior_predictive(
            tree, random_seed=seed + 2, extend_inferencedata=True, progressbar=False
        )
        pm.compute_log_likelihood(tree, extend_inferencedata=True, progressbar=False)
        pm.compute_log_prior(tree, extend_inferencedata=True, progressbar=False)
    groups: dict[str, xr.Dataset] = {}
    for name in GROUPS:
        for src in (tree, prior):
            if name in src.children:
                ds = src[name].to_dataset()
                # Data stay exact; only draws are stored in single precision.
                groups[name] = ds if name.endswith("_data") else _single_precision(ds)
                break
    missing = [g for g in GROUPS if g not in groups and g != "constant_data"]
    if missing:
        raise RuntimeError(f"{stem}: PyMC gave no {missing} group(s)")
    out = xr.DataTree.from_dict({f"/{k}": v for k, v in groups.items()})
    # Group attributes are PyMC's own (the posterior's ``inference_library`` is
    # "pymc" or "nutpie"); nothing of ours is added.
    out.attrs.update(tree.attrs)
    path = demo / "fits" / f"{stem}.nc"
    encoding = {
        f"/{g}": {
            v: {"compression": "gzip", "compression_opts": 9, "shuffle": True}
            for v in ds.data_vars
            if ds[v].dtype.kind in "fiu" and ds[v].ndim > 0
        }
        for g, ds in groups.items()
    }
    out.to_netcdf(path, engine="h5netcdf", encoding=encoding)
    print(f"wrote {path.name} ({sampler})", flush=True)
    return path


def run_all(demo: Path, only: set[str] | None = None) -> None:
    """Sample every PyMC model of the demo (or those in ``only``)."""
    for stem, (sampler, seed) in PYMC_RUNS.items():
        if only and stem not in only:
            continue
        run_one(demo, stem, sampler, seed)
