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

    The circular autocovariance of a zero-padded series of ``length`` values is exact for lags
    up to ``size - length``; ``lags=None`` asks for all of them (padding to ``2 length``, as
    arviz-stats does).

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


def summed_autocovariance(
    padded: np.ndarray, n: int, spectrum: np.ndarray | None = None
) -> np.ndarray:
    """Autocovariance sums over chains, ``sum_c sum_t x[c, t] x[c, t + k]``, for exact lags.

    The FFT runs on a buffer that is already zero-padded (and writes into a reusable
    ``spectrum``), because letting the FFT pad and allocate costs more than the transform
    itself here. The inverse FFT is linear, so the chains' power spectra are summed first and
    one inverse transform per series replaces one per chain.

    Parameters
    ----------
    padded : numpy.ndarray
        Shape (rows, chains, size): centered chains in ``[..., :n]``, zeros after.
    n : int
        Draws per chain.
    spectrum : numpy.ndarray, optional
        complex128 buffer of shape (rows, chains, size // 2 + 1).

    Returns
    -------
    numpy.ndarray
        Shape (rows, size - n + 1): lags ``0 .. size - n``.
    """
    size = padded.shape[-1]
    spectrum = np.fft.rfft(padded, axis=-1, out=spectrum)
    # |F|^2 in place on the float view (re^2, im^2), summed over chains, then re^2 + im^2 by
    # two strided slices (a reduction over a length-2 axis is several times slower).
    flat = spectrum.view(np.float64)
    np.multiply(flat, flat, out=flat)
    both = flat.sum(axis=-2)
    power = both[:, 0::2] + both[:, 1::2]
    acov = scipy.fft.irfft(power, n=size, axis=-1, workers=-1)
    return acov[:, : size - n + 1]


def geyer_ess(
    acov_sum: np.ndarray, chain_means: np.ndarray, n: int
) -> tuple[np.ndarray, np.ndarray]:
    """ESS from chain-summed autocovariances by Geyer's initial monotone sequence.

    Reproduces arviz-stats' loop in closed form: pair sums ``P_k = rho_2k + rho_2k+1`` (with
    ``rho_0 = 1``), truncation at the first non-positive pair ``K``, running minimum of the
    pairs before it, plus the even term of pair ``K`` when it is positive.

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
        where the truncation lies beyond the lags supplied, so the row must be redone with
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
    k_have = min(k_max, (n_lags - 2) // 2)  # pairs whose two lags are both exact here
    rho1 = rho[:, 1] if n_lags > 1 else np.full(rows, np.nan)
    pairs = np.empty((rows, k_have + 1))
    pairs[:, 0] = 1.0 + rho1  # rho_0 is 1 by definition, not estimated
    evens = np.ones((rows, k_have + 1))
    if k_have:
        evens[:, 1:] = rho[:, 2 : 2 * k_have + 1 : 2]
        pairs[:, 1:] = evens[:, 1:] + rho[:, 3 : 2 * k_have + 2 : 2]
    # Truncation K: the first pair after pair 0 whose sum is not positive (NaN stops too).
    stop = ~(pairs > 0)
    stop[:, 0] = False
    trunc = np.where(stop.any(axis=1), stop.argmax(axis=1), k_max)
    trunc[~(pairs[:, 0] > 0)] = 0
    settled = trunc <= k_have
    trunc = np.minimum(trunc, k_have)
    # Initial monotone sequence: each pair sum no larger than the one before.
    monotone = np.minimum.accumulate(pairs, axis=1)
    used = np.arange(k_have + 1)[None, :] < trunc[:, None]
    head = np.where(used, monotone, 0.0).sum(axis=1)
    even_k = evens[np.arange(rows), trunc]
    pair_k = pairs[np.arange(rows), trunc]
    # Pair K's even term stays when positive (or when the pair sum is exactly 0, kept then).
    tail = np.where(trunc == 0, 1.0, np.where((even_k > 0) | (pair_k >= 0), even_k, 0.0))
    tau = -1.0 + 2.0 * head + tail
    floor = 1.0 / np.log10(total)
    tau = np.where(tau > floor, tau, np.where(np.isnan(tau), np.nan, floor))
    ess = total / tau
    ess[np.isnan(rho1)] = np.nan
    return ess, settled


def batched_ess(
    padded: np.ndarray,
    n: int,
    chain_means: np.ndarray,
    constant: np.ndarray,
    spectrum: np.ndarray | None = None,
) -> np.ndarray:
    """ESS of every series of a batch: one FFT pass, then the rows that need more lags.

    Padding only to ``size`` (the buffer's last axis) gives the lags up to ``size - n``, which
    settle well-mixing series; series whose Geyer truncation lies further out are redone with
    full padding, so the result never depends on ``size``.

    Parameters
    ----------
    padded : numpy.ndarray
        Shape (series, chains, size): chains centered on their means in ``[..., :n]``, zeros
        after.
    n : int
        Draws per chain.
    chain_means : numpy.ndarray
        Shape (series, chains).
    constant : numpy.ndarray
        Boolean (series,): series whose range is below :data:`CONSTANT_RANGE`; they get
        ``chains * n`` (uncapped: arviz-stats returns the sample size for them).
    spectrum : numpy.ndarray, optional
        Reusable complex128 buffer of shape (series, chains, size // 2 + 1).

    Returns
    -------
    numpy.ndarray
        Shape (series,).
    """
    n_series, n_chains, size = padded.shape
    ess, settled = geyer_ess(summed_autocovariance(padded, n, spectrum), chain_means, n)
    redo = np.flatnonzero(~settled & ~constant)
    full = fft_size(n)
    # In slices no larger than the first pass, so memory stays within its bound.
    step = max(1, (n_series * size) // full)
    for start in range(0, redo.size, step):
        rows = redo[start : start + step]
        wide = np.zeros((rows.size, n_chains, full))
        wide[:, :, :n] = padded[rows, :, :n]
        ess[rows], _ = geyer_ess(summed_autocovariance(wide, n), chain_means[rows], n)
    ess[constant] = n_chains * n
    return ess
