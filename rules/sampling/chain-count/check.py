"""Count the chains of the posterior."""

from __future__ import annotations


def check(ctx):
    """One finding when the analysis has draws from fewer than ``min_chains`` chains."""
    n = ctx.analysis.n_chains
    need = int(ctx.thresholds["min_chains"])
    if ctx.analysis.tree is None or n == 0 or n >= need:
        return
    yield ctx.finding(
        f"{n} chain{'s' if n != 1 else ''} run; at least {need} are needed to diagnose convergence",
        evidence={"chains": n, "minimum": need},
    )
