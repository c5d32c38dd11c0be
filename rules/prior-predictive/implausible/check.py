"""Prior predictive draws against the declared plausible range, or the outcome's support."""

from __future__ import annotations

import numpy as np

from auditor.findings import Severity
from auditor.predictive_checks import draws_of, observed_values, outcome_kind, share_in_range
from auditor.rulekit import likelihood_of, observed_location, observed_support


def _share(mask: np.ndarray) -> float:
    return float(np.mean(mask)) if mask.size else float("nan")


def check(ctx):
    """Per observed variable with prior predictive draws: the share inside the declared
    range (warning), or without a range the shares outside the support and far beyond
    the observed scale (note)."""
    spec = ctx.analysis.spec
    declared = spec.plausible_range if spec is not None else None
    for p in ctx.analysis.pairings:
        draws = draws_of(ctx.analysis, p.prior_predictive, "prior_predictive")
        if draws is None or draws.size == 0:
            continue
        flat = draws.reshape(-1)
        finite = flat[np.isfinite(flat)]
        q01, q99 = (np.quantile(finite, [0.01, 0.99]) if finite.size else (np.nan, np.nan))
        where = observed_location(ctx, p.observed)
        if declared is not None:
            low, high = declared
            inside = share_in_range(flat, low, high)
            if inside > float(ctx.thresholds["min_share_inside"]):
                continue
            yield ctx.finding(
                f"Only {100 * inside:.1f}% of the prior predictive draws of `{p.observed}` lie in "
                f"the declared plausible range [{low:g}, {high:g}]; 98% of them lie between "
                f"{q01:.3g} and {q99:.3g}: the priors imply mostly implausible data.",
                evidence={"observed": p.observed, "share_inside": round(inside, 4),
                          "q01": float(q01), "q99": float(q99), "range": [low, high],
                          "min_share_inside": float(ctx.thresholds["min_share_inside"]),
                          "draws": int(flat.size)},
                quantity=p.observed, location=where)
            continue
        y = observed_values(ctx.analysis, p.observed)
        dist = likelihood_of(ctx, p.observed)
        kind = outcome_kind(y if y is not None else finite, dist.family if dist else None)
        support = observed_support(ctx, p.observed, kind)
        outside = _share(support.outside(flat))
        extreme = float("nan")
        scale = None
        if y is not None and np.isfinite(y).any():
            scale = float(np.nanmax(np.abs(y))) * float(ctx.thresholds["extreme_multiple"])
            if scale > 0:
                extreme = _share(~np.isfinite(flat) | (np.abs(flat) > scale))
        bad_support = outside > float(ctx.thresholds["max_share_outside_support"])
        bad_scale = np.isfinite(extreme) and extreme > float(ctx.thresholds["max_share_extreme"])
        if not (bad_support or bad_scale):
            continue
        parts = []
        if bad_support:
            parts.append(f"{100 * outside:.1f}% lie outside what `{p.observed}` can be "
                         f"({support.describe()})")
        if bad_scale:
            parts.append(f"{100 * extreme:.1f}% lie beyond {scale:.3g} "
                         f"({float(ctx.thresholds['extreme_multiple']):g} times the largest "
                         "observed magnitude)")
        yield ctx.finding(
            f"Of the prior predictive draws of `{p.observed}`, " + " and ".join(parts)
            + f" (98% between {q01:.3g} and {q99:.3g}); declare plausible_range for "
            "the outcome to check the priors against what you know.",
            evidence={"observed": p.observed, "share_outside_support": round(outside, 4),
                      "share_extreme": None if not np.isfinite(extreme) else round(extreme, 4),
                      "support": support.describe(), "q01": float(q01), "q99": float(q99),
                      "draws": int(flat.size)},
            quantity=p.observed, location=where, severity=ctx.pick_severity(Severity.NOTE))
