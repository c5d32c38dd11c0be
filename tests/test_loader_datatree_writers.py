"""DataTree files as PyMC, nutpie and NumPyro write them (issue 13).

Files used:

- ``examples/demo/fits/harvest_vague.nc``: written by PyMC 6.4.0's own NUTS through
  arviz-base 1.3.1 (attrs ``inference_library = pymc``), draws stored as float32,
  groups posterior, sample_stats, log_likelihood, log_prior, prior,
  prior_predictive, posterior_predictive, observed_data, constant_data
  (examples/README.md says how they were made).
- ``examples/demo/fits/harvest_informed.nc``: sampled by nutpie 0.16.11 (attrs
  ``inference_library = nutpie``; its settings as JSON in
  ``inference_library_settings``: ``"maxdepth": 10``, ``"target_accept": 0.8``,
  ``"seed": 640166715``, ``"num_tune": 1000``).
- NumPyro: numpyro is not installed here, so the file is made with arviz-base's
  ``from_dict`` using exactly the names its ``from_numpyro`` writes
  (arviz_base/io_numpyro.py, ``sample_stats_to_xarray``: ``lp`` from
  ``potential_energy``, ``step_size``, ``n_steps``, ``acceptance_rate``,
  ``diverging``, ``tree_depth`` and ``reached_max_tree_depth``), float32 draws and
  a group beyond the standard ones.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from auditor.loaders import load_draws

REPO = Path(__file__).resolve().parent.parent
FITS = REPO / "examples" / "demo" / "fits"


def test_pymc_own_sampler_float32_and_all_groups():
    path = FITS / "harvest_vague.nc"
    raw = xr.open_datatree(path, engine="h5netcdf")
    loaded = load_draws([path])
    assert loaded.problems == []
    assert set(loaded.tree.children) == set(raw.children)
    post = loaded.tree["posterior"]
    assert post["b"].dtype == np.float32  # kept as written, not widened
    np.testing.assert_array_equal(post["b"].values, raw["posterior"]["b"].values)
    s = loaded.settings
    assert (s.library, s.library_version) == ("pymc", "6.4.0")
    assert s.num_warmup == 1000 and s.max_depth == 10  # tuning_steps; PyMC's default depth
    stats = loaded.tree["sample_stats"].to_dataset()
    assert "divergences" not in stats and stats["diverging"].dtype == bool


def test_nutpie_statistics_and_settings():
    path = FITS / "harvest_informed.nc"
    raw = xr.open_datatree(path, engine="h5netcdf")
    loaded = load_draws([path])
    assert loaded.problems == []
    s = loaded.settings
    assert s.library == "nutpie" and s.max_depth == 10 and s.adapt_delta == pytest.approx(0.8)
    assert s.seeds == [640166715] and s.num_warmup == 1000
    stats = loaded.tree["sample_stats"].to_dataset()
    raw_stats = raw["sample_stats"].to_dataset()
    np.testing.assert_array_equal(stats["tree_depth"].values, raw_stats["depth"].values)
    np.testing.assert_array_equal(stats["reached_max_treedepth"].values,
                                  raw_stats["maxdepth_reached"].values)
    np.testing.assert_array_equal(stats["lp"].values, raw_stats["logp"].values)


def _numpyro_tree() -> xr.DataTree:
    import arviz_base as azb

    rng = np.random.default_rng(7)
    chains, draws = 2, 40
    num_steps = rng.choice([3, 7, 15, 31], size=(chains, draws))
    stats = {
        "lp": rng.normal(-10, 1, (chains, draws)).astype(np.float32),
        "step_size": np.full((chains, draws), 0.4, dtype=np.float32),
        "n_steps": num_steps,
        "acceptance_rate": rng.uniform(0.5, 1, (chains, draws)).astype(np.float32),
        "diverging": rng.uniform(size=(chains, draws)) < 0.1,
        # io_numpyro.py: tree_depth = log2(num_steps) + 1, reached_max_tree_depth = depth >= max
        "tree_depth": (np.log2(num_steps).astype(int) + 1),
        "reached_max_tree_depth": (np.log2(num_steps).astype(int) + 1) >= 5,
    }
    tree = azb.from_dict({
        "posterior": {"mu": rng.normal(size=(chains, draws)).astype(np.float32),
                      "tau": rng.gamma(2, size=(chains, draws)).astype(np.float32)},
        "sample_stats": stats,
        "unconstrained_posterior": {"tau_log__": rng.normal(size=(chains, draws))},
    })
    # from_numpyro passes the numpyro module to dict_to_dataset, whose make_attrs
    # writes inference_library (and its version) on every group.
    for group in tree.children:
        tree[group].attrs.update(inference_library="numpyro", inference_library_version="0.19.0")
    return tree


@pytest.mark.parametrize("form", ["netcdf", "zarr"])
def test_numpyro_through_arviz_base(tmp_path, form):
    tree = _numpyro_tree()
    path = tmp_path / ("fit.nc" if form == "netcdf" else "fit.zarr")
    if form == "netcdf":
        tree.to_netcdf(path, engine="h5netcdf")
    else:
        pytest.importorskip("zarr")
        tree.to_zarr(path)
    loaded = load_draws([path])
    assert loaded.problems == []
    assert loaded.settings.library == "numpyro"
    assert "unconstrained_posterior" in loaded.tree.children  # kept though not standard
    stats = loaded.tree["sample_stats"].to_dataset()
    np.testing.assert_array_equal(stats["reached_max_treedepth"].values,
                                  tree["sample_stats"]["reached_max_tree_depth"].values)
    assert "reached_max_tree_depth" not in stats
    assert loaded.tree["posterior"]["mu"].dtype == np.float32


def test_zarr_and_netcdf_of_the_same_pymc_run_read_equal(tmp_path):
    pytest.importorskip("zarr")
    nc = FITS / "harvest_vague.nc"
    store = tmp_path / "harvest_vague.zarr"
    xr.open_datatree(nc, engine="h5netcdf").load().to_zarr(store)
    a, b = load_draws([nc]), load_draws([store])
    assert a.problems == b.problems == []
    for group in a.tree.children:
        xr.testing.assert_equal(a.tree[group].to_dataset(), b.tree[group].to_dataset())
    assert json.dumps(a.settings.as_dict()) == json.dumps(b.settings.as_dict())
