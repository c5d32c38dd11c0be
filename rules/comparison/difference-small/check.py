"""Pairs of models whose elpd_loo difference is small or within its uncertainty."""

from __future__ import annotations


def small(row, limit: float, ratio: float) -> bool:
    """Whether a row's difference to the best is within either limit."""
    return abs(row.elpd_diff) < limit or abs(row.elpd_diff) < ratio * row.diff_se


def check(ctx):
    """One note per model that the best one does not clearly beat."""
    limit = float(ctx.thresholds["min_difference"])
    ratio = float(ctx.thresholds["min_se_ratio"])
    comp = ctx.comparison
    if len(comp.rows) < 2:
        return
    best = comp.rows[0]
    for row in comp.rows[1:]:
        if not small(row, limit, ratio):
            continue
        why = (f"less than {limit:g}" if abs(row.elpd_diff) < limit
               else f"within {ratio:g} standard errors")
        yield ctx.finding(
            f"`{row.analysis}` and `{best.analysis}` (the best of {len(comp.rows)} models of "
            f"{comp.label}) differ in elpd_loo by {-row.elpd_diff:.2f}, with a standard error "
            f"of {row.diff_se:.2f} for the difference: {why}, so they predict about equally "
            "well and leave-one-out cross-validation favours neither.",
            evidence={"data": comp.label, "model": row.analysis, "best": best.analysis,
                      "elpd_diff": row.elpd_diff, "diff_se": row.diff_se,
                      "min_difference": limit, "min_se_ratio": ratio},
            analysis=row.analysis,
        )
