"""PSIS-weighted LOO-PIT values against simultaneous ECDF bands for uniformity."""

from __future__ import annotations

import zlib

import numpy as np

from auditor.kernels.psis import k_threshold
from auditor.predictive_checks import (
    BINARY,
    COUNT,
    draws_of,
    loo_pit,
    observed_values,
    outcome_kind,
    pit_band_test,
    psis_log_weights,
)
from auditor.rulekit import likelihood_of, observed_location


def tests(ctx):
    """(pairing, PIT values, band test, share of high Pareto k) per observed variable."""
    for p in ctx.analysis.pairings:
        y = observed_values(ctx.analysis, p.observed)
        rep = draws_of(ctx.analysis, p.posterior_predictive, "posterior_predictive")
        ll = draws_of(ctx.analysis, p.log_likelihood, "log_likelihood")
        if y is None or rep is None or ll is None:
            continue
        if not (rep.shape == ll.shape and rep.shape[1] == y.size):
            continue
        if y.size < int(ctx.thresholds["min_observations"]) or not np.all(np.isfinite(ll)):
            continue
        dist = likelihood_of(ctx, p.observed)
        kind = outcome_kind(y, dist.family if dist else None)
        discrete = kind in (BINARY, COUNT) or bool(np.all(rep == np.round(rep)))
        r_eff = ctx.loo.r_eff if ctx.loo is not None else 1.0
        log_w, k = psis_log_weights(ll, max(ctx.analysis.n_chains, 1), r_eff)
        # A fixed seed per analysis and variable: the randomized PIT of discrete data,
        # and so the verdict, is the same on every run.
        seed = zlib.crc32(f"{ctx.analysis.name}/{p.observed}".encode())
        pit = loo_pit(y, rep, log_w, discrete, np.random.default_rng(seed))
        test = pit_band_test(pit, float(ctx.thresholds["alpha"]))
        yield p, pit, test, float(np.mean(k > k_threshold(rep.shape[0]))), discrete


def check(ctx):
    """One finding per observed variable whose LOO-PIT ECDF leaves its band."""
    alpha = float(ctx.thresholds["alpha"])
    for p, pit, test, high_k, discrete in tests(ctx):
        if test.outside == 0:
            continue
        shape = _shape(pit)
        caveat = (f"; {100 * high_k:.0f}% of observations have a Pareto k above the reliable "
                  "limit, so their leave-one-out weights are unreliable" if high_k > 0 else "")
        yield ctx.finding(
            f"The LOO-PIT values of `{p.observed}` ({pit.size} observations"
            f"{', randomized for discrete data' if discrete else ''}) leave the "
            f"{100 * (1 - alpha):.0f}% simultaneous uniformity band at {test.outside} of "
            f"{test.x.size} points (largest excursion {test.largest_gap:.3f}); {shape}{caveat}.",
            evidence={"observed": p.observed, "observations": int(pit.size),
                      "points_outside": test.outside, "largest_excursion": test.largest_gap,
                      "alpha": alpha, "randomized": discrete,
                      "share_high_pareto_k": round(high_k, 4)},
            quantity=p.observed,
            location=observed_location(ctx, p.observed),
        )


def _shape(pit: np.ndarray) -> str:
    """A plain reading of where the PIT values pile up."""
    tails = float(np.mean((pit < 0.1) | (pit > 0.9)))
    middle = float(np.mean((pit > 0.3) & (pit < 0.7)))
    if tails > 0.3:
        return "too many values near 0 and 1: the predictive distributions are too narrow"
    if middle > 0.6:
        return "too many values near 0.5: the predictive distributions are too wide"
    if np.mean(pit) > 0.6:
        return "values pile up near 1: the model predicts too low"
    if np.mean(pit) < 0.4:
        return "values pile up near 0: the model predicts too high"
    return "the values are not uniform"
