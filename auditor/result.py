"""The one result object every reporter formats.

The exit status is decided here and nowhere else (:attr:`AuditResult.exit_status`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from auditor.findings import Finding, Severity

CAUTION = (
    "Passing this audit does not prove an analysis valid: it checks the files for "
    "known warning signs only. A qualified statistician and the venue's own rules "
    "decide whether the analysis is sound."
)

#: Exit statuses of the command line.
EXIT_CLEAN = 0
EXIT_GATE = 1
EXIT_NOTHING = 2

GATES = ("error", "warning", "never")


@dataclass
class Figure:
    """A figure a stage or rule made for the report.

    ``svg`` is a complete, self-contained SVG document (no external references).
    """

    id: str
    title: str
    svg: str
    caption: str = ""
    rule_id: str | None = None
    quantity: str | None = None


@dataclass
class AnalysisResult:
    """Everything the audit says about one analysis."""

    name: str
    sources: list[str]
    settings: dict[str, Any]
    n_chains: int
    n_draws: int
    diagnostics: list[dict[str, Any]]
    findings: list[Finding]
    program: str | None = None
    figures: list[Figure] = field(default_factory=list)
    #: DataTree groups the analysis has (``posterior``, ``prior_predictive``, ...).
    groups: list[str] = field(default_factory=list)
    #: Each prior statement of the program as written, with its place ``path:line``.
    priors: list[str] = field(default_factory=list)
    #: Source lines around each program finding, keyed ``"path:line"``:
    #: ``[(line number, text), ...]`` (the program stage's "flagged line in context").
    excerpts: dict[str, list[tuple[int, str]]] = field(default_factory=dict)
    #: Each observed variable with its replicated draws and log-likelihood, and how
    #: each was found (``Pairing.as_dict()`` of :mod:`auditor.predictive`).
    pairings: list[dict[str, Any]] = field(default_factory=list)
    #: The workflow stages checked and not checked (``StageCoverage.as_dict()`` of
    #: :mod:`auditor.coverage`).
    coverage: list[dict[str, str]] = field(default_factory=list)
    #: PSIS-LOO and WAIC per observed variable (``LooRecord.as_dict()`` of
    #: :mod:`auditor.loo`).
    loo: list[dict[str, Any]] = field(default_factory=list)
    #: Power-scaling sensitivity: ``source`` of the log-prior, ``left_out`` prior
    #: statements and one row per quantity (``quantity``, ``prior``, ``likelihood``,
    #: ``diagnosis``); empty when it could not be computed (see the coverage record).
    sensitivity: dict[str, Any] = field(default_factory=dict)

    def stages_checked(self) -> tuple[int, int, int]:
        """(stages checked, stages partly checked, stages that apply) of the coverage."""
        applicable = [c for c in self.coverage if c["status"] != "not applicable"]
        return (sum(1 for c in applicable if c["status"] == "checked"),
                sum(1 for c in applicable if c["status"] == "partly checked"),
                len(applicable))

    @property
    def worst(self) -> Severity | None:
        """Most severe level of the findings not accepted, ``None`` when there are none."""
        open_findings = [f for f in self.findings if f.accepted is None]
        if not open_findings:
            return None
        return max((f.severity for f in open_findings), key=lambda s: s.rank)

    @property
    def verdict(self) -> str:
        """``fail`` (errors), ``review`` (warnings), ``pass`` (notes or nothing)."""
        worst = self.worst
        if worst is Severity.ERROR:
            return "fail"
        if worst is Severity.WARNING:
            return "review"
        return "pass"


@dataclass
class InputFile:
    """An input file with its SHA-256, for the reproducibility record."""

    path: str
    sha256: str
    size: int


@dataclass
class AuditResult:
    """The whole audit: analyses, project-level findings, the gate and its outcome."""

    tool: str
    version: str
    project_name: str
    analyses: list[AnalysisResult]
    project_findings: list[Finding]
    gate: str
    rules: list[Any]
    inputs: list[InputFile] = field(default_factory=list)
    config: dict[str, Any] = field(default_factory=dict)
    libraries: dict[str, str] = field(default_factory=dict)
    caution: str = CAUTION
    #: Comparison sets of analyses of the same data (``ComparisonSet.as_dict()`` of
    #: :mod:`auditor.comparison`), best model first.
    comparisons: list[dict[str, Any]] = field(default_factory=list)
    #: The policy applied (``Policy.as_dict()``: name, hash, files).
    policy: dict[str, Any] = field(default_factory=dict)
    #: The accepted-findings file used (project-relative path), or ``None``.
    accepted_file: str | None = None
    #: Against a baseline report: counts of new, unchanged and gone findings, and the
    #: gone ones (``Comparison.as_dict()`` of :mod:`auditor.gate.baseline`).
    baseline: dict[str, Any] | None = None
    #: Gate on findings that are new against the baseline only.
    gate_new_only: bool = False

    @property
    def findings(self) -> list[Finding]:
        """Every finding, project-level first (same as :attr:`all_findings`)."""
        return self.all_findings

    def to_dataframe(self, what: str = "findings") -> Any:
        """A pandas DataFrame of ``findings``, ``diagnostics``, ``coverage`` or ``loo``.

        pandas is imported here, on request only.
        """
        import pandas as pd

        rows: list[dict[str, Any]] = []
        if what == "findings":
            for f in self.all_findings:
                rows.append({"rule": f.rule_id, "severity": f.severity.value,
                             "stage": f.stage, "analysis": f.analysis,
                             "quantity": f.quantity, "message": f.message,
                             "path": f.location.path if f.location else None,
                             "line": f.location.line if f.location else None,
                             "accepted": f.accepted is not None, "baseline": f.baseline})
        elif what in ("diagnostics", "coverage", "loo"):
            for a in self.analyses:
                rows.extend({"analysis": a.name, **row} for row in getattr(a, what))
        else:
            raise ValueError(f"what must be findings, diagnostics, coverage or loo, not {what!r}")
        return pd.DataFrame(rows)

    @property
    def all_findings(self) -> list[Finding]:
        """Project findings, then each analysis's, in report order."""
        out = sorted(self.project_findings, key=Finding.sort_key)
        for a in self.analyses:
            out.extend(a.findings)
        return out

    def counts(self) -> dict[str, int]:
        """Number of findings not accepted per severity (all three keys always present)."""
        c = {s.value: 0 for s in (Severity.ERROR, Severity.WARNING, Severity.NOTE)}
        for f in self.all_findings:
            if f.accepted is None:
                c[f.severity.value] += 1
        return c

    @property
    def accepted_count(self) -> int:
        """Number of findings the project accepted (each with its reason)."""
        return sum(1 for f in self.all_findings if f.accepted is not None)

    def gating_findings(self) -> list[Finding]:
        """The findings the gate looks at: not accepted, and new against the baseline
        when gating on new findings only."""
        return [f for f in self.all_findings if f.accepted is None
                and (not self.gate_new_only or f.baseline in (None, "new"))]

    @property
    def gate_reached(self) -> bool:
        """Whether some finding the gate looks at is at or above the gate level."""
        if self.gate == "never":
            return False
        level = Severity(self.gate).rank
        return any(f.severity.rank >= level for f in self.gating_findings())

    @property
    def exit_status(self) -> int:
        """0 clean, 1 a finding reaches the gate, 2 nothing could be audited."""
        if not self.analyses:
            return EXIT_NOTHING
        return EXIT_GATE if self.gate_reached else EXIT_CLEAN
