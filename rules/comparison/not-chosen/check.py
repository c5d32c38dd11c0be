"""A comparison set in which no analysis is marked chosen."""

from __future__ import annotations


def check(ctx):
    """One note per comparison set of two or more models without a chosen one."""
    comp = ctx.comparison
    models = [row.analysis for row in comp.rows] + list(comp.unscored)
    if len(models) < 2 or comp.unscored_chosen or any(row.chosen for row in comp.rows):
        return
    names = ", ".join(f"`{m}`" for m in models)
    yield ctx.finding(
        f"{len(models)} analyses model {comp.label} ({names}) and none is marked "
        "`chosen = true`: the comparison is shown, but no claim about the reported model "
        "can be checked.",
        evidence={"data": comp.label, "models": models},
    )
