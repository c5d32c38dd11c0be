"""What a loader reports when an input file is wrong.

Loaders never raise on bad input: every defect becomes a :class:`LoadProblem`
naming the file, the line where there is one, and what is wrong. The engine
turns them into findings.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import xarray as xr

from auditor.boundary import Refused
from auditor.model import SamplerSettings

#: Problem kinds. ``unreadable``: the file, or part of it, could not be used
#: (the message says what was kept); ``inconsistent-chains``: chains of one run
#: disagree; ``outside-project``, ``special-file``, ``too-large``: the project
#: boundary refused the file (see :mod:`auditor.boundary`); ``note``: worth
#: knowing, nothing was lost.
KINDS: tuple[str, ...] = (
    "unreadable", "inconsistent-chains", "outside-project", "special-file", "too-large", "note",
)


@dataclass
class LoadProblem:
    """One defect of one input file.

    Parameters
    ----------
    path
        The file concerned.
    message
        What is wrong, in plain words.
    line
        1-based line in that file, when there is one.
    kind
        One of :data:`KINDS`.
    """

    path: Path
    message: str
    line: int | None = None
    kind: str = "unreadable"

    def __str__(self) -> str:
        where = f"{self.path}:{self.line}" if self.line else str(self.path)
        return f"{where}: {self.message}"


@dataclass
class Loaded:
    """What a draws loader returns.

    Parameters
    ----------
    tree
        Draws with standard group and sampler-statistic names, or ``None`` when
        nothing usable could be read.
    settings
        Sampler settings as far as the files say.
    sources
        The files the draws in ``tree`` came from, in chain order.
    problems
        Everything that was wrong, including files left out.
    """

    tree: xr.DataTree | None
    settings: SamplerSettings = field(default_factory=SamplerSettings)
    sources: list[Path] = field(default_factory=list)
    problems: list[LoadProblem] = field(default_factory=list)


def refused_problem(path: Path, exc: Refused) -> LoadProblem:
    """The problem for a file the boundary refused to open."""
    return LoadProblem(path, exc.reason, kind=exc.kind)
