"""Everything one sort of a block of draws gives: ranks, normal scores, folded order, quantiles.

The rank normalization is the one of Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat", Bayesian Analysis 16(2):
average ranks of the pooled draws, Blom's offset ``(r - 3/8) / (S - 3/4 + 1)`` (Blom 1958), then
the standard normal quantile. Rows are quantities; every function works on a whole block of rows.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import special

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


def tie_index(sorted_rows: np.ndarray) -> np.ndarray | None:
    """Index ``j = a + b`` of each sorted position's tie run, or ``None`` when no row has ties.

    Parameters
    ----------
    sorted_rows : numpy.ndarray
        Shape (rows, size), each row sorted ascending.

    Returns
    -------
    numpy.ndarray or None
        int64 array of the input's shape; ``2 i`` wherever position ``i`` has no tie.
    """
    rows, size = sorted_rows.shape
    same = sorted_rows[:, 1:] == sorted_rows[:, :-1]
    tied_rows = np.flatnonzero(same.any(axis=1))
    if tied_rows.size == 0:
        return None
    index = np.broadcast_to(2 * np.arange(size, dtype=np.int64), (rows, size)).copy()
    same = same[tied_rows]
    positions = np.arange(size, dtype=np.int64)
    # First position of each run: the running maximum of the positions that start a run.
    starts = np.empty(same.shape[:1] + (size,), dtype=np.int64)
    starts[:, 0] = 0
    starts[:, 1:] = np.where(same, 0, positions[1:])
    np.maximum.accumulate(starts, axis=1, out=starts)
    # Last position of each run: the running minimum, from the right, of positions ending one.
    ends = np.empty_like(starts)
    ends[:, -1] = size - 1
    ends[:, :-1] = np.where(same, size - 1, positions[:-1])
    ends = np.minimum.accumulate(ends[:, ::-1], axis=1)[:, ::-1]
    index[tied_rows] = starts + ends
    return index


def scores_in_sorted_order(sorted_rows: np.ndarray) -> np.ndarray:
    """Rank-normalized (normal) score of each sorted position, ties given their average rank.

    Parameters
    ----------
    sorted_rows : numpy.ndarray
        Shape (rows, size), each row sorted ascending, no NaN.

    Returns
    -------
    numpy.ndarray
        Shape (rows, size); a read-only broadcast view when no row has ties.
    """
    rows, size = sorted_rows.shape
    table = normal_scores(size)
    index = tie_index(sorted_rows)
    if index is None:
        return np.broadcast_to(table[::2], (rows, size))
    return table[index]


def scatter_rows(out: np.ndarray, positions: np.ndarray, values: np.ndarray) -> None:
    """``out[r, positions[r, i]] = values[r, i]`` for every row ``r`` (one flat scatter).

    Parameters
    ----------
    out : numpy.ndarray
        C-contiguous, shape (rows, size), written in place.
    positions : numpy.ndarray
        Integer array (rows, size), each row a permutation of ``range(size)``.
    values : numpy.ndarray
        Array broadcastable to (rows, size).
    """
    rows, size = positions.shape
    flat = positions + (np.arange(rows, dtype=positions.dtype) * size)[:, None]
    out.reshape(-1)[flat.reshape(-1)] = np.broadcast_to(values, (rows, size)).reshape(-1)


def folded_order(sorted_rows: np.ndarray, order: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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

    Returns
    -------
    positions, folded : tuple of numpy.ndarray
        ``positions[r, k]`` is where the k-th smallest folded value of row ``r`` sits among the
        draws, ``folded[r, k]`` that value (sorted ascending; NaN when the median is infinite).
    """
    half = sorted_rows.shape[1] // 2
    # np.median of an even count is the mean of the two middle values, i.e. (a + b) / 2.
    median = (sorted_rows[:, half - 1] + sorted_rows[:, half]) / 2
    runs = np.empty_like(sorted_rows)
    np.subtract(sorted_rows[:, half - 1 :: -1] if half else sorted_rows[:, :0],
                median[:, None], out=runs[:, :half])
    np.subtract(sorted_rows[:, half:], median[:, None], out=runs[:, half:])
    np.abs(runs, out=runs)
    merge = np.argsort(runs, axis=1, kind="stable")
    folded = np.take_along_axis(runs, merge, axis=1)
    del runs
    sources = np.empty_like(order)
    sources[:, :half] = order[:, half - 1 :: -1] if half else order[:, :0]
    sources[:, half:] = order[:, half:]
    return np.take_along_axis(sources, merge, axis=1), folded


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
