"""Power-scaling sensitivity of the posterior to the prior and to the likelihood.

Method, under its published name: power-scaling sensitivity analysis of Kallioinen, Paananen,
Bürkner & Vehtari (2024), "Detecting and diagnosing prior and likelihood sensitivity with
power-scaling", Statistics and Computing 34:57. One component of the posterior (the log-prior or
the log-likelihood, summed per draw) is raised to a power ``alpha`` close to 1; the draws of the
perturbed posterior are the posterior draws with importance weights ``p^(alpha - 1)``, Pareto
smoothed (PSIS: Vehtari, Simpson, Gelman, Yao & Gabry 2024, JMLR 25(72)). For each posterior
quantity the cumulative Jensen-Shannon distance (Nguyen & Vreeken 2015, "Non-parametric
Jensen-Shannon divergence", ECML PKDD) between the weighted and the unweighted draws, taken at
``alpha = 0.99`` and ``1.01`` and divided by ``|log2 alpha|``, gives a finite-difference
derivative: the sensitivity value. Values above 0.05 are the paper's signal; a prior and a
likelihood both above it suggest prior-data conflict, a prior above with a likelihood below a
strong prior or a weak likelihood.

The reference implementation is arviz-stats 1.3 (``arviz_stats.psense`` / ``psense_summary``,
built on ``power_scale_lw`` and ``power_scale_sense`` of its array layer); the numbers here equal
its numbers on the same draws (float64 arithmetic; arviz-stats keeps float32 inputs in float32).
Its choices are kept, including those that are implementation details rather than the paper's:

- the relative efficiency that sets the PSIS tail length is the tail ESS (the smaller of the
  ESS of the indicators ``x <= q05`` and ``x <= q95``) of the *component* (not of the weights),
  computed with all chains concatenated into one sequence and split in two halves, as
  arviz-stats' ``_power_scale_lw`` does on its flattened input;
- the tail length is ``floor(min(0.2 S, 3 sqrt(S / r_eff)))`` (arviz-stats' rounding; the paper
  and the ``loo`` package round up);
- the distance is the larger of the distances of ``x`` and ``-x`` (the cumulative distance is
  not symmetric under reflection).

Differences, in degenerate cases only: with fewer than 25 draws arviz-stats fits the Pareto tail
to 5 draws, here the weights are left unsmoothed (the PSIS convention of
:mod:`auditor.kernels.psis`); a constant component (a flat prior, say) makes arviz-stats raise,
here it gives uniform weights and sensitivity 0; a constant quantity gives ``nan``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from auditor.kernels.psis import ess_mean, psis_log_weights

__all__ = [
    "DEFAULT_ALPHAS",
    "DEFAULT_THRESHOLD",
    "PRIOR_DATA_CONFLICT",
    "STRONG_PRIOR",
    "Sensitivity",
    "cjs_distance",
    "diagnose",
    "power_scale_log_weights",
    "power_scaling_sensitivity",
    "psense_summary",
    "tail_r_eff",
]

#: Lower and upper power of the finite difference (Kallioinen et al. 2024, section 3.3).
DEFAULT_ALPHAS = (0.99, 1.01)
#: Sensitivity above which a component is said to matter (Kallioinen et al. 2024, section 4).
DEFAULT_THRESHOLD = 0.05
#: Diagnoses, in the words of arviz-stats' ``psense_summary`` (without its "potential").
PRIOR_DATA_CONFLICT = "prior-data conflict"
STRONG_PRIOR = "strong prior / weak likelihood"

# Working memory of the sorted draws and their weights, per block of quantities.
_BLOCK_BYTES = 32 * 2**20
_LN2 = math.log(2.0)


def _component(log_component: ArrayLike) -> NDArray[np.float64]:
    a = np.asarray(log_component, dtype=np.float64)
    if a.ndim == 1:
        a = a[None, :]
    if a.ndim != 2:
        raise ValueError(f"log_component must have shape (chains, draws), not {a.shape}")
    if a.size < 2:
        raise ValueError("power-scaling needs at least 2 draws")
    if not np.all(np.isfinite(a)):
        raise ValueError("log_component has non-finite values")
    return a


def tail_r_eff(log_component: ArrayLike) -> float:
    """Relative efficiency that sets the PSIS tail length, as arviz-stats computes it.

    The tail ESS (Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, "Rank-normalization,
    folding, and localization", Bayesian Analysis 16(2)): the smaller of the ESS of the
    indicators ``x <= q05`` and ``x <= q95`` (linear quantiles), divided by the draws used.
    As in arviz-stats' ``_power_scale_lw``, the chains are concatenated into one sequence that
    is split in two halves. A constant indicator gives the split size, not 1 (arviz-stats'
    ``_ess`` returns the size itself there, also when asked for the relative ESS).

    Parameters
    ----------
    log_component : array_like, shape (chains, draws)

    Returns
    -------
    float
        ``nan`` with fewer than 4 draws.
    """
    flat = _component(log_component).ravel()
    n = flat.size
    if n < 4:
        return math.nan
    half = n // 2
    out = math.inf
    for q in np.quantile(flat, [0.05, 0.95]):
        ind = (flat <= q).astype(np.float64)
        split = np.concatenate((ind[:half], ind[n - half:]))
        if split.max() - split.min() < np.finfo(float).resolution:
            r = float(split.size)
        else:
            r = float(ess_mean(ind.reshape(1, n, 1))[0]) / (2 * half)
        out = min(out, r)
    return out


def power_scale_log_weights(
    log_component: ArrayLike, alpha: float
) -> tuple[NDArray[np.float64], float]:
    """Pareto smoothed log importance weights of power-scaling a component by ``alpha``.

    The raw log weights are ``(alpha - 1) * log_component`` (Kallioinen et al. 2024, eq. 5);
    their right tail is Pareto smoothed (PSIS, Vehtari et al. 2024) with the tail length of
    :func:`tail_r_eff` and arviz-stats' rounding.

    Parameters
    ----------
    log_component : array_like, shape (chains, draws)
        Log-prior or log-likelihood of each draw (summed over terms or observations).
    alpha : float
        The power.

    Returns
    -------
    log_weights : ndarray, shape (chains, draws)
        Normalized (``logsumexp`` is 0).
    pareto_k : float
        Pareto k-hat of the weights (``nan`` when the tail could not be fitted, ``inf`` with
        too few draws to fit it; 0 for a constant component).
    """
    comp = _component(log_component)
    c, d = comp.shape
    raw = (alpha - 1.0) * comp
    if raw.max() == raw.min():
        return np.full((c, d), -math.log(c * d)), 0.0
    r_eff = tail_r_eff(comp)
    if not (math.isfinite(r_eff) and r_eff > 0):
        r_eff = 1e-300  # arviz-stats: S * nan > 225 is false, so the tail is floor(S / 5)
    lw, k = psis_log_weights((-raw)[:, :, None], r_eff=r_eff, tail_rounding="floor")
    return lw[:, :, 0], float(k[0])


def _as_quantities(draws: ArrayLike, n_samples: int) -> NDArray[np.float64]:
    a = np.asarray(draws, dtype=np.float64)
    if a.ndim == 2:
        a = a[:, :, None]
    if a.ndim < 2 or a.shape[0] * a.shape[1] != n_samples:
        raise ValueError(f"draws of shape {a.shape} do not match the {n_samples} weights")
    return a.reshape(n_samples, -1)


def _cjs_sorted(bw: NDArray, cdf_p: NDArray, cdf_q: NDArray) -> NDArray[np.float64]:
    """Cumulative Jensen-Shannon distance from sorted bin widths and both ECDFs (columns)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        p_int = np.einsum("ij,ij->j", np.broadcast_to(cdf_p, bw.shape), bw)
        q_int = np.einsum("ij,ij->j", cdf_q, bw)
        mid = 0.5 * (cdf_p + cdf_q)
        log_mid = np.log2(mid, out=np.zeros_like(mid), where=mid != 0)
        log_p = np.log2(cdf_p, out=np.zeros_like(cdf_p), where=cdf_p != 0)
        log_q = np.log2(cdf_q, out=np.zeros_like(cdf_q), where=cdf_q != 0)
        pq = np.einsum("ij,ij->j", bw, cdf_p * (log_p - log_mid)) + 0.5 / _LN2 * (q_int - p_int)
        qp = np.einsum("ij,ij->j", bw, cdf_q * (log_q - log_mid)) + 0.5 / _LN2 * (p_int - q_int)
        return np.sqrt((np.maximum(pq, 0.0) + np.maximum(qp, 0.0)) / (p_int + q_int))


def _cjs_many(x: NDArray[np.float64], weights: list[NDArray[np.float64]]
              ) -> list[NDArray[np.float64]]:
    """:func:`cjs_distance` of the quantities ``x`` (S, Q) for several weight vectors, each
    block of quantities sorted once for all of them."""
    s, n_q = x.shape
    outs = [np.full(n_q, np.nan) for _ in weights]
    if s < 2:
        return outs
    normalized = [w / w.sum() for w in weights]
    equal = [bool(w.max() == w.min()) for w in normalized]
    cdf_p = np.linspace(1 / s, 1 - 1 / s, s - 1)[:, None]
    step = max(1, _BLOCK_BYTES // (10 * 8 * s))
    for q0 in range(0, n_q, step):
        q1 = min(n_q, q0 + step)
        block = x[:, q0:q1]
        finite = np.isfinite(block).all(axis=0)
        order = np.argsort(block, axis=0, kind="stable")
        xs = np.take_along_axis(block, order, axis=0)
        bw = np.diff(xs, axis=0)
        varies = finite & (xs[-1] > xs[0])
        for out, w, same in zip(outs, normalized, equal, strict=True):
            if same:
                # Equal weights: the same distribution. The formula would give about
                # sqrt(rounding error), 1e-7, not 0.
                out[q0:q1] = np.where(varies, 0.0, np.nan)
                continue
            ws = w[order]
            up = _cjs_sorted(bw, cdf_p, np.cumsum(ws, axis=0)[:-1])
            # -x sorted is x sorted reversed: reversed bin widths and weights.
            down = _cjs_sorted(bw[::-1], cdf_p, np.cumsum(ws[::-1], axis=0)[:-1])
            res = np.maximum(up, down)
            res[~finite] = np.nan
            out[q0:q1] = res
    return outs


def cjs_distance(draws: ArrayLike, weights: ArrayLike) -> NDArray[np.float64]:
    """Cumulative Jensen-Shannon distance between the draws and the weighted draws.

    The symmetrised, normalised cumulative Jensen-Shannon divergence of Nguyen & Vreeken (2015)
    as Kallioinen et al. (2024) use it (bounded by 1), computed for ``x`` and for ``-x`` and the
    larger taken, as in arviz-stats' ``_power_scale_sense``.

    Parameters
    ----------
    draws : array_like
        Shape ``(chains, draws, ...)``, or ``(chains, draws)`` for one quantity; trailing axes
        are flattened into quantities.
    weights : array_like, shape (chains, draws)
        Importance weights (need not be normalized).

    Returns
    -------
    ndarray, shape (quantities,)
        ``nan`` for a quantity that is constant or has non-finite draws; exactly 0 for equal
        weights.
    """
    w = np.asarray(weights, dtype=np.float64).ravel()
    return _cjs_many(_as_quantities(draws, w.size), [w])[0]


def _sensitivities(draws: ArrayLike, components: list[NDArray[np.float64]], lo: float,
                   hi: float) -> tuple[list[NDArray[np.float64]], list[tuple[float, float]]]:
    """Sensitivity of every quantity to each component, and the Pareto k-hats of the weights."""
    weights: list[NDArray[np.float64]] = []
    ks: list[tuple[float, float]] = []
    for comp in components:
        lw_lo, k_lo = power_scale_log_weights(comp, lo)
        lw_hi, k_hi = power_scale_log_weights(comp, hi)
        weights += [np.exp(lw_lo).ravel(), np.exp(lw_hi).ravel()]
        ks.append((k_lo, k_hi))
    d = _cjs_many(_as_quantities(draws, weights[0].size), weights)
    values = [(-d[2 * i] / math.log2(lo) + d[2 * i + 1] / math.log2(hi)) / 2
              for i in range(len(components))]
    return values, ks


def power_scaling_sensitivity(
    draws: ArrayLike,
    log_component: ArrayLike,
    *,
    alphas: Sequence[float] = DEFAULT_ALPHAS,
) -> NDArray[np.float64]:
    """Power-scaling sensitivity of every quantity to one component (Kallioinen et al. 2024).

    ``(D(alpha_hi) / log2(alpha_hi) - D(alpha_lo) / log2(alpha_lo)) / 2`` with ``D`` the
    :func:`cjs_distance` between the posterior draws and the draws weighted by
    :func:`power_scale_log_weights`; arviz-stats' ``power_scale_sense``.

    Parameters
    ----------
    draws : array_like, shape (chains, draws, quantities) or (chains, draws)
        Posterior draws; more trailing axes are flattened into quantities.
    log_component : array_like, shape (chains, draws)
        Log-prior or log-likelihood per draw (summed over its terms).
    alphas : (float, float)
        Lower and upper power.

    Returns
    -------
    ndarray, shape (quantities,)
    """
    lo, hi = (float(a) for a in alphas)
    values, _ = _sensitivities(draws, [_component(log_component)], lo, hi)
    return values[0]


def diagnose(
    prior: ArrayLike, likelihood: ArrayLike, threshold: float = DEFAULT_THRESHOLD
) -> list[str]:
    """Diagnosis per quantity from prior and likelihood sensitivity, as ``psense_summary``.

    :data:`PRIOR_DATA_CONFLICT` when both are at or above ``threshold``; :data:`STRONG_PRIOR`
    when the prior is above and the likelihood below; ``""`` otherwise (also for ``nan``).
    arviz-stats' ``psense_summary`` uses the same comparisons (``>=`` for the conflict).
    """
    p = np.asarray(prior, dtype=np.float64).ravel()
    lk = np.asarray(likelihood, dtype=np.float64).ravel()
    out = []
    for a, b in zip(p, lk, strict=True):
        if a >= threshold and b >= threshold:
            out.append(PRIOR_DATA_CONFLICT)
        elif a > threshold > b:
            out.append(STRONG_PRIOR)
        else:
            out.append("")
    return out


@dataclass(frozen=True)
class Sensitivity:
    """Prior and likelihood sensitivity of each quantity, and the diagnosis.

    ``pareto_k`` holds the Pareto k-hat of the weights at the lower and the upper power, per
    component: above about 0.7 the importance weights, and so the values, are unreliable
    (Kallioinen et al. 2024, section 3.2).
    """

    prior: NDArray[np.float64]
    likelihood: NDArray[np.float64]
    diagnosis: list[str]
    pareto_k: dict[str, tuple[float, float]]
    threshold: float


def psense_summary(
    draws: ArrayLike,
    log_prior: ArrayLike,
    log_likelihood: ArrayLike,
    *,
    alphas: Sequence[float] = DEFAULT_ALPHAS,
    threshold: float = DEFAULT_THRESHOLD,
) -> Sensitivity:
    """Prior and likelihood power-scaling sensitivity with the diagnosis, per quantity.

    The computation of arviz-stats' ``psense_summary`` (Kallioinen et al. 2024) on arrays:
    ``draws`` as in :func:`power_scaling_sensitivity`, ``log_prior`` and ``log_likelihood``
    of shape (chains, draws), each summed over its terms.
    """
    lo, hi = (float(a) for a in alphas)
    (prior, likelihood), (k_prior, k_lik) = _sensitivities(
        draws, [_component(log_prior), _component(log_likelihood)], lo, hi)
    return Sensitivity(prior, likelihood, diagnose(prior, likelihood, threshold),
                       {"prior": k_prior, "likelihood": k_lik}, threshold)
