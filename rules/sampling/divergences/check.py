"""Count divergent transitions after warmup."""

from __future__ import annotations

from auditor.rulekit import sample_stat


def check(ctx):
    """One finding when the post-warmup divergence count exceeds ``max_divergent``."""
    div = sample_stat(ctx, "diverging")
    if div is None:
        return
    div = div.astype(bool)
    count = int(div.sum())
    if count <= int(ctx.thresholds["max_divergent"]):
        return
    total = div.size
    per_chain = [int(c) for c in div.sum(axis=1)]
    delta = ctx.analysis.settings.adapt_delta
    yield ctx.finding(
        f"{count} of {total} transitions after warmup diverged ({100 * count / total:.1f}%); "
        f"per chain {per_chain}" + (f"; adapt_delta = {delta:g}" if delta is not None else ""),
        evidence={
            "divergent": count,
            "transitions": total,
            "share": round(count / total, 6),
            "per_chain": per_chain,
            "adapt_delta": delta,
        },
    )
