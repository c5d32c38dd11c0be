"""The chosen model against the best model of its comparison set."""

from __future__ import annotations


def check(ctx):
    """One warning when a chosen model is clearly worse than the best."""
    limit = float(ctx.thresholds["min_difference"])
    ratio = float(ctx.thresholds["min_se_ratio"])
    comp = ctx.comparison
    if len(comp.rows) < 2:
        return
    best = comp.rows[0]
    for row in comp.rows[1:]:
        if not row.chosen:
            continue
        diff = -row.elpd_diff
        if diff > limit and diff > ratio * row.diff_se:
            yield ctx.finding(
                f"The chosen model `{row.analysis}` predicts {comp.label} worse than "
                f"`{best.analysis}`: elpd_loo lower by {diff:.2f}, more than {limit:g} and "
                f"{diff / row.diff_se:.1f} standard errors of the difference "
                f"({row.diff_se:.2f}).",
                evidence={"data": comp.label, "chosen": row.analysis, "best": best.analysis,
                          "elpd_diff": row.elpd_diff, "diff_se": row.diff_se},
                analysis=row.analysis,
            )
