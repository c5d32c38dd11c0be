"""Findings: what a rule reports, with its evidence and its place.

A finding is plain data; reporters format it and never change it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any

from auditor.boundary import display as printable


class Severity(StrEnum):
    """Severity levels, named as in SARIF 2.1.0 (``error``, ``warning``, ``note``)."""

    ERROR = "error"
    WARNING = "warning"
    NOTE = "note"

    @property
    def rank(self) -> int:
        """Larger is more severe; used for sorting and the gate."""
        return {"note": 0, "warning": 1, "error": 2}[self.value]


#: Workflow stages in the order an analysis passes through them; findings are
#: grouped and sorted by this order everywhere.
STAGES: tuple[str, ...] = (
    "inputs",
    "model",
    "priors",
    "prior-predictive",
    "sampling",
    "posterior-predictive",
    "loo",
    "comparison",
    "sensitivity",
    "calibration",
)


def stage_rank(stage: str) -> int:
    """Position of ``stage`` in :data:`STAGES` (unknown stages sort last)."""
    return STAGES.index(stage) if stage in STAGES else len(STAGES)


@dataclass(frozen=True)
class Location:
    """Where a finding points.

    Parameters
    ----------
    path
        File path relative to the project root, with ``/`` separators.
    line, column
        1-based position in that file, when there is one.
    """

    path: str
    line: int | None = None
    column: int | None = None


@dataclass
class Finding:
    """One result of one rule.

    Parameters
    ----------
    rule_id
        The rule's permanent id, ``stage.name``.
    severity
        Severity after configuration.
    stage
        Workflow stage (see :data:`STAGES`).
    message
        One sentence saying what was seen, with the numbers.
    evidence
        The quantities and numbers that triggered the finding (JSON-safe scalars).
    fix
        The fix in one sentence.
    location
        File and line, when the finding points into a file.
    analysis
        Name of the analysis, or ``None`` for project-level findings.
    quantity
        The quantity (e.g. ``theta[3]``) the finding concerns, if any.
    """

    rule_id: str
    severity: Severity
    stage: str
    message: str
    evidence: dict[str, Any] = field(default_factory=dict)
    fix: str = ""
    location: Location | None = None
    analysis: str | None = None
    quantity: str | None = None
    #: Set when the project accepted this finding: ``reason``, ``by``, ``expires``
    #: (see :mod:`auditor.gate.accepted`); the gate ignores accepted findings.
    accepted: dict[str, Any] | None = None
    #: Against a baseline report: ``new`` or ``unchanged`` (see :mod:`auditor.gate.baseline`).
    baseline: str | None = None

    def __post_init__(self) -> None:
        # File names with bytes that are not UTF-8 end up in messages; a report must
        # still be writable, so such text is made printable once, here.
        self.message = printable(self.message)
        self.quantity = None if self.quantity is None else printable(self.quantity)
        self.analysis = None if self.analysis is None else printable(self.analysis)
        self.evidence = {k: printable(v) if isinstance(v, str) else v
                         for k, v in self.evidence.items()}

    def sort_key(self) -> tuple:
        """Stable order: stage, severity (worst first), rule, place, quantity, text."""
        loc = self.location
        return (
            stage_rank(self.stage),
            -self.severity.rank,
            self.rule_id,
            loc.path if loc else "",
            (loc.line or 0) if loc else 0,
            self.quantity or "",
            self.message,
        )
