"""Flag variables whose tail-ESS is below the per-chain threshold."""

from __future__ import annotations

from auditor.rulekit import low_ess_findings


def check(ctx):
    """One finding per variable with tail-ESS below ``min_per_chain`` x chains."""
    return low_ess_findings(ctx, "ess_tail", "tail-ESS")
