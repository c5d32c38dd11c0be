"""priors.support-mismatch: a declared range wider than the prior's support.

Only Stan programs: a PyMC random variable's support is its distribution's own,
so there is no separate declaration that could disagree with it.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

import numpy as np

from auditor.findings import Finding, Severity
from auditor.programs.summary import Bound, Declaration, Distribution
from auditor.rules_api import RuleContext

INF = math.inf
_POSITIVE = {
    "gamma", "lognormal", "exponential", "inv_gamma", "half_normal", "half_cauchy",
    "half_student_t", "half_flat", "chi_square", "inv_chi_square", "scaled_inv_chi_square",
    "weibull", "frechet", "rayleigh", "loglogistic",
}
_UNIT = {"beta", "beta_proportion"}
_REAL_LINE = {
    "normal", "std_normal", "cauchy", "student_t", "logistic", "double_exponential",
    "gumbel", "skew_normal", "skew_double_exponential", "exp_mod_normal", "flat",
}
#: Constrained types with a support fixed by the type itself.
_TYPE_SUPPORT = {"simplex": (0.0, 1.0), "unit_vector": (-1.0, 1.0),
                 "positive_ordered": (0.0, INF)}
_SKIP_TYPES = {"cov_matrix", "corr_matrix", "cholesky_factor_corr", "cholesky_factor_cov",
               "complex", "tuple"}


def _literal(text: str | None, data: dict[str, Any]) -> float | None:
    """Value of a bound or truncation text: a number, or a scalar in the data."""
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        pass
    if text in data:
        arr = np.asarray(data[text])
        if arr.ndim == 0 and np.issubdtype(arr.dtype, np.number):
            return float(arr)
    return None


def _bound(bound: Bound | None, default: float, data: dict[str, Any]) -> float | None:
    if bound is None:
        return default
    return bound.value if bound.value is not None else _literal(bound.text, data)


def _declared(decl: Declaration, data: dict[str, Any]) -> tuple[float | None, float | None]:
    lo = _bound(decl.lower, -INF, data)
    hi = _bound(decl.upper, INF, data)
    if decl.type in _TYPE_SUPPORT:
        t_lo, t_hi = _TYPE_SUPPORT[decl.type]
        lo = t_lo if lo is None else max(lo, t_lo)
        hi = t_hi if hi is None else min(hi, t_hi)
    return lo, hi


def _support(
    dist: Distribution, data: dict[str, Any], truncated: bool = True
) -> tuple[float, float] | None:
    """Support of the prior, with its truncation when ``truncated``."""
    fam = dist.family
    if fam in _POSITIVE:
        lo, hi = 0.0, INF
    elif fam in _UNIT:
        lo, hi = 0.0, 1.0
    elif fam in _REAL_LINE:
        lo, hi = -INF, INF
    elif fam == "uniform" and len(dist.args) >= 2:
        if dist.args[0].value is None or dist.args[1].value is None:
            return None
        lo, hi = dist.args[0].value, dist.args[1].value
    elif fam == "pareto" and dist.args and dist.args[0].value is not None:
        lo, hi = dist.args[0].value, INF
    else:
        return None  # multivariate or unknown support
    if truncated and dist.truncation is not None:
        t_lo, t_hi = dist.truncation
        if t_lo:
            v = _literal(t_lo, data)
            if v is None:
                return None
            lo = max(lo, v)
        if t_hi:
            v = _literal(t_hi, data)
            if v is None:
                return None
            hi = min(hi, v)
    return lo, hi


def _fmt(v: float) -> str:
    return "-inf" if v == -INF else "+inf" if v == INF else f"{v:g}"


def _finite(v: float | None) -> float | None:
    return v if v is not None and math.isfinite(v) else None


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag parameters whose declared range reaches outside their prior's support."""
    prog = ctx.analysis.program
    if prog is None or prog.language != "stan" or prog.syntax_errors:
        return []
    data = ctx.analysis.data
    findings = []
    for decl in prog.parameters:
        if decl.type in _SKIP_TYPES:
            continue
        d_lo, d_hi = _declared(decl, data)
        for dist in decl.priors:
            support = _support(dist, data)
            if support is None:
                continue
            p_lo, p_hi = support
            # A bound that is neither literal nor a data scalar cannot be compared.
            below = d_lo is not None and d_lo < p_lo
            above = d_hi is not None and d_hi > p_hi
            if not (below or above):
                continue
            declared = f"({_fmt(d_lo) if d_lo is not None else '?'}, " \
                       f"{_fmt(d_hi) if d_hi is not None else '?'})"
            prior = f"({_fmt(p_lo)}, {_fmt(p_hi)})"
            natural = _support(dist, data, truncated=False)
            cut_only = natural is not None and not (
                (d_lo is not None and d_lo < natural[0])
                or (d_hi is not None and d_hi > natural[1]))
            if dist.family == "uniform" or cut_only:
                # A stated cut (uniform's ends, a truncation T[a, b]) inside the declared
                # range: the family itself would cover it.
                sides = [s for s, on in (("lower", below), ("upper", above)) if on]
                what = "uniform prior" if dist.truncation is None else \
                    f"truncated {dist.family} prior"
                message = (f"`{decl.name}` is declared on {declared} but its {what} "
                           f"covers only {prior}: the {' and '.join(sides)} "
                           f"cut{'s are' if len(sides) > 1 else ' is'} not stated "
                           "in the declaration, so the sampler meets a hard wall.")
                severity = Severity.WARNING
            elif dist.family in _POSITIVE and below and p_lo == 0.0:
                message = (f"`{decl.name}` may take values down to {declared.split(',')[0][1:]} "
                           f"but its {dist.family} prior is positive-only {prior}.")
                severity = Severity.ERROR
            else:
                message = (f"`{decl.name}` is declared on {declared} but its {dist.family} "
                           f"prior has support {prior} only.")
                severity = Severity.ERROR
            findings.append(ctx.finding(
                message,
                evidence={"parameter": decl.name, "family": dist.family,
                          "declared_support": declared, "prior_support": prior,
                          "declared_lower": _finite(d_lo), "declared_upper": _finite(d_hi),
                          "prior_lower": _finite(p_lo), "prior_upper": _finite(p_hi)},
                quantity=decl.name,
                location=ctx.location_of(dist),
                severity=ctx.pick_severity(severity),
            ))
    return findings
