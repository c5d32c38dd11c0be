"""Adapted step size per chain, and the warmup length, from the files' settings."""

from __future__ import annotations

import numpy as np

from auditor.rulekit import chain_location, chain_names, posterior_attr, sample_stat


def _step_sizes(ctx) -> np.ndarray | None:
    """Adapted step size per chain: CmdStan's "Step size = " line, else the median of the
    post-warmup step_size statistic (constant per chain after adaptation)."""
    n = ctx.analysis.n_chains
    attr = posterior_attr(ctx, "adapted_step_size")
    if attr is not None:
        try:
            values = np.asarray(attr, dtype=np.float64).reshape(-1)
        except (TypeError, ValueError):  # an attribute of another kind: use the statistic
            values = np.array([])
        if values.size == n and np.isfinite(values).any():
            return values
    stat = sample_stat(ctx, "step_size")
    if stat is None or stat.ndim != 2 or stat.shape[0] != n or stat.dtype.kind not in "fiu":
        return None
    out = np.full(n, np.nan)
    for c in range(n):
        finite = stat[c][np.isfinite(stat[c])]
        if finite.size:
            out[c] = float(np.median(finite))
    return out


def check(ctx):
    """Findings for collapsed chains and for a warmup shorter than ``min_warmup``."""
    settings = ctx.analysis.settings
    if ctx.analysis.tree is None:
        return
    names = chain_names(ctx)
    sizes = _step_sizes(ctx)
    ratio_limit = float(ctx.thresholds["min_ratio"])
    if sizes is not None and sizes.size >= 2:
        for c, size in enumerate(sizes):
            others = np.delete(sizes, c)
            others = others[np.isfinite(others) & (others > 0)]
            if not np.isfinite(size) or size <= 0 or others.size == 0:
                continue
            reference = float(np.median(others))
            ratio = float(size) / reference
            if ratio >= ratio_limit:
                continue
            yield ctx.finding(
                f"{names[c]}'s adapted step size {size:.3g} is {ratio:.3g} times the other "
                f"chains' median {reference:.3g} (below {ratio_limit:g}): its adaptation "
                "collapsed on curvature the other chains did not meet, such as a funnel's neck "
                "or a narrow mode",
                evidence={"chain": names[c], "step_size": round(float(size), 6),
                          "others_median": round(reference, 6), "ratio": round(ratio, 6),
                          "min_ratio": ratio_limit,
                          "step_sizes": [round(float(v), 6) for v in sizes]},
                location=chain_location(ctx, c),
            )
    warmup = settings.num_warmup
    need = int(ctx.thresholds["min_warmup"])
    if settings.adapt_engaged is False:
        yield ctx.finding(
            "adaptation was switched off (adapt engaged = 0): the step size and metric were "
            "not tuned to this posterior",
            evidence={"adapt_engaged": False, "num_warmup": warmup, "min_warmup": need},
        )
    elif warmup is not None and warmup < need and ctx.analysis.group("sample_stats") is not None:
        what = ("no warmup: the step size and metric were not adapted at all" if warmup == 0 else
                f"a warmup of {warmup} iterations is shorter than the {need} the default "
                "adaptation windows need (75 + 25 + 50); the step size and metric were tuned on "
                "too few draws")
        yield ctx.finding(what, evidence={"num_warmup": warmup, "min_warmup": need,
                                          "step_sizes": None if sizes is None else
                                          [round(float(v), 6) for v in sizes]})
