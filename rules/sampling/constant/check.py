"""Report quantities whose draws are all the same value."""

from __future__ import annotations

from collections import defaultdict


def check(ctx):
    """One note per variable with constant elements."""
    by_var = defaultdict(list)
    totals = defaultdict(int)
    for row in ctx.diagnostics.rows:
        totals[row["variable"]] += 1
        if row["constant"]:
            by_var[row["variable"]].append(row)
    for var, rows in by_var.items():
        n = totals[var]
        what = f"{len(rows)} of {n} elements of {var} are" if n > 1 else f"{var} is"
        yield ctx.finding(
            f"{what} constant across all draws (value {rows[0]['mean']:g}); "
            "R-hat and ESS are undefined",
            evidence={"constant": len(rows), "elements": n, "value": rows[0]["mean"]},
            quantity=rows[0]["quantity"],
        )
