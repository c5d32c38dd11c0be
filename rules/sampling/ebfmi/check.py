"""E-BFMI per chain from the energy statistic (computed by arviz-stats)."""

from __future__ import annotations

import numpy as np
import xarray as xr


def check(ctx):
    """One finding listing the chains whose E-BFMI is below ``min_ebfmi``."""
    ds = ctx.analysis.group("sample_stats")
    if ds is None or "energy" not in ds.data_vars or ds.sizes.get("draw", 0) < 3:
        return
    import arviz_stats as azs

    energy = xr.Dataset({"energy": ds["energy"].astype(float)})
    values = np.asarray(azs.bfmi(energy)["energy"].values).reshape(-1)
    limit = float(ctx.thresholds["min_ebfmi"])
    low = [(i + 1, float(v)) for i, v in enumerate(values) if np.isfinite(v) and v < limit]
    if not low:
        return
    listing = ", ".join(f"chain {c}: {v:.2f}" for c, v in low)
    yield ctx.finding(
        f"E-BFMI below {limit:g} in {len(low)} of {values.size} chains ({listing})",
        evidence={
            "ebfmi": [round(float(v), 4) for v in values],
            "threshold": limit,
            "low_chains": [c for c, _ in low],
        },
    )
