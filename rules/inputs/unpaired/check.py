"""Report programs found without draws (warning) and draws without a program (note)."""

from __future__ import annotations

from auditor.findings import Location, Severity


def check(ctx):
    """One finding per ``unpaired`` problem; draws without a program are a note."""
    for p in ctx.analysis.problems:
        if p.kind != "unpaired":
            continue
        program_side = p.path.suffix in (".stan", ".py")
        yield ctx.finding(
            f"{ctx.project.relpath(p.path)}: {p.message}",
            evidence={"file": ctx.project.relpath(p.path)},
            location=Location(ctx.project.relpath(p.path)),
            severity=ctx.severity if program_side else Severity.NOTE,
        )
