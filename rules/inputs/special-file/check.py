"""Report FIFOs, sockets, devices and link loops that were not opened."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One finding per ``special-file`` problem of the analysis (project-level ones
    found while walking the folders are reported by the engine)."""
    return problem_findings(ctx, "special-file")
