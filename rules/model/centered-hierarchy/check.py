"""model.centered-hierarchy: theta ~ normal(mu, tau) with tau a parameter."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from auditor.findings import Finding, Severity
from auditor.rules_api import RuleContext

#: Location-scale families in which a parameter scale makes the funnel.
_FAMILIES = {"normal", "student_t", "cauchy", "double_exponential", "logistic"}
_PARAM_BLOCKS = ("parameters", "transformed parameters")


def _divergences(ctx: RuleContext) -> int | None:
    """Divergent transitions after warmup (sample_stats holds post-warmup draws only)."""
    stats = ctx.analysis.group("sample_stats")
    if stats is None or "diverging" not in stats:
        return None
    return int(np.asarray(stats["diverging"].values, dtype=bool).sum())


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Note centered hierarchies; warn when the fit also diverged."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return []
    params = {d.name for d in prog.declarations.values() if d.block in _PARAM_BLOCKS}
    n_div = None
    findings = []
    for decl in prog.parameters:
        if decl.multiplier is not None:
            continue  # the affine transform already samples the standardized variable
        for dist in decl.priors:
            if dist.family not in _FAMILIES:
                continue
            scale = dist.scale_arg()
            if scale is None:
                continue
            scale_params = [n for n in scale.names if n in params and n != decl.name]
            if not scale_params:
                continue
            loc = dist.location_arg()
            loc_text = loc.text if loc is not None else "0"
            if n_div is None:
                n_div = _divergences(ctx)
            max_div = int(ctx.thresholds.get("max_divergences", 0))
            severity = ctx.severity
            if ctx.severity == ctx.rule.severity and n_div is not None and n_div > max_div:
                severity = Severity.WARNING
            tail = ""
            if n_div is not None:
                tail = f" The fit has {n_div} divergent transition(s) after warmup."
            findings.append(ctx.finding(
                f"`{decl.name}` is drawn directly from {dist.family}({loc_text}, {scale.text}) "
                f"with parameter scale `{scale_params[0]}`: the centered form, whose funnel "
                f"hampers the sampler when the groups carry little data.{tail}",
                evidence={"parameter": decl.name, "family": dist.family,
                          "location": loc_text, "scale": scale.text,
                          "scale_parameters": ", ".join(scale_params),
                          "divergences": n_div, "max_divergences": max_div},
                quantity=decl.name,
                location=ctx.location_of(dist),
                severity=severity,
            ))
    return findings
