"""Report chain files that disagree with the other chains of their run."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One finding per ``inconsistent-chains`` problem recorded while loading."""
    return problem_findings(ctx, "inconsistent-chains")
