"""Observed data over replicated data, and each flagged statistic's replicated distribution."""

from __future__ import annotations

from collections.abc import Callable, Iterator

from auditor.figures.predictive import (
    check_helper,
    figure_id,
    figure_limit,
    first_figures,
    observed_vs_replicated,
    statistic_distribution,
)
from auditor.findings import Finding
from auditor.predictive_checks import replicated_statistic
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """Per observed variable with a finding: the observed-over-replicated figure, then one
    histogram per flagged statistic (in the check's order), at most ``max_figures`` in all.

    The data, the outcome's kind and the flagged statistics come from the check's own
    ``flagged(ctx)`` generator, the statistic over the replicated data from
    ``replicated_statistic``: the same functions the findings are made with.
    """
    limit = figure_limit(ctx)
    if limit < 1:
        return []
    wanted = {(f.quantity, f.evidence.get("statistic")) for f in findings}
    variables = {q for q, _ in wanted}
    flagged = check_helper(ctx, "flagged")

    def makers() -> Iterator[Callable[[], Figure | None]]:
        for p, kind, y, rep, checks in flagged(ctx):
            if p.observed not in variables:
                continue
            yield lambda p=p, kind=kind, y=y, rep=rep: observed_vs_replicated(
                p.observed, y, rep, kind=kind, fig_id=figure_id(ctx, p.observed),
                rule_id=ctx.rule.id)
            for c in checks:
                if (p.observed, c.name) not in wanted:
                    continue
                yield lambda p=p, rep=rep, c=c: statistic_distribution(
                    p.observed, c.label, replicated_statistic(rep, c.name), c.observed,
                    c.p_value, fig_id=figure_id(ctx, p.observed, c.name), rule_id=ctx.rule.id)

    return first_figures(makers(), limit)
