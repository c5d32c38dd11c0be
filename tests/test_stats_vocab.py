"""Sampler-statistic vocabulary.

Sources of the sampler-side names, per check: arviz-base's bundled
``centered_eight`` (sample_stats written by PyMC 5.20's NUTS); nutpie's names
from the nutpie docs page "Understanding Sampler Statistics in Nutpie" and the
nuts-rs ``SampleStats`` trait (docs.rs); PyMC3 names from the PyMC3 "Sampler
statistics" notebook; CmdStan column names from the CmdStan guide's "Stan CSV
file format" (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from auditor.loaders.stats_vocab import STANDARD, normalize_sample_stats, standard_name


@pytest.fixture(scope="module")
def pymc_stats() -> xr.Dataset:
    arviz_base = pytest.importorskip("arviz_base")
    tree = arviz_base.load_arviz_data("centered_eight")
    return tree["sample_stats"].to_dataset().load()


def _dims(n_chains=2, n_draws=6):
    return ("chain", "draw"), (n_chains, n_draws)


def test_pymc_names_are_already_standard(pymc_stats):
    out = normalize_sample_stats(pymc_stats)
    assert set(STANDARD) <= set(out.data_vars)
    for name in pymc_stats.data_vars:
        assert name in out.data_vars  # nothing renamed or lost
        np.testing.assert_array_equal(out[name].values, pymc_stats[name].values)


def test_idempotent(pymc_stats):
    once = normalize_sample_stats(pymc_stats)
    twice = normalize_sample_stats(once)
    xr.testing.assert_identical(once, twice)


def test_pymc_divergences_running_count_dropped(pymc_stats):
    # PyMC keeps a running count "divergences" beside the per-draw flag; built
    # here as the cumulative sum of the file's own diverging flags.
    ds = pymc_stats.copy()
    ds["divergences"] = ds["diverging"].astype(int).cumsum("draw")
    out = normalize_sample_stats(ds)
    assert "divergences" not in out.data_vars
    assert int(out["diverging"].sum()) == int(pymc_stats["diverging"].sum())
    assert "divergences" in ds.data_vars  # the input is not changed


def test_nutpie_names():
    dims, shape = _dims()
    rng = np.random.default_rng(0)
    depth = rng.integers(1, 8, shape)
    ds = xr.Dataset(
        {
            "depth": (dims, depth),
            "maxdepth_reached": (dims, depth >= 7),
            "logp": (dims, rng.normal(size=shape)),
            "mean_tree_accept": (dims, rng.uniform(size=shape)),
            "diverging": (dims, np.zeros(shape, dtype=bool)),
            "energy": (dims, rng.normal(size=shape)),
            "step_size": (dims, np.full(shape, 0.3)),
            "n_steps": (dims, 2**depth - 1),
            "index_in_trajectory": (dims, rng.integers(-3, 3, shape)),
            "energy_error": (dims, rng.normal(size=shape)),
        }
    )
    out = normalize_sample_stats(ds)
    assert set(STANDARD) <= set(out.data_vars)
    np.testing.assert_array_equal(out["tree_depth"].values, depth)
    np.testing.assert_array_equal(out["reached_max_treedepth"].values, depth >= 7)
    np.testing.assert_array_equal(out["lp"].values, ds["logp"].values)
    np.testing.assert_array_equal(out["acceptance_rate"].values, ds["mean_tree_accept"].values)
    assert "index_in_trajectory" in out and "energy_error" in out


def test_cmdstan_and_pymc3_names():
    # CmdStan CSV columns and PyMC3 statistic names.
    assert standard_name("lp__") == "lp"
    assert standard_name("accept_stat__") == "acceptance_rate"
    assert standard_name("stepsize__") == "step_size"
    assert standard_name("treedepth__") == "tree_depth"
    assert standard_name("n_leapfrog__") == "n_steps"
    assert standard_name("divergent__") == "diverging"
    assert standard_name("energy__") == "energy"
    assert standard_name("tree_size") == "n_steps"
    assert standard_name("model_logp") == "lp"
    assert standard_name("index_in_trajectory") == "index_in_trajectory"


def test_booleans_cast_missing_counts_as_false():
    dims, _ = _dims(1, 4)
    ds = xr.Dataset(
        {
            "divergent__": (dims, np.array([[0.0, 1.0, np.nan, 0.0]])),
            "reached_max_treedepth": (dims, np.array([[0, 0, 1, 1]], dtype=np.int8)),
        }
    )
    out = normalize_sample_stats(ds)
    assert out["diverging"].dtype == bool
    assert out["diverging"].values.tolist() == [[False, True, False, False]]
    assert out["reached_max_treedepth"].values.tolist() == [[False, False, True, True]]


def test_standard_name_wins_over_alias():
    dims, shape = _dims()
    ds = xr.Dataset({"lp": (dims, np.zeros(shape)), "logp": (dims, np.ones(shape))})
    out = normalize_sample_stats(ds)
    assert (out["lp"].values == 0).all() and (out["logp"].values == 1).all()


def test_reached_max_treedepth_from_max_depth():
    # tree_depth >= max_depth means the cap was hit (common practice, Stan's
    # treedepth diagnostic).
    dims, _ = _dims(1, 5)
    ds = xr.Dataset({"tree_depth": (dims, np.array([[3, 9, 10, 11, 10]]))})
    out = normalize_sample_stats(ds, max_depth=10)
    assert out["reached_max_treedepth"].values.tolist() == [[False, False, True, True, True]]
    assert "reached_max_treedepth" not in normalize_sample_stats(ds)
