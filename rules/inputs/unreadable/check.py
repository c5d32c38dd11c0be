"""Report input files that could not be used."""

from __future__ import annotations

from auditor.findings import Location


def check(ctx):
    """One finding per ``unreadable`` problem recorded while loading."""
    for p in ctx.analysis.problems:
        if p.kind == "unreadable":
            yield ctx.finding(
                f"{ctx.project.relpath(p.path)}" + (f", line {p.line}" if p.line else "")
                + f": {p.message}",
                evidence={"file": ctx.project.relpath(p.path), "line": p.line},
                location=Location(ctx.project.relpath(p.path), p.line),
            )
