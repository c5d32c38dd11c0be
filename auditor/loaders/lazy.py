"""Draws larger than memory, read lazily: Zarr stores through Dask, CmdStan CSV through a
temporary Zarr store.

Used when an analysis's draws exceed ``lazy_share`` of the available memory (see
:mod:`auditor.config`). A Zarr store is opened with xarray's lazy backend (``chunks={}``:
Dask arrays over the store's chunks); a CmdStan CSV run is converted first, file by file in
pieces, into a chunked Zarr store in a temporary folder outside the project
(:mod:`auditor.loaders.cmdstan_lazy`), removed once the analysis is audited. Either way the
posterior (and the prior and warmup draws) stay Dask arrays: the diagnostics table and the
rules read them block by block. The other groups (sampler statistics, log-likelihood,
predictive draws, data) are loaded into memory when each variable fits within the limit for
one input (``max_input_share``), and left out with a ``too-large`` problem otherwise
(:func:`settle`).

Needs ``dask`` and ``zarr`` (the ``scale`` and ``zarr`` extras); without them draws are read
whole, as before.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path

import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem

#: Groups kept as Dask arrays (read block by block); every other group is loaded.
LAZY_GROUPS = ("posterior", "prior", "warmup_posterior")


def missing_libraries() -> list[str]:
    """The libraries lazy reading needs that are not installed."""
    return [m for m in ("dask", "zarr") if importlib.util.find_spec(m) is None]


def _kind(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix == ".zarr" or (path.is_dir() and ((path / ".zgroup").exists()
                                                or (path / "zarr.json").exists())):
        return "zarr"
    return "other"


def _unlimited(gate: Boundary) -> Boundary:
    """The same boundary without the size limit (a lazily read store is never loaded whole;
    the location and type checks still apply)."""
    return dataclasses.replace(gate, max_bytes=None)


def draws_size(paths: Sequence[Path], gate: Boundary) -> int | None:
    """Bytes the draws of ``paths`` would take read whole, without reading them: the files'
    sizes for CmdStan CSV (a number is about as long in text as in float64), the arrays a Zarr
    store declares; ``None`` for other files, or when the boundary refuses one (the loader
    then reports it)."""
    kinds = {_kind(Path(p)) for p in paths}
    try:
        if kinds == {"csv"}:
            return sum(gate.admit(p, size=False).stat().st_size for p in paths)
        if kinds == {"zarr"} and len(paths) == 1 and not missing_libraries():
            _unlimited(gate).admit_tree(paths[0])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                with xr.open_datatree(paths[0], engine="zarr") as tree:
                    return sum(int(node.dataset.nbytes) for node in tree.subtree)
    except (Refused, OSError):
        return None
    except Exception:  # noqa: BLE001 - an unreadable store: the loader says what is wrong
        return None
    return None


def load_lazily(paths: Sequence[Path], gate: Boundary
                ) -> tuple[Loaded, list[Callable[[], None]]]:
    """Open the draws of ``paths`` lazily; return them and the cleanup actions (removing a
    temporary store) to run once the analysis is audited."""
    paths = [Path(p) for p in paths]
    kinds = {_kind(p) for p in paths}
    if kinds == {"csv"}:
        from auditor.loaders.cmdstan_lazy import cmdstan_to_zarr

        return cmdstan_to_zarr(paths, gate)
    return open_zarr(paths[0], gate), []


def open_zarr(path: Path, gate: Boundary) -> Loaded:
    """A DataTree Zarr store opened lazily (Dask arrays over its chunks), normalized.

    The boundary checks every entry of the store first (:meth:`Boundary.admit_tree`), as the
    whole-file loader does, without its size limit.
    """
    from auditor.loaders.datatree_file import normalize_tree

    problems: list[LoadProblem] = []
    try:
        _unlimited(gate).admit_tree(path)
        with warnings.catch_warnings():
            # Reader chatter (format notices) is not about the user's analysis.
            warnings.simplefilter("ignore")
            raw = xr.open_datatree(path, engine="zarr", chunks={})
    except Refused as exc:
        return Loaded(tree=None, problems=[refused_problem(path, exc)])
    except Exception as exc:  # noqa: BLE001 - readers raise many types; report, never crash
        return Loaded(tree=None, problems=[LoadProblem(
            path, f"the store could not be read as a DataTree (zarr): {type(exc).__name__}: "
            f"{str(exc)[:300]}")])
    return normalize_tree(raw, path, problems, "datatree-zarr")


def settle(groups: dict[str, xr.Dataset], limit: int | None, path: Path,
           problems: list[LoadProblem]) -> None:
    """Load every variable of the groups outside :data:`LAZY_GROUPS` that fits within
    ``limit`` bytes; leave out (with a ``too-large`` problem) those that do not. Changed in
    place."""
    for name, ds in list(groups.items()):
        if name in LAZY_GROUPS:
            continue
        too_big = [str(v) for v in ds.data_vars
                   if limit is not None and int(ds[v].nbytes) > limit]
        for v in too_big:
            problems.append(LoadProblem(
                path, f"{v} (group {name}) holds {int(ds[v].nbytes) / 1e6:,.0f} MB, more "
                f"than the limit of {limit / 1e6:,.0f} MB for data read whole (a share of the "
                "memory available); it was left out, with the checks that need it",
                kind="too-large"))
        ds = ds.drop_vars(too_big)
        groups[name] = ds.load(scheduler="synchronous")
