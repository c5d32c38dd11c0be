"""CmdStan CSV runs larger than memory: converted on the fly to a temporary chunked Zarr store.

The files are read by :func:`auditor.loaders.cmdstan_csv.read_run`, the same code as the
whole-file loader (header reading, row parsing, row and chain checks, settings), with one
difference: the ``(chain, row, column)`` array it fills is a shared mapping of a raw file in a
temporary folder outside the project, whose pages are handed back to the page cache as the rows
are written. Then:

1. the rows are read back in blocks of whole rows (contiguous in the mapping) and their model
   columns reordered into the normalized variables, each in C order (the order of the
   diagnostics table), into a second raw file; the sampler columns (a few per draw) are kept in
   memory;
2. each variable is copied from that file into a Zarr array in chunks of about
   :data:`CHUNK_BYTES` (all chains and draws of a run of the variable's elements in C order,
   contiguous in each row of the second file), read with positioned reads in windows of about
   :data:`COPY_BYTES`;
3. the raw files are removed and the arrays opened as Dask arrays.

Columns are never read across rows through the mapping: the kernel maps whole folios of the page
cache on a fault, so a strided read of a few columns from every row maps the whole run (measured:
reading 524 of 20,007 columns mapped all 610 MB). Everything is written in a temporary folder
outside the project (never beside the user's files), which the caller removes once the analysis
is audited. The numbers are parsed by the same code as the whole-file loader, so an audit of the
converted store gives the same results (``tests/test_properties.py``).
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
    reserve,
    run_groups,
)
from auditor.loaders.problems import Loaded, LoadProblem
from auditor.model import SamplerSettings

#: Target bytes of one Zarr chunk (all chains and draws of a run of elements).
CHUNK_BYTES = 16 * 2**20
#: Bytes of rows reordered at a time (step 1), and of elements copied at a time (step 2).
COPY_BYTES = 32 * 2**20


def _chunking(shape: tuple[int, ...], per_element: int) -> tuple[int, ...]:
    """Chunk shape of a variable's elements: ones, then a run along one dimension, then the
    whole of the later dimensions, so that every chunk is a contiguous run in C order."""
    target = max(1, CHUNK_BYTES // per_element)
    for k in range(len(shape)):
        inner = math.prod(shape[k + 1:])
        if inner <= target:
            return (1,) * k + (max(1, min(shape[k], target // inner)),) + tuple(shape[k + 1:])
    return tuple(shape)


def _element_columns(run: Run) -> tuple[np.ndarray, list[tuple[str, int, tuple[int, ...]]]]:
    """The column of every element of the normalized variables, variable after variable,
    each in C order (``-1``: an element without a column, NaN), and each variable's
    ``(name, first element, shape)``."""
    parts: list[np.ndarray] = []
    where: list[tuple[str, int, tuple[int, ...]]] = []
    first = 0
    for name, spec in run.layout.items():
        if isinstance(spec, int):
            shape: tuple[int, ...] = ()
            cols = np.array([spec], dtype=np.int64)
        else:
            shape = tuple(spec.shape)
            cols = np.full(math.prod(shape), -1, dtype=np.int64)
            cols[np.asarray(spec.cells, dtype=np.int64)] = spec.columns
        where.append((name, first, shape))
        parts.append(cols)
        first += cols.size
    return (np.concatenate(parts) if parts else np.zeros(0, np.int64)), where


def _pwrite_all(fd: int, data: memoryview, offset: int) -> None:
    while len(data):
        n = os.pwrite(fd, data, offset)
        data, offset = data[n:], offset + n


def _pread_into(fd: int, out: np.ndarray, offset: int) -> None:
    view = memoryview(out).cast("B")
    got = os.preadv(fd, [view], offset)
    if got != len(view):
        raise OSError(f"the temporary copy of the draws is short ({got} of {len(view)} bytes)")


def _reorder(run: Run, columns: np.ndarray, fd: int, stat_idx: list[int]) -> np.ndarray:
    """Step 1: every usable row of every chain, its model columns in the order of
    ``columns``, written to ``fd`` as ``(chain, row, element)`` float64; returns the sampler
    columns ``stat_idx`` as a ``(chain, row, stat)`` array."""
    n, lo = len(run.chains), run.start
    rows, ncol, width = run.warm + run.kept, run.arr.shape[2], columns.size
    missing = columns < 0
    take = np.where(missing, ncol, columns)
    stats = np.empty((n, rows, len(stat_idx)))
    step = max(1, COPY_BYTES // (8 * max(ncol, width, 1)))
    for c in range(n):
        for r0 in range(0, rows, step):
            r1 = min(rows, r0 + step)
            block = run.arr[c, lo + r0: lo + r1]  # whole rows: contiguous in the mapping
            stats[c, r0:r1] = block[:, stat_idx]
            if missing.any():
                wide = np.empty((r1 - r0, ncol + 1))
                wide[:, :ncol] = block
                wide[:, ncol] = np.nan
                out = wide[:, take]
            else:
                out = block[:, columns]
            _pwrite_all(fd, memoryview(np.ascontiguousarray(out)).cast("B"),
                        (c * rows + r0) * width * 8)
            run.store.release()
    return stats


def _copy(fd: int, run: Run, width: int, pieces: list[tuple[object, tuple, int, int]],
          rows: tuple[int, int]) -> None:
    """Step 2: copy ``pieces`` ``(zarr array, selection, first element, count)``, in order
    of their first element, from the reordered rows ``rows`` of every chain."""
    n, total = len(run.chains), run.warm + run.kept
    n_draws = rows[1] - rows[0]
    per_copy = max(1, COPY_BYTES // (8 * max(1, n * n_draws)))
    k = 0
    while k < len(pieces):
        j = k + 1
        while j < len(pieces) and pieces[j][2] + pieces[j][3] - pieces[k][2] <= per_copy:
            j += 1
        lo, hi = pieces[k][2], pieces[j - 1][2] + pieces[j - 1][3]
        buf = np.empty((n, n_draws, hi - lo))
        for c in range(n):
            for r in range(n_draws):
                _pread_into(fd, buf[c, r], ((c * total + rows[0] + r) * width + lo) * 8)
        for arr, sel, first, count in pieces[k:j]:
            block = buf[:, :, first - lo: first - lo + count]
            arr[(slice(None), slice(None), *sel)] = block.reshape(
                n, n_draws, *(x.stop - x.start for x in sel))
        k = j


def _zarr_groups(folder: Path, zarr, dask_array):  # noqa: ANN001, ANN202
    """A group maker for :func:`run_groups` (the posterior or warmup variables as Dask arrays
    over a Zarr store in ``folder``; the sampler statistics in memory) and the action that
    closes the reordered rows' file."""
    store = zarr.open_group(str(folder / "draws.zarr"), mode="w")
    done: dict[str, object] = {}

    def prepare(run: Run) -> None:
        columns, where = _element_columns(run)
        stat_cols = [(j, c) for j, c in enumerate(run.columns) if c.endswith("__")]
        path = folder / "elements.f64"
        nbytes = 8 * len(run.chains) * (run.warm + run.kept) * columns.size
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o600)
        try:
            if nbytes:
                reserve(fd, nbytes)  # a full disk is an OSError here
            stats = _reorder(run, columns, fd, [j for j, _ in stat_cols])
        except BaseException:
            os.close(fd)
            path.unlink(missing_ok=True)
            raise
        path.unlink()  # the descriptor keeps it until step 2 is done
        done.update(fd=fd, width=int(columns.size), where=where, stats=stats,
                    stat_cols=stat_cols)

    def make(run: Run, warmup: bool) -> tuple[xr.Dataset, xr.Dataset | None]:
        if "where" not in done:
            prepare(run)
        fd, width, where = done["fd"], done["width"], done["where"]
        rows = (0, run.warm) if warmup else (run.warm, run.warm + run.kept)
        n_chains, n_draws = len(run.chains), rows[1] - rows[0]
        zgroup = store.require_group("warmup_posterior" if warmup else "posterior")
        variables: dict[str, xr.Variable] = {}
        coords: dict[str, object] = {"chain": np.arange(n_chains), "draw": np.arange(n_draws)}
        pieces: list[tuple[object, tuple, int, int]] = []
        arrays = []
        for number, (name, first, shape) in enumerate(where):
            spec = run.layout[name]
            chunks = _chunking(shape, 8 * max(1, n_chains * n_draws))
            # Arrays are named by number: a column name need not be a valid store path.
            arr = zgroup.create_array(f"v{number}", shape=(n_chains, n_draws, *shape),
                                      chunks=(n_chains, n_draws, *chunks), dtype="float64",
                                      compressors=None, fill_value=np.nan)
            arrays.append(arr)
            grid = [math.ceil(s / c) for s, c in zip(shape, chunks, strict=True)]
            if n_draws and math.prod(shape) > 0:
                for pos in (np.ndindex(*grid) if shape else [()]):
                    sel = tuple(slice(i * c, min(s, (i + 1) * c))
                                for i, c, s in zip(pos, chunks, shape, strict=True))
                    start = (int(np.ravel_multi_index(tuple(x.start for x in sel), shape))
                             if shape else 0)
                    pieces.append((arr, sel, first + start,
                                   math.prod(x.stop - x.start for x in sel)))
            dims = (("chain", "draw") if isinstance(spec, int)
                    else ("chain", "draw", *spec.dims(name)))
            variables[name] = (dims, arr)
            for dim, coord in stan_names.coords_for(name, spec).items():
                coords.setdefault(dim, coord)
        _copy(fd, run, width, pieces, rows)
        posterior = xr.Dataset(
            {name: xr.Variable(dims, dask_array.from_zarr(arr))
             for name, (dims, arr) in variables.items()}, coords=coords)
        stats = None
        if done["stat_cols"]:
            small = np.ascontiguousarray(done["stats"][:, rows[0]:rows[1]])
            stats = _stats_dataset([(k, c) for k, (_, c) in enumerate(done["stat_cols"])],
                                   small, run.settings.max_depth)
            stats = stats.assign_coords(chain=np.arange(n_chains), draw=np.arange(n_draws))
        if warmup or not run.warm:
            close()  # the last group made: the reordered rows are no longer needed
        return posterior, stats

    def close() -> None:
        fd = done.pop("fd", None)
        if fd is not None:
            os.close(fd)

    return make, close


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
        make, close = _zarr_groups(folder, zarr, dask.array)
        try:
            loaded = run_groups(run, make)
        finally:
            close()
    except OSError as exc:  # a full disk, a file gone while read
        remove()
        problems.append(LoadProblem(paths[0], f"the run could not be converted for reading in "
                                    f"blocks: {exc.strerror or exc}"))
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"),
                      problems=problems), []
    return loaded, [remove]


__all__ = ["cmdstan_to_zarr", "temporary_folder"]
