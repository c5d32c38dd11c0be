"""An observed variable without replicated (posterior predictive) draws."""

from __future__ import annotations

from auditor.rulekit import observed_location


def check(ctx):
    """One finding per observed variable of an analysis with draws but no replicated draws."""
    if ctx.analysis.group("posterior") is None:
        return  # a program without draws: inputs.unpaired says so
    for p in ctx.analysis.pairings:
        if p.posterior_predictive is not None:
            continue
        why = "; ".join(p.notes)
        yield ctx.finding(
            f"No replicated draws of `{p.observed}` were found"
            + (f" ({why})" if why else " (no generated quantity from the likelihood's _rng "
               "function and no posterior_predictive group)")
            + ": whether the fitted model reproduces the data was not checked.",
            evidence={"observed": p.observed, "notes": why or None},
            quantity=p.observed,
            location=observed_location(ctx, p.observed),
        )
