"""Prior predictive draws against the declared plausible range (or the observed range)."""

from __future__ import annotations

import numpy as np

from auditor.figures.predictive import (
    figure_id,
    figure_limit,
    first_figures,
    prior_predictive_range,
)
from auditor.findings import Finding
from auditor.predictive_checks import draws_of, observed_values
from auditor.result import Figure
from auditor.rules_api import RuleContext


def figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """One histogram per flagged observed variable, the range shaded with the share inside.

    With a declared ``plausible_range`` the share inside is computed by the check's own
    function (``share_in_range``); without one the observed data's range is shaded.
    """
    flagged = {f.quantity for f in findings if f.quantity}
    spec = ctx.analysis.spec
    declared = spec.plausible_range if spec is not None else None

    def maker(p):  # noqa: ANN001, ANN202 - a Pairing; returns a deferred figure maker
        def make() -> Figure | None:
            draws = draws_of(ctx.analysis, p.prior_predictive, "prior_predictive")
            if draws is None or draws.size == 0:
                return None
            if declared is not None:
                low, high = declared
            else:
                y = observed_values(ctx.analysis, p.observed)
                finite = y[np.isfinite(y)] if y is not None else np.empty(0)
                if finite.size == 0:
                    low = high = None
                else:
                    low, high = float(finite.min()), float(finite.max())
            return prior_predictive_range(
                p.observed, draws, low=low, high=high, declared=declared is not None,
                fig_id=figure_id(ctx, p.observed), rule_id=ctx.rule.id)
        return make

    makers = [maker(p) for p in ctx.analysis.pairings if p.observed in flagged]
    return first_figures(makers, figure_limit(ctx))
