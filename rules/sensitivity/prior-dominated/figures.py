"""The analysis's sensitivity figure (prior against likelihood sensitivity)."""

from __future__ import annotations

from auditor.figures.sensitivity import analysis_sensitivity_figures
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One figure per analysis, from the same table the findings read."""
    return analysis_sensitivity_figures(ctx)
