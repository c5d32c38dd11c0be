"""Thinning factor from the run's settings, or from the draw numbers of a DataTree."""

from __future__ import annotations

import numpy as np

from auditor.rulekit import sample_stat


def _step(ctx, group: str) -> int | None:
    """The constant step of a group's draw coordinate (0, 4, 8, ... gives 4), or ``None``."""
    ds = ctx.analysis.group(group)
    if ds is None or "draw" not in ds.coords or ds.sizes.get("draw", 0) < 2:
        return None
    draws = np.asarray(ds.coords["draw"].values)
    if not np.issubdtype(draws.dtype, np.integer):
        return None
    steps = np.unique(np.diff(draws))
    return int(steps[0]) if steps.size == 1 and steps[0] > 0 else None


def check(ctx):
    """One finding when the saved transitions, sampler statistics included, are thinned."""
    stats = ctx.analysis.group("sample_stats")
    if stats is None or ctx.analysis.tree is None:
        return
    thin = ctx.analysis.settings.thin
    source = "the run's settings"
    if thin is None or thin <= 1:
        post_step, stat_step = _step(ctx, "posterior"), _step(ctx, "sample_stats")
        if stat_step is None or stat_step <= 1:
            return  # every transition's statistics are there
        thin, source = stat_step, "the draw numbers"
        if post_step is not None and post_step != stat_step:
            return
    if thin <= int(ctx.thresholds["max_thin"]):
        return
    saved = ctx.analysis.n_chains * ctx.analysis.n_draws
    transitions = saved * thin
    div = sample_stat(ctx, "diverging")
    hit = sample_stat(ctx, "reached_max_treedepth")
    seen = []
    n_div = int(np.asarray(div, dtype=bool).sum()) if div is not None else None
    n_hit = int(np.asarray(hit, dtype=bool).sum()) if hit is not None else None
    if n_div is not None:
        seen.append(f"{n_div} divergent")
    if n_hit is not None:
        seen.append(f"{n_hit} at the maximum tree depth")
    shown = f"; the saved ones show {' and '.join(seen)}" if seen else ""
    yield ctx.finding(
        f"only 1 in {thin} transitions was saved (thin = {thin}, from {source}), sampler "
        f"statistics included: divergences and tree-depth hits in the other "
        f"{transitions - saved} of {transitions} transitions after warmup cannot be seen{shown}",
        evidence={"thin": thin, "source": source, "saved": saved, "transitions": transitions,
                  "divergent_saved": n_div, "max_depth_saved": n_hit},
    )
