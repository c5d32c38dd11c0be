"""Posterior predictive p-values of test statistics chosen for the outcome's kind."""

from __future__ import annotations

from auditor.predictive_checks import check_statistics, draws_of, observed_values, outcome_kind
from auditor.rulekit import likelihood_of, observed_location


def flagged(ctx):
    """(pairing, kind, y, replicated draws, flagged statistic checks) per observed variable."""
    low, high = float(ctx.thresholds["p_low"]), float(ctx.thresholds["p_high"])
    for p in ctx.analysis.pairings:
        y = observed_values(ctx.analysis, p.observed)
        rep = draws_of(ctx.analysis, p.posterior_predictive, "posterior_predictive")
        if y is None or rep is None or rep.shape[1] != y.size:
            continue
        dist = likelihood_of(ctx, p.observed)
        kind = outcome_kind(y, dist.family if dist else None)
        checks = [c for c in check_statistics(y, rep, kind)
                  if c.p_value < low or c.p_value > high]
        yield p, kind, y, rep, checks


def check(ctx):
    """One finding per flagged statistic of each observed variable."""
    for p, kind, _, rep, checks in flagged(ctx):
        for c in checks:
            # p = Pr(T(y_rep) >= T(y)): a small p means the data's value is high.
            side = "above" if c.p_value < 0.5 else "below"
            share = 1 - c.p_value if c.p_value < 0.5 else c.p_value
            yield ctx.finding(
                f"The {c.label} of `{p.observed}` ({c.observed:.4g}) lies {side} "
                f"{100 * share:.1f}% of the replicated data sets (replicated 5%-95%: "
                f"{c.q05:.4g} to {c.q95:.4g}; p = {c.p_value:.3g}): the model does not "
                f"reproduce this feature of the {kind} data.",
                evidence={"observed": p.observed, "statistic": c.name, "kind": kind,
                          "value": c.observed, "replicated_q05": c.q05,
                          "replicated_median": c.q50, "replicated_q95": c.q95,
                          "p_value": round(c.p_value, 4), "replications": int(rep.shape[0])},
                quantity=p.observed,
                location=observed_location(ctx, p.observed),
            )
