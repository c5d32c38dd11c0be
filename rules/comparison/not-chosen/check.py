"""A comparison set in which no analysis is marked chosen."""

from __future__ import annotations


def check(ctx):
    """One note per comparison set of two or more models without a chosen one."""
    comp = ctx.comparison
    if len(comp.rows) < 2 or any(row.chosen for row in comp.rows):
        return
    names = ", ".join(f"`{row.analysis}`" for row in comp.rows)
    yield ctx.finding(
        f"{len(comp.rows)} analyses model {comp.label} ({names}) and none is marked "
        "`chosen = true`: the comparison is shown, but no claim about the reported model "
        "can be checked.",
        evidence={"data": comp.label, "models": [row.analysis for row in comp.rows]},
    )
