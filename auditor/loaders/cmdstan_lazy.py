"""CmdStan CSV runs larger than memory: converted on the fly to a temporary chunked Zarr store.

The files are read by :func:`auditor.loaders.cmdstan_csv.read_run`, the same code as the
whole-file loader (header reading, row parsing, row and chain checks, settings), with one
difference: the ``(chain, row, column)`` array it fills is a shared mapping of a raw file in a
temporary folder outside the project, whose pages are handed back to the page cache as the rows
are written. Then:

1. each variable is copied from that array into a Zarr array in chunks of about
   :data:`CHUNK_BYTES` (all chains and draws of a run of the variable's elements in C order,
   the order of the diagnostics table), the mapping's pages released after each copy;
2. the raw file is gone (it was unlinked once mapped) and the arrays are opened as Dask arrays.

The sampler statistics (a few columns) are copied into memory. Everything is written in a
temporary folder outside the project (never beside the user's files), which the caller removes
once the analysis is audited. The numbers are parsed by the same code as the whole-file loader,
so an audit of the converted store gives the same results (``tests/test_properties.py``).
"""

from __future__ import annotations

import math
import os
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary
from auditor.loaders import stan_names
from auditor.loaders.cmdstan_csv import (
    Run,
    _stats_dataset,
    load_cmdstan_csv,
    read_run,
    run_groups,
)
from auditor.loaders.problems import Loaded, LoadProblem
from auditor.model import SamplerSettings

#: Target bytes of one Zarr chunk (all chains and draws of a run of elements).
CHUNK_BYTES = 16 * 2**20


def _chunking(shape: tuple[int, ...], per_element: int) -> tuple[int, ...]:
    """Chunk shape of a variable's elements: ones, then a run along one dimension, then the
    whole of the later dimensions, so that every chunk is a contiguous run in C order."""
    target = max(1, CHUNK_BYTES // per_element)
    for k in range(len(shape)):
        inner = math.prod(shape[k + 1:])
        if inner <= target:
            return (1,) * k + (max(1, min(shape[k], target // inner)),) + tuple(shape[k + 1:])
    return tuple(shape)


def _copy_variable(group, name: str, values: np.ndarray, run: Run):  # noqa: ANN001, ANN202
    """One variable's draws ``values`` (``(chain, draw, *shape)``, a view of the file-backed
    rows) into the Zarr array ``name`` of ``group``, chunk by chunk."""
    n_chains, n_draws, *rest = values.shape
    shape = tuple(rest)
    chunks = _chunking(shape, 8 * max(1, n_chains * n_draws))
    arr = group.create_array(name, shape=values.shape, chunks=(n_chains, n_draws, *chunks),
                             dtype="float64", compressors=None, fill_value=np.nan)
    if values.size == 0:
        return arr
    grid = [math.ceil(n / c) for n, c in zip(shape, chunks, strict=True)]
    for pos in (np.ndindex(*grid) if shape else [()]):
        sel = (slice(None), slice(None), *(
            slice(i * c, min(n, (i + 1) * c)) for i, c, n in zip(pos, chunks, shape, strict=True)))
        arr[sel] = np.ascontiguousarray(values[sel])
        run.store.release()
    return arr


def _zarr_groups(folder: Path, zarr, dask_array):  # noqa: ANN001, ANN202
    """A group maker for :func:`run_groups`: the posterior (or warmup) variables as Dask
    arrays over a Zarr store in ``folder``; the sampler statistics in memory."""
    store = zarr.open_group(str(folder / "draws.zarr"), mode="w")

    def make(run: Run, warmup: bool) -> tuple[xr.Dataset, xr.Dataset | None]:
        values = run.rows(warmup)
        n_chains, n_draws = values.shape[:2]
        zgroup = store.require_group("warmup_posterior" if warmup else "posterior")
        variables: dict[str, xr.Variable] = {}
        coords: dict[str, object] = {"chain": np.arange(n_chains), "draw": np.arange(n_draws)}
        for number, (name, spec) in enumerate(run.layout.items()):
            var = stan_names.extract(values, spec)
            dims = (("chain", "draw") if isinstance(spec, int)
                    else ("chain", "draw", *spec.dims(name)))
            # Arrays are named by number: a column name need not be a valid store path.
            arr = _copy_variable(zgroup, f"v{number}", var, run)
            del var
            variables[name] = xr.Variable(dims, dask_array.from_zarr(arr))
            for dim, coord in stan_names.coords_for(name, spec).items():
                coords.setdefault(dim, coord)
        posterior = xr.Dataset(variables, coords=coords)
        stat_cols = [(j, c) for j, c in enumerate(run.columns) if c.endswith("__")]
        stats = None
        if stat_cols:
            small = np.ascontiguousarray(values[..., [j for j, _ in stat_cols]])
            stats = _stats_dataset([(k, c) for k, (_, c) in enumerate(stat_cols)], small,
                                   run.settings.max_depth)
            stats = stats.assign_coords(chain=np.arange(n_chains), draw=np.arange(n_draws))
        run.store.release()
        return posterior, stats

    return make


def temporary_folder(gate: Boundary) -> Path:
    """A new temporary folder outside the project (and outside the folders the user
    allowed); :class:`OSError` when the system's temporary folder lies inside them."""
    base = Path(os.path.realpath(tempfile.gettempdir()))
    if any(base == r or base.is_relative_to(r) for r in gate.roots):
        raise OSError(f"the temporary folder {base} lies inside the project")
    return Path(tempfile.mkdtemp(prefix="bayes-auditor-draws-", dir=base))


def cmdstan_to_zarr(paths: list[Path], gate: Boundary
                    ) -> tuple[Loaded, list[Callable[[], None]]]:
    """Load the CmdStan CSV files of one run through a temporary Zarr store (see the module
    docstring); return the draws as Dask arrays and the action that removes the store."""
    import dask.array
    import zarr

    try:
        folder = temporary_folder(gate)
    except OSError as exc:
        # No place to convert it: read it whole, as without lazy reading (the size limit
        # for one input still applies).
        whole = load_cmdstan_csv(paths, gate)
        whole.problems.insert(0, LoadProblem(
            paths[0], f"the run is large but could not be converted for reading in blocks "
            f"({exc}); it was read whole", kind="note"))
        return whole, []

    def remove() -> None:
        shutil.rmtree(folder, ignore_errors=True)

    problems: list[LoadProblem] = []
    try:
        run = read_run(paths, gate, scratch=folder)
        if isinstance(run, Loaded):
            remove()
            return run, []
        problems = run.problems
        loaded = run_groups(run, _zarr_groups(folder, zarr, dask.array))
    except OSError as exc:  # a full disk, a file gone while read
        remove()
        problems.append(LoadProblem(paths[0], f"the run could not be converted for reading in "
                                    f"blocks: {exc.strerror or exc}"))
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"),
                      problems=problems), []
    return loaded, [remove]


__all__ = ["cmdstan_to_zarr", "temporary_folder"]
