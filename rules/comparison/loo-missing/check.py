"""An analysis of observed data without pointwise log-likelihood."""

from __future__ import annotations

from auditor.rulekit import observed_location


def check(ctx):
    """One note per observed variable whose log-likelihood was not found."""
    if ctx.analysis.group("posterior") is None:
        return  # a program without draws: inputs.unpaired says so
    for p in ctx.analysis.pairings:
        if p.log_likelihood is not None:
            continue
        yield ctx.finding(
            f"No pointwise log-likelihood of `{p.observed}` was found, so PSIS-LOO could not "
            "be computed and this model cannot be compared with others by its predictive "
            "accuracy.",
            evidence={"observed": p.observed, "notes": "; ".join(p.notes) or None},
            quantity=p.observed,
            location=observed_location(ctx, p.observed),
        )
