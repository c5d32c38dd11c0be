"""The sensitivity figure of an analysis: each parameter's power-scaling sensitivity to
the prior against its sensitivity to the likelihood, with the 0.05 lines.

Values from :class:`auditor.sensitivity.SensitivityTable` (the numbers the findings
state; Kallioinen, Paananen, Bürkner & Vehtari 2024). Quadrants read: prior-data
conflict (both above), strong prior or weak likelihood (prior above only), data-driven
(likelihood above only).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from auditor.figures.predictive import plain_text
from auditor.figures.render import ACCENT, CHAIN_COLORS, INK, MUTED, figure, to_svg
from auditor.figures.sampling import slug
from auditor.result import Figure

if TYPE_CHECKING:
    from auditor.rules_api import RuleContext

#: Parameters labelled at most (the most sensitive to the prior first).
MAX_LABELS = 12


def sensitivity_figure(quantities: list[str], prior: np.ndarray, likelihood: np.ndarray,
                       threshold: float, *, fig_id: str, rule_id: str | None) -> Figure | None:
    """Prior against likelihood sensitivity of every quantity, one point each."""
    p, lk = np.asarray(prior, dtype=float), np.asarray(likelihood, dtype=float)
    ok = np.isfinite(p) & np.isfinite(lk)
    if not ok.any():
        return None
    conflict = ok & (p >= threshold) & (lk >= threshold)
    strong = ok & (p > threshold) & (lk < threshold)
    calm = ok & ~conflict & ~strong
    top = max(float(np.max(p[ok])), float(np.max(lk[ok])), 2 * threshold) * 1.1
    with figure(height_in=3.4) as fig:
        ax = fig.add_subplot()
        ax.axvline(threshold, color=MUTED, lw=0.8, ls="--")
        ax.axhline(threshold, color=MUTED, lw=0.8, ls="--")
        ax.scatter(lk[calm], p[calm], s=14, color=MUTED, linewidths=0, label="neither flagged")
        ax.scatter(lk[strong], p[strong], s=20, color=CHAIN_COLORS[0], linewidths=0,
                   label="prior above, likelihood below")
        ax.scatter(lk[conflict], p[conflict], s=20, color=ACCENT, linewidths=0,
                   label="both above: prior-data conflict")
        flagged = np.flatnonzero(conflict | strong)
        for i in flagged[np.argsort(-p[flagged])][:MAX_LABELS]:
            ax.annotate(plain_text(quantities[i]), (lk[i], p[i]), fontsize=6.5, color=INK,
                        xytext=(3, 3), textcoords="offset points")
        ax.set_xlim(0, top)
        ax.set_ylim(0, top)
        ax.set_xlabel("sensitivity to the likelihood")
        ax.set_ylabel("sensitivity to the prior")
        ax.set_title("Power-scaling sensitivity of each parameter", loc="left", color=INK)
        ax.legend(loc="upper right")
        svg = to_svg(fig, fig_id)
    n = int(ok.sum())
    return Figure(
        id=fig_id, title="Power-scaling sensitivity", svg=svg,
        caption=(f"{n} quantities: how far each posterior moves when the prior (up) or the "
                 f"likelihood (right) is raised to a power near 1. Above the dashed line at "
                 f"{threshold:g} a component matters: both at once mark prior-data conflict "
                 f"({int(conflict.sum())} here), the prior alone a strong prior or a weak "
                 f"likelihood ({int(strong.sum())} here)."),
        rule_id=rule_id)


def analysis_sensitivity_figures(ctx: RuleContext) -> list[Figure]:
    """The figures of the rules that read the power-scaling table (prior-dominated,
    prior-data conflict): the analysis's one sensitivity figure, from the same table the
    findings read, under one id (a report shows it once when both rules made it)."""
    power = ctx.sensitivity.power if ctx.sensitivity is not None else None
    if power is None or int(ctx.options.get("max_figures", 4)) < 1:
        return []
    fig = sensitivity_figure(power.quantities, power.prior, power.likelihood,
                             float(ctx.thresholds["threshold"]),
                             fig_id=slug("sensitivity", ctx.analysis.name), rule_id=ctx.rule.id)
    return [fig] if fig is not None else []
