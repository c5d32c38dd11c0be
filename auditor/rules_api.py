"""What a rule folder provides and what its check receives.

A rule lives in ``rules/<stage>/<name>/`` with ``rule.toml`` (metadata, rationale,
fix, references, thresholds), ``check.py`` (``check(ctx) -> Iterable[Finding]``),
optionally ``figures.py`` (``figures(ctx, findings) -> list[Figure]``), and
``cases/good/`` and ``cases/bad/`` (small projects; see DEVELOPERS.md).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from auditor.findings import Finding, Location, Severity

if TYPE_CHECKING:
    from auditor.comparison import ComparisonSet
    from auditor.diagnostics import DiagnosticsTable
    from auditor.loo import LooRecord, LooTable
    from auditor.model import Analysis, Project
    from auditor.result import Figure
    from auditor.sensitivity import SensitivityTable


@dataclass
class RuleMeta:
    """A rule's metadata as read from its ``rule.toml``."""

    id: str
    title: str
    stage: str
    severity: Severity
    summary: str
    rationale: str
    fix: str
    references: list[str]
    thresholds: dict[str, Any]
    folder: Path
    aliases: list[str] = field(default_factory=list)
    check: Callable[[Any], Iterable[Finding]] | None = None
    figures: Callable[[RuleContext, list[Finding]], list[Figure]] | None = None
    #: ``analysis`` (the check runs on each analysis, with a :class:`RuleContext`)
    #: or ``comparison`` (once per comparison set, after every analysis, with a
    #: :class:`ComparisonContext`); from ``scope`` in ``rule.toml``.
    scope: str = "analysis"
    #: The loaded ``check.py`` (so a rule's ``figures.py`` can reuse its helpers).
    module: Any = None


@dataclass
class RuleContext:
    """What a check sees: one analysis, its diagnostics, the effective thresholds."""

    rule: RuleMeta
    analysis: Analysis
    project: Project
    thresholds: dict[str, Any]
    severity: Severity
    diagnostics: DiagnosticsTable
    options: dict[str, Any] = field(default_factory=dict)
    #: PSIS-LOO of the analysis's observed variables, computed on first use.
    loo: LooTable | None = None
    #: Power-scaling sensitivity and contraction, computed on first use.
    sensitivity: SensitivityTable | None = None

    def finding(
        self,
        message: str,
        evidence: dict[str, Any] | None = None,
        *,
        quantity: str | None = None,
        location: Location | None = None,
        severity: Severity | None = None,
        fix: str | None = None,
    ) -> Finding:
        """Make a finding of this rule, filling id, stage, severity and fix.

        Without ``location``, a finding points at the analysis's first draws file.
        """
        if location is None and self.analysis.sources:
            location = Location(self.project.relpath(self.analysis.sources[0]))
        return Finding(
            rule_id=self.rule.id,
            severity=severity or self.severity,
            stage=self.rule.stage,
            message=message,
            evidence=evidence or {},
            fix=fix or self.rule.fix,
            location=location,
            analysis=self.analysis.name,
            quantity=quantity,
        )

    def location_of(self, item: Any) -> Location | None:
        """Place of a program declaration or statement (``line``, ``column``, ``path``).

        Items written in an ``#include``d file carry that file's ``path``; others
        point into the analysis's program.
        """
        path = getattr(item, "path", "")
        if path:
            return Location(self.project.relpath(path), item.line, item.column)
        return self.program_location(item.line, item.column)

    def pick_severity(self, computed: Severity) -> Severity:
        """The severity a check computed, unless the user configured another one."""
        return self.severity if self.severity != self.rule.severity else computed

    def program_location(self, line: int | None, column: int | None = None) -> Location | None:
        """Location in the analysis's model program, or ``None`` without one."""
        prog = self.analysis.program
        if prog is None:
            return None
        return Location(self.project.relpath(prog.path), line, column)


@dataclass
class ComparisonContext:
    """What a comparison-scope check sees: one comparison set of compact records.

    ``comparison`` has the table (best first); ``records`` the analyses' compact
    PSIS-LOO records by analysis name; ``locations`` where each analysis's
    findings point (its first draws file); ``default_location`` where findings
    about the set as a whole point (the configuration file, else the first
    analysis's draws).
    """

    rule: RuleMeta
    comparison: ComparisonSet
    records: dict[str, LooRecord]
    thresholds: dict[str, Any]
    severity: Severity
    locations: dict[str, Location | None] = field(default_factory=dict)
    default_location: Location | None = None

    def finding(self, message: str, evidence: dict[str, Any] | None = None, *,
                analysis: str | None = None, severity: Severity | None = None,
                fix: str | None = None) -> Finding:
        """A project-level finding of this rule, about ``analysis`` when given."""
        return Finding(
            rule_id=self.rule.id,
            severity=severity or self.severity,
            stage=self.rule.stage,
            message=message,
            evidence=evidence or {},
            fix=fix or self.rule.fix,
            location=(self.locations.get(analysis) if analysis else None)
            or self.default_location,
            analysis=analysis,
        )
