"""priors.vague: prior scales far beyond what the data's scale allows.

The data scale of a parameter comes from the likelihood it appears in. For a
coefficient ``b`` multiplying a predictor ``x`` in the location of a likelihood of
``y`` it is ``sd(y) / sd(x)``; for an intercept-like term it is the larger of
``|mean(y)|`` and ``sd(y)``; for the likelihood's own scale parameter it is
``sd(y)``. Under a logit or log link the linear predictor lives on a unit scale,
so ``sd(y)`` is replaced by 1 (common practice: effects beyond a few units on the
logit scale are extreme). One step further, a parameter used as the location or
scale of another parameter's prior inherits that parameter's data scale.
Parameters that cannot be tied to the data fall back to an absolute limit.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Iterable
from typing import Any

import numpy as np

from auditor.findings import Finding
from auditor.programs.summary import Distribution, Likelihood, ProgramSummary
from auditor.rulekit import prior_statements
from auditor.rules_api import RuleContext

_PARAM_BLOCKS = ("parameters", "transformed parameters")
#: Families with a scale argument and its index (location-scale families come from
#: Distribution.scale_arg; half families are listed here).
_HALF_SCALE = {"half_normal": 0, "half_cauchy": 0, "half_student_t": 1}
_SCALE_FAMILIES = {"normal", "cauchy", "student_t", "logistic", "double_exponential"}
#: Likelihood families whose linear predictor is on a link (unit) scale, with the
#: index of that argument.
_LINK_FAMILIES = {
    "bernoulli_logit": 0, "binomial_logit": 1, "poisson_log": 0, "neg_binomial_2_log": 0,
    "categorical_logit": 0, "ordered_logistic": 0, "ordered_probit": 0,
}
#: Families whose mean argument is often written through an explicit inverse link.
_MEAN_FAMILIES = {"bernoulli": 0, "binomial": 1, "poisson": 0, "neg_binomial_2": 0}
_INVERSE_LINKS = {"inv_logit", "invlogit", "expit", "sigmoid", "exp", "Phi", "Phi_approx",
                  "inv_cloglog", "logistic"}
#: GLM families: (x, alpha, beta, ...) arguments; True when on a link scale.
_GLM_FAMILIES = {"normal_id_glm": False, "bernoulli_logit_glm": True, "poisson_log_glm": True,
                 "neg_binomial_2_log_glm": True, "categorical_logit_glm": True}
_OUTCOME_FAMILIES = {"normal", "student_t", "cauchy", "logistic", "double_exponential",
                     "skew_normal", "gumbel"}


def _prior_scale(dist: Distribution) -> float | None:
    if dist.family == "exponential" and dist.args:
        rate = dist.args[0].value  # the scale (and mean) of exponential(rate) is 1 / rate
        return 1.0 / rate if rate is not None and rate > 0 else None
    if dist.family in _SCALE_FAMILIES:
        arg = dist.scale_arg()
    elif dist.family in _HALF_SCALE and len(dist.args) > _HALF_SCALE[dist.family]:
        arg = dist.args[_HALF_SCALE[dist.family]]
    else:
        return None
    return arg.value if arg is not None else None


def _numeric(value: Any) -> np.ndarray | None:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        return None
    return arr


def _sd(arr: np.ndarray) -> float | None:
    flat = arr[np.isfinite(arr)].ravel()
    if flat.size < 2:
        return None
    sd = float(np.std(flat, ddof=1))
    return sd if sd > 0 else None


def _predictor_sd(arr: np.ndarray) -> float | None:
    """The smallest non-zero column sd of a predictor (the most lenient data scale)."""
    if arr.ndim == 2:
        sds = [s for s in (_sd(arr[:, j]) for j in range(arr.shape[1])) if s is not None]
        return min(sds) if sds else None
    return _sd(arr)


def _parse(text: str) -> ast.expr | None:
    # Stan arithmetic is close enough to Python's; elementwise operators are mapped.
    src = text.replace(".*", "*").replace("./", "/")
    try:
        return ast.parse(src, mode="eval").body
    except SyntaxError:
        return None


def _call_name(node: ast.Call) -> str | None:
    if isinstance(node.func, ast.Name):
        return node.func.id
    if isinstance(node.func, ast.Attribute):
        return node.func.attr
    return None


def _base_name(node: ast.expr) -> str | None:
    """``x`` for ``x``, ``x[n]`` and ``x[n, k]``; indices are not factors."""
    while isinstance(node, ast.Subscript):
        node = node.value
    return node.id if isinstance(node, ast.Name) else None


def _terms(node: ast.expr) -> list[ast.expr]:
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Add, ast.Sub)):
        return _terms(node.left) + _terms(node.right)
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        return _terms(node.operand)
    return [node]


def _factors(node: ast.expr) -> list[ast.expr] | None:
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.MatMult)):
        left, right = _factors(node.left), _factors(node.right)
        return None if left is None or right is None else left + right
    if isinstance(node, ast.Call) and _call_name(node) == "dot" and len(node.args) == 2:
        return [node.args[0], node.args[1]]
    if isinstance(node, (ast.Name, ast.Subscript)):
        return [node]
    if isinstance(node, ast.Constant):
        return []
    return None  # divisions, calls, nested sums: too far from a plain linear term


class _Scales:
    """Data scales found so far, keeping the most lenient (largest) per name."""

    def __init__(self) -> None:
        self.by_name: dict[str, tuple[float, str]] = {}

    def add(self, name: str, scale: float | None, how: str) -> None:
        if scale is None or not math.isfinite(scale) or scale <= 0:
            return
        if name not in self.by_name or scale > self.by_name[name][0]:
            self.by_name[name] = (scale, how)


def _outcome(ctx: RuleContext, lik: Likelihood, n_liks: int) -> np.ndarray | None:
    data = ctx.analysis.data
    if lik.variable in data:
        return _numeric(data[lik.variable])
    spec = ctx.analysis.spec
    if spec is not None and spec.observed in data and n_liks == 1:
        return _numeric(data[spec.observed])
    return None


def _linear_predictor(
    lik: Likelihood, y: np.ndarray
) -> tuple[str | None, float, float, bool]:
    """(predictor text, outcome scale, outcome level, on a link scale) of one likelihood."""
    dist = lik.distribution
    if dist.family in _GLM_FAMILIES and len(dist.args) >= 3:
        # The GLM's linear predictor alpha + x * beta, written out for the term walk.
        x, alpha, beta = (a.text for a in dist.args[:3])
        text = f"({alpha}) + ({x}) * ({beta})"
        if _GLM_FAMILIES[dist.family]:
            return text, 1.0, 1.0, True
        sd = _sd(y)
        if sd is None:
            return None, 0.0, 0.0, False
        return text, sd, max(float(abs(np.nanmean(y))), sd), False
    if dist.family in _LINK_FAMILIES:
        idx = _LINK_FAMILIES[dist.family]
        text = dist.args[idx].text if len(dist.args) > idx else None
        return text, 1.0, 1.0, True
    if dist.family in _MEAN_FAMILIES:
        idx = _MEAN_FAMILIES[dist.family]
        if len(dist.args) > idx:
            node = _parse(dist.args[idx].text)
            if (isinstance(node, ast.Call) and _call_name(node) in _INVERSE_LINKS
                    and len(node.args) == 1):
                return ast.unparse(node.args[0]), 1.0, 1.0, True
        return None, 0.0, 0.0, False
    values = y
    if dist.family == "lognormal":
        if not np.all(y[np.isfinite(y)] > 0):
            return None, 0.0, 0.0, False
        values = np.log(y)
    elif dist.family not in _OUTCOME_FAMILIES:
        return None, 0.0, 0.0, False
    sd = _sd(values)
    if sd is None:
        return None, 0.0, 0.0, False
    loc = dist.location_arg()
    level = max(float(abs(np.nanmean(values))), sd)
    return (loc.text if loc is not None else None), sd, level, False


def _data_scales(ctx: RuleContext, prog: ProgramSummary) -> _Scales:
    scales = _Scales()
    params = {d.name for d in prog.declarations.values() if d.block in _PARAM_BLOCKS}
    data = ctx.analysis.data
    for lik in prog.likelihoods:
        y = _outcome(ctx, lik, len(prog.likelihoods))
        if y is None:
            continue
        text, y_scale, y_level, link = _linear_predictor(lik, y)
        if text is None:
            continue
        outcome = lik.variable
        dist = lik.distribution
        on_scale = dist.family in _SCALE_FAMILIES or dist.family == "lognormal"
        scale_arg = dist.scale_arg() if on_scale else None
        if dist.family == "normal_id_glm" and len(dist.args) >= 4:
            scale_arg = dist.args[3]
        sigma_names = scale_arg.names if scale_arg is not None and not link else ()
        if len(sigma_names) == 1 and sigma_names[0] in params:
            scales.add(sigma_names[0], y_scale, f"sd({outcome})")
        node = _parse(text)
        if node is None:
            continue
        for term in _terms(node):
            factors = _factors(term)
            if factors is None:
                continue
            names = [_base_name(f) for f in factors]
            if any(n is None or (n not in params and n not in data) for n in names):
                continue  # a factor of unknown value (transformed data, a local, a call)
            term_params = [n for n in names if n in params]
            term_data = [n for n in names if n not in params]
            if len(term_params) != 1:
                continue  # a product of parameters (tau * z) has no single data scale
            p = term_params[0]
            if not term_data:
                scales.add(p, y_level, "unit link scale" if link
                           else f"max(|mean({outcome})|, sd({outcome}))")
            elif len(term_data) == 1:
                x = _numeric(data[term_data[0]])
                sd_x = _predictor_sd(x) if x is not None else None
                if sd_x is not None:
                    how = (f"1 / sd({term_data[0]}) (link scale)" if link
                           else f"sd({outcome}) / sd({term_data[0]})")
                    scales.add(p, y_scale / sd_x, how)
    # One step of inheritance through the hierarchy: mu and tau of theta ~ normal(mu, tau).
    for decl in prog.declarations.values():
        if decl.name in scales.by_name or decl.block not in _PARAM_BLOCKS:
            continue
        for child in [*decl.location_of, *decl.scale_of]:
            if child in scales.by_name:
                scale, how = scales.by_name[child]
                scales.add(decl.name, scale, f"{how}, via {child}")
    return scales


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag prior scales above max_scale_ratio times the data scale (or above max_scale)."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return []
    max_ratio = float(ctx.thresholds.get("max_scale_ratio", 100.0))
    max_scale = float(ctx.thresholds.get("max_scale", 100.0))
    scales = _data_scales(ctx, prog)
    findings = []
    for decl, dist in prior_statements(ctx):
        prior_scale = _prior_scale(dist)
        if prior_scale is None or prior_scale <= 0:
            continue
        loc = ctx.location_of(dist)
        shown = f"{dist.family}({', '.join(a.text for a in dist.args)})"
        if decl.name in scales.by_name:
            data_scale, how = scales.by_name[decl.name]
            ratio = prior_scale / data_scale
            if ratio > max_ratio:
                findings.append(ctx.finding(
                    f"The prior {shown} on `{decl.name}` has scale "
                    f"{prior_scale:g}, {ratio:.3g} times the data scale {data_scale:.3g} "
                    f"({how}); the limit is {max_ratio:g} times.",
                    evidence={"parameter": decl.name, "family": dist.family,
                              "prior_scale": prior_scale, "data_scale": data_scale,
                              "data_scale_from": how, "ratio": ratio,
                              "max_scale_ratio": max_ratio},
                    quantity=decl.name, location=loc))
        elif prior_scale > max_scale:
            findings.append(ctx.finding(
                f"The prior {shown} on `{decl.name}` has scale {prior_scale:g}, "
                f"above the limit of {max_scale:g} (no data scale could be tied to it).",
                evidence={"parameter": decl.name, "family": dist.family,
                          "prior_scale": prior_scale, "data_scale": None, "ratio": None,
                          "max_scale": max_scale},
                quantity=decl.name, location=loc))
    return findings
