"""Small helpers that several rule checks share (rules import this; it imports no rule)."""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterator

import numpy as np

from auditor.findings import Finding, Location
from auditor.programs.summary import Declaration, Distribution
from auditor.rules_api import RuleContext


def low_ess_findings(ctx: RuleContext, column: str, label: str) -> Iterator[Finding]:
    """Findings for variables whose ``column`` ESS is below ``min_per_chain`` x chains
    (or below ``min_total`` when that is higher)."""
    chains = max(ctx.analysis.n_chains, 1)
    per_chain = float(ctx.thresholds["min_per_chain"])
    floor = float(ctx.thresholds.get("min_total", 0))
    limit = max(per_chain * chains, floor)
    basis = ("the required minimum" if floor > per_chain * chains
             else f"{per_chain:g} per chain x {chains} chains")
    by_var = defaultdict(list)
    for row in ctx.diagnostics.rows:
        if not row["constant"] and row[column] is not None:
            by_var[row["variable"]].append(row)
    for var, rows in by_var.items():
        bad = [r for r in rows if r[column] < limit]
        if not bad:
            continue
        worst = min(bad, key=lambda r: r[column])
        share = f"{len(bad)} of {len(rows)} elements of {var}" if len(rows) > 1 else var
        yield ctx.finding(
            f"{label} of {share} below {limit:g} ({basis}); "
            f"lowest {worst['quantity']} = {worst[column]:.0f}",
            evidence={
                column: round(worst[column], 2),
                "threshold": limit,
                "per_chain": per_chain,
                "min_total": floor,
                "chains": chains,
                "flagged": len(bad),
                "elements": len(rows),
            },
            quantity=worst["quantity"],
        )


def sample_stat(ctx: RuleContext, name: str) -> np.ndarray | None:
    """Sampler statistic ``name`` as a (chain, draw) array, or ``None`` when absent."""
    ds = ctx.analysis.group("sample_stats")
    if ds is None or name not in ds.data_vars:
        return None
    return np.asarray(ds[name].transpose("chain", "draw", ...).values)


#: Blocks whose declarations take prior statements.
PRIOR_BLOCKS = ("parameters", "transformed parameters")


def prior_statements(ctx: RuleContext) -> Iterator[tuple[Declaration, Distribution]]:
    """Every prior statement of the program with its variable; none when it does not parse."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return
    for decl in prog.declarations.values():
        if decl.block in PRIOR_BLOCKS:
            for dist in decl.priors:
                yield decl, dist


def problem_findings(ctx: RuleContext, kind: str) -> Iterator[Finding]:
    """One finding per input problem of ``kind`` recorded while loading the analysis.

    A finding points at the file only when the file is inside the project; a path
    outside it is named in the message, never given to reviewers' tools as a place.
    """
    for p in ctx.analysis.problems:
        if p.kind != kind:
            continue
        path = ctx.project.relpath(p.path)
        inside = not (path.startswith("/") or path.startswith(".."))
        yield ctx.finding(
            f"{path}" + (f", line {p.line}" if p.line else "") + f": {p.message}",
            evidence={"file": path, "line": p.line},
            location=Location(path, p.line) if inside else None,
        )


# --------------------------------------------------------------------------- predictive checks


def likelihood_of(ctx: RuleContext, observed: str) -> Distribution | None:
    """The program's likelihood statement of ``observed``, when the program has one."""
    prog = ctx.analysis.program
    if prog is None:
        return None
    for lik in prog.likelihoods:
        if lik.variable == observed:
            return lik.distribution
    return None


def observed_location(ctx: RuleContext, observed: str) -> Location | None:
    """Where a predictive finding about ``observed`` points: its likelihood statement,
    else its declaration, else (``None``) the analysis's first draws file."""
    dist = likelihood_of(ctx, observed)
    if dist is not None:
        return ctx.location_of(dist)
    prog = ctx.analysis.program
    decl = prog.declarations.get(observed) if prog is not None else None
    return ctx.location_of(decl) if decl is not None else None


def observed_support(ctx: RuleContext, observed: str, kind: str):  # noqa: ANN201
    """The outcome's support: the program's declared bounds and type, else its kind."""
    from auditor.predictive_checks import support

    prog = ctx.analysis.program
    decl = prog.declarations.get(observed) if prog is not None else None
    lower = decl.lower.value if decl is not None and decl.lower is not None else None
    upper = decl.upper.value if decl is not None and decl.upper is not None else None
    return support(kind, lower, upper, integer_type=decl is not None and decl.type == "int")
