"""Effective sample size of many series at once from one batched FFT.

Autocovariances by FFT with zero padding and Geyer's initial monotone sequence estimator
(Geyer 1992, "Practical Markov chain Monte Carlo", Statistical Science 7(4)), combined over chains
as in Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021), Bayesian Analysis 16(2), eq. (10) and
the R package ``posterior``; the arithmetic follows arviz-stats' ``_ess`` step by step so that both
agree to rounding.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

#: Range below which a series counts as constant (arviz-stats: ``np.finfo(float).resolution``).
CONSTANT_RANGE = float(np.finfo(np.float64).resolution)


def fft_size(length: int, lags: int | None = None) -> int:
    """FFT length that gives exact (non-circular) autocovariances up to ``lags``.

    Circular autocovariance of a zero-padded series of ``length`` values is exact for lags up to
    ``size - length``; ``lags=None`` asks for all of them (``2 length - 1``, as arviz-stats).

    Parameters
    ----------
    length : int
        Number of draws per series.
    lags : int, optional
        Largest lag needed exactly.

    Returns
    -------
    int
    """
    want = 2 * length if lags is None else length + min(max(lags, 1), length)
    return scipy.fft.next_fast_len(want, real=True)


def summed_autocovariance(centered: np.ndarray, size: int) -> np.ndarray:
    """Autocovariances summed over chains, for lags ``0 .. size - n`` (exact ones only).

    The inverse FFT is linear, so summing the chains' power spectra first needs one inverse
    transform per series instead of one per chain.

    Parameters
    ----------
    centered : numpy.ndarray
        Shape (..., chains, n), each chain centered on its mean; any leading batch shape.
    size : int
        FFT length (``>= n``).

    Returns
    -------
    numpy.ndarray
        Shape (..., size - n + 1): ``sum_c sum_t x[c, t] x[c, t + k]`` for lag ``k``.
    """
    n = centered.shape[-1]
    spectrum = scipy.fft.rfft(centered, n=size, axis=-1, workers=-1)
    # |F|^2 in place on the float view (re^2, im^2), then one reduction over chains and re/im.
    flat = spectrum.view(np.float64)
    np.multiply(flat, flat, out=flat)
    power = flat.sum(axis=-2)
    power = power.reshape(power.shape[:-1] + (power.shape[-1] // 2, 2)).sum(axis=-1)
    del spectrum, flat
    acov = scipy.fft.irfft(power, n=size, axis=-1, workers=-1)
    return acov[..., : size - n + 1]


def geyer_ess(
    acov_sum: np.ndarray, chain_means: np.ndarray, n: int
) -> tuple[np.ndarray, np.ndarray]:
    """ESS from chain-summed autocovariances by Geyer's initial monotone sequence.

    Parameters
    ----------
    acov_sum : numpy.ndarray
        Shape (rows, lags + 1), output of :func:`summed_autocovariance` (lag 0 first).
    chain_means : numpy.ndarray
        Shape (rows, chains): the mean of each chain (before centering).
    n : int
        Draws per chain.

    Returns
    -------
    ess, settled : tuple of numpy.ndarray
        ``ess`` (rows,) is capped at ``S log10 S`` (``S = chains * n``); ``settled`` is False
        where the truncation lag lies beyond the lags supplied, so the row must be redone with
        more lags (its ``ess`` is then meaningless).
    """
    rows, n_lags = acov_sum.shape
    n_chains = chain_means.shape[1]
    total = n_chains * n
    mean_acov = acov_sum / (n * n_chains)
    mean_var = mean_acov[:, 0] * n / (n - 1.0)
    var_plus = mean_var * (n - 1.0) / n
    if n_chains > 1:
        var_plus = var_plus + np.var(chain_means, axis=1, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = 1.0 - (mean_var[:, None] - mean_acov) / var_plus[:, None]

    # Pairs k = 1.. that arviz-stats' loop may reach: it runs while 2k - 1 < n - 3.
    k_max = max((n - 3) // 2, 0)
    k_have = min(k_max, (n_lags - 2) // 2)  # pairs whose both lags are exact here
    rho1 = rho[:, 1] if n_lags > 1 else np.full(rows, np.nan)
    pair0 = 1.0 + rho1  # rho_0 is 1 by definition, not estimated
    pairs = np.empty((rows, k_have + 1))
    pairs[:, 0] = pair0
    evens = np.ones((rows, k_have + 1))
    if k_have:
        evens[:, 1:] = rho[:, 2 : 2 * k_have + 1 : 2]
        pairs[:, 1:] = evens[:, 1:] + rho[:, 3 : 2 * k_have + 2 : 2]
    # Truncation K: the first pair (after pair 0) whose sum is not positive, else k_max.
    stop = ~(pairs > 0)  # NaN stops too, as in the reference loop
    stop[:, 0] = False
    first = np.where(stop.any(axis=1), stop.argmax(axis=1), k_max)
    trunc = np.where(~(pair0 > 0), 0, first)
    settled = trunc <= k_have
    safe = np.minimum(trunc, k_have)
    # Initial monotone sequence: each pair sum no larger than the previous one.
    monotone = np.minimum.accumulate(pairs, axis=1)
    used = np.arange(k_have + 1)[None, :] < safe[:, None]
    with np.errstate(invalid="ignore"):
        head = np.where(used, monotone, 0.0).sum(axis=1)
    even_k = np.take_along_axis(evens, safe[:, None], axis=1)[:, 0]
    pair_k = np.take_along_axis(pairs, safe[:, None], axis=1)[:, 0]
    # The even term of the truncating pair is kept when positive (or when its pair sum is 0).
    tail = np.where(safe == 0, 1.0, np.where((even_k > 0) | (pair_k >= 0), even_k, 0.0))
    tau = -1.0 + 2.0 * head + tail
    floor = 1.0 / np.log10(total)
    tau = np.where(tau > floor, tau, np.where(np.isnan(tau), np.nan, floor))
    ess = total / tau
    ess[np.isnan(rho1)] = np.nan
    return ess, settled


def batched_ess(
    centered: np.ndarray,
    chain_means: np.ndarray,
    constant: np.ndarray,
    *,
    lags: int | None = None,
) -> np.ndarray:
    """ESS of every series of a batch: one batched FFT, then the rows needing more lags again.

    Parameters
    ----------
    centered : numpy.ndarray
        Shape (series, chains, n): chains centered on their means.
    chain_means : numpy.ndarray
        Shape (series, chains).
    constant : numpy.ndarray
        Boolean (series,): series whose range is below :data:`CONSTANT_RANGE`; they get
        ``chains * n`` (uncapped, as arviz-stats returns the sample size for them).
    lags : int, optional
        Lags computed in the first pass; ``None`` computes all. Rows whose Geyer truncation
        lies further out are recomputed with every lag, so the result does not depend on it.

    Returns
    -------
    numpy.ndarray
        Shape (series,).
    """
    n_series, n_chains, n = centered.shape
    size = fft_size(n, lags)
    ess, settled = geyer_ess(summed_autocovariance(centered, size), chain_means, n)
    redo = np.flatnonzero(~settled & ~constant)
    if redo.size:
        full = fft_size(n)
        ess[redo], _ = geyer_ess(
            summed_autocovariance(centered[redo], full), chain_means[redo], n
        )
    ess[constant] = n_chains * n
    return ess
