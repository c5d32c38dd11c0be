"""Trace and rank plots of the quantities with the lowest bulk-ESS (worst first)."""

from __future__ import annotations

from auditor.figures.sampling import flagged_traces
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """At most ``ctx.options["max_figures"]`` trace/rank figures, smallest bulk-ESS first."""
    limit = float(ctx.thresholds.get("min_per_chain", 100)) * max(ctx.analysis.n_chains, 1)
    return flagged_traces(
        ctx,
        findings,
        badness=lambda row: -row["ess_bulk"] if row.get("ess_bulk") is not None
        else float("-inf"),
        flagged=lambda row: not row["constant"] and row.get("ess_bulk") is not None
        and row["ess_bulk"] < limit,
    )
