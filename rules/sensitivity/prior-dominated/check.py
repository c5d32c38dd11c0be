"""Parameters sensitive to the prior but not the likelihood."""

from __future__ import annotations

from auditor.rulekit import sensitivity_findings


def check(ctx):
    """One finding per variable with quantities the prior dominates."""
    return sensitivity_findings(ctx, conflict=False)
