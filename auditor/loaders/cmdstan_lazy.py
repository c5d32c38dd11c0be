"""CmdStan CSV runs larger than memory: converted on the fly to a temporary chunked Zarr store.

The files are checked and read as :func:`auditor.loaders.cmdstan_csv.load_cmdstan_csv` reads
them (same header reading, row checks, chain checks and settings, from that module), but never
whole:

1. each file is read through the boundary in pieces of :data:`PIECE_BYTES`; its data rows are
   parsed in batches, the model columns reordered into the normalized variables (each in C
   order, the order of the diagnostics table) and appended to a raw float64 file of that
   chain; the sampler columns (a few per draw) stay in memory;
2. after the chain checks, each variable is copied from the raw files into a Zarr array in
   chunks of about :data:`CHUNK_BYTES`, each chunk a contiguous run of the variable's elements
   (all chains and draws), read from the raw files with positioned reads;
3. the raw files are deleted and the arrays opened as Dask arrays.

Everything is written in a temporary folder outside the project (never beside the user's
files), which the caller removes once the analysis is audited. The numbers are parsed by the
same code as the whole-file loader, so an audit of the converted store gives the same results.
"""

from __future__ import annotations

import hashlib
import math
import os
import shutil
import tempfile
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders.cmdstan_csv import (
    _BOM,
    _ELAPSED,
    _STEP_SIZE,
    _all_numbers,
    _as_float,
    _Chain,
    _check_chains,
    _coords,
    _head_lines,
    _is_fixed_param,
    _kept_and_warmup_expected,
    _layout,
    _parse_header_lines,
    _parse_rows,
    _settings,
    _stats_dataset,
    load_cmdstan_csv,
)
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem
from auditor.model import SamplerSettings

#: Bytes read from a file at a time.
PIECE_BYTES = 8 * 2**20
#: Bytes of data rows parsed at a time.
BATCH_BYTES = 4 * 2**20
#: Target bytes of one Zarr chunk (all chains and draws of a run of elements).
CHUNK_BYTES = 16 * 2**20
#: Bytes of raw rows copied at a time in pass 2 (a run of whole chunks).
COPY_BYTES = 64 * 2**20


@dataclass
class _Streamed:
    """One file read in pieces: its header, counts, sampler columns and draws digest."""

    header: object
    raw: Path
    n_good: int = 0
    n_rows_seen: int = 0
    n_warmup: int = 0
    stats: list[np.ndarray] = field(default_factory=list)
    digest: bytes = b""
    step_size: float = math.nan
    elapsed: dict[str, float] = field(default_factory=dict)


def _permutation(columns: tuple[str, ...]) -> tuple[list[int], list[int], np.ndarray]:
    """(model column positions, sampler column positions, model column of every element of
    the normalized variables in order, -1 for a missing element)."""
    model_idx = [j for j, c in enumerate(columns) if not c.endswith("__")]
    stat_idx = [j for j, c in enumerate(columns) if c.endswith("__")]
    layout = _layout([columns[j] for j in model_idx], Path(), None, [])
    perm: list[np.ndarray] = []
    for spec in layout.values():
        if isinstance(spec, int):
            perm.append(np.array([spec]))
            continue
        cells = np.full(math.prod(spec.shape), -1, dtype=np.int64)
        cells[spec.flat] = spec.columns
        perm.append(cells)
    return model_idx, stat_idx, (np.concatenate(perm) if perm else np.empty(0, np.int64))


def _stream(path: Path, gate: Boundary, folder: Path, index: int,
            problems: list[LoadProblem]) -> _Streamed | None:
    """Pass 1 for one file; ``None`` (with a problem) when it is unusable."""
    try:
        head, why = _head_lines(path, gate)
    except Refused as exc:
        problems.append(refused_problem(path, exc))
        return None
    except OSError as exc:
        problems.append(LoadProblem(path, f"cannot read the file: {exc.strerror or exc}"))
        return None
    if head is None:
        # The whole-file loader's words for the same defects.
        if (why or "").startswith("an empty file"):
            why = "an empty file (0 bytes), not a CmdStan CSV"
        elif (why or "").startswith("a binary file"):
            why = "a binary file, not a CmdStan CSV"
        problems.append(LoadProblem(path, why or "not CSV text"))
        return None
    header = _parse_header_lines(path, head)
    if header is None:
        problems.append(LoadProblem(
            path, "not a CmdStan CSV: no 'stan_version_major' header comment and no "
            "sampler columns ending in '__'"))
        return None
    if not header.columns or header.column_line is None:
        problems.append(LoadProblem(path, "the file has a header but no line of column names"))
        return None
    if _all_numbers(header.columns):
        problems.append(LoadProblem(
            path, "the line of column names is missing: this line holds numbers, so the draws "
            "cannot be matched to quantities; the file is left out", line=header.column_line))
        return None
    dupes = [c for c, n in Counter(header.columns).items() if n > 1]
    if dupes:
        problems.append(LoadProblem(
            path, f"column names repeat ({', '.join(dupes[:5])}); the file cannot be read "
            "as one set of draws", line=header.column_line))
        return None
    out = _Streamed(header, folder / f"chain-{index}.f64")
    model_idx, stat_idx, perm = _permutation(header.columns)
    missing = perm < 0
    take = np.maximum(perm, 0)
    fixed = _is_fixed_param(header)
    variational = header.method == "variational"
    digest = hashlib.blake2b(digest_size=32)
    used_all: list[np.ndarray] = []
    rows: list[str] = []
    numbers: list[int] = []
    pending = 0
    dropped_first = False

    def flush() -> None:
        nonlocal pending, dropped_first
        data, used = _parse_rows(header, rows, numbers, problems)
        used_all.append(used)
        if variational and not dropped_first and data.shape[0]:
            # The first row of a variational output is the mean of the approximation
            # (as the whole-file loader reads it).
            data = data[1:]
            dropped_first = True
        if data.shape[0]:
            if not fixed:
                digest.update(np.ascontiguousarray(data).data)
            model = data[:, model_idx][:, take]
            model[:, missing] = np.nan
            with out.raw.open("ab") as fh:
                fh.write(np.ascontiguousarray(model, dtype=np.float64).data)
            out.stats.append(np.array(data[:, stat_idx]))
            out.n_good += data.shape[0]
        rows.clear()
        numbers.clear()
        pending = 0

    out.raw.touch()
    number = 0
    buf = b""
    with gate.open(path, check_size=False) as fh:
        first = True
        while True:
            piece = fh.read(PIECE_BYTES)
            if first and piece.startswith(_BOM.encode()):
                problems.append(LoadProblem(
                    path, "the file starts with a byte-order mark (an editor added it); read "
                    "without it", line=1, kind="note"))
                piece = piece[len(_BOM.encode()):]
            first = False
            if not piece and not buf:
                break
            buf += piece
            cut = len(buf) if not piece else buf.rfind(b"\n") + 1
            if cut <= 0:
                continue
            text, buf = buf[:cut].decode("utf-8", errors="replace"), buf[cut:]
            for line in text.splitlines():
                number += 1
                if number <= header.column_line or not line.strip():
                    continue
                if line.startswith("#"):
                    m = _STEP_SIZE.match(line)
                    if m:
                        value = _as_float(m.group(1))
                        out.step_size = math.nan if value is None else value
                    m = _ELAPSED.match(line)
                    if m:
                        seconds = _as_float(m.group(1))
                        if seconds is None:
                            problems.append(LoadProblem(
                                path, f"the timing line says {m.group(1)!r} seconds, not a "
                                "number; the time is left out", line=number, kind="note"))
                        else:
                            out.elapsed[m.group(2).lower()] = seconds
                    continue
                rows.append(line)
                numbers.append(number)
                out.n_rows_seen += 1
                pending += len(line)
                if pending >= BATCH_BYTES:
                    flush()
            if not piece:
                break
    if rows:
        flush()
    out.digest = digest.digest()
    used = np.concatenate(used_all) if used_all else np.zeros(0, dtype=bool)
    expected = _kept_and_warmup_expected(header, fixed) if header.method == "sample" else None
    if expected is not None:
        kept, warm = expected
        if out.n_rows_seen != kept + warm:
            what = f"{kept} draws" if not warm else f"{warm} warmup rows and {kept} draws"
            problems.append(LoadProblem(
                path, f"the header promises {what} (num_samples = "
                f"{header.find('num_samples', 'sample')}) but the file has {out.n_rows_seen} "
                "data rows; the file looks cut short or edited",
                line=header.lines.get(header.find_key("num_samples", "sample") or "")))
        out.n_warmup = int(used[:warm].sum())
    return out


def _drop_identical(streamed: list[_Streamed], kept: list[_Chain], n_total: int,
                    problems: list[LoadProblem]) -> list[_Chain]:
    """Leave out a chain whose draws equal another's (the whole-file loader's check, on
    digests taken while reading)."""
    by_header = {id(s.header): s for s in streamed}
    seen: dict[bytes, _Chain] = {}
    out = []
    for c in kept:
        s = by_header[id(c.header)]
        if not _is_fixed_param(c.header) and s.n_good:
            twin = seen.get(s.digest)
            if twin is not None:
                problems.append(LoadProblem(
                    c.header.path,
                    f"chain file {c.header.path.name}: its draws are identical to those of "
                    f"{twin.header.path.name} (a copied file, or the same seed and chain id); "
                    f"it is left out (of {n_total} files given)", kind="inconsistent-chains"))
                continue
            seen.setdefault(s.digest, c)
        out.append(c)
    return out


def _chunking(shape: tuple[int, ...], per_element: int) -> tuple[int, ...]:
    """Chunk shape of a variable's elements: ones, then a run along one dimension, then the
    whole of the later dimensions, so that every chunk is a contiguous run in C order."""
    target = max(1, CHUNK_BYTES // per_element)
    for k in range(len(shape)):
        inner = math.prod(shape[k + 1:])
        if inner <= target:
            return (1,) * k + (max(1, min(shape[k], target // inner)),) + tuple(shape[k + 1:])
    return tuple(shape)


def _copy_variable(group, name: str, dims: tuple[str, ...], shape: tuple[int, ...],  # noqa: ANN001
                   start: int, width: int, raws: list[int], rows: tuple[int, int]):  # noqa: ANN202
    """Pass 2 for one variable: raw rows ``rows`` of every chain into the Zarr array ``name``
    of ``group``."""
    n_chains, n_draws = len(raws), rows[1] - rows[0]
    per_element = 8 * n_chains * n_draws
    chunks = _chunking(shape, per_element)
    arr = group.create_array(name, shape=(n_chains, n_draws, *shape),
                             chunks=(n_chains, n_draws, *chunks), dtype="float64",
                             compressors=None, fill_value=np.nan)
    size = math.prod(shape)
    if size == 0 or n_draws == 0:
        return arr
    # Chunks in C order of the chunk grid cover the elements in order, each a contiguous
    # run; copy runs of whole chunks at a time.
    grid = [math.ceil(n / c) for n, c in zip(shape, chunks, strict=True)]
    pieces = []
    for pos in (np.ndindex(*grid) if shape else [()]):
        sel = tuple(slice(i * c, min(n, (i + 1) * c))
                    for i, c, n in zip(pos, chunks, shape, strict=True))
        first = int(np.ravel_multi_index(tuple(x.start for x in sel), shape)) if shape else 0
        pieces.append((sel, first, math.prod(x.stop - x.start for x in sel)))
    per_copy = max(1, COPY_BYTES // per_element)
    k = 0
    while k < len(pieces):
        j = k + 1
        while j < len(pieces) and pieces[j][1] + pieces[j][2] - pieces[k][1] <= per_copy:
            j += 1
        lo, hi = pieces[k][1], pieces[j - 1][1] + pieces[j - 1][2]
        buf = np.empty((n_chains, n_draws, hi - lo))
        for c, fd in enumerate(raws):
            for r in range(n_draws):
                offset = ((rows[0] + r) * width + start + lo) * 8
                got = os.pread(fd, (hi - lo) * 8, offset)
                if len(got) != (hi - lo) * 8:
                    raise OSError(f"the temporary copy of the draws is short ({fd})")
                buf[c, r] = np.frombuffer(got, dtype=np.float64)
        for sel, first, count in pieces[k:j]:
            block = buf[:, :, first - lo:first - lo + count]
            arr[(slice(None), slice(None), *sel)] = block.reshape(
                n_chains, n_draws, *(x.stop - x.start for x in sel))
        k = j
    return arr


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

    problems: list[LoadProblem] = []
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

    try:
        loaded = _convert(paths, gate, folder, problems, zarr, dask.array)
    except OSError as exc:  # a full disk, a file gone while read
        remove()
        problems.append(LoadProblem(paths[0], f"the run could not be converted for reading in "
                                    f"blocks: {exc.strerror or exc}"))
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"),
                      problems=problems), []
    if loaded.tree is None:
        remove()
        return loaded, []
    return loaded, [remove]


def _convert(paths, gate, folder, problems, zarr, dask_array) -> Loaded:  # noqa: ANN001
    streamed: list[_Streamed] = []
    for i, p in enumerate(paths):
        s = _stream(Path(p), gate, folder, i, problems)
        if s is not None:
            streamed.append(s)
    stand_ins = [_Chain(s.header, np.empty((s.n_good, 0)), s.n_rows_seen, s.n_warmup,
                        s.step_size, s.elapsed) for s in streamed]
    kept = _check_chains(stand_ins, problems)
    kept = _drop_identical(streamed, kept, len(stand_ins), problems)
    if not kept:
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"), problems=problems)
    settings = _settings(kept)
    h = kept[0].header
    if settings.algorithm == "fixed_param" and h.find("algorithm", "sample") == "hmc":
        problems.append(LoadProblem(
            h.path, "the header says algorithm = hmc but there are no HMC sampler columns "
            "(stepsize__, treedepth__): read as a fixed_param run, as CmdStan does for models "
            "without parameters", line=h.lines.get(h.find_key("algorithm", "sample") or ""),
            kind="note"))
    by_header = {id(s.header): s for s in streamed}
    chains = [by_header[id(c.header)] for c in kept]
    if all(s.n_good == 0 for s in chains):
        for s in chains:
            if s.n_rows_seen == 0:
                problems.append(LoadProblem(s.header.path, "the file has no draws (no data rows)"))
        return Loaded(tree=None, settings=settings, problems=problems)
    model_columns = [c for c in h.columns if not c.endswith("__")]
    layout = _layout(model_columns, h.path, h.column_line, problems)
    stat_cols = [c for c in h.columns if c.endswith("__")]
    width = sum(1 if isinstance(spec, int) else math.prod(spec.shape)
                for spec in layout.values())
    store = zarr.open_group(str(folder / "draws.zarr"), mode="w")
    attrs = {"inference_library": "CmdStan", "source_format": "cmdstan-csv"}
    if settings.library_version:
        attrs["inference_library_version"] = settings.library_version
    n_warmup = chains[0].n_warmup
    n_kept = chains[0].n_good - n_warmup
    fds = [os.open(s.raw, os.O_RDONLY) for s in chains]
    try:
        groups: dict[str, xr.Dataset] = {}
        for group, rows, warm in (("posterior", (n_warmup, n_warmup + n_kept), False),
                                  ("warmup_posterior", (0, n_warmup), True)):
            if warm and not n_warmup:
                continue
            zgroup = store.require_group(group)
            variables: dict[str, xr.Variable] = {}
            start = 0
            for number, (name, spec) in enumerate(layout.items()):
                shape = () if isinstance(spec, int) else tuple(spec.shape)
                dims = tuple(f"{name}_dim_{k}" for k in range(len(shape)))
                # Arrays are named by number: a column name need not be a valid store path.
                arr = _copy_variable(zgroup, f"v{number}", dims, shape, start, width, fds,
                                     rows)
                variables[name] = xr.Variable(("chain", "draw", *dims),
                                              dask_array.from_zarr(arr))
                start += max(1, math.prod(shape))
            n_draws = rows[1] - rows[0]
            post = xr.Dataset(variables, coords=_coords(len(chains), n_draws, variables))
            post.attrs.update(attrs)
            stacked = np.stack([np.concatenate(s.stats)[rows[0]:rows[1]] if s.stats
                                else np.empty((0, len(stat_cols))) for s in chains])
            stats = None
            if stat_cols:
                stats = _stats_dataset(stat_cols, stacked, settings.max_depth)
                stats = stats.assign_coords(chain=np.arange(len(chains)),
                                            draw=np.arange(n_draws))
                stats.attrs.update(attrs)
            if not warm:
                post.attrs["adapted_step_size"] = [float(s.step_size) for s in chains]
                for phase in ("warm-up", "sampling"):
                    values = [s.elapsed.get(phase, math.nan) for s in chains]
                    if not all(math.isnan(v) for v in values):
                        key = "warmup" if phase == "warm-up" else phase
                        post.attrs[f"elapsed_{key}_seconds"] = values
                groups["posterior"] = post
                if stats is not None:
                    groups["sample_stats"] = stats
            else:
                groups["warmup_posterior"] = post
                if stats is not None:
                    groups["warmup_sample_stats"] = stats
    finally:
        for fd in fds:
            os.close(fd)
        for s in streamed:
            s.raw.unlink(missing_ok=True)
    tree = xr.DataTree.from_dict(groups)
    tree.attrs.update(attrs)
    return Loaded(tree=tree, settings=settings, sources=[s.header.path for s in chains],
                  problems=problems)


__all__ = ["cmdstan_to_zarr", "temporary_folder"]
