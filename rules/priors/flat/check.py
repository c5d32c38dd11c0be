"""priors.flat: explicit flat priors and uniform priors over very wide intervals."""

from __future__ import annotations

from collections.abc import Iterable

from auditor.findings import Finding, Severity
from auditor.rulekit import prior_statements
from auditor.rules_api import RuleContext

_IMPROPER = {"flat": "(-inf, +inf)", "half_flat": "(0, +inf)"}


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag pm.Flat/pm.HalfFlat and uniform(a, b) with b - a above the width threshold."""
    max_width = float(ctx.thresholds.get("max_uniform_width", 100.0))
    findings = []
    for decl, dist in prior_statements(ctx):
        loc = ctx.location_of(dist)
        if dist.family in _IMPROPER:
            findings.append(
                ctx.finding(
                    f"`{decl.name}` has an explicit {dist.family} prior, which is improper "
                    f"over {_IMPROPER[dist.family]}.",
                    evidence={"parameter": decl.name, "family": dist.family,
                              "proper": False},
                    quantity=decl.name,
                    location=loc,
                    severity=ctx.pick_severity(Severity.ERROR),
                )
            )
            continue
        if dist.family != "uniform" or len(dist.args) < 2:
            continue
        lo, hi = dist.args[0].value, dist.args[1].value
        if lo is None or hi is None:
            continue  # bounds computed from data or parameters: width unknown here
        width = hi - lo
        if width > max_width:
            findings.append(
                ctx.finding(
                    f"`{decl.name}` has a uniform({dist.args[0].text}, {dist.args[1].text}) "
                    f"prior of width {width:g}, above the limit of {max_width:g}.",
                    evidence={"parameter": decl.name, "family": "uniform", "lower": lo,
                              "upper": hi, "width": width, "max_width": max_width},
                    quantity=decl.name,
                    location=loc,
                    severity=ctx.pick_severity(Severity.WARNING),
                )
            )
    return findings
