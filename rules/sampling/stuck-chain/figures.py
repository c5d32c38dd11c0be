"""Trace and ranks of the series in which the odd chain differs most."""

from __future__ import annotations

import numpy as np

from auditor.figures.draws import quantity_draws
from auditor.figures.sampling import _max_figures, _one_based, slug, trace_rank
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rulekit import sample_stat
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One trace/rank figure per finding (at most ``max_figures``)."""
    out: list[Figure] = []
    posterior = ctx.analysis.group("posterior")
    for f in findings[: _max_figures(ctx)]:
        top = (f.evidence.get("differences") or [{}])[0].get("series")
        if top is None:
            continue
        if top in ("lp", "energy"):
            draws = sample_stat(ctx, top)
        elif posterior is not None:
            draws = quantity_draws(posterior, top, _one_based(ctx))
        else:
            draws = None
        if draws is None or draws.ndim != 2 or not np.isfinite(draws).all():
            continue
        out.append(trace_rank(
            top, draws.astype(float), fig_id=slug(ctx.analysis.name, ctx.rule.id, top),
            rule_id=ctx.rule.id, note=f"{f.evidence.get('chain', '')} is the chain that differs.",
        ))
    return out
