"""Share of transitions that reached the maximum tree depth."""

from __future__ import annotations

import numpy as np

from auditor.rulekit import sample_stat


def check(ctx):
    """One finding when the saturated share exceeds ``max_share``."""
    max_depth = ctx.analysis.settings.max_depth or int(ctx.thresholds["default_max_depth"])
    hit = sample_stat(ctx, "reached_max_treedepth")
    depth = sample_stat(ctx, "tree_depth")
    if hit is None:
        if depth is None:
            return
        hit = depth >= max_depth
    hit = hit.astype(bool)
    share = float(hit.mean())
    if share <= float(ctx.thresholds["max_share"]):
        return
    deepest = int(np.nanmax(depth)) if depth is not None else None
    yield ctx.finding(
        f"{int(hit.sum())} of {hit.size} transitions ({100 * share:.1f}%) reached the maximum "
        f"tree depth {max_depth}",
        evidence={
            "saturated": int(hit.sum()),
            "transitions": int(hit.size),
            "share": round(share, 6),
            "max_depth": max_depth,
            "deepest": deepest,
        },
    )
