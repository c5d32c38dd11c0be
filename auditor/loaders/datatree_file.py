"""DataTree files: netCDF (HDF5) and Zarr stores written by arviz, PyMC, nutpie.

The file is read whole into memory and closed at once, so nothing keeps a user
file open. Every group is kept; sampler statistics get the standard names of
:mod:`auditor.loaders.stats_vocab`.
"""

from __future__ import annotations

import importlib.util
import json
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem
from auditor.loaders.stats_vocab import normalize_sample_stats
from auditor.model import SamplerSettings

#: Groups whose variables have ``(chain, draw, ...)`` dimensions.
DRAWS_GROUPS: tuple[str, ...] = (
    "posterior",
    "sample_stats",
    "warmup_posterior",
    "warmup_sample_stats",
    "log_likelihood",
    "log_prior",
    "prior",
    "prior_predictive",
    "posterior_predictive",
    "warmup_posterior_predictive",
    "sample_stats_prior",
)
STATS_GROUPS: tuple[str, ...] = ("sample_stats", "warmup_sample_stats", "sample_stats_prior")
OTHER_GROUPS: tuple[str, ...] = ("observed_data", "constant_data", "predictions_constant_data")

#: Attribute names under which writers record the maximum tree depth.
_MAX_DEPTH_ATTRS = ("max_treedepth", "max_tree_depth", "max_depth", "maxdepth")

#: PyMC's NUTS default ``max_treedepth`` (PyMC docs, ``pymc.step_methods.hmc.NUTS``;
#: from memory: 10, as in Stan).
PYMC_DEFAULT_MAX_DEPTH = 10

_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"


def _engine_for(path: Path) -> str:
    if path.is_dir() or path.suffix.lower() == ".zarr":
        return "zarr"
    return "h5netcdf"


def _declared_bytes(tree: xr.DataTree) -> int:
    """Bytes the arrays of a lazily opened tree would take once loaded."""
    return sum(int(node.dataset.nbytes) for node in tree.subtree)


def _open(source: Any, engine: str, path: Path, gate: Boundary,
          problems: list[LoadProblem]) -> xr.DataTree | None:
    """Read the whole tree into memory and close the file.

    The sizes the file declares are checked before anything is loaded: a file
    of a few bytes can declare dimensions of billions of elements.
    """
    with warnings.catch_warnings():
        # Reader chatter (format notices) is not about the user's analysis.
        warnings.simplefilter("ignore")
        with xr.open_datatree(source, engine=engine) as lazy:
            declared = _declared_bytes(lazy)
            if gate.max_bytes is not None and declared > gate.max_bytes:
                problems.append(LoadProblem(
                    path,
                    f"the file declares arrays of {declared / 1e6:,.0f} MB in all, more than "
                    f"the limit of {gate.max_bytes / 1e6:,.0f} MB for one input (a share of "
                    "the memory available); it was not loaded",
                    kind="too-large",
                ))
                return None
            return lazy.load().copy(deep=True)


def _read(
    path: Path, problems: list[LoadProblem], gate: Boundary
) -> tuple[xr.DataTree | None, str]:
    engine = _engine_for(path)
    if engine == "zarr" and importlib.util.find_spec("zarr") is None:
        problems.append(
            LoadProblem(
                path,
                "reading Zarr stores needs the zarr package "
                "(install the zarr extra: pip install 'bayes-auditor[zarr]')",
            )
        )
        return None, engine
    try:
        if engine == "zarr":
            gate.admit_tree(path)
            return _open(path, engine, path, gate, problems), engine
        with gate.open(path) as fh:
            magic = fh.read(8)
            if magic.startswith(b"CDF"):
                problems.append(
                    LoadProblem(
                        path,
                        "a netCDF-3 classic file: that format has no groups, so it cannot "
                        "hold an inference DataTree (posterior, sample_stats, ...)",
                    )
                )
                return None, engine
            if magic != _HDF5_MAGIC:
                problems.append(
                    LoadProblem(path, "not a netCDF-4/HDF5 file (the first bytes do not match)")
                )
                return None, engine
            fh.seek(0)
            # The open, checked file object goes to the reader, never the name again.
            return _open(fh, engine, path, gate, problems), engine
    except Refused as exc:
        problems.append(refused_problem(path, exc))
        return None, engine
    except Exception as exc:  # noqa: BLE001 - readers raise many types; report, never crash
        problems.append(
            LoadProblem(
                path,
                f"the file could not be read as a DataTree ({engine}): "
                f"{type(exc).__name__}: {str(exc)[:300]}",
            )
        )
        return None, engine


def _attr(tree: xr.DataTree, name: str) -> Any:
    """First value of attribute ``name`` on the root, posterior or sample_stats."""
    for node in (tree, *(tree[g] for g in ("posterior", "sample_stats") if g in tree.children)):
        if name in node.attrs:
            return node.attrs[name]
    return None


def _as_int(value: Any) -> int | None:
    try:
        arr = np.asarray(value)
        if arr.size != 1:
            return None
        v = arr.item()
        if isinstance(v, bool):
            return None
        f = float(v)
        return int(f) if f.is_integer() else None
    except (TypeError, ValueError):
        return None


def _as_float(value: Any) -> float | None:
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if np.isfinite(f) else None


#: Longest settings text read as JSON (nutpie writes about 2 kB).
_MAX_SETTINGS_CHARS = 1_000_000


def _nutpie_settings(text: Any) -> dict[str, Any]:
    """The flat settings nutpie stores as JSON in ``inference_library_settings``:
    the top level merged with its ``settings`` and ``adapt_options`` parts."""
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    if not isinstance(text, str) or len(text) > _MAX_SETTINGS_CHARS:
        return {}
    try:
        data = json.loads(text)
    except (ValueError, RecursionError):
        return {}
    if not isinstance(data, dict):
        return {}
    flat: dict[str, Any] = {}
    inner = data.get("settings")
    inner = inner if isinstance(inner, dict) else {}
    step = inner.get("adapt_options", {})
    step = step.get("step_size_settings", {}) if isinstance(step, dict) else {}
    for part in (step if isinstance(step, dict) else {}, inner, data):
        flat.update({k: v for k, v in part.items() if not isinstance(v, dict | list)})
    return flat


def _draws_ok(name: str, ds: xr.Dataset, path: Path, problems: list[LoadProblem]) -> xr.Dataset:
    """Put chain and draw first; report a draws group without them."""
    if not ds.data_vars:
        return ds
    missing = [d for d in ("chain", "draw") if d not in ds.dims]
    if missing:
        problems.append(
            LoadProblem(
                path,
                f"group {name!r} has no {' or '.join(missing)} dimension (its dimensions: "
                f"{', '.join(map(str, ds.dims)) or 'none'}); the group is left out",
            )
        )
        return xr.Dataset()
    bad = [v for v in ds.data_vars if not {"chain", "draw"} <= set(ds[v].dims)]
    if bad:
        problems.append(
            LoadProblem(
                path,
                f"group {name!r}: variables without chain/draw dimensions left out: "
                f"{', '.join(map(str, bad[:8]))}",
            )
        )
        ds = ds.drop_vars(bad)
    return ds.transpose("chain", "draw", ...)


def _settings(tree: xr.DataTree, raw_stats: set[str]) -> SamplerSettings:
    library = _attr(tree, "inference_library")
    if library is None and "maxdepth_reached" in raw_stats:
        library = "nutpie"  # only nutpie names this statistic so
    library = None if library is None else str(library)
    version = _attr(tree, "inference_library_version")
    sizes: dict[str, int] = {}
    for g in ("posterior", "sample_stats"):
        if g in tree.children and "draw" in tree[g].dims:
            sizes = dict(tree[g].sizes)
            break
    chains: list[int] = []
    if "chain" in sizes:
        for g in ("posterior", "sample_stats"):
            if g in tree.children and "chain" in tree[g].coords:
                coord = np.asarray(tree[g].coords["chain"].values)
                if np.issubdtype(coord.dtype, np.integer):
                    chains = [int(c) for c in coord]
                break
        if not chains:
            chains = list(range(1, sizes["chain"] + 1))
    warm = None
    for g in ("warmup_posterior", "warmup_sample_stats"):
        if g in tree.children and "draw" in tree[g].dims:
            warm = int(tree[g].sizes["draw"])
            break
    num_warmup = _as_int(_attr(tree, "tuning_steps"))
    if num_warmup is None:
        num_warmup = _as_int(_attr(tree, "num_warmup"))
    if num_warmup is None:
        num_warmup = warm
    save_warmup = True if warm else (False if num_warmup else None)
    max_depth = None
    for name in _MAX_DEPTH_ATTRS:
        max_depth = _as_int(_attr(tree, name))
        if max_depth is not None:
            break
    stats = tree["sample_stats"].to_dataset() if "sample_stats" in tree.children else None
    nuts = stats is not None and "tree_depth" in stats.data_vars
    if max_depth is None and library is not None and library.lower() == "pymc" and nuts:
        max_depth = PYMC_DEFAULT_MAX_DEPTH
    seed = _attr(tree, "random_seed")
    seeds: list[int] = []
    if seed is not None:
        values = np.atleast_1d(np.asarray(seed))
        if np.issubdtype(values.dtype, np.integer):
            seeds = [int(v) for v in values]
    model_name = _attr(tree, "model_name")
    adapt_delta = None
    nutpie = _nutpie_settings(_attr(tree, "inference_library_settings"))
    if nutpie:
        # nutpie records its settings as JSON (examples/demo/fits/harvest_informed.nc,
        # written by nutpie 0.16: "maxdepth", "target_accept", "seed", "num_tune").
        max_depth = max_depth if max_depth is not None else _as_int(nutpie.get("maxdepth"))
        adapt_delta = _as_float(nutpie.get("target_accept"))
        if not seeds and _as_int(nutpie.get("seed")) is not None:
            seeds = [_as_int(nutpie.get("seed"))]  # type: ignore[list-item]
        if num_warmup is None:
            num_warmup = _as_int(nutpie.get("num_tune"))
    return SamplerSettings(
        library=library,
        library_version=None if version is None else str(version),
        method="sample" if stats is not None and stats.data_vars else None,
        algorithm="hmc" if nuts else None,
        engine="nuts" if nuts else None,
        num_samples=sizes.get("draw"),
        num_warmup=num_warmup,
        save_warmup=save_warmup,
        max_depth=max_depth,
        adapt_delta=adapt_delta,
        chain_ids=chains,
        seeds=seeds,
        model_name=None if model_name is None else str(model_name),
    )


def load_datatree(path: Path, gate: Boundary | None = None) -> Loaded:
    """Load a DataTree netCDF file or Zarr store (opened through ``gate``).

    Returns
    -------
    Loaded
        All groups of the file; draws groups with ``(chain, draw, ...)`` first;
        sampler statistics under standard names (``reached_max_treedepth`` added
        from ``tree_depth`` when the maximum depth is known).
    """
    path = Path(path)
    gate = gate or Boundary.unconfined()
    problems: list[LoadProblem] = []
    if not (path.exists() or path.is_symlink()):
        problems.append(LoadProblem(path, "the file does not exist"))
        return Loaded(tree=None, problems=problems)
    raw, engine = _read(path, problems, gate)
    if raw is None:
        return Loaded(tree=None, problems=problems)
    return normalize_tree(raw, path, problems,
                          "datatree-zarr" if engine == "zarr" else "datatree-netcdf")


def normalize_tree(raw: xr.DataTree, path: Path, problems: list[LoadProblem] | None = None,
                   source_format: str = "datatree-memory") -> Loaded:
    """Normalize a DataTree already in memory (read from ``path``, or handed to the
    Python API; ``path`` then only names it in problems)."""
    problems = [] if problems is None else problems
    groups = {name: raw[name].to_dataset() for name in raw.children}
    known = [g for g in groups if g in DRAWS_GROUPS or g in OTHER_GROUPS]
    if not known:
        problems.append(
            LoadProblem(
                path,
                "not an inference DataTree: no posterior, sample_stats or other standard "
                f"group (groups found: {', '.join(groups) or 'none'})",
            )
        )
        return Loaded(tree=None, problems=problems)
    stats0 = groups.get("sample_stats")
    raw_stats = set(map(str, stats0.data_vars)) if stats0 is not None else set()
    for name in list(groups):
        if name in DRAWS_GROUPS:
            groups[name] = _draws_ok(name, groups[name], path, problems)
    for name in STATS_GROUPS:
        if name in groups and groups[name].data_vars:
            groups[name] = normalize_sample_stats(groups[name])
    groups = {k: v for k, v in groups.items() if v.data_vars or k not in DRAWS_GROUPS}
    settings = _settings(xr.DataTree.from_dict(groups), raw_stats)
    if settings.max_depth is not None:
        # Second pass (idempotent) adds reached_max_treedepth now the depth is known.
        for name in STATS_GROUPS:
            if name in groups:
                groups[name] = normalize_sample_stats(groups[name], max_depth=settings.max_depth)
    tree = xr.DataTree.from_dict(groups)
    tree.attrs.update(raw.attrs)
    tree.attrs["source_format"] = source_format
    if settings.library:
        tree.attrs.setdefault("inference_library", settings.library)
    if settings.library_version:
        tree.attrs.setdefault("inference_library_version", settings.library_version)
    if not any(g in groups for g in ("posterior", "sample_stats", "prior")):
        problems.append(
            LoadProblem(
                path,
                "the file has no posterior, sample_stats or prior draws; only "
                f"{', '.join(groups)}",
                kind="note",
            )
        )
    return Loaded(tree=tree, settings=settings, sources=[path], problems=problems)
