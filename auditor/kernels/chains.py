"""Chain-level measures: nested R-hat, E-BFMI, per-chain ESS and chain-against-chain tests.

- :func:`rhat_nested`: nested R-hat over superchains (Margossian, Hoffman, Sountsov,
  Riou-Durand, Vehtari & Gelman 2024, "Nested R-hat: assessing the convergence of Markov chain
  Monte Carlo when running many short chains", Bayesian Analysis, doi:10.1214/24-BA1453,
  equations 4 to 8), on the draws themselves as the paper defines it.
- :func:`ebfmi`: energy Bayesian fraction of missing information per chain (Betancourt 2016,
  "Diagnosing suboptimal cotangent disintegrations in Hamiltonian Monte Carlo",
  arXiv:1604.00695): ``sum (E_n - E_{n-1})^2 / sum (E_n - mean E)^2``.
- :func:`chain_ess`: the ESS of each chain alone (Geyer's initial monotone sequence, the same
  estimator as the multi-chain kernel, one chain at a time).
- :func:`rank_scores` and :func:`chain_contrasts`: pooled rank-normalized draws (Vehtari et al.
  2021) and, for every pair of chains, the standardized difference of their means, the
  variance of each chain mean taken from its own ESS. They serve the stuck-chain rule.

numpy/scipy only; everything is vectorized over series (quantities).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import special, stats

from auditor.kernels.autocorr import CONSTANT_RANGE, batched_ess, fft_size
from auditor.kernels.ranks import folded_order, sort_rows, write_scores

#: Working-memory budget of one block of :func:`rhat_nested`, in bytes.
BLOCK_BYTES = 32 * 2**20


def superchain_groups(n_chains: int, superchain_ids: Any) -> np.ndarray:
    """Chain indices grouped by superchain, shape (superchains, chains per superchain).

    Raises
    ------
    ValueError
        When ``superchain_ids`` does not give one id per chain, or the superchains are not
        all of the same size (the estimator needs equal sizes, as in the paper).
    """
    ids = np.asarray(superchain_ids).reshape(-1)
    if ids.size != n_chains:
        raise ValueError(f"{ids.size} superchain ids for {n_chains} chains")
    labels, counts = np.unique(ids, return_counts=True)
    if counts.min() != counts.max():
        raise ValueError(f"superchains of unequal sizes {sorted(set(counts.tolist()))}")
    return np.stack([np.flatnonzero(ids == label) for label in labels])


def rhat_nested(draws: Any, superchain_ids: Any) -> np.ndarray:
    """Nested R-hat of every quantity (Margossian et al. 2024, eq. 4-8).

    With ``K`` superchains of ``M`` chains of ``N`` draws: ``B_nu`` is the variance (ddof 1) of
    the ``K`` superchain means; ``W_nu`` the mean over superchains of the variance of their
    chain means (ddof 1; 0 when ``M = 1``) plus the mean of their within-chain variances
    (ddof 1; 0 when ``N = 1``); nested R-hat is ``sqrt(1 + B_nu / W_nu)``.

    Parameters
    ----------
    draws : array_like
        Shape (chains, draws, quantities).
    superchain_ids : array_like
        One label per chain; chains with the same label form a superchain.

    Returns
    -------
    numpy.ndarray
        Shape (quantities,); NaN for quantities with a NaN draw, or with fewer than 2
        superchains.
    """
    x = np.asarray(draws)
    if x.ndim != 3:
        raise ValueError(f"expected draws of shape (chains, draws, quantities), got {x.shape}")
    n_chains, n_draws, n_q = x.shape
    groups = superchain_groups(n_chains, superchain_ids)
    n_super, per = groups.shape
    out = np.full(n_q, np.nan)
    if n_super < 2 or n_draws < 1 or n_q == 0:
        return out
    step = max(1, BLOCK_BYTES // max(1, 8 * n_chains * n_draws))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for start in range(0, n_q, step):
            part = np.asarray(x[:, :, start : start + step], dtype=np.float64)
            means = part.mean(axis=1)  # (chains, q)
            within = part.var(axis=1, ddof=1) if n_draws > 1 else np.zeros_like(means)
            by_super = means[groups]  # (K, M, q)
            super_means = by_super.mean(axis=1)
            between_chains = by_super.var(axis=1, ddof=1) if per > 1 else 0.0
            w_nu = (within[groups].mean(axis=1) + between_chains).mean(axis=0)
            b_nu = super_means.var(axis=0, ddof=1)
            out[start : start + step] = np.sqrt(1.0 + b_nu / w_nu)
    return out


def ebfmi(energy: Any) -> np.ndarray:
    """E-BFMI of each chain from its energy draws, shape (chains, draws) -> (chains,).

    ``mean((E_n - E_{n-1})^2) / var(E)`` (ddof 1), which is Betancourt's (2016) ratio of sums;
    NaN for chains with fewer than 2 draws or a non-finite energy.
    """
    e = np.atleast_2d(np.asarray(energy, dtype=np.float64))
    out = np.full(e.shape[0], np.nan)
    if e.shape[1] < 2:
        return out
    with np.errstate(divide="ignore", invalid="ignore"):
        out[:] = np.square(np.diff(e, axis=1)).mean(axis=1) / np.var(e, axis=1, ddof=1)
    return out


def chain_ess(series: Any) -> np.ndarray:
    """ESS of each chain by itself, shape (series, chains, draws) -> (series, chains).

    Geyer's initial monotone sequence on every chain alone (the multi-chain estimator with one
    chain), capped at ``N log10 N``; a constant chain gets ``N``. NaN for fewer than 4 draws or
    non-finite draws.
    """
    x = np.asarray(series, dtype=np.float64)
    n_series, n_chains, n = x.shape
    out = np.full((n_series, n_chains), np.nan)
    if n < 4 or x.size == 0:
        return out
    flat = x.reshape(n_series * n_chains, 1, n)
    ok = np.isfinite(flat).all(axis=(1, 2))
    if not ok.any():
        return out
    rows = flat[ok]
    size = fft_size(n, max(16, n // 8))
    padded = np.zeros((rows.shape[0], 1, size))
    means = rows.mean(axis=-1)
    padded[:, :, :n] = rows - means[..., None]
    constant = (rows.max(axis=(1, 2)) - rows.min(axis=(1, 2))) < CONSTANT_RANGE
    with np.errstate(divide="ignore", invalid="ignore"):
        ess = batched_ess(padded, n, means, constant)
    result = out.reshape(-1)
    result[ok] = ess
    return result.reshape(n_series, n_chains)


def rank_scores(series: Any, folded: bool = False) -> np.ndarray:
    """Rank-normalized draws, pooled over chains: shape (series, chains, draws), same shape.

    Average ranks of ties; normal scores ``Phi^-1((r - 3/8) / (S + 1/4))`` (Blom), as in
    Vehtari et al. (2021). With ``folded``, the draws ``|x - median(x)|`` are ranked instead.
    Finite draws: one keyed sort per series serves both (:mod:`auditor.kernels.ranks`, the
    diagnostics kernel's, measured 4 times faster here than ``scipy.stats.rankdata``).
    """
    x = np.asarray(series, dtype=np.float64)
    n_series, n_chains, n = x.shape
    flat = np.ascontiguousarray(x.reshape(n_series, n_chains * n))
    size = flat.shape[1]
    if size < 2 or not np.isfinite(flat).all() or (folded and size % 2):
        if folded:  # odd pooled sizes (folded_order needs an even one), or non-finite draws
            flat = np.abs(flat - np.median(flat, axis=1, keepdims=True))
        ranks = stats.rankdata(flat, method="average", axis=1)
        return special.ndtri((ranks - 0.375) / (size + 0.25)).reshape(x.shape)
    order = np.empty(flat.shape, np.int64)
    ordered = np.empty(flat.shape)
    sort_rows(flat, order, ordered, np.empty(flat.shape, np.int64))
    out = np.empty(flat.shape)
    if folded:
        positions, values = folded_order(ordered, order)
        write_scores(out, values, positions)
    else:
        write_scores(out, ordered, order)
    return out.reshape(x.shape)


def chain_contrasts(scores: np.ndarray) -> np.ndarray:
    """Standardized differences of chain means for every pair of chains.

    For chains ``c`` and ``j`` of one series, ``(m_c - m_j) / sqrt(v / e_c + v / e_j)`` where
    ``m`` are the chain means, ``e`` the chains' own ESS (:func:`chain_ess`) and ``v`` the
    pooled variance of the series: under chains that sample one distribution, approximately
    standard normal (a two-sample z statistic for autocorrelated draws).

    Parameters
    ----------
    scores : numpy.ndarray
        Shape (series, chains, draws), e.g. from :func:`rank_scores`.

    Returns
    -------
    numpy.ndarray
        Shape (series, chains, chains), antisymmetric; NaN where undefined.
    """
    n_series, n_chains, n = scores.shape
    means = scores.mean(axis=2)
    pooled = scores.reshape(n_series, -1).var(axis=1, ddof=1)
    ess = chain_ess(scores)
    with np.errstate(divide="ignore", invalid="ignore"):
        var_mean = pooled[:, None] / ess
        diff = means[:, :, None] - means[:, None, :]
        return diff / np.sqrt(var_mean[:, :, None] + var_mean[:, None, :])


def bonferroni_z(alpha: float, tests: int) -> float:
    """Two-sided normal critical value for ``tests`` tests at family-wise level ``alpha``."""
    return float(special.ndtri(1.0 - alpha / (2.0 * max(tests, 1))))


def odd_chains(series: Any, critical: float) -> list[tuple[int, int, str, float]]:
    """Chains that differ from every other chain, by the rank-normalized chain contrasts.

    A chain is odd in a series when its standardized difference (:func:`chain_contrasts`) from
    each other chain exceeds ``critical`` in absolute value, all with one sign: in location
    (rank-normalized draws), or else in scale (rank-normalized folded draws ``|x - median|``;
    a chain odd in location is not tested for scale, which the shift would confound).

    Parameters
    ----------
    series : array_like
        Shape (series, chains, draws), finite.
    critical : float
        Critical value of ``|z|`` (e.g. :func:`bonferroni_z` over every test made).

    Returns
    -------
    list of (series, chain, kind, z)
        ``kind`` is ``"location"`` or ``"scale"``; ``z`` the contrast with the closest other
        chain, signed (positive: higher, or wider).
    """
    x = np.asarray(series, dtype=np.float64)
    n_chains = x.shape[1]
    off = ~np.eye(n_chains, dtype=bool)
    hits: list[tuple[int, int, str, float]] = []
    seen: set[tuple[int, int]] = set()
    for kind, folded in (("location", False), ("scale", True)):
        t = chain_contrasts(rank_scores(x, folded=folded))
        weakest = np.where(off, np.abs(t), np.inf).min(axis=2)
        for s, c in zip(*np.nonzero(np.isfinite(weakest) & (weakest > critical)), strict=True):
            signs = np.sign(t[s, c][off[c]])
            if (int(s), int(c)) in seen or not (signs == signs[0]).all():
                continue
            seen.add((int(s), int(c)))
            hits.append((int(s), int(c), kind, float(signs[0] * weakest[s, c])))
    return hits




def split_chain_ess(series: Any) -> np.ndarray:
    """ESS of the split chains taken one by one and summed, the smaller of bulk and folded.

    Unlike the multi-chain bulk-ESS, which chains that disagree drive down, this counts only
    each half-chain's own autocorrelation, so it says how long the run is whatever the chains'
    agreement. Draws are rank-normalized over all chains (bulk) and as ``|x - median|``
    (folded), as the rank-normalized R-hat does; each chain is split in two (the middle draw of
    an odd length dropped). Each half's ESS is estimated from that half alone, which
    overstates it when the half holds few effective draws (its own mean absorbs slow
    drifts); callers trust it only above a minimum (the R-hat rule: 100 per chain).

    Parameters
    ----------
    series : array_like
        Shape (series, chains, draws), finite.

    Returns
    -------
    numpy.ndarray
        Shape (series,) (NaN under 8 draws a chain).
    """
    x = np.asarray(series, dtype=np.float64)
    n_series, n_chains, n = x.shape
    half = n // 2
    if half < 4 or x.size == 0:
        return np.full(n_series, np.nan)
    split = np.concatenate([x[..., :half], x[..., n - half:]], axis=1)
    bulk = chain_ess(rank_scores(split)).sum(axis=1)
    folded = chain_ess(rank_scores(split, folded=True)).sum(axis=1)
    return np.fmin(bulk, folded)


def rhat_noise_bound(
    draws: int, chains: int, ess: Any, alpha: float, tests: int
) -> np.ndarray:
    """Largest rank-normalized split R-hat that chains sampling one distribution still produce.

    Short runs give R-hat above 1.01 by chance alone: at 4 chains of 100 iid draws about one
    quantity in ten does, and at 4 chains of 250 draws with lag-1 autocorrelation 0.5 one in
    three. This bound separates that noise from chains that disagree. For ``m`` split chains of
    ``n`` draws, stationary and sampling one distribution, the between-chain variance of the
    chain means is about ``W / ess_split`` times a chi-square on ``m - 1`` degrees of freedom
    over ``m - 1``, where ``ess_split = ess / m`` (the ESS carries the autocorrelation),
    so (Gelman & Rubin 1992, section 3; Vehtari et al. 2021, equations 3 and 4)::

        R-hat^2 = (n - 1) / n + B / (n W)  ~  (n - 1) / n + (m / ess) chi2_{m-1} / (m - 1)

    The bound is that expression at the ``1 - alpha / tests`` quantile, so that among
    ``tests`` quantities of a healthy run the family-wise chance of one above it is about
    ``alpha`` (an F quantile on ``m - 1`` and ``ess - m`` degrees of freedom rather than the
    chi-square, since ``W`` is estimated too; tests/test_sampling_causes.py measures the rate
    on simulated stationary chains).

    Parameters
    ----------
    draws : int
        Draws per chain (before splitting).
    chains : int
        Chains (before splitting); the rank-normalized R-hat splits each in two.
    ess : array_like
        ESS of each quantity; NaN or non-positive gives NaN (no bound). Use the split chains'
        own ESS (:func:`split_chain_ess`), not the multi-chain bulk-ESS: chains stuck apart
        drive the bulk-ESS down and would widen the bound around the very disagreement it
        is meant to detect.
    alpha : float
        Family-wise chance of a healthy run exceeding the bound somewhere.
    tests : int
        Number of R-hat values judged together (quantities x 2 when bulk and folded R-hat
        both count).

    Returns
    -------
    numpy.ndarray
        One bound per quantity.
    """
    m, n = 2 * chains, draws // 2
    ess = np.asarray(ess, dtype=float)
    if m < 2 or n < 2:
        return np.full(ess.shape, np.nan)
    # An ESS estimated above the draws (antithetic chains, or noise at short lengths) would
    # narrow the bound below what independent draws give; the draws cap it.
    ess = np.where(ess > 0, np.minimum(ess, m * n), np.nan)
    # W is estimated too: F rather than chi-square, its denominator on the effective draws.
    with np.errstate(divide="ignore", invalid="ignore"):
        q = stats.f.ppf(1.0 - alpha / max(tests, 1), m - 1, np.maximum(ess - m, 1.0))
        return np.sqrt((n - 1) / n + q * m / ess)


def rhat_sure(
    rhat: Any, ess: Any, *, draws: int, chains: int, gross: float, alpha: float, tests: int,
    min_ess_per_chain: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Which R-hat values are surely more than chance, and the chance bound of each.

    An R-hat is sure when it exceeds ``gross``, or when the split chains hold at least
    ``min_ess_per_chain`` effective draws a chain (``ess``, from :func:`split_chain_ess`) and
    it exceeds :func:`rhat_noise_bound`. Under that many effective draws a run is too short to
    tell chance from disagreement, and only ``gross`` decides.

    Parameters
    ----------
    rhat, ess : array_like
        R-hat and split chains' own ESS of each quantity.
    draws, chains : int
        Draws per chain and chains.
    gross : float
        R-hat above which the chains disagree whatever the run's length.
    alpha, tests : float, int
        Family-wise chance and number of tests of :func:`rhat_noise_bound`.
    min_ess_per_chain : float
        Effective draws per chain the bound needs.

    Returns
    -------
    (numpy.ndarray of bool, numpy.ndarray)
        Sure or not, and the bound (NaN where there is none), one each per quantity.
    """
    r = np.asarray(rhat, dtype=float)
    e = np.asarray(ess, dtype=float)
    bound = rhat_noise_bound(draws, chains, e, alpha, tests)
    with np.errstate(invalid="ignore"):
        long_enough = e >= min_ess_per_chain * chains
        sure = (r > gross) | (long_enough & (r > bound))
    return sure, bound
