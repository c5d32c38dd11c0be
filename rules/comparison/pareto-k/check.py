"""Observations whose Pareto k is above the sample size dependent threshold."""

from __future__ import annotations

import numpy as np

from auditor.rulekit import observed_location


def flagged(ctx):
    """(variable LOO, indices of high-k observations) per observed variable."""
    if ctx.loo is None:
        return
    for v in ctx.loo.variables:
        k = v.loo.pareto_k
        bad = np.flatnonzero(~(k <= v.loo.k_threshold))  # NaN/inf (no fit) count as bad
        if bad.size:
            yield v, bad


def check(ctx):
    """One finding per observed variable with high-k observations, listing the worst."""
    limit = int(ctx.thresholds["max_listed"])
    for v, bad in flagged(ctx):
        k = v.loo.pareto_k
        order = bad[np.argsort(-np.nan_to_num(k[bad], nan=np.inf))][:limit]
        listed = []
        for i in order:
            value = f" (observed {v.y[i]:.4g})" if v.y is not None else ""
            listed.append(f"#{i + 1}{value}: k = {k[i]:.2f}")
        more = f", and {bad.size - order.size} more" if bad.size > order.size else ""
        yield ctx.finding(
            f"{bad.size} of {k.size} observations of `{v.observed}` have a Pareto k above "
            f"{v.loo.k_threshold:.2f} (for {v.loo.n_samples} draws): " + "; ".join(listed)
            + more + ". Their leave-one-out terms, and elpd_loo, are unreliable.",
            evidence={"observed": v.observed, "high_k": int(bad.size),
                      "observations": int(k.size), "k_threshold": v.loo.k_threshold,
                      "max_k": float(np.nanmax(k)) if np.isfinite(k).any() else None,
                      "worst": [int(i) + 1 for i in order]},
            quantity=v.observed,
            location=observed_location(ctx, v.observed),
        )
