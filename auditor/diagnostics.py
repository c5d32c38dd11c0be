"""Per-quantity convergence diagnostics of the posterior, computed once per analysis.

Every number comes from the fused kernel :mod:`auditor.kernels.diagnostics`: rank-normalized
split R-hat (the larger of bulk and folded), bulk-ESS, tail-ESS (5% and 95% quantiles) and the
MCSE of the mean (Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, Bayesian Analysis 16(2)),
in one pass over blocks of quantities. Rules that need other measures (the MCSE of a quantile,
the classic split R-hat) ask the table for them with :meth:`DiagnosticsTable.measures`; rules
that need the draws of many quantities walk them with :meth:`DiagnosticsTable.blocks`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import xarray as xr

from auditor.kernels.diagnostics import (
    CONVERGENCE,
    DEFAULT_BLOCK_BYTES,
    DRAW_SUMMARIES,
    TAIL_PROBS,
    Workspace,
    block_size,
    diagnose_block,
)

__all__ = ["COLUMNS", "TAIL_PROBS", "BlockRunner", "DiagnosticsTable", "block_columns",
           "element_blocks", "is_lazy", "quantity_label", "quantity_labels", "read_flat"]

COLUMNS = ("quantity", "variable", "rhat", "ess_bulk", "ess_tail", "mcse_mean", "mean", "sd")
#: Row key of each kernel measure in the table.
ROW_KEYS = {"rhat_rank": "rhat", "ess_bulk": "ess_bulk", "ess_tail": "ess_tail",
            "mcse_mean": "mcse_mean"}  # fmt: skip
#: Fewest draws per chain for which the table has rows (the kernel's minimum).
MIN_DRAWS = 4


def _coord_label(coord: Any, one_based: bool) -> str:
    if isinstance(coord, np.integer | int) and not isinstance(coord, bool | np.bool_):
        return str(int(coord) + (1 if one_based else 0))
    return str(coord)


def _labels_of(da: xr.DataArray, dim: str, size: int, one_based: bool) -> list[str]:
    """Labels of one dimension's positions: coordinates (integers 1-based if asked) or indices."""
    values = da.coords[dim].values if dim in da.coords else range(size)
    return [_coord_label(coord, one_based) for coord in values]


def quantity_label(var: str, da: xr.DataArray, index: tuple, one_based: bool) -> str:
    """Name of one scalar element: ``var`` or ``var[i,j]``.

    Integer coordinates are written 1-based when ``one_based`` (Stan's convention,
    matching CmdStan's ``var.i.j`` columns); label coordinates as their label.
    """
    if not index:
        return var
    parts = []
    for dim, i in zip([d for d in da.dims if d not in ("chain", "draw")], index, strict=True):
        coord = da.coords[dim].values[i] if dim in da.coords else i
        parts.append(_coord_label(coord, one_based))
    return f"{var}[{','.join(parts)}]"


def quantity_labels(var: str, da: xr.DataArray, one_based: bool) -> list[str]:
    """Labels of every scalar element of ``da`` in C order (as :func:`quantity_label`)."""
    dims = [d for d in da.dims if d not in ("chain", "draw")]
    if not dims:
        return [var]
    per_dim = [_labels_of(da, d, da.sizes[d], one_based) for d in dims]
    return [f"{var}[{','.join(p)}]" for p in itertools.product(*per_dim)]


def _finite(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def is_lazy(values: Any) -> bool:
    """Whether ``values`` is a Dask array (draws read lazily) rather than in memory."""
    return type(values).__module__.split(".")[0] == "dask"


def flat_boxes(shape: tuple[int, ...], lo: int, hi: int) -> list[tuple[slice, ...]]:
    """Rectangular selections of an array of ``shape`` whose C-order elements, taken box
    after box, are exactly the C-order elements ``lo`` to ``hi - 1`` (at most two boxes per
    dimension and one in between), so that a range of quantities is read without reading
    the rest of its variable."""
    if lo >= hi:
        return []
    if not shape:
        return [()]
    inner = math.prod(shape[1:])
    rest = len(shape) - 1
    i0, r0 = divmod(lo, inner)
    i1, r1 = divmod(hi, inner)
    if i0 == i1:
        return [(slice(i0, i0 + 1), *b) for b in flat_boxes(shape[1:], r0, r1)]
    out: list[tuple[slice, ...]] = []
    if r0:
        out += [(slice(i0, i0 + 1), *b) for b in flat_boxes(shape[1:], r0, inner)]
        i0 += 1
    if i1 > i0:
        out.append((slice(i0, i1), *(slice(None),) * rest))
    if r1:
        out += [(slice(i1, i1 + 1), *b) for b in flat_boxes(shape[1:], 0, r1)]
    return out


def read_flat(values: Any, lo: int, hi: int) -> np.ndarray:
    """Elements ``lo`` to ``hi - 1`` (C order) of a (chains, draws, ...) array as a
    (chains, draws, hi - lo) numpy array; a Dask array is read box by box
    (:func:`flat_boxes`) with the synchronous scheduler, so only the store chunks that
    hold those elements are read, one at a time."""
    chains, draws = values.shape[:2]
    if not is_lazy(values):
        return np.asarray(values).reshape(chains, draws, -1)[:, :, lo:hi]
    import dask

    boxes = flat_boxes(tuple(values.shape[2:]), lo, hi)
    parts = dask.compute(*[values[(slice(None), slice(None), *b)] for b in boxes],
                         scheduler="synchronous")
    flat = [np.asarray(p).reshape(chains, draws, -1) for p in parts]
    return flat[0] if len(flat) == 1 else np.concatenate(flat, axis=2)


def element_blocks(da: xr.DataArray, per_block: int) -> Iterator[tuple[int, np.ndarray]]:
    """The elements of one (chain, draw, ...) variable in blocks: ``(first, draws)`` with
    draws (chains, draws, k) in C order; from memory as views, from a lazily read variable
    block by block."""
    da = da.transpose("chain", "draw", ...)
    values = da.data if is_lazy(da.data) else np.asarray(da.values)
    size = math.prod(values.shape[2:])
    for lo in range(0, size, max(1, per_block)):
        yield lo, read_flat(values, lo, min(size, lo + per_block))


#: Bytes read from a lazily read posterior at a time, walking it in order; the kernel's blocks
#: are cut from this window (so a store's chunks are read once, not once per kernel block).
READ_BYTES = 16 * 2**20


@dataclass
class _Variable:
    """One numeric variable of the posterior: a (chains, draws, elements) view of the array in
    memory, or the (chains, draws, ...) Dask array of a posterior read lazily."""

    name: str
    values: Any
    labels: list[str]
    start: int
    size: int

    def take(self, lo: int, hi: int) -> np.ndarray:
        """Elements ``lo`` to ``hi - 1`` as (chains, draws, hi - lo): a view, or read."""
        if is_lazy(self.values):
            return read_flat(self.values, lo, hi)
        return self.values[:, :, lo:hi]


#: Runs a function over argument tuples (blocks of a posterior read lazily, on a cluster) and
#: yields the results in order: ``runner(fn, [args, ...])`` (see :mod:`auditor.cluster`).
BlockRunner = Callable[[Callable[..., Any], list[tuple[Any, ...]]], Iterator[Any]]


def _iter_blocks(pieces: Iterable[tuple[int, np.ndarray]], per_block: int
                 ) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """Cut consecutive pieces ``(first index, (chains, draws, k))`` into blocks of
    ``per_block`` quantities: a block inside one piece is a view of it, quantities from
    several pieces are copied into one float64 block."""
    pending: list[np.ndarray] = []
    pending_idx: list[np.ndarray] = []
    count = 0

    def flush() -> tuple[np.ndarray, np.ndarray]:
        block = pending[0] if len(pending) == 1 else np.concatenate(
            [p.astype(np.float64, copy=False) for p in pending], axis=2)
        return np.concatenate(pending_idx), block

    for first, values in pieces:
        size = values.shape[2]
        pos = 0
        while pos < size:
            take = min(per_block - count, size - pos)
            pending.append(values[:, :, pos : pos + take])
            pending_idx.append(np.arange(first + pos, first + pos + take))
            count += take
            pos += take
            if count == per_block:
                yield flush()
                pending, pending_idx, count = [], [], 0
    if pending:
        yield flush()


def block_columns(pieces: list[tuple[int, np.ndarray]], per_block: int,
                  workspace: Workspace | None = None) -> dict[str, np.ndarray]:
    """The table's columns for consecutive pieces of the posterior, in kernel blocks of
    ``per_block`` quantities (a top-level function: a Dask worker runs it on the blocks of
    a posterior read lazily).

    Returns the :data:`CONVERGENCE` measures, ``mean``, ``sd``, ``constant`` and
    ``nonfinite``, one value per quantity of the pieces, in order.
    """
    workspace = workspace or Workspace()
    out: dict[str, list[np.ndarray]] = {}
    for _, block in _iter_blocks(pieces, per_block):
        result = diagnose_block(block, measures=CONVERGENCE + DRAW_SUMMARIES, quantiles=(),
                                workspace=workspace)
        cols = {name: np.asarray(result[name], dtype=np.float64) for name in CONVERGENCE}
        # Mean, sd and range come with the kernel's sort; quantities with a non-finite draw
        # (NaN or infinite at an end of the sorted draws) are summarized over their finite
        # draws instead.
        low, high = result["draws_min"], result["draws_max"]
        cols["mean"] = np.array(result["draws_mean"], dtype=np.float64)
        cols["sd"] = np.array(result["draws_sd"], dtype=np.float64)
        cols["constant"] = np.asarray(low == high)
        cols["nonfinite"] = np.zeros(block.shape[2], dtype=np.int64)
        odd = ~(np.isfinite(low) & np.isfinite(high))
        if odd.any():
            mean, sd, const, bad = _moments(np.asarray(block)[:, :, odd])
            cols["mean"][odd], cols["sd"][odd] = mean, sd
            cols["constant"][odd], cols["nonfinite"][odd] = const, bad
        for name, values in cols.items():
            out.setdefault(name, []).append(values)
    return {name: np.concatenate(parts) for name, parts in out.items()}


@dataclass
class DiagnosticsTable:
    """Rows of diagnostics, one per scalar quantity of the posterior group.

    ``one_based`` labels integer indices from 1 (Stan's convention, so that
    ``theta[1]`` matches the CSV column ``theta.1``). ``block_bytes`` bounds the working
    memory of one block of quantities (default: the kernel's budget, at most half the draws).
    A posterior read lazily (Dask arrays) is never loaded whole: blocks are read from it
    window by window; ``runner`` (a :data:`BlockRunner`) computes its windows elsewhere (the
    tasks of a Dask cluster). The blocks, and so every number, are the same either way.
    """

    posterior: xr.Dataset | None
    one_based: bool = False
    errors: list[str] = field(default_factory=list)
    block_bytes: int | None = None
    runner: BlockRunner | None = None

    # --- layout ------------------------------------------------------------------------------

    @cached_property
    def _variables(self) -> list[_Variable]:
        ds = self.posterior
        if ds is None or not ds.data_vars:
            return []
        out: list[_Variable] = []
        start = 0
        for var in ds.data_vars:
            da = ds[var]
            dtype = da.dtype
            if not np.issubdtype(dtype, np.number) or np.issubdtype(dtype, np.complexfloating):
                continue
            if "chain" not in da.dims or "draw" not in da.dims:
                continue
            da = da.transpose("chain", "draw", ...)
            labels = quantity_labels(str(var), da, self.one_based)
            if is_lazy(da.data):
                values = da.data
                size = math.prod(values.shape[2:])
            else:
                full = np.asarray(da.values)
                values = full.reshape(full.shape[0], full.shape[1], -1)
                size = values.shape[2]
            out.append(_Variable(str(var), values, labels, start, size))
            start += size
        return out

    @property
    def lazy(self) -> bool:
        """Whether the posterior is read lazily (some variable is a Dask array)."""
        return any(is_lazy(v.values) for v in self._variables)

    @property
    def shape(self) -> tuple[int, int, int]:
        """(chains, draws, quantities) of the numeric posterior (zeros without one)."""
        variables = self._variables
        if not variables:
            return (0, 0, 0)
        chains, draws = variables[0].values.shape[:2]
        return (chains, draws, sum(v.size for v in variables))

    @cached_property
    def quantities(self) -> list[str]:
        """Label of every scalar quantity, in table order."""
        return [label for v in self._variables for label in v.labels]

    @cached_property
    def variables(self) -> list[str]:
        """Variable of every scalar quantity, in table order."""
        return [v.name for v in self._variables for _ in range(v.size)]

    def _per_block(self, n_series: int, raw_ess: bool = False) -> int:
        chains, draws, total = self.shape
        budget = self.block_bytes
        if budget is None:
            budget = min(DEFAULT_BLOCK_BYTES, max(1, chains * draws * total * 8 // 2))
        return block_size(chains, draws, n_series, budget, raw_ess)

    def _window(self, per_block: int) -> int:
        """Quantities per read window of a lazy posterior: a multiple of ``per_block``, so
        that no kernel block is cut by a window's edge (only by a variable's, as in memory)."""
        chains, draws, _ = self.shape
        per_quantity = max(1, chains * draws * 8)
        return per_block * max(1, READ_BYTES // (per_quantity * per_block))

    def _pieces(self, lo: int, hi: int, lazy_arrays: bool = False) -> list[tuple[int, Any]]:
        """The pieces of quantities ``lo`` to ``hi - 1`` (table order), one per variable they
        touch: ``(first index, (chains, draws, k))``, read (or, with ``lazy_arrays``, as Dask
        arrays to be read elsewhere)."""
        out: list[tuple[int, Any]] = []
        for v in self._variables:
            a, b = max(lo, v.start), min(hi, v.start + v.size)
            if a >= b:
                continue
            if lazy_arrays and is_lazy(v.values):
                import dask.array

                parts = [v.values[(slice(None), slice(None), *box)]
                         for box in flat_boxes(tuple(v.values.shape[2:]), a - v.start,
                                               b - v.start)]
                c, d = v.values.shape[:2]
                arr = dask.array.concatenate([p.reshape(c, d, -1) for p in parts], axis=2)
                out.append((a, arr))
            else:
                out.append((a, v.take(a - v.start, b - v.start)))
        return out

    def _walk(self, per_block: int) -> Iterator[tuple[int, np.ndarray]]:
        """Every variable's pieces in order: whole views in memory, windows when lazy."""
        if not self.lazy:
            for v in self._variables:
                yield v.start, v.values
            return
        window = self._window(per_block)
        total = self.shape[2]
        for lo in range(0, total, window):
            yield from self._pieces(lo, min(total, lo + window))

    def blocks(self, per_block: int | None = None,
               index: Iterable[int] | None = None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Draws in blocks of quantities: ``(indices, draws)`` with draws (chains, draws, q).

        A block inside one variable is a view of its array (no copy); quantities from several
        variables are copied into one float64 block. ``index`` restricts the walk to those
        quantities (table order). A posterior read lazily is read window by window (or, for
        ``index``, run by run of nearby quantities), never whole.
        """
        if per_block is None:
            per_block = self._per_block(4)
        per_block = max(1, int(per_block))
        variables = self._variables
        if not variables:
            return
        if index is not None:
            wanted = np.unique(np.asarray(list(index), dtype=np.int64))
            starts = np.array([v.start for v in variables])
            owner = np.searchsorted(starts, wanted, side="right") - 1
            lazy = self.lazy
            for a in range(0, wanted.size, per_block):
                idx = wanted[a : a + per_block]
                own = owner[a : a + per_block]
                if not lazy:
                    parts = [variables[o].values[:, :, [int(i) - variables[o].start]]
                             for i, o in zip(idx, own, strict=True)]
                else:
                    parts = self._runs(idx, own, per_block)
                yield idx, np.concatenate(parts, axis=2).astype(np.float64, copy=False)
            return
        yield from _iter_blocks(self._walk(per_block), per_block)

    def _runs(self, idx: np.ndarray, own: np.ndarray, per_block: int) -> list[np.ndarray]:
        """The draws of quantities ``idx`` (owned by variables ``own``) from a lazy posterior,
        reading each run of nearby quantities of one variable once."""
        parts: list[np.ndarray] = []
        k = 0
        while k < idx.size:
            v = self._variables[int(own[k])]
            j = k
            while (j + 1 < idx.size and own[j + 1] == own[k]
                   and idx[j + 1] - idx[k] < per_block):
                j += 1
            lo, hi = int(idx[k]) - v.start, int(idx[j]) - v.start + 1
            run = v.take(lo, hi)
            parts.append(run[:, :, idx[k : j + 1] - v.start - lo])
            k = j + 1
        return parts

    # --- rows --------------------------------------------------------------------------------

    @cached_property
    def rows(self) -> list[dict[str, Any]]:
        """One dict per quantity with the keys of :data:`COLUMNS`, ``constant`` and ``nonfinite``.

        Odd draws that make the computation fail give no rows and a message in
        :attr:`errors`, so that rules reading the table still run.
        """
        try:
            return self._compute()
        except Exception as exc:  # odd data must not stop the audit
            self.errors.append(f"{type(exc).__name__}: {exc}")
            return []

    def _columns(self, per_block: int) -> Iterator[tuple[int, dict[str, np.ndarray]]]:
        """``(first index, columns)`` of consecutive runs of quantities, computed here or, for
        a lazy posterior with a runner, by the runner window by window."""
        total = self.shape[2]
        if self.runner is not None and self.lazy:
            window = self._window(per_block)
            starts = list(range(0, total, window))
            tasks = [(self._pieces(lo, min(total, lo + window), lazy_arrays=True), per_block)
                     for lo in starts]
            yield from zip(starts, self.runner(block_columns, tasks), strict=True)
            return
        workspace = Workspace()
        for idx, block in self.blocks(per_block):
            yield int(idx[0]), block_columns([(int(idx[0]), block)], per_block, workspace)

    def _compute(self) -> list[dict[str, Any]]:
        chains, draws, total = self.shape
        if total == 0 or draws < MIN_DRAWS:
            return []
        columns = {name: np.empty(total) for name in (*CONVERGENCE, "mean", "sd")}
        constant = np.zeros(total, dtype=bool)
        nonfinite = np.zeros(total, dtype=np.int64)
        for first, cols in self._columns(self._per_block(4)):
            at = slice(first, first + len(cols["mean"]))
            for name in columns:
                columns[name][at] = cols[name]
            constant[at], nonfinite[at] = cols["constant"], cols["nonfinite"]
        out: list[dict[str, Any]] = []
        rhat, bulk = columns["rhat_rank"].tolist(), columns["ess_bulk"].tolist()
        tail, mcse = columns["ess_tail"].tolist(), columns["mcse_mean"].tolist()
        means, sds = columns["mean"].tolist(), columns["sd"].tolist()
        for k, (quantity, variable) in enumerate(zip(self.quantities, self.variables,
                                                     strict=True)):
            out.append({
                "quantity": quantity,
                "variable": variable,
                "rhat": _finite(rhat[k]),
                "ess_bulk": _finite(bulk[k]),
                "ess_tail": _finite(tail[k]),
                "mcse_mean": _finite(mcse[k]),
                "mean": _finite(means[k]),
                "sd": _finite(sds[k]),
                "constant": bool(constant[k]),
                "nonfinite": int(nonfinite[k]),
            })  # fmt: skip
        return out

    # --- measures on demand ------------------------------------------------------------------

    def index_of(self, names: Iterable[str]) -> np.ndarray:
        """Table positions of quantities named by label (``beta[2]``) or variable (``beta``)."""
        want = set(names)
        return np.array([k for k, (q, v) in enumerate(zip(self.quantities, self.variables,
                                                           strict=True))
                         if q in want or v in want], dtype=np.int64)  # fmt: skip

    def measures(self, names: Iterable[str], *, quantiles: Iterable[float] = (),
                 index: Iterable[int] | None = None) -> dict[str, np.ndarray]:
        """Kernel measures (:func:`auditor.kernels.diagnostics.measure_names`) of some quantities.

        Parameters
        ----------
        names : iterable of str
            Measures, e.g. ``("mcse_quantile_0.05", "rhat_split")``.
        quantiles : iterable of float
            Probabilities of the quantile measures asked for.
        index : iterable of int, optional
            Table positions (:meth:`index_of`); all quantities by default.

        Returns
        -------
        dict of str to numpy.ndarray
            One array per measure, aligned with ``index`` (sorted, unique) or the whole table.
        """
        names = tuple(names)
        quantiles = tuple(float(p) for p in quantiles)
        _, draws, total = self.shape
        positions = np.arange(total) if index is None else np.unique(
            np.asarray(list(index), dtype=np.int64))
        out = {name: np.full(positions.size, np.nan) for name in names}
        if positions.size == 0 or draws < MIN_DRAWS:
            return out
        where = {int(p): k for k, p in enumerate(positions)}
        workspace = Workspace()
        walk = self.blocks(self._per_block(len(names) + 2, "ess_raw" in names),
                           index=None if index is None else positions)
        for idx, block in walk:
            result = diagnose_block(block, measures=names, quantiles=quantiles,
                                    workspace=workspace)
            at = [where[int(i)] for i in idx]
            for name in names:
                out[name][at] = result[name]
        return out


def _moments(block: np.ndarray) -> tuple[np.ndarray, ...]:
    """Mean and sd (ddof 1) of the finite draws, constant flags and non-finite counts."""
    x = np.asarray(block, dtype=np.float64)
    flat = x.reshape(-1, x.shape[2])
    size = flat.shape[0]
    with np.errstate(all="ignore"):
        finite = np.isfinite(flat)
        counts = finite.sum(axis=0)
        bad = size - counts
        if bad.any():
            clean = np.where(finite, flat, 0.0)
            mean = clean.sum(axis=0) / counts
            dev = np.where(finite, flat - mean, 0.0)
            sd = np.sqrt((dev * dev).sum(axis=0) / (counts - 1))
            low = np.where(finite, flat, np.inf).min(axis=0)
            high = np.where(finite, flat, -np.inf).max(axis=0)
        else:
            mean = flat.mean(axis=0)
            sd = flat.std(axis=0, ddof=1) if size > 1 else np.full(flat.shape[1], np.nan)
            low, high = flat.min(axis=0), flat.max(axis=0)
    mean = np.where(counts > 0, mean, np.nan)
    sd = np.where(counts > 1, sd, np.nan)
    constant = (counts > 0) & (high == low)
    return mean, sd, constant, bad
