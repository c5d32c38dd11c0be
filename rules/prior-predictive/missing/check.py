"""An observed variable without prior predictive draws."""

from __future__ import annotations

from auditor.rulekit import observed_location


def check(ctx):
    """One finding per observed variable whose prior predictive draws were not found."""
    for p in ctx.analysis.pairings:
        if p.prior_predictive is not None:
            continue
        yield ctx.finding(
            f"No prior predictive draws of `{p.observed}` were found (no prior-only run among "
            "the inputs and no prior_predictive group): what the priors imply about the data "
            "was not checked.",
            evidence={"observed": p.observed},
            quantity=p.observed,
            location=observed_location(ctx, p.observed),
        )
