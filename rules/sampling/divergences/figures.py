"""Divergent transitions in the pair of quantities that best separates them."""

from __future__ import annotations

from auditor.figures.sampling import divergence_figures


def figures(ctx, findings):
    """One scatter figure of the best-separating pair, divergent draws marked."""
    return divergence_figures(ctx, findings)
