"""The LOO-PIT ECDF difference with its simultaneous band."""

from __future__ import annotations

from collections.abc import Callable, Iterator

from auditor.figures.predictive import (
    check_helper,
    figure_id,
    figure_limit,
    first_figures,
    loo_pit_difference,
)
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One figure per flagged observed variable, from the check's own ``tests(ctx)``
    generator (the same PIT values, seed and band as the finding)."""
    limit = figure_limit(ctx)
    if limit < 1:
        return []
    flagged = {f.quantity for f in findings if f.quantity}
    alpha = float(ctx.thresholds["alpha"])
    tests = check_helper(ctx, "tests")

    def makers() -> Iterator[Callable[[], Figure | None]]:
        for p, pit, test, _, discrete in tests(ctx):
            if p.observed not in flagged or test.outside == 0:
                continue
            yield lambda p=p, pit=pit, test=test, discrete=discrete: loo_pit_difference(
                p.observed, test, alpha=alpha, n_obs=int(pit.size), randomized=discrete,
                fig_id=figure_id(ctx, p.observed), rule_id=ctx.rule.id)

    return first_figures(makers(), limit)
