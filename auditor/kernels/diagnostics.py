"""Fused, vectorized MCMC convergence diagnostics for every scalar quantity of a posterior.

Measures (Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, "Rank-normalization, folding, and
localization: an improved R-hat", Bayesian Analysis 16(2):667-718; definitions as in the R
package ``posterior`` after 1.6.0 and in arviz-stats):

- ``rhat_bulk``: split R-hat of the rank-normalized draws; ``rhat_folded``: the same of the
  folded draws ``|x - median|``; ``rhat_rank``: the larger of the two (rank-normalized R-hat);
- ``rhat_raw``: the classic R-hat of Gelman & Rubin (1992) on the unsplit chains, as
  ``posterior::rhat_basic(x, split = FALSE)`` (that is what the reference table holds);
  ``rhat_split``: the classic R-hat of the split chains (Gelman et al. 2013, BDA3 section 11.4;
  ``posterior::rhat_basic(x)``, arviz-stats' ``rhat(method="split")``);
- ``ess_bulk`` (ESS of the rank-normalized split chains) and ``ess_tail`` (the smaller ESS of
  the indicators ``x <= q05`` and ``x <= q95``);
- ``ess_mean`` (split chains), ``ess_sd`` (ESS of ``(x - mean)^2``), ``ess_median``,
  ``ess_quantile_<p>`` (indicator ``x <= q_p``), ``ess_raw`` (unsplit, not rank-normalized, as
  ``posterior::ess_basic(x, split = FALSE)``); every ESS is capped at ``S log10 S``;
- ``mcse_mean`` (``sd / sqrt(ess_mean)``), ``mcse_sd`` (delta method on the ESS of
  ``(x - mean)^2``), ``mcse_median`` and ``mcse_quantile_<p>`` (Beta(ESS p + 1, ESS (1 - p) + 1)
  interval at +-1 sd mapped through the sorted draws, half its width; paper's appendix).

Design: the draws come as (chains, draws, quantities) and are processed in blocks of
quantities whose working memory fits a budget. Within a block everything is vectorized over
quantities: one sort gives the bulk ranks, the folded order (a linear merge of two runs) and
the quantiles; the autocovariances of all series of the block come from one batched real FFT
whose chain spectra are summed before a single inverse FFT. :func:`diagnose_block` works on one
block by itself, so a caller may feed blocks from a lazily loaded array (or map it over Dask
chunks along the quantity axis).

Undefined cases follow arviz-stats: fewer than 4 draws per chain or any NaN in a quantity gives
NaN for all its measures; one chain gives NaN R-hats; a constant series gives its sample size as
ESS and a NaN R-hat; infinite draws propagate as the same arithmetic does there. Results agree
with arviz-stats to rounding, except where a Geyer pair sum is zero in exact arithmetic (seen
only for tiny discrete chains): rounding then decides the truncation, differently in each.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator
from typing import Any

import numpy as np
from scipy import stats

from auditor.kernels.autocorr import CONSTANT_RANGE, batched_ess, fft_size
from auditor.kernels.ranks import folded_order, linear_quantiles, sort_rows, write_scores

#: Quantile probabilities of ``summarize`` by default (the reference table's 0.01, 0.1, 0.3).
DEFAULT_QUANTILES: tuple[float, ...] = (0.01, 0.1, 0.3)
#: Probabilities of tail-ESS (Vehtari et al. 2021, section 4.3).
TAIL_PROBS: tuple[float, float] = (0.05, 0.95)
#: Normal probabilities of -1 and +1 sd, for the quantile MCSE interval (``posterior``).
MCSE_INTERVAL = (0.1586553, 0.8413447)
#: Measures of :func:`convergence`.
CONVERGENCE: tuple[str, ...] = ("rhat_rank", "ess_bulk", "ess_tail", "mcse_mean")
#: Largest working-memory budget of one block, in bytes (the default is also at most half the
#: draws array, so that the peak stays under twice the array).
DEFAULT_BLOCK_BYTES = 64 * 2**20
#: Plain summaries of the draws that :func:`diagnose_block` also gives when asked (they are
#: by-products of its sort and copy): mean, sd (ddof 1), smallest and largest draw. Not part of
#: :func:`measure_names`; NaN for a quantity with a NaN draw, as every measure.
DRAW_SUMMARIES: tuple[str, ...] = ("draws_mean", "draws_sd", "draws_min", "draws_max")
#: Minimum draws per chain for any measure, chains for R-hat (arviz-stats' ``not_valid``).
MIN_DRAWS, MIN_CHAINS_RHAT = 4, 2


def prob_label(prob: float) -> str:
    """Suffix of a quantile measure's name: ``0.1`` -> ``"0.1"`` (``ess_quantile_0.1``)."""
    return f"{prob:g}"


def measure_names(quantiles: Iterable[float] = DEFAULT_QUANTILES) -> tuple[str, ...]:
    """Names of every measure :func:`summarize` returns for these quantile probabilities.

    Parameters
    ----------
    quantiles : iterable of float
        Probabilities of the quantile ESS and MCSE.

    Returns
    -------
    tuple of str
    """
    labels = [prob_label(p) for p in quantiles]
    return (
        "rhat_rank", "rhat_bulk", "rhat_folded", "rhat_raw", "rhat_split",
        "ess_bulk", "ess_tail", "ess_mean", "ess_sd", "ess_median", "ess_raw",
        *(f"ess_quantile_{label}" for label in labels),
        "mcse_mean", "mcse_sd", "mcse_median",
        *(f"mcse_quantile_{label}" for label in labels),
    )  # fmt: skip


def _rhat(chain_means: np.ndarray, chain_vars: np.ndarray, n: int) -> np.ndarray:
    """Potential scale reduction from chain means and variances (Gelman & Rubin 1992).

    ``sqrt((B / W + n - 1) / n)`` with ``B = n var(means)`` and ``W = mean(vars)``, the
    arithmetic of arviz-stats' ``_rhat``; ``W = 0`` gives inf or NaN as there.
    """
    between = n * np.var(chain_means, axis=1, ddof=1)
    within = np.mean(chain_vars, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.sqrt((between / within + n - 1) / n)


def _center(series: np.ndarray) -> np.ndarray:
    """Subtract each chain's mean in place (last axis = draws); return the means."""
    means = series.mean(axis=-1)
    series -= means[..., None]
    return means


def _chain_vars(centered: np.ndarray) -> np.ndarray:
    """Sample variances (ddof 1) of centered chains, by one fused multiply-sum."""
    n = centered.shape[-1]
    return np.einsum("...i,...i->...", centered, centered) / (n - 1)


class _Plan:
    """What one call needs: which series get an ESS and which extra work is required."""

    def __init__(self, names: Iterable[str], quantiles: Iterable[float]) -> None:
        self.quantiles = tuple(float(p) for p in quantiles)
        known = set(measure_names(self.quantiles)) | set(DRAW_SUMMARIES)
        self.names = tuple(names)
        unknown = [n for n in self.names if n not in known]
        if unknown:
            raise ValueError(f"unknown measures {unknown}; known: {sorted(known)}")
        want = set(self.names)
        self.bulk_z = bool(want & {"rhat_rank", "rhat_bulk", "ess_bulk"})
        self.folded_z = bool(want & {"rhat_rank", "rhat_folded"})
        self.raw_rhat = "rhat_raw" in want
        self.split_rhat = "rhat_split" in want
        self.raw_ess = "ess_raw" in want
        # Series whose split-chain ESS is needed, in stack order; indicator series by prob.
        series: list[str | float] = []
        if "ess_bulk" in want:
            series.append("bulk")
        if "ess_tail" in want:
            series += list(TAIL_PROBS)
        if want & {"ess_mean", "mcse_mean"}:
            series.append("mean")
        if want & {"ess_sd", "mcse_sd"}:
            series.append("sd")
        if want & {"ess_median", "mcse_median"}:
            series.append(0.5)
        for p in self.quantiles:
            label = prob_label(p)
            if want & {f"ess_quantile_{label}", f"mcse_quantile_{label}"}:
                series.append(p)
        self.series = tuple(dict.fromkeys(series))  # drop repeats, keep order
        self.probs = tuple(s for s in self.series if isinstance(s, float))

    @property
    def n_series(self) -> int:
        """Number of split-chain series whose ESS is computed."""
        return len(self.series)


class Workspace:
    """Named buffers reused from one block to the next.

    Fresh memory costs a page fault per 4 KiB on first touch and the allocator hands freed
    blocks back to the system between blocks; reusing buffers made a block about a fifth
    faster here. Buffers only grow, so a workspace holds one block's working set. Not
    thread-safe: give each thread its own.
    """

    def __init__(self) -> None:
        self._buffers: dict[str, np.ndarray] = {}

    def __call__(self, name: str, shape: tuple[int, ...], dtype: type = np.float64) -> np.ndarray:
        """An uninitialized array of this shape and dtype, backed by the buffer ``name``."""
        dtype = np.dtype(dtype)
        count = math.prod(shape)
        buffer = self._buffers.get(name)
        if buffer is None or buffer.dtype != dtype or buffer.size < count:
            buffer = np.empty(count, dtype)
            self._buffers[name] = buffer
        return buffer[:count].reshape(shape)

    @property
    def nbytes(self) -> int:
        """Bytes held."""
        return sum(b.nbytes for b in self._buffers.values())


def _transpose_into(target: np.ndarray, block: np.ndarray) -> None:
    """Copy (chains, draws, quantities) into (quantities, chains, draws), converting to float64.

    In slices of 256 draws, so that source and target stay in cache: measured five times
    faster than one ``moveaxis`` copy of the block.
    """
    step = 256
    for c in range(block.shape[0]):
        for start in range(0, block.shape[1], step):
            target[:, c, start : start + step] = block[c, start : start + step].T


def _first_lags(n: int, lags: int | None) -> int | None:
    """Lags of the first FFT pass for series of ``n`` draws (``-1``: n / 8, at least 16)."""
    return max(16, n // 8) if lags == -1 else lags


def bytes_per_quantity(
    chains: int, draws: int, n_series: int, raw_ess: bool = True, lags: int | None = -1
) -> int:
    """Working memory one quantity needs in :func:`diagnose_block` (a generous estimate).

    In arrays of ``chains * draws`` values (8 bytes): the block copy, its sort keys, order and
    sorted values, the scores, five folded-order buffers and the split chains' variance
    temporary (11; 15 for an odd draw count); per
    series the padded series, its spectrum and at most as much again for series redone with
    full padding (3 each, times the padding ratio); the same for the unsplit ``ess_raw`` series.
    """
    half = max(draws // 2, 1)
    split_ratio = fft_size(half, _first_lags(half, lags)) / half
    units = 11 + (4 if draws % 2 else 0) + 3 * n_series * split_ratio
    if raw_ess:
        units += 3 * fft_size(max(draws, 1), _first_lags(draws, lags)) / max(draws, 1)
    return int(units * chains * max(draws, 1) * 8)


def block_size(
    chains: int, draws: int, n_series: int, block_bytes: int, raw_ess: bool = True
) -> int:
    """Quantities per block so that a block's working memory stays within ``block_bytes``."""
    return max(1, int(block_bytes // bytes_per_quantity(chains, draws, n_series, raw_ess)))


def diagnose_block(
    block: Any,
    *,
    quantiles: Iterable[float] = DEFAULT_QUANTILES,
    measures: Iterable[str] | None = None,
    lags: int | None = -1,
    workspace: Workspace | None = None,
) -> dict[str, np.ndarray]:
    """All requested measures for one block of quantities, vectorized over the quantities.

    Parameters
    ----------
    block : array_like
        Draws of shape (chains, draws, quantities), float64 or float32 (computed in float64).
    quantiles : iterable of float, default (0.01, 0.1, 0.3)
        Probabilities of ``ess_quantile_<p>`` and ``mcse_quantile_<p>``.
    measures : iterable of str, optional
        Names to compute (see :func:`measure_names`, and :data:`DRAW_SUMMARIES`); all of
        :func:`measure_names` by default.
    lags : int or None, default -1
        Autocovariance lags of the first FFT pass (-1: an eighth of the series, at least 16;
        None: all). Series whose Geyer truncation lies further out are redone with every lag,
        so this changes only the speed, never the result.
    workspace : Workspace, optional
        Buffers to reuse across calls (pass the same one for every block of an array).

    Returns
    -------
    dict of str to numpy.ndarray
        One float64 array of length ``quantities`` per measure.
    """
    plan = _Plan(measure_names(quantiles) if measures is None else measures, quantiles)
    x = np.asarray(block)
    if x.ndim != 3:
        raise ValueError(f"expected draws of shape (chains, draws, quantities), got {x.shape}")
    out = {name: np.full(x.shape[2], np.nan) for name in plan.names}
    if x.size == 0 or x.shape[1] < MIN_DRAWS:
        return out
    # Non-finite draws are a handled case: their NaN/inf arithmetic mirrors arviz-stats.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        _diagnose(x, plan, lags, Workspace() if workspace is None else workspace, out)
    return out


def _diagnose(
    x: np.ndarray, plan: _Plan, lags: int | None, ws: Workspace, out: dict[str, np.ndarray]
) -> None:
    """Body of :func:`diagnose_block`: fills ``out`` (pre-filled with NaN) in place."""
    n_chains, n_draws, n_q = x.shape
    half = n_draws // 2
    size, split_size = n_chains * n_draws, 2 * n_chains * half
    # Quantity-major float64 copy: every later pass reads contiguous chains.
    y = ws("draws", (n_q, n_chains, n_draws))
    _transpose_into(y, x)
    flat = y.reshape(n_q, size)

    # The one sort: pooled order of each quantity's draws (NaN sorts to an end).
    order = ws("order", (n_q, size), np.int64)
    ordered = ws("sorted", (n_q, size))
    sort_rows(flat, order, ordered, ws("keys", (n_q, size), np.int64))
    results: dict[str, np.ndarray] = {}
    if "draws_min" in plan.names:
        results["draws_min"] = ordered[:, 0].copy()
    if "draws_max" in plan.names:
        results["draws_max"] = ordered[:, -1].copy()
    if "draws_mean" in plan.names:
        results["draws_mean"] = flat.mean(axis=1)
    invalid = np.isnan(ordered[:, 0]) | np.isnan(ordered[:, -1])
    if invalid.any():
        # Any NaN makes every measure NaN (arviz-stats); zeros keep the arithmetic quiet.
        y[invalid] = 0.0
        ordered[invalid] = 0.0
        order[invalid] = np.arange(size)

    # Split chains (first and second half of each chain; the middle draw of an odd count is
    # dropped). For an even count the split layout is the block itself, reshaped.
    if n_draws % 2 == 0:
        split = y.reshape(n_q, 2 * n_chains, half)
        split_order, split_sorted = order, ordered
    else:
        halves = ws("split", (n_q, n_chains, 2, half))
        halves[:, :, 0] = y[:, :, :half]
        halves[:, :, 1] = y[:, :, half + 1 :]
        split = halves.reshape(n_q, 2 * n_chains, half)
        t = np.arange(n_draws)
        to_split = np.where(t < half, t, t - 1) + 2 * half * np.arange(n_chains)[:, None]
        to_split[:, half] = -1
        mapped = to_split.reshape(-1)[order]
        keep = mapped >= 0
        split_order = ws("split_order", (n_q, split_size), np.int64)
        split_order[...] = mapped[keep].reshape(n_q, split_size)
        split_sorted = ws("split_sorted", (n_q, split_size))
        split_sorted[...] = ordered[keep].reshape(n_q, split_size)
        del mapped, keep

    rhat_ok = n_chains >= MIN_CHAINS_RHAT
    if plan.split_rhat and rhat_ok:
        # Classic split R-hat on the draws themselves, before anything is centered in place.
        rhat_split = _rhat(np.mean(split, axis=-1), np.var(split, axis=-1, ddof=1), half)
    # Series for the FFT live in a zero-padded buffer: the FFT then needs no padded copy.
    padded = fft_size(half, _first_lags(half, lags))
    stack = ws("series", (plan.n_series, n_q, 2 * n_chains, padded))
    stack[..., half:] = 0.0
    body = stack[..., :half]
    means = np.empty((plan.n_series, n_q, 2 * n_chains))
    constant = np.zeros((plan.n_series, n_q), dtype=bool)
    slot = {name: k for k, name in enumerate(plan.series)}

    if plan.bulk_z:
        # Rank-normalized draws: normal scores written straight into their places.
        scores = ws("scores", (n_q, 2 * n_chains, half))
        write_scores(scores.reshape(n_q, split_size), split_sorted, split_order)
        bulk_means = _center(scores)
        if rhat_ok:
            rhat_bulk = _rhat(bulk_means, _chain_vars(scores), half)
        if "bulk" in slot:
            body[slot["bulk"]] = scores
            means[slot["bulk"]] = bulk_means
            constant[slot["bulk"]] = split_sorted[:, 0] == split_sorted[:, -1]

    if plan.folded_z and rhat_ok:
        positions, folded = folded_order(split_sorted, split_order, ws)
        undefined = np.isnan(folded[:, -1])  # infinite median: NaN folded draws sort last
        if undefined.any():
            folded[undefined] = 0.0
        scores = ws("scores", (n_q, 2 * n_chains, half))
        write_scores(scores.reshape(n_q, split_size), folded, positions)
        rhat_folded = _rhat(_center(scores), _chain_vars(scores), half)
        rhat_folded[undefined] = np.nan

    thresholds = linear_quantiles(ordered, plan.probs)
    for k, prob in enumerate(plan.probs):
        series = body[slot[prob]]
        np.less_equal(split, thresholds[:, k, None, None], out=series)
        share = _center(series)
        means[slot[prob]] = share
        constant[slot[prob]] = (share == 0).all(axis=1) | (share == 1).all(axis=1)

    if "mean" in slot:
        series = body[slot["mean"]]
        series[...] = split
        means[slot["mean"]] = _center(series)
        constant[slot["mean"]] = (split_sorted[:, -1] - split_sorted[:, 0]) < CONSTANT_RANGE
    if "sd" in slot:
        # (x - mean)^2 over all draws: its moments give mcse_sd, its split chains ess_sd.
        squares = ws("fold_runs", (n_q, size))
        np.subtract(flat, flat.mean(axis=1)[:, None], out=squares)
        np.multiply(squares, squares, out=squares)
        second = squares.mean(axis=1)
        fourth = np.einsum("ij,ij->i", squares, squares) / size
        series = body[slot["sd"]]
        if n_draws % 2 == 0:
            series[...] = squares.reshape(series.shape)
        else:
            both = series.reshape(n_q, n_chains, 2, half)
            by_chain = squares.reshape(n_q, n_chains, n_draws)
            both[:, :, 0] = by_chain[:, :, :half]
            both[:, :, 1] = by_chain[:, :, half + 1 :]
        spread = series.max(axis=(1, 2)) - series.min(axis=(1, 2))
        constant[slot["sd"]] = spread < CONSTANT_RANGE
        means[slot["sd"]] = _center(series)
    if "mcse_mean" in plan.names or "draws_sd" in plan.names:
        sd = np.std(flat, axis=1, ddof=1)
        if "draws_sd" in plan.names:
            results["draws_sd"] = sd

    # Unsplit chains: classic R-hat and raw ESS; the block copy is centered in place now.
    if (plan.raw_rhat and rhat_ok) or plan.raw_ess:
        raw_means = _center(y)
    if plan.raw_rhat and rhat_ok:
        rhat_raw = _rhat(raw_means, _chain_vars(y), n_draws)
    if plan.raw_ess:
        raw_size = fft_size(n_draws, _first_lags(n_draws, lags))
        raw = ws("raw_series", (n_q, n_chains, raw_size))
        raw[..., :n_draws] = y
        raw[..., n_draws:] = 0.0
        raw_spectrum = ws("raw_spectrum", (n_q, n_chains, raw_size // 2 + 1), np.complex128)
        raw_constant = (ordered[:, -1] - ordered[:, 0]) < CONSTANT_RANGE
        ess_raw = batched_ess(raw, n_draws, raw_means, raw_constant, raw_spectrum)

    if plan.n_series:
        rows = plan.n_series * n_q
        spectrum = ws("spectrum", (rows, 2 * n_chains, padded // 2 + 1), np.complex128)
        ess = batched_ess(
            stack.reshape(rows, 2 * n_chains, padded),
            half,
            means.reshape(rows, 2 * n_chains),
            constant.reshape(rows),
            spectrum,
        ).reshape(plan.n_series, n_q)

    if rhat_ok:
        if plan.bulk_z:
            results["rhat_bulk"] = rhat_bulk
        if plan.folded_z:
            results["rhat_folded"] = rhat_folded
        if plan.bulk_z and plan.folded_z:
            # Python's max(bulk, folded) as in arviz-stats: a NaN folded value keeps bulk.
            results["rhat_rank"] = np.where(rhat_folded > rhat_bulk, rhat_folded, rhat_bulk)
        if plan.raw_rhat:
            results["rhat_raw"] = rhat_raw
        if plan.split_rhat:
            results["rhat_split"] = rhat_split
    if plan.raw_ess:
        results["ess_raw"] = ess_raw
    if "bulk" in slot:
        results["ess_bulk"] = ess[slot["bulk"]]
    if "ess_tail" in plan.names:
        low, high = ess[slot[TAIL_PROBS[0]]], ess[slot[TAIL_PROBS[1]]]
        results["ess_tail"] = np.where(high < low, high, low)  # Python's min(low, high)
    if "mean" in slot:
        results["ess_mean"] = ess[slot["mean"]]
        with np.errstate(divide="ignore", invalid="ignore"):
            results["mcse_mean"] = sd / np.sqrt(ess[slot["mean"]])
    if "sd" in slot:
        ess_sd = ess[slot["sd"]]
        results["ess_sd"] = ess_sd
        with np.errstate(divide="ignore", invalid="ignore"):
            results["mcse_sd"] = np.sqrt((fourth - second**2) / ess_sd / second / 4)
    if 0.5 in slot:
        results["ess_median"] = ess[slot[0.5]]
        results["mcse_median"] = _mcse_quantile(ordered, ess[slot[0.5]], 0.5)
    for p in plan.quantiles:
        label = prob_label(p)
        if p in slot:
            results[f"ess_quantile_{label}"] = ess[slot[p]]
            results[f"mcse_quantile_{label}"] = _mcse_quantile(ordered, ess[slot[p]], p)

    for name in plan.names:
        if name in results:
            out[name][:] = results[name]
            out[name][invalid] = np.nan


def _mcse_quantile(ordered: np.ndarray, ess: np.ndarray, prob: float) -> np.ndarray:
    """MCSE of a quantile: half the width of the draws between the Beta interval's ends.

    Vehtari et al. (2021), appendix: with ``a, b = ESS p + 1, ESS (1 - p) + 1`` the Beta(a, b)
    quantiles at the normal +-1 sd probabilities are mapped to order statistics of all draws.
    """
    size = ordered.shape[1]
    with np.errstate(invalid="ignore"):
        ends = stats.beta.ppf(
            MCSE_INTERVAL, (ess * prob + 1)[:, None], (ess * (1 - prob) + 1)[:, None]
        )
    ends = ends * size - 1
    # np.nanmax((v, 0)) and np.nanmin((v, size - 1)) of the reference: NaN falls to the bound.
    low = np.floor(np.where(np.isnan(ends[:, 0]), 0, np.maximum(ends[:, 0], 0))).astype(np.intp)
    high = np.ceil(np.where(np.isnan(ends[:, 1]), size - 1, np.minimum(ends[:, 1], size - 1)))
    rows = np.arange(ordered.shape[0])
    return (ordered[rows, high.astype(np.intp)] - ordered[rows, low]) / 2


def iter_blocks(n_quantities: int, per_block: int) -> Iterator[slice]:
    """Slices of the quantity axis, ``per_block`` quantities each (the last may be shorter)."""
    for start in range(0, n_quantities, per_block):
        yield slice(start, min(start + per_block, n_quantities))


def _over_blocks(
    draws: Any, names: tuple[str, ...], quantiles: Iterable[float], block_bytes: int | None
) -> dict[str, np.ndarray]:
    shape = tuple(draws.shape)
    if len(shape) != 3:
        raise ValueError(f"expected draws of shape (chains, draws, quantities), got {shape}")
    n_chains, n_draws, n_q = shape
    plan = _Plan(names, quantiles)
    if block_bytes is None:
        # Half the draws array at most, so that array plus work stays under twice the array.
        block_bytes = min(DEFAULT_BLOCK_BYTES, math.prod(shape) * 8 // 2)
    per_block = block_size(n_chains, n_draws, plan.n_series, block_bytes, plan.raw_ess)
    out = {name: np.empty(n_q) for name in names}
    workspace = Workspace()
    for part in iter_blocks(n_q, per_block):
        # Slicing a lazy array (memmap, HDF5, zarr) loads only this block.
        result = diagnose_block(
            draws[:, :, part], quantiles=plan.quantiles, measures=names, workspace=workspace
        )
        for name in names:
            out[name][part] = result[name]
    return out


def summarize(
    draws: Any,
    *,
    quantiles: Iterable[float] = DEFAULT_QUANTILES,
    block_bytes: int | None = None,
) -> dict[str, np.ndarray]:
    """Every measure for every quantity, block by block.

    Parameters
    ----------
    draws : array_like
        Shape (chains, draws, quantities); anything sliceable as ``draws[:, :, a:b]`` (numpy
        array, memmap, HDF5/zarr dataset).
    quantiles : iterable of float, default (0.01, 0.1, 0.3)
        Probabilities of ``ess_quantile_<p>`` and ``mcse_quantile_<p>``.
    block_bytes : int, optional
        Working-memory budget per block (default :data:`DEFAULT_BLOCK_BYTES`).

    Returns
    -------
    dict of str to numpy.ndarray
        Names of :func:`measure_names`, one float64 array of length ``quantities`` each.
    """
    quantiles = tuple(float(p) for p in quantiles)
    return _over_blocks(draws, measure_names(quantiles), quantiles, block_bytes)


def convergence(
    draws: Any, *, mcse_mean: bool = True, block_bytes: int | None = None
) -> dict[str, np.ndarray]:
    """The convergence trio (rank-normalized R-hat, bulk-ESS, tail-ESS), and the mean's MCSE.

    Parameters
    ----------
    draws : array_like
        Shape (chains, draws, quantities), as for :func:`summarize`.
    mcse_mean : bool, default True
        Also return ``mcse_mean`` (one more FFT series per quantity).
    block_bytes : int, optional
        Working-memory budget per block.

    Returns
    -------
    dict of str to numpy.ndarray
        ``rhat_rank``, ``ess_bulk``, ``ess_tail`` (and ``mcse_mean``).
    """
    names = CONVERGENCE if mcse_mean else CONVERGENCE[:3]
    return _over_blocks(draws, names, (), block_bytes)
