"""A chain whose lp, energy or draws differ from every other chain's (rank-based z tests)."""

from __future__ import annotations

import numpy as np

from auditor.kernels.chains import bonferroni_z, odd_chains
from auditor.rulekit import chain_location, chain_names, sample_stat

#: Sampler statistics compared, in this order, with their names in messages.
STATS = (("lp", "lp"), ("energy", "energy"))


def _series(ctx) -> tuple[list[str], list[np.ndarray], int]:
    """Names and (chain, draw) arrays of every series tested, and the count of all series
    the false-alarm bound must cover."""
    names: list[str] = []
    arrays: list[np.ndarray] = []
    bound = 0
    for stat, label in STATS:
        values = sample_stat(ctx, stat)
        if values is not None and values.ndim == 2 and values.dtype.kind in "fiu":
            bound += 1
            names.append(label)
            arrays.append(values.astype(np.float64))
    table = ctx.diagnostics
    rows = table.rows
    total = len(rows)
    bound += total
    if total <= int(ctx.thresholds["test_all_quantities"]):
        index = np.arange(total)
    else:
        limit = float(ctx.thresholds["screen_rhat"])
        screened = sorted(((r["rhat"], k) for k, r in enumerate(rows)
                           if r["rhat"] is not None and r["rhat"] > limit), reverse=True)
        keep = screened[: max(0, int(ctx.thresholds["max_screened"]))]
        index = np.array(sorted(k for _, k in keep), dtype=np.int64)
    if index.size:
        for idx, block in table.blocks(index=index):
            for j, k in enumerate(idx):
                names.append(table.quantities[int(k)])
                arrays.append(np.asarray(block[:, :, j], dtype=np.float64))
    return names, arrays, bound


def check(ctx):
    """One finding per chain that differs from each other chain in some series."""
    n_chains = ctx.analysis.n_chains
    if n_chains < int(ctx.thresholds["min_chains"]) or ctx.analysis.n_draws < 4:
        return
    names, arrays, bound = _series(ctx)
    keep = [k for k, a in enumerate(arrays)
            if a.shape[0] == n_chains and a.shape[1] >= 4 and np.isfinite(a).all()
            and np.ptp(a) > 0]
    if not keep:
        return
    names = [names[k] for k in keep]
    x = np.stack([arrays[k] for k in keep])  # (series, chains, draws)
    alpha = float(ctx.thresholds["alpha"])
    tests = bound * n_chains * 2
    crit = bonferroni_z(alpha, tests)
    hits: dict[int, list[dict]] = {}
    for s, c, kind, z in odd_chains(x, crit):
        others = [j for j in range(n_chains) if j != c]
        hits.setdefault(c, []).append({
            "series": names[s],
            "kind": kind,
            "z": round(z, 2),
            "chain_mean": float(x[s, c].mean()),
            "others_mean": float(x[s, others].mean()),
            "chain_sd": float(x[s, c].std(ddof=1)),
            "others_sd": float(x[s, others].std(ddof=1)),
        })  # fmt: skip
    labels = chain_names(ctx)
    stat_names = {label for _, label in STATS}
    for c, found in sorted(hits.items()):
        found.sort(key=lambda h: -abs(h["z"]))
        quantities = [h for h in found if h["series"] not in stat_names]
        stats = [h for h in found if h["series"] in stat_names]
        named = stats + quantities[: max(1, int(ctx.thresholds["max_named"]))]
        parts = [_describe(h) for h in named]
        more = len(quantities) - (len(named) - len(stats))
        text = "; ".join(parts) + (f"; and {more} more quantit{'y' if more == 1 else 'ies'}"
                                   if more > 0 else "")
        yield ctx.finding(
            f"{labels[c]} differs from each of the other {n_chains - 1} chains: {text} "
            f"(|z| > {crit:.1f} against every other chain, a bound that keeps false alarms on "
            f"healthy runs below {alpha:g})",
            evidence={
                "chain": labels[c],
                "chain_index": c + 1,
                "critical_z": round(crit, 3),
                "alpha": alpha,
                "tests": tests,
                "differences": [{k: (round(v, 6) if isinstance(v, float) else v)
                                 for k, v in h.items()} for h in named],
                "quantities": [h["series"] for h in quantities],
            },
            quantity=quantities[0]["series"] if quantities else None,
            location=chain_location(ctx, c),
        )


def _describe(h: dict) -> str:
    if h["kind"] == "location":
        side = "higher" if h["z"] > 0 else "lower"
        return (f"{h['series']} sits {side} (mean {h['chain_mean']:.4g} against "
                f"{h['others_mean']:.4g}; z {h['z']:+.1f})")
    side = "wider" if h["z"] > 0 else "narrower"
    return (f"{h['series']} spreads {side} (sd {h['chain_sd']:.3g} against "
            f"{h['others_sd']:.3g}; z {h['z']:+.1f})")
