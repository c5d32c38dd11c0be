"""priors.flat: explicit flat priors and uniform priors over very wide intervals."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from auditor.findings import Finding, Location, Severity
from auditor.rules_api import RuleContext

_PRIOR_BLOCKS = ("parameters", "transformed parameters")
_IMPROPER = {"flat": "(-inf, +inf)", "half_flat": "(0, +inf)"}


def _where(ctx: RuleContext, item: Any) -> Location | None:
    """Place of a statement or declaration, in the included file it was written in."""
    if getattr(item, "path", ""):
        return Location(ctx.project.relpath(item.path), item.line, item.column)
    return ctx.program_location(item.line, item.column)


def _severity(ctx: RuleContext, computed: Severity) -> Severity:
    # A severity set by the user in the configuration wins over the computed one.
    return ctx.severity if ctx.severity != ctx.rule.severity else computed


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag pm.Flat/pm.HalfFlat and uniform(a, b) with b - a above the width threshold."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return []
    max_width = float(ctx.thresholds.get("max_uniform_width", 100.0))
    findings = []
    for decl in prog.declarations.values():
        if decl.block not in _PRIOR_BLOCKS:
            continue
        for dist in decl.priors:
            loc = _where(ctx, dist)
            if dist.family in _IMPROPER:
                findings.append(
                    ctx.finding(
                        f"`{decl.name}` has an explicit {dist.family} prior, which is improper "
                        f"over {_IMPROPER[dist.family]}.",
                        evidence={"parameter": decl.name, "family": dist.family,
                                  "proper": False},
                        quantity=decl.name,
                        location=loc,
                        severity=_severity(ctx, Severity.ERROR),
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
                        severity=_severity(ctx, Severity.WARNING),
                    )
                )
    return findings
