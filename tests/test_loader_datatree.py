"""DataTree loader (netCDF and Zarr).

The real file is arviz-base's bundled example ``centered_eight.nc``, written by
PyMC 5.20 through arviz 0.20 (its attrs say so). Expected shapes, values and
attributes are read from that file with h5py directly, not through xarray or our
loader.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import h5py
import numpy as np
import pytest
import xarray as xr

import auditor.loaders.datatree_file as datatree_file
from auditor.loaders import load_draws


@pytest.fixture(scope="module")
def centered_eight() -> Path:
    arviz_base = pytest.importorskip("arviz_base")
    path = Path(arviz_base.__file__).parent / "example_data" / "data" / "centered_eight.nc"
    if not path.exists():
        pytest.skip(f"arviz-base example file missing: {path}")
    return path


def _attr(value):
    return value.decode() if isinstance(value, bytes) else value


def test_centered_eight_all_groups_and_values(centered_eight):
    before = hashlib.sha256(centered_eight.read_bytes()).hexdigest()
    loaded = load_draws([centered_eight])
    assert loaded.problems == []
    assert loaded.sources == [centered_eight]
    with h5py.File(centered_eight, "r") as f:
        groups = set(f.keys())
        theta = f["posterior/theta"][...]
        diverging = f["sample_stats/diverging"][...]
        tuning = int(f["posterior"].attrs["tuning_steps"])
        library = _attr(f["posterior"].attrs["inference_library"])
        version = _attr(f["posterior"].attrs["inference_library_version"])
    assert set(loaded.tree.children) == groups
    post = loaded.tree["posterior"].to_dataset()
    assert post["theta"].dims[:2] == ("chain", "draw")
    np.testing.assert_array_equal(post["theta"].values, theta)
    stats = loaded.tree["sample_stats"].to_dataset()
    assert stats["diverging"].dtype == bool
    np.testing.assert_array_equal(stats["diverging"].values, diverging.astype(bool))
    s = loaded.settings
    assert (s.library, s.library_version) == (library, version) == ("pymc", "5.20.0")
    assert s.num_samples == theta.shape[1] and len(s.chain_ids) == theta.shape[0]
    assert s.num_warmup == tuning
    # Not recorded in the file: PyMC's NUTS default max_treedepth = 10 (from memory).
    assert s.max_depth == 10
    assert loaded.tree.attrs["inference_library"] == "pymc"
    assert hashlib.sha256(centered_eight.read_bytes()).hexdigest() == before


def test_centered_eight_standard_stats(centered_eight):
    stats = load_draws([centered_eight]).tree["sample_stats"].to_dataset()
    for name in (
        "lp",
        "acceptance_rate",
        "step_size",
        "tree_depth",
        "n_steps",
        "diverging",
        "energy",
        "reached_max_treedepth",
    ):
        assert name in stats.data_vars, name
    # PyMC-only extras pass through under their own names.
    assert "energy_error" in stats and "index_in_trajectory" in stats


@pytest.mark.filterwarnings("ignore::UserWarning")  # zarr's notice when writing the copy
def test_zarr_store(centered_eight, tmp_path):
    pytest.importorskip("zarr")
    store = tmp_path / "fit.zarr"
    with xr.open_datatree(centered_eight, engine="h5netcdf") as tree:
        tree.load().to_zarr(store)
    loaded = load_draws([store])
    assert loaded.problems == []
    assert loaded.tree.attrs["source_format"] == "datatree-zarr"
    with h5py.File(centered_eight, "r") as f:
        mu = f["posterior/mu"][...]
    np.testing.assert_array_equal(loaded.tree["posterior"].to_dataset()["mu"].values, mu)
    # A Zarr store is recognised by its metadata file too, whatever the folder name.
    renamed = tmp_path / "fit_store"
    store.rename(renamed)
    assert load_draws([renamed]).problems == []


def test_zarr_missing_package_is_a_problem(tmp_path, monkeypatch):
    store = tmp_path / "fit.zarr"
    store.mkdir()
    real = datatree_file.importlib.util.find_spec
    monkeypatch.setattr(
        datatree_file.importlib.util,
        "find_spec",
        lambda name, *a: None if name == "zarr" else real(name, *a),
    )
    loaded = load_draws([store])
    assert loaded.tree is None
    assert "zarr" in loaded.problems[0].message and loaded.problems[0].path == store


def test_corrupt_and_wrong_files(centered_eight, tmp_path):
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(centered_eight.read_bytes()[:4000])
    text = tmp_path / "notes.nc"
    text.write_text("not netCDF at all\n")
    plain = tmp_path / "plain.nc"
    xr.Dataset({"a": ("x", np.arange(3.0))}).to_netcdf(plain, engine="h5netcdf")
    classic = tmp_path / "classic.nc"
    xr.Dataset({"a": ("x", np.arange(3.0))}).to_netcdf(classic, engine="scipy")
    for path, words in [
        (truncated, "could not be read"),
        (text, "not a netCDF-4/HDF5 file"),
        (plain, "not an inference DataTree"),
        (classic, "netCDF-3"),
        (tmp_path / "absent.nc", "does not exist"),
    ]:
        loaded = load_draws([path])
        assert loaded.tree is None, path
        assert len(loaded.problems) == 1
        assert loaded.problems[0].path == path and words in loaded.problems[0].message


def _nutpie_tree(n_chains: int = 2, n_draws: int = 5) -> xr.DataTree:
    """A tree with nutpie's sample_stats names (nutpie docs, "Understanding Sampler
    Statistics in Nutpie"; nuts-rs SampleStats trait on docs.rs)."""
    rng = np.random.default_rng(3)
    shape = (n_chains, n_draws)
    dims = ("chain", "draw")
    stats = xr.Dataset(
        {
            "depth": (dims, rng.integers(1, 6, shape)),
            "maxdepth_reached": (dims, np.zeros(shape, dtype=bool)),
            "logp": (dims, rng.normal(size=shape)),
            "mean_tree_accept": (dims, rng.uniform(size=shape)),
            "diverging": (dims, np.array([[0, 1, 0, 0, 0], [0, 0, 0, 0, 1]], dtype=np.uint8)),
            "energy": (dims, rng.normal(size=shape)),
            "step_size": (dims, np.full(shape, 0.4)),
            "n_steps": (dims, rng.integers(1, 32, shape)),
            "index_in_trajectory": (dims, rng.integers(-5, 5, shape)),
        },
        coords={"chain": np.arange(n_chains), "draw": np.arange(n_draws)},
    )
    post = xr.Dataset(
        {"mu": (dims, rng.normal(size=shape))},
        coords={"chain": np.arange(n_chains), "draw": np.arange(n_draws)},
    )
    return xr.DataTree.from_dict({"posterior": post, "sample_stats": stats})


def test_nutpie_names_normalized(tmp_path):
    path = tmp_path / "nutpie.nc"
    _nutpie_tree().to_netcdf(path, engine="h5netcdf")
    loaded = load_draws([path])
    assert loaded.problems == []
    stats = loaded.tree["sample_stats"].to_dataset()
    assert {"tree_depth", "reached_max_treedepth", "lp", "acceptance_rate"} <= set(stats.data_vars)
    assert not {"depth", "maxdepth_reached", "logp", "mean_tree_accept"} & set(stats.data_vars)
    assert stats["diverging"].dtype == bool and int(stats["diverging"].sum()) == 2
    assert "index_in_trajectory" in stats
    assert loaded.settings.library == "nutpie"
    assert loaded.settings.max_depth is None  # nutpie files do not record it


def test_group_without_chain_dimension(tmp_path):
    tree = _nutpie_tree()
    bad = xr.Dataset({"y": ("obs", np.arange(4.0))})
    tree = xr.DataTree.from_dict(
        {
            "posterior": tree["posterior"].to_dataset(),
            "posterior_predictive": bad,
            "observed_data": bad,
        }
    )
    path = tmp_path / "odd.nc"
    tree.to_netcdf(path, engine="h5netcdf")
    loaded = load_draws([path])
    assert "posterior_predictive" not in loaded.tree.children
    assert "observed_data" in loaded.tree.children  # not a draws group: kept as is
    assert len(loaded.problems) == 1
    assert "'posterior_predictive'" in loaded.problems[0].message
    assert "chain" in loaded.problems[0].message


def test_two_datatree_files_refused(tmp_path):
    a, b = tmp_path / "a.nc", tmp_path / "b.nc"
    loaded = load_draws([a, b])
    assert loaded.tree is None and {p.path for p in loaded.problems} == {a, b}
