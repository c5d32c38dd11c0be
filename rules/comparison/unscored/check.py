"""Models of compared data that could not be scored by PSIS-LOO."""

from __future__ import annotations


def check(ctx):
    """One finding per analysis of a comparison set without PSIS-LOO."""
    comp = ctx.comparison
    scored = [row.analysis for row in comp.rows]
    for name in comp.unscored:
        others = ", ".join(f"`{a}`" for a in scored) or "no other model"
        yield ctx.finding(
            f"`{name}` models {comp.label} like {others}, but has no pointwise "
            "log-likelihood: it is left out of the comparison, which then cannot say "
            "whether it predicts better or worse.",
            evidence={"data": comp.label, "analysis": name, "scored": scored},
            analysis=name,
        )
