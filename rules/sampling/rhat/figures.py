"""Trace and rank plots of the quantities with the highest R-hat (worst first)."""

from __future__ import annotations

from auditor.figures.sampling import flagged_traces
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """At most ``ctx.options["max_figures"]`` trace/rank figures, largest R-hat first."""
    limit = float(ctx.thresholds.get("max_rhat", 1.01))
    return flagged_traces(
        ctx,
        findings,
        badness=lambda row: row["rhat"] if row.get("rhat") is not None else float("-inf"),
        flagged=lambda row: not row["constant"] and row.get("rhat") is not None
        and row["rhat"] > limit,
    )
