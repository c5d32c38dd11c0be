"""Report syntax errors of the analysis's model program."""

from __future__ import annotations

from auditor.findings import Location


def check(ctx):
    """One finding per syntax problem, at its line and column."""
    prog = ctx.analysis.program
    if prog is None:
        return
    for problem in prog.syntax_errors:
        if problem.kind != "syntax":
            continue  # a file the boundary refused: an input problem of its own kind
        path = ctx.project.relpath(problem.path)
        yield ctx.finding(
            f"{path}:{problem.line}:{problem.column}: {problem.message}",
            evidence={"line": problem.line, "column": problem.column},
            location=Location(path, problem.line, problem.column),
        )
