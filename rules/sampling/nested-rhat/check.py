"""Nested R-hat (Margossian et al. 2024) of every quantity, for many short chains."""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from auditor.findings import Severity
from auditor.kernels.chains import rhat_nested, superchain_groups
from auditor.rulekit import many_short_chains


def _superchains(ctx, n_chains: int) -> tuple[list, str | None]:
    """One superchain label per chain, or a reason why none can be formed."""
    ids = list(ctx.thresholds["superchain_ids"])
    if ids:
        if len(ids) != n_chains:
            return [], f"superchain_ids gives {len(ids)} labels for {n_chains} chains"
        try:
            superchain_groups(n_chains, ids)
        except (TypeError, ValueError) as exc:
            return [], f"superchain_ids: {exc}"
        return ids, None
    per = int(ctx.thresholds["chains_per_superchain"])
    if per < 1 or n_chains % per or n_chains // per < 2:
        return [], (f"{n_chains} chains cannot be split into at least 2 superchains of "
                    f"{per} consecutive chains")
    return [c // per for c in range(n_chains)], None


def check(ctx):
    """One finding per variable whose nested R-hat exceeds ``max_nested_rhat``."""
    a = ctx.analysis
    if not many_short_chains(ctx, int(ctx.thresholds["min_chains"]),
                             int(ctx.thresholds["max_draws"])):
        return
    ids, problem = _superchains(ctx, a.n_chains)
    if problem:
        yield ctx.finding(
            f"{a.n_chains} chains of {a.n_draws} draws call for nested R-hat, but {problem}; "
            'set [rules."sampling.nested-rhat"] superchain_ids (one label per chain)',
            evidence={"chains": a.n_chains, "draws": a.n_draws},
            severity=Severity.NOTE,
        )
        return
    table = ctx.diagnostics
    rows = table.rows
    if not rows:
        return
    values = np.full(len(rows), np.nan)
    for idx, block in table.blocks():
        values[idx] = rhat_nested(block, ids)
    limit = float(ctx.thresholds["max_nested_rhat"])
    by_var: dict[str, list[tuple[dict, float]]] = defaultdict(list)
    for row, value in zip(rows, values, strict=True):
        if not row["constant"] and np.isfinite(value):
            by_var[row["variable"]].append((row, float(value)))
    n_super = len(set(ids))
    for var, items in by_var.items():
        bad = [(r, v) for r, v in items if v > limit]
        if not bad:
            continue
        worst, value = max(bad, key=lambda rv: rv[1])
        share = f"{len(bad)} of {len(items)} elements of {var}" if len(items) > 1 else var
        yield ctx.finding(
            f"nested R-hat of {share} above {limit:g} over {n_super} superchains of "
            f"{a.n_chains // n_super} chains ({a.n_draws} draws each); worst "
            f"{worst['quantity']} = {value:.3f}",
            evidence={"nested_rhat": round(value, 6), "threshold": limit,
                      "flagged": len(bad), "elements": len(items), "chains": a.n_chains,
                      "superchains": n_super, "draws": a.n_draws},
            quantity=worst["quantity"],
        )
