"""priors.missing: a Stan parameter that no prior statement mentions."""

from __future__ import annotations

from collections.abc import Iterable

from auditor.findings import Finding, Severity
from auditor.rules_api import RuleContext

# Constrained types whose implicit uniform prior is proper: their support is bounded
# whatever the declared bounds (simplex, sphere, correlation matrices).
_COMPACT_TYPES = {"simplex", "unit_vector", "corr_matrix", "cholesky_factor_corr"}
#: Unbounded constrained types: their range is described by the type, not by bounds.
_TYPE_RANGE = {"positive_ordered": "(0, +inf)", "cov_matrix": "the covariance matrices",
               "cholesky_factor_cov": "the Cholesky factors of covariance matrices",
               "sum_to_zero_vector": "the sum-to-zero vectors"}


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag parameters-block declarations with no prior statement."""
    prog = ctx.analysis.program
    # PyMC free random variables always carry a distribution (pm.Flat is priors.flat);
    # a program with syntax errors has an incomplete summary, so absences mean nothing.
    if prog is None or prog.language != "stan" or prog.syntax_errors:
        return []
    findings = []
    for decl in prog.parameters:
        if decl.priors:
            continue
        bounded = (decl.lower is not None and decl.upper is not None) or decl.type in _COMPACT_TYPES
        lower = decl.lower.text if decl.lower is not None else "-inf"
        upper = decl.upper.text if decl.upper is not None else "+inf"
        if decl.type in _COMPACT_TYPES:
            support = f"the {decl.type} space"
        elif decl.type in _TYPE_RANGE:
            support = _TYPE_RANGE[decl.type]
        else:
            support = f"({lower}, {upper})"
        kind = "a proper uniform" if bounded else "an improper flat"
        affine = ""
        if decl.offset is not None or decl.multiplier is not None:
            affine = " Its offset/multiplier reparameterizes it but gives it no prior."
        message = (
            f"Parameter `{decl.name}` has no prior statement, so it gets {kind} prior "
            f"over {support}.{affine}"
        )
        findings.append(
            ctx.finding(
                message,
                evidence={
                    "parameter": decl.name,
                    "declared_lower": decl.lower.text if decl.lower is not None else None,
                    "declared_upper": decl.upper.text if decl.upper is not None else None,
                    "implicit_prior": "uniform (proper)" if bounded else "flat (improper)",
                    "offset": decl.offset,
                    "multiplier": decl.multiplier,
                },
                quantity=decl.name,
                location=ctx.location_of(decl),
                severity=ctx.pick_severity(Severity.WARNING if bounded else Severity.ERROR),
            )
        )
    return findings
