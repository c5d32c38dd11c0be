"""Pareto k of every observation against the reliability threshold."""

from __future__ import annotations

import numpy as np

from auditor.figures.render import ACCENT, INK, MUTED, figure, to_svg
from auditor.figures.sampling import slug
from auditor.findings import Finding
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One scatter of k by observation per flagged observed variable."""
    out = []
    wanted = {f.quantity for f in findings}
    for v in (ctx.loo.variables if ctx.loo is not None else []):
        if v.observed not in wanted or len(out) >= int(ctx.options.get("max_figures", 4)):
            continue
        k = np.asarray(v.loo.pareto_k, dtype=float)
        x = np.arange(1, k.size + 1)
        high = ~(k <= v.loo.k_threshold)
        shown = np.where(np.isfinite(k), k, np.nanmax(np.where(np.isfinite(k), k, 0)) + 0.2)
        fig_id = slug("pareto-k", ctx.analysis.name, v.observed)
        with figure(height_in=2.6) as fig:
            ax = fig.add_subplot(1, 1, 1)
            ax.scatter(x[~high], shown[~high], s=10, color=MUTED, linewidths=0)
            ax.scatter(x[high], shown[high], s=16, color=ACCENT, linewidths=0)
            ax.axhline(v.loo.k_threshold, color=INK, lw=0.8, ls="--")
            ax.set_xlabel("observation")
            ax.set_ylabel("Pareto k")
            ax.set_title(f"Pareto k of each observation of {v.observed}", loc="left", color=INK)
            svg = to_svg(fig, fig_id)
        out.append(Figure(
            id=fig_id, title=f"Pareto k of {v.observed}", svg=svg,
            caption=(f"Each point is one observation of {v.observed}; the dashed line is the "
                     f"reliability threshold {v.loo.k_threshold:.2f} for {v.loo.n_samples} "
                     f"draws. {int(high.sum())} observations lie above it (marked); their "
                     "leave-one-out terms need exact refits, moment matching or K-fold "
                     "cross-validation."),
            rule_id=ctx.rule.id, quantity=v.observed))
    return out
