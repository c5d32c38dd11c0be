"""Energy distribution (marginal energy against energy transitions) with E-BFMI per chain."""

from __future__ import annotations

from auditor.figures.sampling import energy_figures
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One energy figure for the analysis."""
    return energy_figures(ctx, findings)
