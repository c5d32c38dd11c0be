"""Energy distribution (marginal energy against energy transitions) with E-BFMI per chain."""

from __future__ import annotations

from auditor.figures.sampling import energy_figures


def figures(ctx, findings):
    """One energy figure for the analysis."""
    return energy_figures(ctx, findings)
