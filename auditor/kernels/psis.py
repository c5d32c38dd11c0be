"""PSIS-LOO and WAIC from a pointwise log-likelihood array, a chunk of observations at a time.

The input is an array of shape ``(chains, draws, observations)`` (float32 or float64, in memory,
a ``numpy.memmap`` or anything else that can be sliced along its last axis). Observations are
processed in chunks whose working memory stays under a byte budget, so an array of several GB
needs only a few tens of MB beside it, and a caller can stream it from disk.

Methods, under their published names:

- Pareto smoothed importance sampling (PSIS) and the Pareto k-hat diagnostic: Vehtari, Simpson,
  Gelman, Yao & Gabry (2024), "Pareto smoothed importance sampling", Journal of Machine Learning
  Research 25(72). The generalized Pareto fit is the empirical Bayes estimate of Zhang & Stephens
  (2009), "A new and efficient estimation method for the generalized Pareto distribution",
  Technometrics 51(3), with the weakly informative prior on k that Vehtari et al. (2024)
  recommend for small tails, as the ``loo`` R package and arviz-stats apply it.
- PSIS-LOO and WAIC: Vehtari, Gelman & Gabry (2017), "Practical Bayesian model evaluation using
  leave-one-out cross-validation and WAIC", Statistics and Computing 27:1413-1432; WAIC after
  Watanabe (2010), Journal of Machine Learning Research 11:3571-3594.
- Relative efficiency ``r_eff``: split-chain ESS of the mean with Geyer's (1992) initial monotone
  sequence, as in Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021), "Rank-normalization,
  folding, and localization: an improved R-hat", Bayesian Analysis 16(2) (their ``ess_basic``).

Where arviz-stats 1.3 (the reference library) and the paper differ, both are offered:
``tail_rounding="ceil"`` is the paper's and the ``loo`` package's tail length, ``"floor"`` is
arviz-stats'; :func:`posterior_r_eff` reproduces arviz-stats' default ``r_eff``.
"""

from __future__ import annotations

import math
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Mapping
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Literal, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.fft import next_fast_len
from scipy.special import logsumexp

__all__ = [
    "DEFAULT_CHUNK_BYTES",
    "LooResult",
    "WaicResult",
    "ess_mean",
    "iter_psis_log_weights",
    "k_threshold",
    "posterior_r_eff",
    "psis_log_weights",
    "psis_loo",
    "psis_tail_length",
    "relative_eff",
    "waic",
]

#: Largest default working memory (bytes) of the chunks in flight, beside the input array; the
#: default is an eighth of the input for smaller arrays, but not under 8 MiB.
DEFAULT_CHUNK_BYTES = 64 * 2**20
_MIN_AUTO_CHUNK_BYTES = 8 * 2**20

# Blocks of rows for the exp passes and the ESS: about 1 MB, so one block stays in cache
# between the passes that read it.
_BLOCK_BYTES = 2**20
# Columns per step of the chunk transpose: numpy's plain transposed copy strides through memory
# and is 2-3x slower than copying it in blocks.
_TRANSPOSE_COLS = 256
# Weakly informative prior on k: centred at 0.5 and worth 10 observations (Vehtari et al.
# 2024), and the grid scale of Zhang & Stephens (2009); the same constants as the loo package
# and arviz-stats.
_PRIOR_K_WEIGHT = 10
_PRIOR_K_MEAN = 0.5
_PRIOR_B_SCALE = 3
# Fewer tail draws than this: no smoothing, k-hat = inf (the loo package's convention).
_MIN_TAIL = 5

# Threads by default: the usable CPUs, but no more than this (chunks get small beyond it).
_MAX_DEFAULT_WORKERS = 8

TailRounding = Literal["ceil", "floor"]
REff = float | ArrayLike | Literal["log_lik"]


class SliceableArray(Protocol):
    """What the kernels need of an input: a shape, a dtype and slicing along the last axis."""

    @property
    def shape(self) -> tuple[int, ...]: ...

    @property
    def dtype(self) -> Any: ...

    def __getitem__(self, key: Any) -> Any: ...


@dataclass(frozen=True)
class LooResult:
    """PSIS-LOO estimates (Vehtari, Gelman & Gabry 2017).

    Attributes
    ----------
    elpd_loo : float
        Sum of ``elpd_loo_i``.
    se : float
        Standard error of ``elpd_loo``: ``sqrt(N * var(elpd_loo_i, ddof=1))`` (0 when N = 1).
    p_loo : float
        Effective number of parameters, ``lppd - elpd_loo``.
    lppd : float
        Log pointwise predictive density of the full-data posterior.
    elpd_loo_i, p_loo_i, lppd_i, pareto_k, r_eff : ndarray
        Per observation (length N): PSIS-LOO elpd, ``lppd_i - elpd_loo_i``, ``log mean_s
        p(y_i | theta_s)``, Pareto k-hat (``inf`` when the tail was too short to fit, ``nan``
        when the fit failed, e.g. tied tail values), and the relative efficiency used.
    n_samples, n_obs : int
        Posterior draws S (chains x draws) and observations N.
    k_threshold : float
        Sample-size dependent k-hat threshold ``min(1 - 1/log10(S), 0.7)``.
    """

    elpd_loo: float
    se: float
    p_loo: float
    lppd: float
    elpd_loo_i: NDArray[np.float64]
    p_loo_i: NDArray[np.float64]
    lppd_i: NDArray[np.float64]
    pareto_k: NDArray[np.float64]
    r_eff: NDArray[np.float64]
    n_samples: int
    n_obs: int
    k_threshold: float

    @property
    def warning(self) -> bool:
        """True when some k-hat exceeds ``k_threshold`` (arviz-stats' ``warning``)."""
        return bool(np.any(self.pareto_k > self.k_threshold))


@dataclass(frozen=True)
class WaicResult:
    """WAIC estimates (Watanabe 2010; Vehtari, Gelman & Gabry 2017, eqs. 11-13).

    Attributes
    ----------
    elpd_waic, se, p_waic, lppd : float
        Totals; ``se = sqrt(N * var(elpd_waic_i, ddof=1))``.
    elpd_waic_i, p_waic_i, lppd_i : ndarray
        Per observation; ``p_waic_i`` is the sample variance (ddof=1) of the log-likelihood
        over the draws.
    n_samples, n_obs : int
        Posterior draws S and observations N.
    """

    elpd_waic: float
    se: float
    p_waic: float
    lppd: float
    elpd_waic_i: NDArray[np.float64]
    p_waic_i: NDArray[np.float64]
    lppd_i: NDArray[np.float64]
    n_samples: int
    n_obs: int


# --------------------------------------------------------------------------------------------
# Small public helpers


def k_threshold(n_samples: int) -> float:
    """Sample-size dependent Pareto k-hat threshold ``min(1 - 1/log10(S), 0.7)``.

    Vehtari et al. (2024), section 3.2.4; capped at 0.7 as the loo package and arviz-stats do.
    """
    if n_samples <= 1:
        return 0.7
    return min(1 - 1 / math.log10(n_samples), 0.7)


def psis_tail_length(
    n_samples: int, r_eff: ArrayLike, rounding: TailRounding = "ceil"
) -> NDArray[np.int64]:
    """Number of largest importance ratios M fitted by the generalized Pareto distribution.

    Parameters
    ----------
    n_samples : int
        Posterior draws S.
    r_eff : array_like
        Relative efficiency per observation (or a scalar). Non-finite values count as 1, as
        in the loo package.
    rounding : {"ceil", "floor"}
        ``"ceil"``: ``ceil(min(0.2 S, 3 sqrt(S / r_eff)))``, Vehtari et al. (2024) and the loo
        package. ``"floor"``: the same with ``floor``, as arviz-stats 1.3 does.

    Returns
    -------
    ndarray of int64
        Tail lengths, shaped like ``r_eff``.
    """
    r = np.asarray(r_eff, dtype=np.float64)
    r = np.where(np.isfinite(r), r, 1.0)
    s = float(n_samples)
    if rounding == "ceil":
        m = np.ceil(np.minimum(0.2 * s, 3 * np.sqrt(s / r)))
    elif rounding == "floor":
        # arviz-stats' branch form; the same as floor(min(...)) since S r > 225 <=> 0.2 S > 3
        # sqrt(S / r).
        m = np.where(s * r > 225, np.floor(3 * (s / r) ** 0.5), np.floor(s / 5))
    else:
        raise ValueError(f"tail_rounding must be 'ceil' or 'floor', not {rounding!r}")
    return m.astype(np.int64)


# --------------------------------------------------------------------------------------------
# Effective sample size


def _ess_mean_rows(x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Split-chain ESS of the mean for each row of ``x`` with shape (rows, chains, draws).

    The ``ess_basic`` of Vehtari et al. (2021) (arviz-stats' ``method="mean"``): chains split
    in halves, autocovariances by FFT, Geyer's initial positive then initial monotone sequence,
    ``tau`` bounded below by ``1 / log10(size)``. Vectorized over rows; the two Geyer loops of
    the scalar version become a first-non-positive-pair search and a running minimum.
    """
    rows, n_chain, n_draw = x.shape
    out = np.full(rows, np.nan)
    if n_draw < 4 or rows == 0:
        return out
    half = n_draw // 2
    y = np.concatenate((x[:, :, :half], x[:, :, n_draw - half :]), axis=1)
    nc, nd = 2 * n_chain, half
    size = nc * nd
    with np.errstate(all="ignore"):
        chain_mean = y.mean(axis=2)
        m = next_fast_len(2 * nd, real=True)
        f = np.fft.rfft(y - chain_mean[..., None], n=m, axis=2)
        power = f.real**2 + f.imag**2
        del f
        acov = np.fft.irfft(power, n=m, axis=2)[..., :nd]
        acov /= nd
        mean_acov = acov.mean(axis=1)  # (rows, nd): mean over chains at each lag
        del acov, power
        mean_var = mean_acov[:, 0] * nd / (nd - 1.0)
        var_plus = mean_var * (nd - 1.0) / nd
        if nc > 1:
            var_plus = var_plus + chain_mean.var(axis=1, ddof=1)
        rho = 1.0 - (mean_var[:, None] - mean_acov) / var_plus[:, None]
        rho[:, 0] = 1.0
        n_pairs = nd // 2
        pairs = rho[:, 0 : 2 * n_pairs : 2] + rho[:, 1 : 2 * n_pairs : 2]
        # Initial positive sequence: pairs are added while the previous pair sum is positive,
        # up to lag nd - 3; k_last is the last pair looked at (the first non-positive one, or
        # the last one allowed).
        k_max = max((nd - 3) // 2, 0)
        non_pos = ~(pairs > 0)
        first = np.where(non_pos.any(axis=1), non_pos.argmax(axis=1), n_pairs)
        k_last = np.minimum(first, k_max)
        # Initial monotone sequence: each pair sum is capped by the previous one.
        mono = np.minimum.accumulate(pairs, axis=1)
        csum = np.concatenate((np.zeros((rows, 1)), np.cumsum(mono, axis=1)), axis=1)
        idx = np.arange(rows)
        pair_sum = csum[idx, k_last]
        rho_even = rho[idx, 2 * k_last]
        tail = np.where((rho_even > 0) | (pairs[idx, k_last] >= 0), rho_even, 0.0)
        tau = -1.0 + 2.0 * pair_sum + tail
        tau = np.maximum(tau, 1.0 / np.log10(size))
        ess = size / tau
    ess[np.isnan(rho).any(axis=1)] = np.nan
    const = (y.max(axis=(1, 2)) - y.min(axis=(1, 2))) < np.finfo(float).resolution
    ess[const] = size
    ess[~np.isfinite(y).all(axis=(1, 2))] = np.nan
    return ess


def ess_mean(draws: ArrayLike) -> NDArray[np.float64]:
    """Split-chain effective sample size of the mean (Vehtari et al. 2021, ``ess_basic``).

    Parameters
    ----------
    draws : array_like
        Shape ``(chains, draws, ...)``; the trailing axes are flattened.

    Returns
    -------
    ndarray
        One ESS per trailing element (``nan`` with fewer than 4 draws or non-finite draws).
    """
    a = np.asarray(draws, dtype=np.float64)
    if a.ndim < 2:
        raise ValueError("draws must have shape (chains, draws, ...)")
    c, d = a.shape[:2]
    rows = np.moveaxis(a.reshape(c, d, -1), 2, 0)
    return _ess_mean_rows(np.ascontiguousarray(rows))


def posterior_r_eff(posterior: Mapping[str, ArrayLike] | Iterable[ArrayLike]) -> float:
    """One relative efficiency from the posterior draws, as arviz-stats 1.3 ``loo`` computes it.

    arviz-stats' default (``loo(..., reff=None)``) is not per observation: it is the mean of the
    split-chain ESS of the mean over every scalar element of every posterior variable, divided
    by S, and exactly 1 with a single chain.

    Parameters
    ----------
    posterior : mapping or iterable of array_like
        Posterior variables, each of shape ``(chains, draws, ...)``.

    Returns
    -------
    float
        Relative efficiency (``nan`` when some ESS is ``nan``, as in arviz-stats).
    """
    arrays = [np.asarray(v) for v in (posterior.values() if isinstance(posterior, Mapping)
                                       else posterior)]
    if not arrays:
        raise ValueError("posterior_r_eff needs at least one posterior variable")
    n_chain, n_draw = arrays[0].shape[:2]
    if n_chain == 1:
        return 1.0
    ess = np.concatenate([ess_mean(a) for a in arrays])
    return float(ess.mean() / (n_chain * n_draw))


# --------------------------------------------------------------------------------------------
# Input handling and chunking


def _source(log_lik: SliceableArray | ArrayLike) -> tuple[Any, tuple[int, int, int], np.dtype]:
    """The input as something sliceable, its shape and the dtype the kernels work in."""
    src: Any = log_lik
    if not (hasattr(src, "shape") and hasattr(src, "dtype") and hasattr(src, "__getitem__")):
        src = np.asarray(src, dtype=np.float64)
    shape = tuple(int(n) for n in src.shape)
    if len(shape) != 3:
        raise ValueError(f"log_lik must have shape (chains, draws, observations), not {shape}")
    if shape[0] * shape[1] < 2:
        raise ValueError("PSIS needs at least 2 posterior draws")
    # float32 input is worked on in float32 where that is exact (copies, max/min, selection of
    # the tail) and widened to float64 for every sum, so the results equal those of the float64
    # computation on the widened array.
    work = np.dtype(np.float32) if np.dtype(src.dtype) == np.float32 else np.dtype(np.float64)
    return src, shape, work


def _read(src: Any, sl: slice, work: np.dtype) -> NDArray[Any]:
    """Observations ``sl`` as an array (C, D, n); a view when the source is a numpy array."""
    raw = np.asarray(src[:, :, sl])
    if raw.dtype != work:
        raw = raw.astype(work)
    return raw


def _obs_per_chunk(per_obs: int, chunk_bytes: int, n_obs: int) -> int:
    return int(max(1, min(n_obs, chunk_bytes // max(per_obs, 1))))


def _to_rows(raw: NDArray[Any], work: np.dtype, negate: bool) -> NDArray[Any]:
    """Copy a chunk (C, D, n) into rows (n, S), one row of draws per observation (optionally
    negated: log importance ratios are ``-log_lik``)."""
    c, d, n = raw.shape
    s = c * d
    flat = raw.reshape(s, n)
    out = np.empty((n, s), dtype=work)
    for s0 in range(0, s, _TRANSPOSE_COLS):
        s1 = min(s, s0 + _TRANSPOSE_COLS)
        if negate:
            np.negative(flat[s0:s1].T, out=out[:, s0:s1])
        else:
            out[:, s0:s1] = flat[s0:s1].T
    return out


def _r_eff_spec(r_eff: REff, n_obs: int) -> NDArray[np.float64] | None:
    """None for "estimate from log_lik", else r_eff per observation."""
    if isinstance(r_eff, str):
        if r_eff != "log_lik":
            raise ValueError(f"r_eff must be a number, an array or 'log_lik', not {r_eff!r}")
        return None
    r = np.asarray(r_eff, dtype=np.float64)
    if r.ndim == 0:
        r = np.full(n_obs, float(r))
    elif r.shape != (n_obs,):
        raise ValueError(f"r_eff must be a scalar or have shape ({n_obs},), not {r.shape}")
    if np.any(r <= 0):
        raise ValueError("r_eff must be positive")
    return r


def _tail_bytes(s: int, r_min: float) -> int:
    """Bytes per observation of the tail arrays (about 16 float64 arrays of length M + 1)."""
    m = int(psis_tail_length(s, r_min, "ceil")) + 1
    return 16 * 8 * (m + 64)


# --------------------------------------------------------------------------------------------
# Generalized Pareto fit and PSIS, vectorized over observations


def _gpd_fit(x: NDArray[np.float64], n: NDArray[np.int64]) -> tuple[NDArray, NDArray]:
    """Zhang & Stephens (2009) estimate of the generalized Pareto (k, sigma) for each row.

    Each row holds ``n`` exceedances sorted ascending and right-aligned, padded on the left
    with zeros (``log1p(-b * 0) = 0``, so padding adds nothing to the sums). The profile
    likelihood is evaluated on the grid of ``30 + floor(sqrt(n))`` values of b; k gets the
    weakly informative prior of Vehtari et al. (2024). A Python loop runs over the grid points
    only, never over observations.

    Returns
    -------
    k, sigma : ndarray
        ``nan`` when the first quartile does not exceed the minimum (far from a generalized
        Pareto tail, e.g. tied values); k = ``inf`` when the estimate is not a number.
    """
    rows, width = x.shape
    idx = np.arange(rows)
    nf = n.astype(np.float64)
    start = width - n
    first = x[idx, start]
    last = x[:, -1]
    xstar = x[idx, start + ((nf / 4 + 0.5) - 1).astype(np.int64)]  # first quartile
    m = 30 + np.sqrt(nf).astype(np.int64)
    m_max = int(m.max())
    j = np.arange(1, m_max + 1, dtype=np.float64)
    with np.errstate(all="ignore"):
        b = 1 - np.sqrt(m[:, None] / (j - 0.5))
        b /= _PRIOR_B_SCALE * xstar[:, None]
        b += (1 / last)[:, None]
        k_grid = np.empty((rows, m_max))
        tmp = np.empty_like(x)
        for g in range(m_max):
            np.multiply(x, -b[:, g : g + 1], out=tmp)
            np.log1p(tmp, out=tmp)
            k_grid[:, g] = tmp.sum(axis=1)
        del tmp
        k_grid /= nf[:, None]
        log_lik = nf[:, None] * (np.log(-b / k_grid) - k_grid - 1)
        log_lik[j[None, :] > m[:, None]] = -np.inf
        w = np.exp(log_lik - logsumexp(log_lik, axis=1, keepdims=True))
        w[w < 10 * np.finfo(float).eps] = 0.0  # negligible grid weights, dropped as loo does
        w /= w.sum(axis=1, keepdims=True)
        b_post = (b * np.where(w > 0, w, 0.0)).sum(axis=1)
        k = np.log1p(-b_post[:, None] * x).sum(axis=1) / nf
        sigma = -k / b_post
        k = (nf * k + _PRIOR_K_WEIGHT * _PRIOR_K_MEAN) / (nf + _PRIOR_K_WEIGHT)
    sigma = np.where(np.isnan(k), np.nan, sigma)
    k = np.where(np.isnan(k), np.inf, k)
    fail = xstar <= first
    k[fail] = np.nan
    sigma[fail] = np.nan
    return k, sigma


@dataclass
class _Tails:
    """PSIS of the M largest log ratios of each row (the tail), in the shifted log scale."""

    raw: NDArray[np.float64]  # (n, Mmax) sorted tail log ratios minus the row maximum
    smoothed: NDArray[np.float64]  # (n, Mmax) smoothed log weights (raw where not in the tail)
    in_tail: NDArray[np.bool_]  # (n, Mmax) True where a column belongs to the row's tail
    k: NDArray[np.float64]
    body_top: NDArray[np.float64]  # sum of exp(shifted) of the top columns left of the tail


def _smooth_tails(top: NDArray[np.float64], max_lr: NDArray[np.float64],
                  m: NDArray[np.int64]) -> _Tails:
    """Pareto smooth the tails (Vehtari et al. 2024, section 3).

    ``top`` holds each row's ``Mmax + 1`` largest log ratios sorted ascending; the tail of a
    row is its last ``M`` columns and its cutoff the column before. The generalized Pareto
    distribution is fitted to the exceedances of the weights (not log weights) over the
    cutoff, and the tail weights are replaced by its quantiles at ``(z - 1/2) / M``, z = 1..M,
    truncated at the largest raw weight.
    """
    rows, width = top.shape
    m_max = width - 1
    idx = np.arange(rows)
    shifted = top - max_lr[:, None]  # <= 0; the shift keeps exp() finite
    cut_col = m_max - m
    cols = np.arange(width)
    in_top_tail = cols[None, :] > cut_col[:, None]
    with np.errstate(under="ignore"):
        w = np.exp(shifted)
    body_top = np.where(in_top_tail, 0.0, w).sum(axis=1)
    in_tail = in_top_tail[:, 1:]
    cutoff = w[idx, cut_col]
    exceed = np.where(in_tail, w[:, 1:] - cutoff[:, None], 0.0)
    k = np.full(rows, np.inf)
    raw = shifted[:, 1:]
    smoothed = raw.copy()
    fit = m >= _MIN_TAIL
    if fit.any():
        kf, sigma = _gpd_fit(exceed[fit], m[fit])
        k[fit] = kf
        ok = np.zeros(rows, dtype=bool)
        ok[fit] = np.isfinite(kf)
        if ok.any():
            sig = np.full(rows, np.nan)
            sig[fit] = sigma
            mo = m[ok].astype(np.float64)
            rank = np.arange(m_max)[None, :] - cut_col[ok][:, None]  # 0..M-1 inside the tail
            p = (rank + 0.5) / mo[:, None]
            kk, ss, cc = k[ok][:, None], sig[ok][:, None], cutoff[ok][:, None]
            with np.errstate(all="ignore"):
                lp = np.log1p(-p)
                q = np.where(kk == 0, cc - ss * lp, cc + ss * np.expm1(-kk * lp) / kk)
                q = np.where(ss > 0, q, np.nan)  # generalized Pareto quantile needs sigma > 0
                lq = np.log(q)
            lq = np.where(lq > 0, 0.0, lq)  # truncate at the largest raw weight (0 here)
            sub = smoothed[ok]
            sub[in_tail[ok]] = lq[in_tail[ok]]
            smoothed[ok] = sub
    return _Tails(raw, smoothed, in_tail, k, body_top)


def _select_top(lr: NDArray[Any], m_max: int, with_index: bool
                ) -> tuple[NDArray[np.float64], NDArray[np.intp] | None]:
    """The ``m_max + 1`` largest values of each row, sorted ascending (and their columns).

    Without indices the row is partitioned in place: the sums that follow do not depend on the
    order of the draws, and a partition (O(S)) is much cheaper than a sort.
    """
    s = lr.shape[1]
    kth = s - m_max - 1
    if not with_index:
        lr.partition(kth, axis=1)
        return np.sort(lr[:, kth:], axis=1).astype(np.float64), None
    part = np.argpartition(lr, kth, axis=1)[:, kth:]
    vals = np.take_along_axis(lr, part, axis=1)
    order = np.argsort(vals, axis=1)
    return (np.take_along_axis(vals, order, axis=1).astype(np.float64),
            np.take_along_axis(part, order, axis=1))


def _exp_sums(lr: NDArray[Any], upto: int, max_lr: NDArray[np.float64], want_full: bool
              ) -> tuple[NDArray, NDArray | None, NDArray | None]:
    """Per row: ``sum(exp(lr[:, :upto] - max_lr))`` and, if ``want_full``, the row minimum
    ``min_lr`` and ``sum(exp(min_lr - lr))`` over the whole row.

    In float64 and in row blocks of about 1 MB: the block read for the first sum is still in
    cache for the minimum and the second sum, and temporaries stay small.
    """
    n, s = lr.shape
    rb = max(1, _BLOCK_BYTES // (8 * s))
    buf = np.empty((min(rb, n), s))
    body = np.empty(n)
    full = np.empty(n) if want_full else None
    min_lr = np.empty(n) if want_full else None
    with np.errstate(under="ignore", over="ignore"):
        for r0 in range(0, n, rb):
            r1 = min(n, r0 + rb)
            b = buf[: r1 - r0]
            blk = lr[r0:r1]
            if upto > 0:
                np.subtract(blk[:, :upto], max_lr[r0:r1, None], out=b[:, :upto])
                np.exp(b[:, :upto], out=b[:, :upto])
                body[r0:r1] = b[:, :upto].sum(axis=1)
            else:
                body[r0:r1] = 0.0
            if full is not None and min_lr is not None:
                mn = blk.min(axis=1).astype(np.float64)
                min_lr[r0:r1] = mn
                np.subtract(mn[:, None], blk, out=b)
                np.exp(b, out=b)
                full[r0:r1] = b.sum(axis=1)
    return body, full, min_lr


def _lik_rows_ess(lr: NDArray[Any], n_chain: int
                  ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """r_eff per row from ``exp(log_lik)`` (the loo package's ``relative_eff``), with the row
    minimum of ``lr`` and the row sums of ``exp(min_lr - lr)`` that the lppd needs, in one pass.

    ESS does not change when a row is scaled, so ``exp(log_lik - max log_lik)`` stands in for
    ``exp(log_lik)``, which would overflow or underflow.
    """
    n, s = lr.shape
    n_draw = s // n_chain
    rb = max(1, _BLOCK_BYTES // (8 * s))
    r_eff = np.empty(n)
    full = np.empty(n)
    min_lr = np.empty(n)
    with np.errstate(under="ignore", over="ignore"):
        for r0 in range(0, n, rb):
            r1 = min(n, r0 + rb)
            blk = lr[r0:r1]
            mn = blk.min(axis=1).astype(np.float64)
            min_lr[r0:r1] = mn
            lik = np.subtract(mn[:, None], blk, dtype=np.float64)
            np.exp(lik, out=lik)
            full[r0:r1] = lik.sum(axis=1)
            r_eff[r0:r1] = _ess_mean_rows(lik.reshape(r1 - r0, n_chain, n_draw)) / s
    return r_eff, full, min_lr


def _log_sum_exp_rows(a: NDArray[np.float64]) -> NDArray[np.float64]:
    """``log(sum(exp(a), axis=1))`` for rows whose maximum is about 0, in row blocks."""
    n, s = a.shape
    rb = max(1, _BLOCK_BYTES // (8 * s))
    out = np.empty(n)
    with np.errstate(under="ignore", divide="ignore"):
        for r0 in range(0, n, rb):
            out[r0 : r0 + rb] = np.log(np.exp(a[r0 : r0 + rb]).sum(axis=1))
    return out


@dataclass
class _ChunkPsis:
    k: NDArray[np.float64]
    r_eff: NDArray[np.float64]
    elpd_i: NDArray[np.float64] | None = None
    lppd_i: NDArray[np.float64] | None = None
    log_weights: NDArray[np.float64] | None = None  # (n, S)


def _psis_chunk(raw: NDArray[Any], r_eff: NDArray[np.float64] | None, work: np.dtype,
                rounding: TailRounding, weights: bool) -> _ChunkPsis:
    """PSIS for one chunk (C, D, n): LOO quantities, or the normalized log weights."""
    n_chain, n_draw, n = raw.shape
    s = n_chain * n_draw
    if n == 0:
        empty = np.empty(0)
        return _ChunkPsis(k=empty, r_eff=empty, elpd_i=empty, lppd_i=empty,
                          log_weights=np.empty((0, s)))
    lr = _to_rows(raw, work, negate=True)  # log importance ratios, one row per observation
    full = min_lr = None
    if r_eff is None:
        r_eff, full, min_lr = _lik_rows_ess(lr, n_chain)
        r_eff = np.where(np.isfinite(r_eff), r_eff, 1.0)
    m = psis_tail_length(s, r_eff, rounding)
    m_max = int(m.max())
    top, top_idx = _select_top(lr, m_max, with_index=weights)
    max_lr = top[:, -1].copy()  # the row maximum, known once the tail is selected
    tails = _smooth_tails(top, max_lr, m)
    if weights:
        assert top_idx is not None
        lw = np.subtract(lr, max_lr[:, None], dtype=np.float64)
        # Columns of top_idx left of a row's tail get their raw value back: smoothed == raw there.
        np.put_along_axis(lw, top_idx[:, 1:], tails.smoothed, axis=1)
        lw -= _log_sum_exp_rows(lw)[:, None]
        return _ChunkPsis(k=tails.k, r_eff=r_eff, log_weights=lw)
    kth = s - m_max - 1
    body, full2, min2 = _exp_sums(lr, kth, max_lr, want_full=full is None)
    if full is None:
        full, min_lr = full2, min2
    body += tails.body_top
    with np.errstate(under="ignore", divide="ignore"):
        tail_w = np.where(tails.in_tail, np.exp(tails.smoothed), 0.0).sum(axis=1)
        log_norm = np.log(body + tail_w)  # log of the sum of the unnormalized weights
    # elpd_i = log sum_s w_s p(y_i | theta_s) / sum_s w_s. Outside the tail w_s p(y_i|theta_s)
    # = exp(lr_s - max) exp(-lr_s) = exp(-max) exactly, so only the tail needs a sum.
    with np.errstate(under="ignore", divide="ignore", invalid="ignore"):
        ratio = np.where(tails.in_tail, np.exp(tails.smoothed - tails.raw), 0.0).sum(axis=1)
        elpd_i = np.log((s - m) + ratio) - log_norm - max_lr
        assert full is not None and min_lr is not None
        lppd_i = np.log(full) - min_lr - math.log(s)
    return _ChunkPsis(k=tails.k, r_eff=r_eff, elpd_i=elpd_i, lppd_i=lppd_i)


# --------------------------------------------------------------------------------------------
# Driving the chunks


def _n_workers(workers: int | None) -> int:
    if workers is not None:
        if workers < 1:
            raise ValueError("workers must be at least 1")
        return int(workers)
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, _MAX_DEFAULT_WORKERS))


def _plan(src: Any, shape: tuple[int, int, int], work: np.dtype, r_all: NDArray | None,
          chunk_bytes: int | None, workers: int, row_bytes: int) -> tuple[int, int]:
    """Observations per chunk and number of threads.

    Each of the ``workers`` chunks in flight gets ``chunk_bytes / workers``: the working memory
    of one observation is its row of log ratios (``row_bytes`` per draw) plus the tail arrays,
    plus a copy of the raw chunk when the source does not give numpy views.
    """
    n_chain, n_draw, n_obs = shape
    s = n_chain * n_draw
    r_min = float(r_all.min()) if r_all is not None and n_obs else 0.2  # M <= 0.2 S anyway
    per_obs = s * row_bytes + _tail_bytes(s, r_min)
    if not isinstance(src, np.ndarray) or np.dtype(src.dtype) != work:
        per_obs += s * work.itemsize
    if chunk_bytes is None:
        # Small arrays get a budget in proportion, so the work never dwarfs the input.
        array_bytes = s * n_obs * work.itemsize
        chunk_bytes = int(min(DEFAULT_CHUNK_BYTES, max(_MIN_AUTO_CHUNK_BYTES, array_bytes // 8)))
    if chunk_bytes <= 0:
        raise ValueError("chunk_bytes must be positive")
    step = _obs_per_chunk(per_obs, chunk_bytes // workers, n_obs)
    return step, min(workers, -(-n_obs // step)) if n_obs else 1


def _map_chunks[T](src: Any, n_obs: int, step: int, work: np.dtype, workers: int,
                   fn: Callable[[NDArray[Any], slice], T]) -> Iterator[tuple[slice, T]]:
    """Apply ``fn(raw_chunk, obs_slice)`` to every chunk, in order.

    With several workers the chunks run on threads (numpy releases the GIL in the ufunc loops,
    partitions and FFTs that take the time); at most ``workers`` chunks are in flight, so memory
    stays within the plan. Chunks are read from the source in the calling thread only, so a
    source that is not thread-safe (an HDF5 dataset, say) is never read concurrently.
    """
    slices = [slice(i, min(n_obs, i + step)) for i in range(0, n_obs, step)]
    if workers <= 1 or len(slices) <= 1:
        for sl in slices:
            yield sl, fn(_read(src, sl, work), sl)
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque[tuple[slice, Future[T]]] = deque()
        for sl in slices:
            if len(pending) >= workers:
                done_sl, fut = pending.popleft()
                yield done_sl, fut.result()
            pending.append((sl, pool.submit(fn, _read(src, sl, work), sl)))
        while pending:
            done_sl, fut = pending.popleft()
            yield done_sl, fut.result()


# --------------------------------------------------------------------------------------------
# Public API


def psis_loo(
    log_lik: SliceableArray | ArrayLike,
    *,
    r_eff: REff = "log_lik",
    tail_rounding: TailRounding = "ceil",
    chunk_bytes: int | None = None,
    workers: int | None = None,
) -> LooResult:
    """PSIS-LOO (Vehtari, Gelman & Gabry 2017) with Pareto smoothed importance sampling
    (Vehtari, Simpson, Gelman, Yao & Gabry 2024).

    Parameters
    ----------
    log_lik : array_like, shape (chains, draws, observations)
        Pointwise log-likelihood; float32 or float64; a memmap or any object with ``shape``,
        ``dtype`` and slicing along the last axis is read one chunk of observations at a time.
    r_eff : float, array of shape (observations,), or "log_lik"
        Relative MCMC efficiency used for the tail length. ``"log_lik"`` (default) estimates it
        per observation from the chains of ``exp(log_lik)`` as the loo package's
        ``relative_eff`` does. arviz-stats 1.3's default is one number from the posterior
        draws: pass ``posterior_r_eff(posterior)`` to reproduce it.
    tail_rounding : {"ceil", "floor"}
        Tail length rounding, see :func:`psis_tail_length` (``"floor"`` matches arviz-stats).
    chunk_bytes : int, optional
        Budget for the working memory of all chunks in flight, beside the input (default:
        ``DEFAULT_CHUNK_BYTES`` = 64 MiB, or an eighth of the input if less, at least 8 MiB).
        Results do not depend on it.
    workers : int, optional
        Threads working on chunks; default: the usable CPUs, at most 8. Results do not depend
        on it.

    Returns
    -------
    LooResult
    """
    src, shape, work = _source(log_lik)
    n_chain, n_draw, n_obs = shape
    s = n_chain * n_draw
    r_all = _r_eff_spec(r_eff, n_obs)
    step, nw = _plan(src, shape, work, r_all, chunk_bytes, _n_workers(workers), work.itemsize)

    def one(raw: NDArray[Any], sl: slice) -> _ChunkPsis:
        return _psis_chunk(raw, None if r_all is None else r_all[sl], work, tail_rounding,
                           weights=False)

    elpd_i = np.empty(n_obs)
    lppd_i = np.empty(n_obs)
    k = np.empty(n_obs)
    r_used = np.empty(n_obs)
    for sl, res in _map_chunks(src, n_obs, step, work, nw, one):
        assert res.elpd_i is not None and res.lppd_i is not None
        elpd_i[sl], lppd_i[sl], k[sl], r_used[sl] = res.elpd_i, res.lppd_i, res.k, res.r_eff
    p_loo_i = lppd_i - elpd_i
    se = float(np.sqrt(n_obs * np.var(elpd_i, ddof=1))) if n_obs > 1 else 0.0
    return LooResult(
        elpd_loo=float(elpd_i.sum()), se=se, p_loo=float(p_loo_i.sum()),
        lppd=float(lppd_i.sum()), elpd_loo_i=elpd_i, p_loo_i=p_loo_i, lppd_i=lppd_i,
        pareto_k=k, r_eff=r_used, n_samples=s, n_obs=n_obs, k_threshold=k_threshold(s),
    )


def iter_psis_log_weights(
    log_lik: SliceableArray | ArrayLike,
    *,
    r_eff: REff = "log_lik",
    tail_rounding: TailRounding = "ceil",
    chunk_bytes: int | None = None,
    workers: int | None = None,
) -> Iterator[tuple[slice, NDArray[np.float64], NDArray[np.float64]]]:
    """Normalized PSIS log weights, one chunk of observations at a time.

    For leave-one-out expectations (e.g. PSIS-weighted LOO-PIT) over arrays too large to hold
    all weights at once. Arguments as in :func:`psis_loo`; the weights of up to ``workers``
    chunks are computed ahead of the one being consumed.

    Yields
    ------
    obs : slice
        The observations of this chunk.
    log_weights : ndarray, shape (chains, draws, len(obs))
        Smoothed log weights of the leave-one-out posterior, normalized over the draws
        (``logsumexp`` over chains and draws is 0). A transposed view of an (obs, draws) block.
    pareto_k : ndarray, shape (len(obs),)
    """
    src, shape, work = _source(log_lik)
    n_chain, n_draw, n_obs = shape
    r_all = _r_eff_spec(r_eff, n_obs)
    # per draw: the ratio, its index from argpartition and the float64 weight
    step, nw = _plan(src, shape, work, r_all, chunk_bytes, _n_workers(workers),
                     work.itemsize + 16)

    def one(raw: NDArray[Any], sl: slice) -> _ChunkPsis:
        return _psis_chunk(raw, None if r_all is None else r_all[sl], work, tail_rounding,
                           weights=True)

    for sl, res in _map_chunks(src, n_obs, step, work, nw, one):
        assert res.log_weights is not None
        yield sl, res.log_weights.T.reshape(n_chain, n_draw, sl.stop - sl.start), res.k


def psis_log_weights(
    log_lik: SliceableArray | ArrayLike,
    *,
    obs: slice | None = None,
    r_eff: REff = "log_lik",
    tail_rounding: TailRounding = "ceil",
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Normalized PSIS log weights and Pareto k-hat for the observations ``obs`` (all if None).

    ``r_eff``, if an array, is given for all observations and sliced with ``obs``. The weights
    take 8 bytes per draw and observation: for large arrays use :func:`iter_psis_log_weights`.

    Returns
    -------
    log_weights : ndarray, shape (chains, draws, n)
    pareto_k : ndarray, shape (n,)
    """
    src, (n_chain, n_draw, n_obs), work = _source(log_lik)
    sl = slice(*(obs if obs is not None else slice(None)).indices(n_obs))
    if sl.step != 1:
        raise ValueError("obs must be a contiguous slice")
    r_all = _r_eff_spec(r_eff, n_obs)
    res = _psis_chunk(_read(src, sl, work), None if r_all is None else r_all[sl], work,
                      tail_rounding, weights=True)
    assert res.log_weights is not None
    n = max(sl.stop - sl.start, 0)
    return res.log_weights.T.reshape(n_chain, n_draw, n), res.k


def relative_eff(
    log_lik: SliceableArray | ArrayLike,
    *,
    chunk_bytes: int | None = None,
    workers: int | None = None,
) -> NDArray[np.float64]:
    """Relative efficiency per observation from the chains of ``exp(log_lik)``.

    The loo package's ``relative_eff(exp(log_lik))``: split-chain ESS of the mean
    (:func:`ess_mean`) divided by S.
    """
    src, shape, work = _source(log_lik)
    n_chain = shape[0]
    step, nw = _plan(src, shape, work, np.ones(1), chunk_bytes, _n_workers(workers),
                     work.itemsize)

    def one(raw: NDArray[Any], sl: slice) -> NDArray[np.float64]:
        return _lik_rows_ess(_to_rows(raw, work, negate=True), n_chain)[0]

    out = np.empty(shape[2])
    for sl, r in _map_chunks(src, shape[2], step, work, nw, one):
        out[sl] = r
    return out


def waic(
    log_lik: SliceableArray | ArrayLike,
    *,
    chunk_bytes: int | None = None,
    workers: int | None = None,
) -> WaicResult:
    """WAIC (Watanabe 2010) as in Vehtari, Gelman & Gabry (2017), eqs. 11-13.

    ``lppd_i = log mean_s p(y_i | theta_s)``, ``p_waic_i = var_s log p(y_i | theta_s)`` (sample
    variance, ddof = 1), ``elpd_waic_i = lppd_i - p_waic_i``. Input as in :func:`psis_loo`.
    """
    src, shape, work = _source(log_lik)
    s = shape[0] * shape[1]
    n_obs = shape[2]
    step, nw = _plan(src, shape, work, np.ones(1), chunk_bytes, _n_workers(workers),
                     work.itemsize)

    def one(raw: NDArray[Any], sl: slice) -> tuple[NDArray, NDArray]:
        # One row of draws per observation, like psis_loo: each row is then reduced by the same
        # operations whatever the chunk, so results do not depend on the chunk size.
        ll = _to_rows(raw, work, negate=False)
        n = ll.shape[0]
        lppd, var = np.empty(n), np.empty(n)
        rb = max(1, _BLOCK_BYTES // (8 * s))
        with np.errstate(under="ignore"):
            for r0 in range(0, n, rb):
                blk = ll[r0 : r0 + rb]
                mx = blk.max(axis=1).astype(np.float64)
                d = np.subtract(blk, mx[:, None], dtype=np.float64)
                lppd[r0 : r0 + rb] = np.log(np.exp(d).sum(axis=1)) + mx - math.log(s)
                var[r0 : r0 + rb] = np.var(blk, axis=1, ddof=1, dtype=np.float64)
        return lppd, var

    lppd_i = np.empty(n_obs)
    p_i = np.empty(n_obs)
    for sl, (lppd, var) in _map_chunks(src, n_obs, step, work, nw, one):
        lppd_i[sl], p_i[sl] = lppd, var
    elpd_i = lppd_i - p_i
    se = float(np.sqrt(n_obs * np.var(elpd_i, ddof=1))) if n_obs > 1 else 0.0
    return WaicResult(
        elpd_waic=float(elpd_i.sum()), se=se, p_waic=float(p_i.sum()), lppd=float(lppd_i.sum()),
        elpd_waic_i=elpd_i, p_waic_i=p_i, lppd_i=lppd_i, n_samples=s, n_obs=n_obs,
    )
