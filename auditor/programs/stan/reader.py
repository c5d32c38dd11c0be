"""Read a Stan file into a :class:`ProgramSummary`, turning every failure into a finding."""

from __future__ import annotations

from pathlib import Path

from auditor.boundary import Boundary, Refused
from auditor.programs.stan.includes import expand_includes
from auditor.programs.stan.parser import StanSyntaxError, parse_stan
from auditor.programs.stan.summarize import summarize
from auditor.programs.summary import ProgramSummary, SyntaxProblem


def read_stan(path: Path, gate: Boundary | None = None) -> ProgramSummary:
    """Parse the Stan program at ``path``; never raises on bad input.

    The program and its ``#include`` files are opened through ``gate`` (the
    project boundary; default: type and size checks only). An unreadable file,
    a bad or refused ``#include`` or a syntax error becomes a
    :class:`SyntaxProblem` in ``syntax_errors`` naming the file and position.
    """
    gate = gate or Boundary.unconfined()
    try:
        text = gate.read_text(path)
    except Refused as exc:
        return _unreadable(path, exc.reason, exc.kind)
    except UnicodeDecodeError:
        return _unreadable(path, "the file is not UTF-8 text")
    except OSError as exc:
        return _unreadable(path, f"cannot read the file: {exc.strerror or exc}")
    return read_stan_text(text, path, gate)


def read_stan_text(text: str, path: Path, gate: Boundary | None = None) -> ProgramSummary:
    """Parse Stan program ``text`` as if read from ``path`` (includes resolve beside it)."""
    summary = ProgramSummary(language="stan", path=str(path), source_lines=text.splitlines())
    source = expand_includes(path, text, gate)
    summary.includes = list(source.includes)
    for p in source.problems:
        summary.syntax_errors.append(SyntaxProblem(p.message, p.line, p.column, p.path, p.kind))
    try:
        tree = parse_stan(source.text)
    except StanSyntaxError as exc:
        file, line = source.origin(exc.line)
        summary.syntax_errors.append(
            SyntaxProblem(exc.message, line, exc.column, file or str(path)))
        return summary
    except RecursionError:
        return _too_deep(summary, path)
    try:
        summarize(tree, source, summary)
    except RecursionError:
        return _too_deep(summary, path)
    return summary


def _too_deep(summary: ProgramSummary, path: Path) -> ProgramSummary:
    summary.syntax_errors.append(SyntaxProblem(
        "the program is nested too deeply to read (thousands of levels of brackets)",
        1, 1, str(path)))
    return summary


def _unreadable(path: Path, message: str, kind: str = "syntax") -> ProgramSummary:
    summary = ProgramSummary(language="stan", path=str(path))
    summary.syntax_errors.append(SyntaxProblem(message, 1, 1, str(path), kind))
    return summary
