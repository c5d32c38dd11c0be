"""inputs.stale-fit: the posterior draws' variables against the program's declarations.

Names ending in ``__`` are sampler or transform bookkeeping (CmdStan ``lp__``, PyMC
``sigma_log__``) and are not compared. Generated quantities may be absent from the
posterior group because loaders move ``log_lik`` and ``y_rep`` to their own groups,
so only missing *parameters* count as missing.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Iterable
from typing import Any

import numpy as np

from auditor.findings import Finding, Severity
from auditor.programs.summary import Declaration
from auditor.rules_api import RuleContext

_DRAWS_BLOCKS = ("parameters", "transformed parameters", "generated quantities")
_SQUARE = {"cov_matrix", "corr_matrix", "cholesky_factor_corr"}
#: Types whose draws shape cannot be told from the dims text alone.
_UNSHAPED = {"cholesky_factor_cov", "complex", "complex_vector", "complex_row_vector",
             "complex_matrix", "tuple"}


def _eval_size(text: str, data: dict[str, Any]) -> int | None:
    """Integer value of a size expression made of literals, data scalars and + - * %/%."""
    try:
        node = ast.parse(text.replace("%/%", "//"), mode="eval").body
    except SyntaxError:
        return None

    def ev(n: ast.expr) -> int | None:
        if isinstance(n, ast.Constant) and isinstance(n.value, int):
            return n.value
        if isinstance(n, ast.Name) and n.id in data:
            arr = np.asarray(data[n.id])
            if arr.ndim == 0 and np.issubdtype(arr.dtype, np.number):
                v = float(arr)
                return int(v) if v.is_integer() else None
            return None
        if isinstance(n, ast.BinOp):
            a, b = ev(n.left), ev(n.right)
            if a is None or b is None:
                return None
            if isinstance(n.op, ast.Add):
                return a + b
            if isinstance(n.op, ast.Sub):
                return a - b
            if isinstance(n.op, ast.Mult):
                return a * b
            if isinstance(n.op, ast.FloorDiv) and b != 0:
                return a // b
        return None

    return ev(node)


def _expected_shape(decl: Declaration, data: dict[str, Any]) -> tuple[int, ...] | None:
    if decl.type in _UNSHAPED:
        return None
    sizes = []
    for text in decl.dims:
        v = _eval_size(text, data)
        if v is None:
            return None
        sizes.append(v)
    if decl.type in _SQUARE and sizes:
        sizes.append(sizes[-1])
    return tuple(sizes)


def _shape(da: Any) -> tuple[int, ...]:
    return tuple(int(da.sizes[d]) for d in da.dims if d not in ("chain", "draw"))


def check(ctx: RuleContext) -> Iterable[Finding]:
    """Flag undeclared draws variables, missing parameters and shape mismatches."""
    prog = ctx.analysis.program
    post = ctx.analysis.group("posterior")
    if prog is None or post is None or prog.syntax_errors:
        return []
    data = ctx.analysis.data
    declared = {d.name: d for d in prog.declarations.values() if d.block in _DRAWS_BLOCKS}
    # A tuple's slots are variables of their own in the draws (``pair:1``, ``pair:2``;
    # auditor/loaders/stan_names.py): they belong to the declaration ``pair``.
    draws_names = sorted({str(n).split(":", 1)[0] for n in post.data_vars
                          if not str(n).endswith("__")})
    slots = {str(n).split(":", 1)[0] for n in post.data_vars if ":" in str(n)}
    # A PyMC source may name variables at run time (f-strings, loops), which a reader
    # that never runs it cannot see: an unseen name there is a warning, not proof.
    unseen_severity = ctx.severity
    if prog.language != "stan" and ctx.severity == ctx.rule.severity:
        unseen_severity = Severity.WARNING
    findings = []
    for name in draws_names:
        if name in declared:
            continue
        findings.append(ctx.finding(
            f"The draws contain `{name}`, which the program does not declare as a parameter, "
            "transformed parameter or generated quantity: the draws look like they came "
            "from another version of the program.",
            evidence={"variable": name, "problem": "undeclared",
                      "draws_shape": "x".join(map(str, _shape(post[name]))) or "scalar"
                      if name in post.data_vars else "tuple"},
            quantity=name, location=ctx.program_location(None), severity=unseen_severity))
    for decl in declared.values():
        expected = _expected_shape(decl, data)
        if decl.name in slots:
            continue  # a tuple: its slots' shapes are not compared
        if decl.name not in post.data_vars:
            empty = expected is not None and math.prod(expected) == 0
            if decl.block == "parameters" and not empty:
                findings.append(ctx.finding(
                    f"Parameter `{decl.name}` is declared in the program but absent from "
                    "the draws, so they did not come from this program.",
                    evidence={"variable": decl.name, "problem": "missing"},
                    quantity=decl.name, location=ctx.location_of(decl)))
            continue
        got = _shape(post[decl.name])
        # A scalar stored as a length-1 vector (or the reverse) is a loader's choice.
        if expected is None or got == expected or math.prod(got) == math.prod(expected) == 1:
            continue
        dims = ", ".join(decl.dims)
        findings.append(ctx.finding(
            f"`{decl.name}` is declared with size [{dims}] = "
            f"{'x'.join(map(str, expected)) or 'scalar'} but the draws have shape "
            f"{'x'.join(map(str, got)) or 'scalar'}, so they did not come from this program "
            "with this data.",
            evidence={"variable": decl.name, "problem": "shape",
                      "declared_dims": dims,
                      "declared_shape": "x".join(map(str, expected)) or "scalar",
                      "draws_shape": "x".join(map(str, got)) or "scalar"},
            quantity=decl.name, location=ctx.location_of(decl)))
    return findings
