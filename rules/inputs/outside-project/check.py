"""Report paths that lead outside the project and were therefore not read."""

from __future__ import annotations

from auditor.rulekit import problem_findings


def check(ctx):
    """One finding per ``outside-project`` problem of the analysis.

    Such problems found while walking the project's folders (a link leading out)
    belong to no analysis; the engine reports those with this rule's metadata.
    """
    return problem_findings(ctx, "outside-project")
