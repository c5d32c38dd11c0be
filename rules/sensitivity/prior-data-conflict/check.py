"""Parameters sensitive to both prior and likelihood: prior-data conflict."""

from __future__ import annotations

from auditor.rulekit import sensitivity_findings


def check(ctx):
    """One finding per variable with quantities sensitive to both components."""
    return sensitivity_findings(ctx, conflict=True)
