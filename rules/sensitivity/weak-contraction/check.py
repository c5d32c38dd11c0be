"""Parameters whose posterior is barely narrower than their prior."""

from __future__ import annotations

from collections import defaultdict


def check(ctx):
    """One note per variable with quantities of low contraction."""
    if ctx.sensitivity is None:
        return
    limit = float(ctx.thresholds["min_contraction"])
    by_var: dict[str, list[tuple[str, float]]] = defaultdict(list)
    for label, value in ctx.sensitivity.contraction.items():
        by_var[label.split("[", 1)[0]].append((label, value))
    for var, items in by_var.items():
        low = [(q, v) for q, v in items if v < limit]
        if not low:
            continue
        worst = min(low, key=lambda t: t[1])
        share = f"{len(low)} of {len(items)} elements of `{var}`" if len(items) > 1 else (
            f"`{var}`")
        yield ctx.finding(
            f"The data barely narrow {share}: posterior contraction {worst[1]:.2f} for "
            f"{worst[0]} (1 - posterior variance / prior variance; below {limit:g}).",
            evidence={"quantity": worst[0], "contraction": round(worst[1], 4),
                      "min_contraction": limit, "flagged": len(low), "elements": len(items)},
            quantity=worst[0],
        )
