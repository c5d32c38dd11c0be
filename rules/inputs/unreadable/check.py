"""Report input files that could not be used."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One finding per ``unreadable`` problem recorded while loading."""
    return problem_findings(ctx, "unreadable")
