"""Report input files that that disagree with the other chains of their run."""

from __future__ import annotations

from auditor.findings import Location


def check(ctx):
    """One finding per ``inconsistent-chains`` problem recorded while loading."""
    for p in ctx.analysis.problems:
        if p.kind == "inconsistent-chains":
            yield ctx.finding(
                f"{ctx.project.relpath(p.path)}" + (f", line {p.line}" if p.line else "")
                + f": {p.message}",
                evidence={"file": ctx.project.relpath(p.path), "line": p.line},
                location=Location(ctx.project.relpath(p.path), p.line),
            )
