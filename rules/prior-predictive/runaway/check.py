"""Prior draws that run away to huge values (an improper prior sampled on its own)."""

from __future__ import annotations

import numpy as np

from auditor.kernels.diagnostics import convergence
from auditor.rulekit import draws_blocks


def _largest(ds) -> list[tuple[str, float, object]]:
    """(name, largest magnitude, variable) of every draws variable; infinite when a draw is
    not finite. Read block by block (prior draws read lazily are never loaded whole)."""
    out = []
    for name, da in ds.data_vars.items():
        if "chain" not in da.dims or "draw" not in da.dims:
            continue
        biggest = 0.0
        for block in draws_blocks(da):
            arr = np.asarray(block, dtype=float)
            if not np.all(np.isfinite(arr)):
                biggest = float("inf")
                break
            if arr.size:
                biggest = max(biggest, float(np.abs(arr).max()))
        out.append((str(name), biggest, da))
    return out


def _largest_rhat(da) -> float | None:
    """The largest rank-normalized R-hat over the elements of a variable with finite draws."""
    parts = [convergence(np.asarray(block, dtype=float), mcse_mean=False)["rhat_rank"]
             for block in draws_blocks(da)]
    if not parts:
        return None
    values = np.concatenate(parts)
    return float(np.nanmax(values)) if np.isfinite(values).any() else None


def check(ctx):
    """One finding per prior group of a sampled prior-only run whose draws exceed
    ``max_magnitude`` in size.

    Only runs made by a sampler (their statistics are kept as ``sample_stats_prior``)
    can drift; draws simulated forward from proper priors can be huge only because
    the priors are vague, which ``prior-predictive.implausible`` reports.
    """
    if ctx.analysis.group("sample_stats_prior") is None:
        return
    limit = float(ctx.thresholds["max_magnitude"])
    runaway = []
    for group in ("prior", "prior_predictive"):
        ds = ctx.analysis.group(group)
        if ds is not None:
            runaway += [(group, n, big, arr) for n, big, arr in _largest(ds) if big > limit]
    if not runaway:
        return
    # The parameters first (they are the cause), the largest first.
    runaway.sort(key=lambda t: (t[0] != "prior", -t[2]))
    group, name, big, da = runaway[0]
    rhat = None
    if da.sizes["chain"] > 1 and da.sizes["draw"] >= 4 and np.isfinite(big):
        rhat = _largest_rhat(da)
    listed = ", ".join(f"`{n}` ({b:.3g})" for _, n, b, _ in runaway[:6])
    drift = f"; the chains of `{name}` disagree (R-hat {rhat:.3g})" if rhat is not None else ""
    yield ctx.finding(
        f"The prior-only run's draws reach enormous sizes: {listed}{drift}. The run had no "
        "proper target to sample, the mark of an improper prior, so these draws do not "
        "describe the priors.",
        evidence={"variables": [n for _, n, _, _ in runaway], "largest": big,
                  "rhat": rhat, "max_magnitude": limit},
        quantity=name,
    )
