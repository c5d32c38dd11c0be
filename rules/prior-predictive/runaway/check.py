"""Prior draws that run away to huge values (an improper prior sampled on its own)."""

from __future__ import annotations

import numpy as np

from auditor.kernels.diagnostics import convergence


def _largest(ds) -> list[tuple[str, float, np.ndarray]]:
    out = []
    for name, da in ds.data_vars.items():
        if "chain" not in da.dims or "draw" not in da.dims:
            continue
        arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
        finite = np.abs(arr[np.isfinite(arr)])
        biggest = float(finite.max()) if finite.size else 0.0
        if not np.all(np.isfinite(arr)):
            biggest = float("inf")
        out.append((str(name), biggest, arr))
    return out


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
    group, name, big, arr = runaway[0]
    rhat = None
    if arr.shape[0] > 1 and arr.shape[1] >= 4 and np.all(np.isfinite(arr)):
        values = convergence(arr.reshape(arr.shape[0], arr.shape[1], -1),
                             mcse_mean=False)["rhat_rank"]
        rhat = float(np.nanmax(values)) if np.isfinite(values).any() else None
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
