"""Everything one sort of a block of draws gives: ranks, normal scores, folded order, quantiles.

The rank normalization is the one of Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat", Bayesian Analysis 16(2):
average ranks of the pooled draws, Blom's offset ``(r - 3/8) / (S - 3/4 + 1)`` (Blom 1958), then
the standard normal quantile. Rows are quantities; every function works on a whole block of rows.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache

import numpy as np
from scipy import special

#: Buffer provider ``alloc(name, shape, dtype)``: lets a caller reuse memory across blocks.
Alloc = Callable[[str, tuple[int, ...], type], np.ndarray]


def fresh(name: str, shape: tuple[int, ...], dtype: type = np.float64) -> np.ndarray:
    """Default :data:`Alloc`: a new uninitialized array (the name is ignored)."""
    return np.empty(shape, dtype)


#: Blom's fractional offset (Blom 1958), as in the R package ``posterior`` and arviz-stats.
BLOM_OFFSET = 3 / 8


@lru_cache(maxsize=16)
def normal_scores(size: int) -> np.ndarray:
    """Normal scores of every possible average rank among ``size`` pooled draws.

    An average rank is ``(a + b + 2) / 2`` for a run of ties spanning the 0-based sorted
    positions ``a..b``, so it is indexed by ``j = a + b`` (``0 <= j <= 2 size - 2``); without ties
    ``j = 2 i``. A table lookup replaces one ``ndtri`` call per draw, with the same arithmetic as
    arviz-stats (``(rank - c) / (size - 2 c + 1)``, then ``ndtri``), hence bit-identical scores.

    Parameters
    ----------
    size : int
        Number of pooled draws ranked together.

    Returns
    -------
    numpy.ndarray
        Read-only float64 array of length ``2 size - 1``.
    """
    rank = 0.5 * np.arange(2 * size - 1, dtype=np.float64) + 1.0
    table = special.ndtri((rank - BLOM_OFFSET) / (size - 2 * BLOM_OFFSET + 1))
    table.flags.writeable = False
    return table


def tie_flags(sorted_rows: np.ndarray) -> np.ndarray:
    """``sorted_rows[r, i + 1] == sorted_rows[r, i]``, flattened, zero-padded to a multiple of 8.

    The padding lets :func:`tie_runs` read the flags as 64-bit words.
    """
    rows, size = sorted_rows.shape
    count = rows * (size - 1)
    flags = np.zeros(-(-count // 8) * 8, dtype=bool)
    np.equal(sorted_rows[:, 1:], sorted_rows[:, :-1], out=flags[:count].reshape(rows, size - 1))
    return flags


def tie_runs(flags: np.ndarray, rows: int, size: int) -> tuple[np.ndarray, ...]:
    """Tied sorted positions and the index ``j = a + b`` of the tie run each belongs to.

    Sparse, for draws with few ties (continuous draws have none, their folded values nearly
    always one: the two middle values); only tied positions are visited.

    Parameters
    ----------
    flags : numpy.ndarray
        Output of :func:`tie_flags` for sorted rows of shape (rows, size).
    rows, size : int
        That shape.

    Returns
    -------
    rows, positions, j : tuple of numpy.ndarray
        int64 arrays, one entry per tied sorted position (empty when nothing is tied).
    """
    # Scanning the flags as 64-bit words is eight times shorter (measured 9x faster).
    words = np.flatnonzero(flags.view(np.uint64))
    candidates = (words[:, None] * 8 + np.arange(8)).reshape(-1)
    tied = candidates[flags[candidates]]
    row, pos = tied // (size - 1), tied % (size - 1)
    # A link joins flat positions f and f + 1; consecutive links form one run of ties.
    link = row * size + pos
    opens = np.ones(link.size, dtype=bool)
    opens[1:] = link[1:] != link[:-1] + 1
    closes = np.ones(link.size, dtype=bool)
    closes[:-1] = opens[1:]
    first, last = link[opens], link[closes] + 1
    lengths = last - first + 1
    starts_at = np.repeat(np.cumsum(lengths) - lengths, lengths)
    flat = np.repeat(first, lengths) + (np.arange(lengths.sum()) - starts_at)
    j = np.repeat(first % size + last % size, lengths)
    return flat // size, flat % size, j


def tie_index(flags: np.ndarray, rows: int, size: int) -> np.ndarray:
    """Index ``j = a + b`` of every sorted position's tie run (``2 i`` when untied), densely.

    For draws with many ties (discrete quantities): running maxima and minima of the run
    bounds cost a few passes, where the sparse bookkeeping of :func:`tie_runs` would cost more.
    """
    same = flags[: rows * (size - 1)].reshape(rows, size - 1)
    positions = np.arange(size, dtype=np.int64)
    # First position of each run: the running maximum of the positions that open a run.
    starts = np.empty((rows, size), dtype=np.int64)
    starts[:, 0] = 0
    np.copyto(starts[:, 1:], positions[1:])
    starts[:, 1:][same] = 0
    np.maximum.accumulate(starts, axis=1, out=starts)
    # Last position: the running minimum, from the right, of the positions that close one.
    ends = np.empty((rows, size), dtype=np.int64)
    ends[:, -1] = size - 1
    np.copyto(ends[:, :-1], positions[:-1])
    ends[:, :-1][same] = size - 1
    ends = np.minimum.accumulate(ends[:, ::-1], axis=1)[:, ::-1]
    starts += ends
    return starts


def sort_rows(values: np.ndarray, order: np.ndarray, ordered: np.ndarray, keys: np.ndarray) -> None:
    """Argsort each row into ``order`` and the sorted values into ``ordered``.

    Sorting 64-bit integer keys that carry the column index in their low bits (the float's
    order-preserving bit pattern above it) is a plain SIMD sort, measured 1.5 times faster than
    ``argsort``. The keys drop those low bits of the value, so a row whose sorted values come
    out not ascending (values closer than about ``2**-40`` relative) is redone by ``argsort``.
    NaN sorts first or last (by its sign bit).

    Parameters
    ----------
    values : numpy.ndarray
        C-contiguous float64, shape (rows, size).
    order, ordered : numpy.ndarray
        Outputs, int64 and float64, shape (rows, size).
    keys : numpy.ndarray
        int64 scratch, shape (rows, size).
    """
    size = values.shape[1]
    low = (1 << max(int(size - 1).bit_length(), 1)) - 1
    bits = values.view(np.int64)
    # Two's-complement order of the float: negative floats get their magnitude bits flipped.
    np.right_shift(bits, 63, out=keys)
    np.bitwise_and(keys, np.int64(0x7FFF_FFFF_FFFF_FFFF), out=keys)
    np.bitwise_xor(keys, bits, out=keys)
    np.bitwise_and(keys, np.int64(~low), out=keys)
    np.bitwise_or(keys, np.arange(size, dtype=np.int64), out=keys)
    keys.sort(axis=1)
    np.bitwise_and(keys, np.int64(low), out=order)
    gather_rows(values, order, ordered)
    for r in np.flatnonzero((ordered[:, 1:] < ordered[:, :-1]).any(axis=1)):
        order[r] = np.argsort(values[r])
        np.take(values[r], order[r], out=ordered[r])


def argsort_rows(values: np.ndarray, out: np.ndarray, kind: str | None = None) -> np.ndarray:
    """Argsort each row into ``out`` (int64), a row at a time so no block-sized array is new."""
    for r in range(values.shape[0]):
        out[r] = np.argsort(values[r], kind=kind)
    return out


def gather_rows(source: np.ndarray, index: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """``source[r, index[r, i]]`` for every row: one 1-d take per row.

    A row at a time keeps source and result in cache; measured faster here than
    ``numpy.take_along_axis`` or one flat fancy index over the whole block.
    """
    if out is None:
        out = np.empty(index.shape, dtype=source.dtype)
    for r in range(index.shape[0]):
        np.take(source[r], index[r], out=out[r])
    return out


def scatter_rows(out: np.ndarray, positions: np.ndarray, values: np.ndarray) -> None:
    """``out[r, positions[r, i]] = values[r, i]`` (or ``values[i]`` for a 1-d ``values``)."""
    for r in range(positions.shape[0]):
        out[r, positions[r]] = values if values.ndim == 1 else values[r]


def write_scores(out: np.ndarray, sorted_rows: np.ndarray, positions: np.ndarray) -> None:
    """Write each draw's rank-normalized score at its place: ``out[r, positions[r, i]]``.

    Without ties the score of sorted position ``i`` is the table entry ``2 i`` for every row,
    so one shared row is scattered and only tied positions are patched with average ranks;
    when more than an eighth of the positions are tied, all indices are computed densely.

    Parameters
    ----------
    out : numpy.ndarray
        Shape (rows, size), written in place.
    sorted_rows : numpy.ndarray
        Shape (rows, size), each row sorted ascending, no NaN.
    positions : numpy.ndarray
        ``positions[r, i]``: column of ``out`` that holds the draw ``sorted_rows[r, i]``.
    """
    rows, size = sorted_rows.shape
    table = normal_scores(size)
    flags = tie_flags(sorted_rows)
    tied = np.count_nonzero(flags)
    if tied * 8 > flags.size:  # discrete draws: scores of all positions from dense run bounds
        scatter_rows(out, positions, table[tie_index(flags, rows, size)])
        return
    scatter_rows(out, positions, table[::2])
    if tied:
        row, pos, j = tie_runs(flags, rows, size)
        out[row, positions[row, pos]] = table[j]


def folded_order(
    sorted_rows: np.ndarray, order: np.ndarray, alloc: Alloc = fresh
) -> tuple[np.ndarray, np.ndarray]:
    """Order of the folded draws ``|x - median(x)|`` derived from the order of the draws.

    Below the median the folded values decrease along the sorted draws, above it they increase,
    so the folded order is a merge of two sorted runs: a stable argsort (timsort) merges them in
    linear time instead of sorting afresh. ``size`` must be even, as pooled split chains are.

    Parameters
    ----------
    sorted_rows : numpy.ndarray
        Shape (rows, size), sorted draws, no NaN.
    order : numpy.ndarray
        Shape (rows, size): ``order[r, i]`` is the position of ``sorted_rows[r, i]`` in the rows
        of the draws.
    alloc : Alloc, optional
        Buffer provider (names ``fold_runs``, ``fold_merge``, ``fold_values``,
        ``fold_sources``, ``fold_positions``).

    Returns
    -------
    positions, folded : tuple of numpy.ndarray
        ``positions[r, k]`` is where the k-th smallest folded value of row ``r`` sits among the
        draws, ``folded[r, k]`` that value (sorted ascending; NaN when the median is infinite).
    """
    shape = sorted_rows.shape
    half = shape[1] // 2
    # np.median of an even count is the mean of the two middle values, i.e. (a + b) / 2.
    median = (sorted_rows[:, half - 1] + sorted_rows[:, half]) / 2
    runs = alloc("fold_runs", shape, np.float64)
    # |x - m| without an abs pass: m - x below the median, x - m above (the same values, as
    # rounding is symmetric).
    np.subtract(median[:, None], sorted_rows[:, :half][:, ::-1], out=runs[:, :half])
    np.subtract(sorted_rows[:, half:], median[:, None], out=runs[:, half:])
    # Timsort finds the two runs and merges them in linear time (faster here than the keyed
    # sort of sort_rows, which would also stumble on the nearly equal middle pair).
    merge = argsort_rows(runs, alloc("fold_merge", shape, np.int64), kind="stable")
    folded = gather_rows(runs, merge, alloc("fold_values", shape, np.float64))
    sources = alloc("fold_sources", shape, np.int64)
    sources[:, :half] = order[:, :half][:, ::-1]
    sources[:, half:] = order[:, half:]
    return gather_rows(sources, merge, alloc("fold_positions", shape, np.int64)), folded


def linear_quantiles(sorted_rows: np.ndarray, probs: tuple[float, ...]) -> np.ndarray:
    """Quantiles of sorted rows by ``numpy.quantile``'s default "linear" method (H&F type 7).

    Mirrors numpy's index and interpolation arithmetic (including its switch to
    ``b - (b - a) (1 - t)`` for ``t >= 0.5``) so the thresholds, and hence the indicator series
    built from them, equal those of ``numpy.quantile``.

    Parameters
    ----------
    sorted_rows : numpy.ndarray
        Shape (rows, size), sorted ascending.
    probs : tuple of float
        Probabilities in [0, 1].

    Returns
    -------
    numpy.ndarray
        Shape (rows, len(probs)).
    """
    size = sorted_rows.shape[1]
    out = np.empty((sorted_rows.shape[0], len(probs)))
    for k, prob in enumerate(probs):
        virtual = np.float64(size - 1) * np.float64(prob)
        previous = np.floor(virtual)
        if virtual >= size - 1:
            lo = hi = size - 1
        elif virtual < 0:
            lo = hi = 0
        else:
            lo, hi = int(previous), int(previous) + 1
        gamma = virtual - previous
        a, b = sorted_rows[:, lo], sorted_rows[:, hi]
        diff = b - a
        out[:, k] = b - diff * (1 - gamma) if gamma >= 0.5 else a + diff * gamma
    return out
