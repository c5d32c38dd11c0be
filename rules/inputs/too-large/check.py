"""Report inputs over the size limit, which were not read."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One finding per ``too-large`` problem of the analysis."""
    return problem_findings(ctx, "too-large")
