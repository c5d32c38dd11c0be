"""MCSE of the mean and of declared quantiles against the analyst's precision targets."""

from __future__ import annotations

import math

import numpy as np

from auditor.findings import Severity
from auditor.kernels.diagnostics import prob_label


def _number(value) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _percent(p: float) -> str:
    return f"{100 * p:g}%"


def check(ctx):
    """One finding per quantity whose MCSE exceeds its target; notes for unusable settings."""
    targets = dict(ctx.thresholds["targets"])
    if not targets:
        return
    table = ctx.diagnostics
    rows = table.rows
    if not rows:
        return
    probs: list[float] = []
    for p in ctx.thresholds["quantiles"]:
        q = _number(p)
        if q is None or not 0 < q < 1:
            yield ctx.finding(f"quantile {p!r} in quantiles is not a probability between 0 "
                              "and 1; it is left out", evidence={"quantile": repr(p)},
                              severity=Severity.NOTE)
        elif q not in probs:
            probs.append(q)
    usable: dict[str, float] = {}
    for name, value in targets.items():
        target = _number(value)
        if target is None or target <= 0:
            yield ctx.finding(f"target {value!r} for {name!r} is not a positive number; it is "
                              "left out", evidence={"name": name, "target": repr(value)},
                              severity=Severity.NOTE)
            continue
        if len(table.index_of([name])) == 0:
            yield ctx.finding(f"target for {name!r} names no quantity of the posterior "
                              "(variables: " + ", ".join(sorted(set(table.variables))[:8])
                              + ")", evidence={"name": name}, severity=Severity.NOTE)
            continue
        usable[name] = target
    index = table.index_of(usable)
    if index.size == 0:
        return
    names = [f"mcse_quantile_{prob_label(p)}" for p in probs]
    extra = table.measures(names, quantiles=probs, index=index) if names else {}
    for k, pos in enumerate(index):
        row = rows[int(pos)]
        quantity = row["quantity"]
        target = usable.get(quantity, usable.get(row["variable"]))
        if target is None or row["constant"]:
            continue
        over: list[tuple[str, float]] = []
        if row["mcse_mean"] is not None and row["mcse_mean"] > target:
            over.append(("mean", row["mcse_mean"]))
        for p, name in zip(probs, names, strict=True):
            value = float(extra[name][k])
            if np.isfinite(value) and value > target:
                over.append((f"{_percent(p)} quantile", value))
        if not over:
            continue
        worst = max(v for _, v in over)
        listing = ", ".join(f"{what} {value:.3g}" for what, value in over)
        yield ctx.finding(
            f"Monte Carlo standard error of {quantity} above the declared target {target:g}: "
            f"{listing}; meeting it needs about {(worst / target) ** 2:.1f} times the effective "
            "draws",
            evidence={"target": target, "mcse": {what: round(v, 6) for what, v in over},
                      "ess_factor": round((worst / target) ** 2, 3)},
            quantity=quantity,
        )
