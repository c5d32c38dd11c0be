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
from collections.abc import Iterable, Iterator
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

__all__ = ["COLUMNS", "TAIL_PROBS", "DiagnosticsTable", "quantity_label", "quantity_labels"]

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


@dataclass
class _Variable:
    """One numeric variable of the posterior as a (chains, draws, elements) view."""

    name: str
    values: np.ndarray
    labels: list[str]
    start: int

    @property
    def size(self) -> int:
        return self.values.shape[2]


@dataclass
class DiagnosticsTable:
    """Rows of diagnostics, one per scalar quantity of the posterior group.

    ``one_based`` labels integer indices from 1 (Stan's convention, so that
    ``theta[1]`` matches the CSV column ``theta.1``). ``block_bytes`` bounds the working
    memory of one block of quantities (default: the kernel's budget, at most half the draws).
    """

    posterior: xr.Dataset | None
    one_based: bool = False
    errors: list[str] = field(default_factory=list)
    block_bytes: int | None = None

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
            values = np.asarray(da.values)
            flat = values.reshape(values.shape[0], values.shape[1], -1)
            labels = quantity_labels(str(var), da, self.one_based)
            out.append(_Variable(str(var), flat, labels, start))
            start += flat.shape[2]
        return out

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

    def blocks(self, per_block: int | None = None,
               index: Iterable[int] | None = None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Draws in blocks of quantities: ``(indices, draws)`` with draws (chains, draws, q).

        A block inside one variable is a view of its array (no copy); quantities from several
        variables are copied into one float64 block. ``index`` restricts the walk to those
        quantities (table order).
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
            for a in range(0, wanted.size, per_block):
                idx = wanted[a : a + per_block]
                own = owner[a : a + per_block]
                parts = [variables[o].values[:, :, [int(i) - variables[o].start]]
                         for i, o in zip(idx, own, strict=True)]
                yield idx, np.concatenate(parts, axis=2).astype(np.float64, copy=False)
            return
        pending: list[np.ndarray] = []
        pending_idx: list[np.ndarray] = []
        count = 0

        def flush() -> tuple[np.ndarray, np.ndarray]:
            block = pending[0] if len(pending) == 1 else np.concatenate(
                [p.astype(np.float64, copy=False) for p in pending], axis=2)
            return np.concatenate(pending_idx), block

        for v in variables:
            pos = 0
            while pos < v.size:
                take = min(per_block - count, v.size - pos)
                pending.append(v.values[:, :, pos : pos + take])
                pending_idx.append(np.arange(v.start + pos, v.start + pos + take))
                count += take
                pos += take
                if count == per_block:
                    yield flush()
                    pending, pending_idx, count = [], [], 0
        if pending:
            yield flush()

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

    def _compute(self) -> list[dict[str, Any]]:
        chains, draws, total = self.shape
        if total == 0 or draws < MIN_DRAWS:
            return []
        columns = {name: np.empty(total) for name in (*CONVERGENCE, "mean", "sd")}
        constant = np.zeros(total, dtype=bool)
        nonfinite = np.zeros(total, dtype=np.int64)
        workspace = Workspace()
        for idx, block in self.blocks(self._per_block(4)):
            result = diagnose_block(block, measures=CONVERGENCE + DRAW_SUMMARIES, quantiles=(),
                                    workspace=workspace)
            for name in CONVERGENCE:
                columns[name][idx] = result[name]
            # Mean, sd and range come with the kernel's sort; quantities with a non-finite draw
            # (NaN or infinite at an end of the sorted draws) are summarized over their finite
            # draws instead.
            low, high = result["draws_min"], result["draws_max"]
            columns["mean"][idx], columns["sd"][idx] = result["draws_mean"], result["draws_sd"]
            constant[idx] = low == high
            odd = ~(np.isfinite(low) & np.isfinite(high))
            if odd.any():
                mean, sd, const, bad = _moments(np.asarray(block)[:, :, odd])
                at = idx[odd]
                columns["mean"][at], columns["sd"][at] = mean, sd
                constant[at], nonfinite[at] = const, bad
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
