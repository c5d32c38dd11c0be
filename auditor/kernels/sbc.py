"""Simulation-based calibration: uniformity tests of the ranks of the simulated truths.

Method, under its published name: simulation-based calibration (SBC) of Talts, Betancourt,
Simpson, Vehtari & Gelman (2018), "Validating Bayesian inference algorithms with
simulation-based calibration", arXiv:1804.06788, and Modrák, Moon, Kim, Säilynoja, Gelman &
Vehtari (2023), "Simulation-based calibration checking for Bayesian computation: the choice of
test quantities shapes sensitivity", Bayesian Analysis (arXiv:2211.02383). Each simulation draws
a parameter value from the prior, data from the model, and ``M`` posterior draws given the
data; the rank of the true value among the draws (the number of draws below it, ``0..M``) is
uniform on ``{0, ..., M}`` when the inference is calibrated.

Two tests per parameter:

- Pearson's chi-square test of the rank histogram (Talts et al. 2018, section 4.1). Bins group
  consecutive ranks: rank ``r`` of a simulation with ``M`` draws falls in bin
  ``floor(B r / (M + 1))``, so the bins are of equal width when ``B`` divides ``M + 1`` and
  otherwise differ by one rank; the expected counts are computed exactly for the widths and
  for every simulation's ``M`` (which may differ between simulations). ``B`` is the largest
  number of bins up to ``max_bins`` (20, Talts et al.'s choice) that keeps every expected count
  at 5 or more (common practice for the chi-square approximation), preferring a divisor of
  ``M + 1`` within a factor of 2 of it.
- The ECDF of the fractional ranks against simultaneous confidence bands (Säilynoja, Bürkner &
  Vehtari 2022, "Graphical test for discrete uniformity and its applications in goodness-of-fit
  evaluation and multiple sample comparison", Statistics and Computing 32:32; the plot
  Modrák et al. 2023 recommend). Ranks are discrete, the bands are for a continuous uniform: the
  ranks are made continuous as ``u = (r + v) / (M + 1)`` with ``v`` uniform on ``(0, 1)`` from a
  fixed seed, which is exactly uniform on ``(0, 1)`` when ``r`` is uniform on ``{0..M}``. The
  bands come from arviz-stats (``arviz_stats.ecdf_utils.ecdf_pit``, their simulation method, as
  :func:`auditor.predictive_checks.pit_band_test` uses it); with a fixed seed they, and the
  verdict, are the same on every run. A p-value of the same test statistic (the smallest
  two-sided pointwise binomial tail probability of the ECDF, Säilynoja et al. 2022, section 2)
  is simulated with a fixed seed as well; the statistic is discrete, so the p-value is
  slightly conservative (seen: 3.6% rejections at alpha 0.05 over 2000 uniform samples).

arviz-stats 1.3's band is slightly liberal: in its simulation a sample whose ECDF count is 0
at some point gets a ``nan`` upper tail probability there, and Python's ``min`` then ignores
the upper tail, so the simulated statistic is less extreme than it should be and the band a
little narrow. Seen with the fixed seed used here, on 4000 uniform samples at a nominal 5%: 6.5%
outside the band for 100 values, 5.3% for 200 and for 1000. The p-value here counts both tails
(4.6% outside its corresponding band for 200 and 1000 values), so near the band's edge the two
can disagree.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special, stats

__all__ = [
    "MAX_BINS",
    "MAX_DRAWS",
    "MIN_EXPECTED",
    "SbcTest",
    "choose_bins",
    "expected_counts",
    "fractional_ranks",
    "sbc_rank_tests",
]

#: Most bins of the rank histogram (Talts et al. 2018 use 20).
MAX_BINS = 20
#: Smallest expected count per bin for the chi-square approximation (common practice).
MIN_EXPECTED = 5.0
#: Most posterior draws per simulation accepted (far beyond any sampler's output; keeps the
#: integer arithmetic of the bins exact).
MAX_DRAWS = 10**12
#: Seeds of the jitter of the ranks, of the band simulation and of the ECDF p-value.
JITTER_SEED = 20180413
BAND_SEED = 20220316
P_VALUE_SEED = 20231101


def _draws_per_sim(n_draws: int | ArrayLike, n_sims: int) -> NDArray[np.int64]:
    m = np.asarray(n_draws)
    if m.ndim == 0:
        m = np.full(n_sims, int(m))
    if m.shape != (n_sims,):
        raise ValueError(f"n_draws must be a number or have shape ({n_sims},), not {m.shape}")
    if m.dtype.kind == "f":
        if not np.all(np.isfinite(m)) or np.any(m != np.round(m)):
            raise ValueError("n_draws must be whole numbers")
    m = m.astype(np.int64)
    if np.any(m < 1) or np.any(m > MAX_DRAWS):
        raise ValueError(f"n_draws must be between 1 and {MAX_DRAWS}")
    return m


def _bin_counts(m: int, bins: int) -> NDArray[np.int64]:
    """How many of the ranks ``0..m`` fall in each bin ``floor(bins r / (m + 1))``."""
    # r is in bin b iff b (m + 1) <= bins r < (b + 1) (m + 1): r from ceil(b (m + 1) / bins).
    starts = np.array([-((-k * (m + 1)) // bins) for k in range(bins + 1)], dtype=np.int64)
    return np.diff(starts)


def expected_counts(n_draws: ArrayLike, bins: int) -> NDArray[np.float64]:
    """Expected rank counts per bin under uniformity, summed over simulations.

    Parameters
    ----------
    n_draws : array_like of int, shape (simulations,)
        Posterior draws ``M`` of each simulation (ranks ``0..M``).
    bins : int
    """
    m = np.asarray(n_draws, dtype=np.int64).ravel()
    values, counts = np.unique(m, return_counts=True)
    out = np.zeros(bins)
    for mv, c in zip(values, counts, strict=True):
        out += c * _bin_counts(int(mv), bins) / (int(mv) + 1)
    return out


def choose_bins(n_draws: ArrayLike, max_bins: int = MAX_BINS,
                min_expected: float = MIN_EXPECTED) -> int:
    """Number of bins of the chi-square test: 0 when even 2 bins expect fewer than
    ``min_expected`` ranks (too few simulations for the test).

    The largest ``B <= min(max_bins, M + 1)`` with every expected count at least
    ``min_expected``; when all simulations have the same ``M``, a divisor of ``M + 1`` (equal
    bins) is preferred if one lies in ``[ceil(B / 2), B]``.
    """
    m = np.asarray(n_draws, dtype=np.int64).ravel()
    if m.size == 0:
        return 0
    top = int(min(max_bins, int(m.min()) + 1))
    feasible = [b for b in range(2, top + 1) if expected_counts(m, b).min() >= min_expected]
    if not feasible:
        return 0
    best = max(feasible)
    if np.all(m == m[0]):
        size = int(m[0]) + 1
        for b in range(best, math.ceil(best / 2) - 1, -1):
            if size % b == 0 and b in feasible:
                return b
    return best


def fractional_ranks(ranks: ArrayLike, n_draws: int | ArrayLike,
                     seed: int = JITTER_SEED) -> NDArray[np.float64]:
    """Ranks made continuous: ``(r + v) / (M + 1)``, ``v ~ Uniform(0, 1)`` from ``seed``.

    Uniform on ``(0, 1)`` exactly when ``r`` is uniform on ``{0..M}``. Column ``j`` uses the
    stream ``default_rng([seed, j])``, so adding a parameter does not change the others.
    """
    r = np.asarray(ranks, dtype=np.float64)
    if r.ndim == 1:
        r = r[:, None]
    m = _draws_per_sim(n_draws, r.shape[0]).astype(np.float64)
    out = np.empty_like(r)
    for j in range(r.shape[1]):
        v = np.random.default_rng([seed, j]).uniform(size=r.shape[0])
        out[:, j] = (r[:, j] + v) / (m + 1.0)
    return out


@lru_cache(maxsize=32)
def _band(n: int, prob: float, n_simulations: int, seed: int
          ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Evaluation points and simultaneous band of the ECDF of ``n`` uniform values.

    arviz-stats' ``ecdf_pit``; the band depends only on ``n``, so it is computed once and
    reused for every parameter (the values passed to it only shape its ECDF, not its band).
    """
    from arviz_stats.ecdf_utils import ecdf_pit

    x, _, lower, upper = ecdf_pit(np.linspace(0.0, 1.0, n), prob, n_simulations,
                                  rng=np.random.default_rng(seed))
    return (np.asarray(x, dtype=np.float64), np.asarray(lower, dtype=np.float64),
            np.asarray(upper, dtype=np.float64))


def _tail_statistic(counts: NDArray[np.int64], n: int, z: NDArray[np.float64]
                    ) -> NDArray[np.float64]:
    """Smallest two-sided pointwise tail probability of ECDF counts ``counts`` (rows) at ``z``.

    ``2 min(P(K <= k), P(K >= k))`` with ``K ~ Binomial(n, z)``, minimised over the points;
    arviz-stats' ``simulate_confidence_bands`` uses the same tails (its ``gamma`` is one minus
    this, and
    lets a count of 0 make the upper tail undefined where here it is 1).
    """
    lower = special.bdtr(counts, n, z).min(axis=-1)
    with np.errstate(invalid="ignore"):
        # P(K >= 0) = 1 (scipy's bdtr(-1, ...) is nan).
        upper = np.where(counts > 0, 1.0 - special.bdtr(counts - 1, n, z), 1.0).min(axis=-1)
    return 2.0 * np.minimum(lower, upper)


@lru_cache(maxsize=32)
def _null_statistics(n: int, n_simulations: int, seed: int) -> NDArray[np.float64]:
    """The tail statistic of ``n_simulations`` samples of ``n`` uniform values, sorted."""
    rng = np.random.default_rng(seed)
    z = np.arange(1, n) / n
    out = np.empty(n_simulations)
    step = max(1, 2**22 // max(n, 1))
    for s0 in range(0, n_simulations, step):
        s1 = min(n_simulations, s0 + step)
        u = rng.uniform(size=(s1 - s0, n))
        idx = np.minimum((u * n).astype(np.int64), n - 1)
        idx += (np.arange(s1 - s0) * n)[:, None]
        hist = np.bincount(idx.ravel(), minlength=(s1 - s0) * n).reshape(s1 - s0, n)
        counts = np.cumsum(hist, axis=1)[:, :-1]  # values <= j / n for j = 1..n-1
        out[s0:s1] = _tail_statistic(counts, n, z)
    return np.sort(out)


@dataclass(frozen=True)
class SbcTest:
    """Both uniformity tests of one parameter's ranks.

    ``bins == 0`` (and ``chi2``, ``chi2_p`` ``nan``) when there are too few simulations for
    5 expected ranks in each of 2 bins. ``x``, ``ecdf``, ``lower``, ``upper``: the ECDF of the
    fractional ranks and its simultaneous band at the evaluation points (0 and 1 included);
    ``outside`` points of ``x`` lie outside the band, by at most ``largest_gap``.
    """

    parameter: str
    n_simulations: int
    alpha: float
    bins: int
    observed: NDArray[np.int64]
    expected: NDArray[np.float64]
    chi2: float
    chi2_p: float
    x: NDArray[np.float64]
    ecdf: NDArray[np.float64]
    lower: NDArray[np.float64]
    upper: NDArray[np.float64]
    outside: int
    largest_gap: float
    ecdf_p: float

    @property
    def chi2_rejects(self) -> bool:
        """The chi-square test rejects uniformity at ``alpha``."""
        return bool(self.bins) and self.chi2_p < self.alpha

    @property
    def band_rejects(self) -> bool:
        """The ECDF leaves its simultaneous ``1 - alpha`` band somewhere."""
        return self.outside > 0

    def ecdf_difference(self) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """Data of the ECDF difference plot: ``x``, ECDF minus ``x``, band minus ``x``."""
        return self.x, self.ecdf - self.x, self.lower - self.x, self.upper - self.x


def sbc_rank_tests(
    ranks: ArrayLike,
    n_draws: int | ArrayLike,
    *,
    parameters: Sequence[str] | None = None,
    alpha: float = 0.05,
    max_bins: int = MAX_BINS,
    min_expected: float = MIN_EXPECTED,
    n_simulations: int = 1000,
    seed: int = JITTER_SEED,
) -> list[SbcTest]:
    """Chi-square and ECDF-band tests of uniformity of SBC ranks, per parameter.

    Parameters
    ----------
    ranks : array_like of int, shape (simulations, parameters) or (simulations,)
        Rank of each simulated true value among its posterior draws, ``0..M``.
    n_draws : int or array_like of int, shape (simulations,)
        Posterior draws ``M`` per simulation.
    parameters : sequence of str, optional
        Names for the results (default ``"0"``, ``"1"``, ...).
    alpha : float
        Level of both tests; the band is the simultaneous ``1 - alpha`` band.
    max_bins, min_expected
        See :func:`choose_bins`.
    n_simulations : int
        Simulations of the band (arviz-stats' ``ecdf_pit``) and of the ECDF p-value.
    seed : int
        Seed of the jitter of the ranks (:func:`fractional_ranks`).

    Returns
    -------
    list of SbcTest
        One per parameter, in column order.

    Raises
    ------
    ValueError
        When ranks are not whole numbers in ``0..M`` or shapes disagree (the reader,
        :func:`auditor.loaders.sbc_ranks.read_sbc_ranks`, reports bad rows instead).
    """
    r = np.asarray(ranks)
    if r.ndim == 1:
        r = r[:, None]
    if r.ndim != 2 or r.shape[0] < 2:
        raise ValueError("ranks must have shape (simulations, parameters), 2 simulations or more")
    rf = r.astype(np.float64)
    if not np.all(np.isfinite(rf)) or np.any(rf != np.round(rf)):
        raise ValueError("ranks must be whole numbers")
    n_sims, n_par = r.shape
    m = _draws_per_sim(n_draws, n_sims)
    ri = rf.astype(np.int64)
    if np.any(ri < 0) or np.any(ri > m[:, None]):
        raise ValueError("ranks must lie in 0..n_draws")
    names = [str(p) for p in (parameters if parameters is not None else range(n_par))]
    if len(names) != n_par:
        raise ValueError(f"{len(names)} parameter names for {n_par} columns")

    bins = choose_bins(m, max_bins, min_expected)
    expected = expected_counts(m, bins) if bins else np.zeros(0)
    u = fractional_ranks(ri, m, seed)
    x, lower, upper = _band(n_sims, 1.0 - alpha, n_simulations, BAND_SEED)
    null = _null_statistics(n_sims, n_simulations, P_VALUE_SEED)
    inner = x[1:-1]
    out: list[SbcTest] = []
    for j, name in enumerate(names):
        if bins:
            idx = (bins * ri[:, j]) // (m + 1)
            observed = np.bincount(idx, minlength=bins).astype(np.int64)
            chi2 = float(np.sum((observed - expected) ** 2 / expected))
            chi2_p = float(stats.chi2.sf(chi2, bins - 1))
        else:
            observed, chi2, chi2_p = np.zeros(0, dtype=np.int64), math.nan, math.nan
        sorted_u = np.sort(u[:, j])
        counts = np.searchsorted(sorted_u, inner, side="right")
        ecdf = np.concatenate(([0.0], counts / n_sims, [1.0]))
        gap = np.maximum(np.maximum(ecdf - upper, 0.0), np.maximum(lower - ecdf, 0.0))
        stat = float(_tail_statistic(counts[None, :], n_sims, inner)[0])
        # Share of uniform samples at least as extreme (a statistic at most as large).
        ecdf_p = float((np.searchsorted(null, stat, side="right") + 1) / (null.size + 1))
        out.append(SbcTest(
            parameter=name, n_simulations=n_sims, alpha=alpha, bins=bins, observed=observed,
            expected=expected, chi2=chi2, chi2_p=chi2_p, x=x, ecdf=ecdf, lower=lower,
            upper=upper, outside=int(np.sum(gap > 0)), largest_gap=float(gap.max()),
            ecdf_p=ecdf_p,
        ))
    return out
