"""p_loo against the number of parameters, read as in the loo package's glossary."""

from __future__ import annotations

import numpy as np

from auditor.loo import n_parameters
from auditor.rulekit import observed_location


def check(ctx):
    """One finding per observed variable whose p_loo is out of line with p and N."""
    if ctx.loo is None:
        return
    p = n_parameters(ctx.analysis)
    if p is None:
        return
    share = float(ctx.thresholds["flexible_share"])
    excess = float(ctx.thresholds["excess_ratio"])
    for v in ctx.loo.variables:
        n = v.loo.n_obs
        p_loo = float(v.loo.p_loo)
        high = int(np.sum(~(v.loo.pareto_k <= v.loo.k_threshold)))
        evidence = {"observed": v.observed, "p_loo": p_loo, "parameters": p,
                    "observations": n, "high_k": high}
        if (p_loo > p and high) or p_loo > excess * p:
            with_k = f" with {high} observations of high Pareto k" if high else ""
            yield ctx.finding(
                f"p_loo of `{v.observed}` is {p_loo:.2f}, more than the {p} parameters of the "
                f"model{with_k}: a sign that the model is badly misspecified (see the "
                "posterior predictive checks).",
                evidence=evidence, quantity=v.observed,
                location=observed_location(ctx, v.observed))
        elif p > share * n and high:
            yield ctx.finding(
                f"The model has {p} parameters for {n} observations of `{v.observed}` (more "
                f"than {share:g} N) and {high} observations with high Pareto k (p_loo = "
                f"{p_loo:.2f}): a very flexible model, whose leave-one-out terms cannot be "
                "estimated from the full-data posterior.",
                evidence=evidence, quantity=v.observed,
                location=observed_location(ctx, v.observed))
