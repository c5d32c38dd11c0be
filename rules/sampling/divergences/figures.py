"""Divergent transitions in the pair of quantities that best separates them."""

from __future__ import annotations

from auditor.figures.sampling import divergence_figures
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One scatter figure of the best-separating pair, divergent draws marked."""
    return divergence_figures(ctx, findings)
