"""The analysis's sensitivity figure (prior against likelihood sensitivity)."""

from __future__ import annotations

from auditor.figures.sampling import slug
from auditor.figures.sensitivity import sensitivity_figure
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One figure per analysis, from the same table the findings read."""
    power = ctx.sensitivity.power if ctx.sensitivity is not None else None
    if power is None or int(ctx.options.get("max_figures", 4)) < 1:
        return []
    fig = sensitivity_figure(power.quantities, power.prior, power.likelihood,
                             float(ctx.thresholds["threshold"]),
                             fig_id=slug("sensitivity", ctx.analysis.name), rule_id=ctx.rule.id)
    return [fig] if fig is not None else []
