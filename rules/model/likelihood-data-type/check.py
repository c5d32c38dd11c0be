"""model.likelihood-data-type: the observed data's type against the likelihood family."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import numpy as np

from auditor.findings import Finding
from auditor.programs.summary import Likelihood
from auditor.rules_api import RuleContext

#: Continuous likelihoods with support on the whole real line.
_UNBOUNDED = {"normal", "student_t", "cauchy", "logistic", "double_exponential",
              "skew_normal", "gumbel", "normal_id_glm", "exp_mod_normal",
              "skew_double_exponential"}


def _observed(ctx: RuleContext, lik: Likelihood, n_liks: int) -> np.ndarray | None:
    data = ctx.analysis.data
    value: Any = data.get(lik.variable)
    spec = ctx.analysis.spec
    if value is None and spec is not None and spec.observed in data and n_liks == 1:
        value = data[spec.observed]
    if value is None:
        return None
    try:
        arr = np.asarray(value, dtype=float).ravel()
    except (TypeError, ValueError):
        return None
    return arr[np.isfinite(arr)]


def _classify(y: np.ndarray, boundary_z: float) -> tuple[str, str] | None:
    """(kind of data, suggested likelihoods), or ``None`` when nothing is wrong."""
    is_int = bool(np.all(y == np.round(y)))
    if is_int and set(np.unique(y)).issubset({0.0, 1.0}):
        return "binary 0/1", "Bernoulli (or binomial for grouped trials)"
    if is_int and np.all(y >= 0):
        return "non-negative integer counts", "Poisson or negative binomial"
    sd = float(np.std(y, ddof=1))
    mean = float(np.mean(y))
    if np.all((y > 0) & (y < 1)):
        gap = min(mean, 1.0 - mean)
        if sd > 0 and gap < boundary_z * sd:
            return "proportions strictly inside (0, 1)", "beta"
        return None
    if np.all(y > 0) and sd > 0 and mean < boundary_z * sd:
        return "strictly positive values near zero", "lognormal or gamma"
    return None


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag unbounded continuous likelihoods over counts, 0/1, positive or (0, 1) data."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return []
    boundary_z = float(ctx.thresholds.get("boundary_z", 3.0))
    min_n = int(ctx.thresholds.get("min_observations", 3))
    findings = []
    for lik in prog.likelihoods:
        dist = lik.distribution
        # A truncated likelihood already states the data's bounds on purpose.
        if dist.family not in _UNBOUNDED or dist.truncation is not None:
            continue
        y = _observed(ctx, lik, len(prog.likelihoods))
        if y is None or y.size < min_n:
            continue
        kind = _classify(y, boundary_z)
        if kind is None:
            continue
        what, suggestion = kind
        findings.append(ctx.finding(
            f"`{lik.variable}` has a {dist.family} likelihood but its {y.size} values are "
            f"{what} (min {y.min():g}, max {y.max():g}); consider {suggestion}.",
            evidence={"variable": lik.variable, "family": dist.family, "data_kind": what,
                      "n": int(y.size), "min": float(y.min()), "max": float(y.max()),
                      "mean": float(y.mean()), "sd": float(np.std(y, ddof=1)),
                      "suggested": suggestion},
            quantity=lik.variable,
            location=ctx.location_of(dist),
            fix=f"Model `{lik.variable}` with a {suggestion} likelihood, which only gives "
                "values the data can take.",
        ))
    return findings
