"""One entry point for model programs: pick the reader by file suffix."""

from __future__ import annotations

from pathlib import Path

from auditor.boundary import Boundary
from auditor.programs.pymc_source import read_pymc
from auditor.programs.stan import read_stan
from auditor.programs.summary import ProgramSummary, SyntaxProblem

_READERS = {".stan": read_stan, ".py": read_pymc}


def read_program(path: Path, gate: Boundary | None = None) -> ProgramSummary:
    """Summarize the Stan (``.stan``) or PyMC (``.py``) program at ``path``.

    Files are opened through ``gate`` (the project boundary; default: type and
    size checks only). Never raises on bad input: unreadable or refused files,
    bad includes and syntax errors become :class:`SyntaxProblem` entries in
    ``summary.syntax_errors``. A Python file is parsed with :mod:`ast` only,
    never imported or executed.
    """
    path = Path(path)
    reader = _READERS.get(path.suffix.lower())
    if reader is None:
        summary = ProgramSummary(language="unknown", path=str(path))
        summary.syntax_errors.append(SyntaxProblem(
            f"not a model program this tool reads: expected a .stan or .py file, "
            f"got '{path.suffix or path.name}'", 1, 1, str(path)))
        return summary
    return reader(path, gate)
