"""E-BFMI per chain from the energy statistic (computed by auditor.kernels.chains)."""

from __future__ import annotations

import numpy as np

from auditor.kernels.chains import ebfmi
from auditor.rulekit import sample_stat


def check(ctx):
    """One finding listing the chains whose E-BFMI is below ``min_ebfmi``."""
    energy = sample_stat(ctx, "energy")
    if energy is None or energy.ndim != 2 or energy.shape[1] < 3 or energy.dtype.kind not in "fiu":
        return
    values = ebfmi(energy.astype(float))
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
