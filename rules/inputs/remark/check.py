"""Report what the readers noticed about input files without losing anything."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One note per ``note`` problem recorded while loading the analysis."""
    return problem_findings(ctx, "note")
