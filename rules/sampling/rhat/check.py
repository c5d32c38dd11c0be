"""Flag variables whose rank-normalized R-hat exceeds the threshold."""

from __future__ import annotations

from collections import defaultdict

from auditor.rulekit import many_short_chains


def check(ctx):
    """One finding per variable with an R-hat above ``max_rhat`` (worst element named).

    Nothing for many short chains, where sampling.nested-rhat replaces this rule.
    """
    limit = float(ctx.thresholds["max_rhat"])
    min_chains = int(ctx.thresholds["nested_min_chains"])
    if min_chains > 0 and many_short_chains(ctx, min_chains,
                                            int(ctx.thresholds["nested_max_draws"])):
        return  # many short chains: sampling.nested-rhat judges convergence
    by_var = defaultdict(list)
    for row in ctx.diagnostics.rows:
        if row["constant"] or row["rhat"] is None:
            continue  # undefined R-hat is sampling.constant's business
        by_var[row["variable"]].append(row)
    for var, rows in by_var.items():
        bad = [r for r in rows if r["rhat"] > limit]
        if not bad:
            continue
        worst = max(bad, key=lambda r: r["rhat"])
        share = f"{len(bad)} of {len(rows)} elements of {var}" if len(rows) > 1 else var
        yield ctx.finding(
            f"R-hat of {share} above {limit:g}; worst {worst['quantity']} = {worst['rhat']:.3f}",
            evidence={
                "rhat": round(worst["rhat"], 6),
                "threshold": limit,
                "flagged": len(bad),
                "elements": len(rows),
                "chains": ctx.analysis.n_chains,
            },
            quantity=worst["quantity"],
        )
