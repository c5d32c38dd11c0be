"""The ECDF difference plot of each failing parameter's SBC ranks."""

from __future__ import annotations

from auditor.figures.calibration import sbc_ecdf_difference
from auditor.figures.sampling import slug
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One figure per flagged parameter, from the tests the findings came from."""
    flagged = {f.quantity for f in findings}
    out: list[Figure] = []
    for t in ctx.rule.module.tests(ctx):
        if t.parameter not in flagged or len(out) >= int(ctx.options.get("max_figures", 4)):
            continue
        fig = sbc_ecdf_difference(t, fig_id=slug("sbc", ctx.analysis.name, t.parameter),
                                  rule_id=ctx.rule.id)
        if fig is not None:
            out.append(fig)
    return out
