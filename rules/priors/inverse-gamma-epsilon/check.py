"""priors.inverse-gamma-epsilon: inv_gamma(eps, eps) on a variance (gamma on a precision)."""

from __future__ import annotations

from collections.abc import Iterable

from auditor.findings import Finding
from auditor.rulekit import prior_statements
from auditor.rules_api import RuleContext

_WHAT = {"inv_gamma": "a variance", "gamma": "a precision"}


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag inv_gamma/gamma priors whose two literal arguments are both <= max_eps."""
    max_eps = float(ctx.thresholds.get("max_eps", 0.01))
    findings = []
    for decl, dist in prior_statements(ctx):
        if dist.family not in _WHAT or len(dist.args) < 2:
            continue
        a, b = dist.args[0].value, dist.args[1].value
        if a is None or b is None or not (0 < a <= max_eps and 0 < b <= max_eps):
            continue
        findings.append(ctx.finding(
            f"`{decl.name}` has the prior {dist.family}({dist.args[0].text}, "
            f"{dist.args[1].text}), the 'epsilon' prior on {_WHAT[dist.family]}, "
            "which is far from non-informative when the data say little about it.",
            evidence={"parameter": decl.name, "family": dist.family, "shape": a,
                      "second_arg": b, "max_eps": max_eps},
            quantity=decl.name,
            location=ctx.location_of(dist),
        ))
    return findings
