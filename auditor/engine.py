"""Run the audit: configuration, analyses, rules, figures, one result.

Findings flow one way: loaders and readers build the :class:`Project`, rules read
it and return findings, and the :class:`AuditResult` carries them to reporters.
"""

from __future__ import annotations

import ctypes
import dataclasses
import datetime as dt
import gc
import hashlib
import importlib.metadata
import os
import sys
import traceback
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from auditor import TOOL_NAME, __version__
from auditor.assemble import assemble
from auditor.boundary import Boundary, Refused, available_memory, default_max_bytes, display
from auditor.comparison import ComparisonSet, comparison_sets
from auditor.config import Config, ConfigError, apply_policy, check_rule_options, load_config
from auditor.coverage import analysis_coverage, comparison_coverage
from auditor.diagnostics import BlockRunner, DiagnosticsTable
from auditor.discovery import discover
from auditor.findings import Finding, Location, Severity
from auditor.gate.accepted import DEFAULT_FILE as ACCEPTED_FILE
from auditor.gate.accepted import AcceptedFileError
from auditor.gate.accepted import apply as apply_accepted
from auditor.gate.accepted import load as load_accepted
from auditor.gate.baseline import BaselineError, earlier_findings
from auditor.gate.baseline import compare as compare_baseline
from auditor.gate.policy import Policy, PolicyError, load_policy
from auditor.gate.since import SinceError, changed, files_at
from auditor.loo import LooRecord, LooTable
from auditor.model import Analysis, AnalysisSpec, InputProblem, Project
from auditor.programs.read import read_program
from auditor.registry import all_rules, find_rule
from auditor.result import AnalysisResult, AuditResult, InputFile
from auditor.rules_api import ComparisonContext, RuleContext, RuleMeta
from auditor.sensitivity import SensitivityTable

#: Libraries whose versions go into the reproducibility record.
LIBRARIES = ("arviz-base", "arviz-stats", "xarray", "numpy", "scipy", "lark", "jinja2")
EXCERPT_RADIUS = 3


class NothingToAudit(Exception):
    """No analysis could be found in the given paths (exit status 2)."""


def _exists(path: Path) -> bool:
    try:
        return path.exists() or path.is_symlink()
    except OSError:  # a name too long to look up
        return False


def project_root(paths: list[Path]) -> Path:
    """The project folder: the folder given, or the folder holding the files given."""
    resolved = [Path(os.path.realpath(p)) for p in paths]
    if len(resolved) == 1 and resolved[0].is_dir() and resolved[0].suffix != ".zarr":
        return resolved[0]
    cwd = Path.cwd().resolve()
    if all(p.is_relative_to(cwd) for p in resolved):
        return cwd
    parents = [p.parent for p in resolved]
    common = parents[0]
    while not all(p.is_relative_to(common) for p in parents):
        common = common.parent
    return common


def _sha256(path: Path, gate: Boundary) -> tuple[str, int]:
    digest = hashlib.sha256()
    size = 0
    with gate.open(path, check_size=False) as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
            size += len(block)
    return digest.hexdigest(), size


def _fingerprint(path: Path, gate: Boundary) -> tuple[str, int] | None:
    """SHA-256 and size of a file, or of a ``.zarr`` store's files in order; ``None``
    when the boundary refuses it (it was then not read, and is not listed)."""
    try:
        real = gate.admit(path, folder=True, size=False)
        if not real.is_dir():
            return _sha256(path, gate)
        gate.admit_tree(path)
        digest = hashlib.sha256()
        size = 0
        for f in sorted(q for q in real.rglob("*") if q.is_file()):
            digest.update(f.relative_to(real).as_posix().encode())
            sha, n = _sha256(f, gate)
            digest.update(sha.encode())
            size += n
        return digest.hexdigest(), size
    except (Refused, OSError):
        return None


def _analysis_files(analysis: Analysis) -> set[Path]:
    """The input files one analysis read (draws, data, program and its includes)."""
    files: set[Path] = set(analysis.sources)
    if analysis.spec is not None and analysis.spec.data is not None:
        files.add(analysis.spec.data)
    if analysis.program is not None:
        files.add(Path(analysis.program.path))
        files.update(Path(p) for p in analysis.program.includes)
    return files


def _fingerprints(files: set[Path], project: Project, gate: Boundary,
                  skip: frozenset[Path] | set[Path] = frozenset()) -> list[InputFile]:
    """SHA-256 and size of each file (relative to the project) not in ``skip``, leaving
    out the files the boundary refuses."""
    out = []
    for path in sorted(files, key=lambda p: project.relpath(p)):
        if path in skip:
            continue
        found = _fingerprint(path, gate)
        if found is not None:
            out.append(InputFile(project.relpath(path), *found))
    return out


def _libraries() -> dict[str, str]:
    out = {}
    for name in LIBRARIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def _rule_settings(rule: RuleMeta, cfg: Config) -> tuple[bool, Severity, dict[str, Any]]:
    opts: dict[str, Any] = {}
    for key in [rule.id, *rule.aliases]:
        opts.update(cfg.rules.get(key, {}))
    enabled = bool(opts.get("enabled", True))
    if cfg.only_rules is not None:
        enabled = rule.id in cfg.only_rules
    severity = Severity(opts.get("severity", rule.severity.value))
    thresholds = dict(rule.thresholds)
    thresholds.update({k: v for k, v in opts.items() if k in rule.thresholds})
    return enabled, severity, thresholds


def _failure(what: str, analysis: Analysis | None, project: Project | None,
             error: Exception | str) -> Finding:
    """An ``inputs.rule-failed`` finding for a part of the audit that raised."""
    failed = find_rule("inputs.rule-failed")
    where = ""
    if isinstance(error, Exception):
        tb = traceback.extract_tb(error.__traceback__) if error.__traceback__ else None
        where = f" ({Path(tb[-1].filename).name}:{tb[-1].lineno})" if tb else ""
        error = f"{type(error).__name__}: {error}"
    loc = None
    if analysis is not None and analysis.sources and project is not None:
        loc = Location(project.relpath(analysis.sources[0]))
    return Finding(
        rule_id="inputs.rule-failed",
        severity=failed.severity if failed else Severity.WARNING,
        stage="inputs",
        message=(
            f"{what} could not finish{' on this analysis' if analysis else ''}: {error}{where}; "
            "its result is missing from this audit"
        ),
        evidence={"part": what, "error": error.split(":", 1)[0]},
        fix=failed.fix if failed else "Report this to the tool's maintainers with the input files.",
        location=loc,
        analysis=analysis.name if analysis else None,
    )


def _excerpts(analysis: Analysis, project: Project, findings: list[Finding],
              gate: Boundary) -> dict:
    prog = analysis.program
    if prog is None:
        return {}
    # The program's own lines, and those of the files it #includes (findings can
    # point into either); includes are read through the boundary again, so only
    # files it admitted can appear in a report.
    sources: dict[str, list[str]] = {project.relpath(prog.path): prog.source_lines}
    for inc in prog.includes:
        try:
            sources[project.relpath(inc)] = gate.read_text(inc, errors="replace").splitlines()
        except (Refused, OSError):
            continue
    out: dict[str, list[tuple[int, str]]] = {}
    for f in findings:
        loc = f.location
        lines = sources.get(loc.path) if loc is not None and loc.line is not None else None
        if not lines:
            continue
        lo = max(1, loc.line - EXCERPT_RADIUS)
        hi = min(len(lines), loc.line + EXCERPT_RADIUS)
        out[f"{loc.path}:{loc.line}"] = [(n, lines[n - 1]) for n in range(lo, hi + 1)]
    return out


def _priors(analysis: Analysis, project: Project) -> list[str]:
    prog = analysis.program
    if prog is None:
        return []
    out = []
    for decl in prog.declarations.values():
        for dist in decl.priors:
            path = project.relpath(getattr(dist, "path", "") or prog.path)
            text = dist.text.strip() or f"{decl.name} ~ {dist.family}(...)"
            out.append(f"{text} ({path}:{dist.line})")
    return out


#: An observed variable the comparison could not score: (analysis, observed, key,
#: label, chosen); see :func:`auditor.comparison.comparison_sets`.
Unscored = tuple[str, str, str, str, bool]


def _audit_analysis(analysis: Analysis, project: Project, rules: list[RuleMeta],
                    cfg: Config, gate: Boundary, blocks: BlockRunner | None = None
                    ) -> tuple[AnalysisResult, list[LooRecord], list[Unscored]]:
    """Run every enabled analysis-scope rule; return the compact result, the compact
    PSIS-LOO records the project-level comparison needs, and the observed variables
    it could not score (``(analysis, observed, key, label, chosen)``). ``blocks`` runs
    the diagnostics table's blocks of a posterior read lazily (on a Dask cluster)."""
    one_based = analysis.settings.library == "CmdStan"
    table = DiagnosticsTable(analysis.group("posterior"), one_based=one_based, runner=blocks)
    loo = LooTable(analysis)
    sensitivity = SensitivityTable(analysis)
    findings: list[Finding] = []
    figures = []
    enabled_stages: set[str] = set()
    for rule in rules:
        enabled, severity, thresholds = _rule_settings(rule, cfg)
        if not enabled or rule.check is None:
            continue
        enabled_stages.add(rule.stage)
        if rule.scope != "analysis":
            continue
        ctx = RuleContext(rule, analysis, project, thresholds, severity, table,
                          options={"max_figures": cfg.max_figures}, loo=loo,
                          sensitivity=sensitivity)
        try:
            hits = list(rule.check(ctx) or [])
        except Exception as exc:  # a rule failing on odd data must not stop the audit
            findings.append(_failure(f"rule {rule.id}", analysis, project, exc))
            continue
        findings.extend(hits)
        if hits and rule.figures is not None and cfg.max_figures > 0:
            try:
                figures.extend(rule.figures(ctx, hits) or [])
            except Exception as exc:
                findings.append(_failure(f"figures of rule {rule.id}", analysis, project, exc))
    rows = table.rows
    for error in table.errors:
        findings.append(_failure("diagnostics table", analysis, project, error))
    try:
        contraction = sensitivity.contraction
    except Exception as exc:  # odd prior draws must not stop the audit
        contraction = {}
        findings.append(_failure("posterior contraction", analysis, project, exc))
    if contraction:
        # Shown in the diagnostics table, from the object the rules read.
        rows = [{**r, "contraction": contraction.get(r["quantity"])} for r in rows]
    for error in sensitivity.errors:
        findings.append(_failure("power-scaling sensitivity", analysis, project, error))
    try:
        records = loo.records()
        unscored = [(analysis.name, *u) for u in loo.unscored()]
    except Exception as exc:  # odd log-likelihood values must not stop the audit
        records, unscored = [], []
        findings.append(_failure("PSIS-LOO", analysis, project, exc))
    for error in loo.errors:
        findings.append(_failure("PSIS-LOO", analysis, project, error))
    findings.sort(key=Finding.sort_key)
    return AnalysisResult(
        name=analysis.name,
        sources=[project.relpath(p) for p in analysis.sources],
        settings=analysis.settings.as_dict(),
        n_chains=analysis.n_chains,
        n_draws=analysis.n_draws,
        diagnostics=rows,
        findings=findings,
        program=project.relpath(analysis.program.path) if analysis.program else None,
        figures=figures,
        excerpts=_excerpts(analysis, project, findings, gate),
        groups=sorted(n for n in (analysis.tree.children if analysis.tree is not None else {})
                      if analysis.group(n) is not None),
        priors=_priors(analysis, project),
        pairings=[p.as_dict() for p in analysis.pairings],
        coverage=[c.as_dict() for c in analysis_coverage(analysis, enabled_stages,
                                                         sensitivity)],
        loo=[r.as_dict() for r in records],
        sensitivity=_sensitivity_record(sensitivity, findings, analysis, project),
    ), records, unscored


def _sensitivity_record(table: SensitivityTable, findings: list[Finding], analysis: Analysis,
                        project: Project) -> dict[str, Any]:
    try:
        return table.record()
    except Exception as exc:  # odd draws must not stop the audit
        findings.append(_failure("power-scaling sensitivity", analysis, project, exc))
        return {}


def _cover_comparison(analyses: list[AnalysisResult], records: list[LooRecord],
                      sets: list[ComparisonSet], rules: list[RuleMeta], cfg: Config) -> None:
    """Fill the model comparison stage of each coverage record after the project pass."""
    compared = {row.analysis for s in sets for row in s.rows}
    with_loo = {r.analysis for r in records}
    enabled = any(_rule_settings(r, cfg)[0] for r in rules
                  if r.stage in ("loo", "comparison") and r.check is not None)
    for a in analyses:
        a.coverage = [comparison_coverage(c, a.name in with_loo, a.name in compared, enabled)
                      if c["stage"] == "comparison" else c for c in a.coverage]


def _problem_finding(problem: InputProblem, project: Project) -> Finding | None:
    """A project-level finding for an input problem outside any analysis."""
    rule_id = f"inputs.{'remark' if problem.kind == 'note' else problem.kind}"
    rule = find_rule(rule_id)
    if rule is None:
        return None
    path = project.relpath(problem.path)
    return Finding(
        rule_id=rule.id,
        severity=rule.severity,
        stage=rule.stage,
        message=f"{path}" + (f", line {problem.line}" if problem.line else "")
        + f": {problem.message}",
        evidence={"file": path, "line": problem.line},
        fix=rule.fix,
        location=_existing_location(project, problem.path, problem.line),
    )


def _existing_location(project: Project, path: Path, line: int | None) -> Location | None:
    """A location only for a file that is really in the project: a finding never
    points a reviewer's tools at a path outside it."""
    shown = project.relpath(path)
    if shown.startswith("/") or shown.startswith(".."):
        return None
    return Location(shown, line)


def _project_findings(project: Project, cfg: Config) -> list[Finding]:
    rule = find_rule("inputs.config")
    out = [f for f in (_problem_finding(p, project) for p in project.problems) if f]
    for message in cfg.warnings:
        path = project.relpath(cfg.source) if cfg.source else None
        out.append(
            Finding(
                rule_id="inputs.config",
                severity=rule.severity if rule else Severity.NOTE,
                stage="inputs",
                message=message.replace(str(cfg.source), path or "") if cfg.source else message,
                evidence={},
                fix=rule.fix if rule else "Correct or remove the key.",
                location=Location(path) if path else None,
            )
        )
    return out


def analysis_specs(paths: list[Path], cfg: Config, root: Path,
                   gate: Boundary) -> tuple[list[AnalysisSpec], list[InputProblem]]:
    """The analyses named by ``paths`` under ``cfg`` (declared, else discovered), and
    the input problems found outside any analysis."""
    given_dir = len(paths) == 1 and paths[0].is_dir() and paths[0].suffix != ".zarr"
    if cfg.analyses and given_dir:
        return list(cfg.analyses), []
    files = None if given_dir else [Path(os.path.abspath(p)) for p in paths]
    return discover(root, files, gate)


def build_project(paths: list[Path], cfg: Config, root: Path,
                  gate: Boundary | None = None) -> Project:
    """Find and load every analysis at once (for tests and tools that want the
    normalized analyses; the audit itself streams them, see :func:`run_audit`)."""
    gate = gate or Boundary(root)
    specs, problems = analysis_specs(paths, cfg, root, gate)
    project = Project(root=root, problems=problems)
    project.analyses = [assemble(spec, gate) for spec in specs]
    return project


def _comparison_findings(sets: list[ComparisonSet], records: list[LooRecord],
                         results: list[AnalysisResult], rules: list[RuleMeta],
                         cfg: Config, project: Project) -> list[Finding]:
    """Run every enabled comparison-scope rule once per comparison set."""
    by_name = {(r.analysis, r.key): r for r in records}
    locations = {a.name: Location(a.sources[0]) if a.sources else None for a in results}
    config_location = Location(project.relpath(cfg.source)) if cfg.source else None
    out: list[Finding] = []
    for rule in rules:
        enabled, severity, thresholds = _rule_settings(rule, cfg)
        if not enabled or rule.check is None or rule.scope != "comparison":
            continue
        for comp in sets:
            first = comp.rows[0].analysis if comp.rows else comp.unscored[0]
            ctx = ComparisonContext(
                rule, comp, {row.analysis: by_name[(row.analysis, comp.key)]
                             for row in comp.rows}, thresholds, severity, locations,
                config_location or locations.get(first))
            try:
                out.extend(rule.check(ctx) or [])
            except Exception as exc:  # a rule failing on odd data must not stop the audit
                out.append(_failure(f"rule {rule.id} on the comparison of {comp.label}",
                                    None, None, exc))
    return out


def _policy(cfg: Config, gate: Boundary) -> Policy:
    """The policy the configuration names, read through the boundary when it is the
    project's own file (a built-in or the user's command line is trusted)."""
    trusted = Boundary.unconfined(gate.max_bytes)
    reader = trusted.read_bytes if cfg.policy_trusted else gate.read_bytes
    try:
        return load_policy(cfg.policy, cfg.policy_base or gate.root, reader)
    except PolicyError as exc:
        raise ConfigError(str(exc)) from None


def _engine_finding(rule_id: str, message: str, *, analysis: str | None = None,
                    quantity: str | None = None, location: Location | None = None,
                    severity: Severity | None = None, evidence: dict | None = None,
                    cfg: Config | None = None) -> Finding | None:
    """A finding of an engine-emitted rule, with its configured severity; ``None``
    when the rule is disabled or left out of this run."""
    rule = find_rule(rule_id)
    if rule is None:
        return None
    if cfg is not None:
        enabled, configured, _ = _rule_settings(rule, cfg)
        if not enabled:
            return None
        if configured != rule.severity:
            severity = configured
    return Finding(rule_id=rule.id, severity=severity or rule.severity, stage=rule.stage,
                   message=message, evidence=evidence or {}, fix=rule.fix,
                   location=location, analysis=analysis, quantity=quantity)


def _required_stages(analyses: list[AnalysisResult], policy: Policy, cfg: Config) -> None:
    """A finding per required stage an analysis did not check (its ``quantity`` is the
    stage, so that accepting it excuses exactly that stage)."""
    for a in analyses:
        for c in a.coverage:
            if c["stage"] not in policy.require_stages or c["status"] in ("checked",
                                                                         "not applicable"):
                continue
            f = _engine_finding(
                "inputs.stage-not-checked",
                f"The {policy.name} policy requires the stage '{c['title'].lower()}', which "
                f"is {c['status']} here: {c['note']}.",
                analysis=a.name, quantity=c["stage"], cfg=cfg,
                location=Location(a.sources[0]) if a.sources else (
                    Location(a.program) if a.program else None),
                evidence={"stage": c["stage"], "status": c["status"], "policy": policy.name})
            if f is not None:
                a.findings.append(f)
                a.findings.sort(key=Finding.sort_key)


def _acceptances(result: AuditResult, cfg: Config, gate: Boundary, project: Project,
                 today: dt.date) -> list[Finding]:
    """Apply the accepted-findings file; return findings about entries that do not apply."""
    if cfg.accepted is not None:
        base = cfg.source.parent if cfg.source is not None else project.root
        path = base / cfg.accepted
    else:
        path = project.root / ACCEPTED_FILE
        if not (path.exists() or path.is_symlink()):
            return []
    shown = project.relpath(path)
    try:
        entries = load_accepted(path, lambda p: gate.read_text(p))
    except (AcceptedFileError, Refused, OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{shown}: the accepted-findings file cannot be used ({exc})") from None
    result.accepted_file = shown
    outcome = apply_accepted(result.all_findings, entries, today)
    out = []
    problems = ([(e, f"expired on {e.expires}", Severity.WARNING) for e in outcome.expired]
                + [(e, "matches no finding of this audit", Severity.WARNING)
                   for e in outcome.unmatched]
                + [(e, "has no reason or no 'by' yet, so it accepts nothing",
                    Severity.NOTE) for e in outcome.incomplete])
    for e, what, severity in problems:
        scope = " / ".join(x for x in (e.rule, e.analysis, e.quantity) if x)
        f = _engine_finding("inputs.acceptance", f"The acceptance of {scope} {what}.",
                            analysis=e.analysis, location=Location(shown, e.line),
                            severity=severity, cfg=cfg,
                            evidence={"rule": e.rule, "analysis": e.analysis,
                                      "quantity": e.quantity,
                                      "expires": e.expires.isoformat() if e.expires else None})
        if f is not None:
            out.append(f)
    return out


def run_audit(paths: list[Path], config_path: Path | None = None,
              overrides: dict[str, Any] | None = None,
              only_rules: set[str] | None = None,
              allow_read: tuple[Path, ...] = (),
              baseline: Path | None = None,
              gate_new_only: bool = False,
              today: dt.date | None = None,
              since: str | None = None,
              progress: Callable[[str, int, int], None] | None = None,
              scheduler: str | None = None,
              workers: int | None = None,
              rules_root: Path | None = None) -> AuditResult:
    """Audit ``paths`` (a project folder or files) and return the one result.

    Nothing outside the project root is read, except under the folders of
    ``allow_read`` (the command line's ``--allow-read``, for trusted projects).
    ``baseline`` is an earlier JSON report to mark findings new, unchanged or gone
    against; ``gate_new_only`` makes the gate look at new findings only; ``today``
    is the date acceptances expire against (default: today); ``since`` a git
    revision: only analyses whose inputs changed since then are audited;
    ``progress(what, done, total)`` is called as the audit goes (for a progress bar).
    ``scheduler`` (the address of a running Dask scheduler) or ``workers`` (a local
    Dask cluster of that many worker processes) spread the analyses over a cluster
    (:mod:`auditor.cluster`); the result is the same as the serial run's.
    ``rules_root`` is a folder of rule folders to use instead of the installed ones.

    Raises
    ------
    auditor.config.ConfigError
        Unreadable or invalid configuration, or a cluster that cannot be used.
    NothingToAudit
        No analysis found.
    """
    missing = [p for p in paths if not _exists(p)]
    if missing:
        raise NothingToAudit(f"{display(missing[0])}: no such file or folder")
    root = project_root(paths)
    gate, cfg, rules, policy = _prepare(root, config_path, overrides, only_rules, allow_read,
                                        rules_root=rules_root)
    specs, problems = analysis_specs(paths, cfg, root, gate)
    if not specs:
        raise NothingToAudit(
            f"{root}: no analyses found (no CmdStan CSV, .nc or .zarr draws, no Stan program, "
            "and no [[analysis]] in a configuration file)"
        )
    if since is not None:
        specs = _changed_since(specs, since, cfg, gate)
        if not specs:
            raise NothingToAudit(f"{root}: no analysis has inputs that changed since {since}")
    return audit_specs(specs, problems, root, gate, cfg, rules, policy,
                       baseline=baseline, gate_new_only=gate_new_only, today=today,
                       progress=progress, scheduler=scheduler, workers=workers,
                       rules_root=rules_root)


def _prepare(root: Path, config_path: Path | None, overrides: dict[str, Any] | None,
             only_rules: set[str] | None, allow_read: tuple[Path, ...], find: bool = True,
             rules_root: Path | None = None) -> tuple[Boundary, Config, list[RuleMeta], Policy]:
    """The boundary, the effective configuration (policy beneath it) and the rules."""
    gate = Boundary(root, extra=tuple(allow_read), max_bytes=default_max_bytes())
    cfg = load_config(root, config_path, overrides or {}, gate, find=find)
    gate.max_bytes = default_max_bytes(cfg.max_input_share)
    cfg.only_rules = only_rules
    policy = _policy(cfg, gate)
    apply_policy(cfg, policy)
    rules = _rules(rules_root)
    check_rule_options(cfg, rules)
    return gate, cfg, rules, policy


def _rules(root: Path | None) -> list[RuleMeta]:
    """The rules of the folder ``root``, or the installed ones."""
    return all_rules() if root is None else all_rules(root)


@dataclass(frozen=True)
class AuditJob:
    """What auditing one analysis needs besides its spec, in plain picklable data.

    A Dask worker gets this and rebuilds the boundary from it, and loads the rules
    again from their folders (``rules_root``; ``None``: the installed rules): rule
    checks are loaded from files by the registry, so they are never pickled.
    ``lazy_bytes``: draws larger than this are read lazily (``None``: never).
    """

    root: Path
    extra: tuple[Path, ...]
    max_bytes: int | None
    cfg: Config
    rules_root: Path | None = None
    lazy_bytes: int | None = None

    @classmethod
    def of(cls, gate: Boundary, cfg: Config, rules_root: Path | None = None) -> AuditJob:
        """The job of an audit: the boundary's settings and the configuration without its
        ``[[analysis]]`` entries (each task gets its own spec)."""
        assert gate.root is not None
        return cls(gate.root, gate.extra, gate.max_bytes,
                   dataclasses.replace(cfg, analyses=[]), rules_root,
                   lazy_bytes(cfg.lazy_share))

    def boundary(self) -> Boundary:
        return Boundary(self.root, extra=self.extra, max_bytes=self.max_bytes)


#: What :func:`audit_one` returns: the compact result, the PSIS-LOO records, the observed
#: variables without PSIS-LOO, and the fingerprints of the input files it read.
OneResult = tuple[AnalysisResult, list[LooRecord], list[Unscored], list[InputFile]]


def audit_one(spec: AnalysisSpec, job: AuditJob, hashed: frozenset[Path] = frozenset(),
              blocks: BlockRunner | None = None) -> OneResult:
    """Load one analysis, audit it, reduce it to its compact result and release its draws.

    A top-level function of plain arguments, so that a Dask worker can run it: the
    boundary is rebuilt from ``job`` and the rules are loaded again from their folders.
    ``hashed`` are files already fingerprinted by this audit (not hashed again);
    ``blocks`` runs the blocks of a posterior read lazily (see :class:`DiagnosticsTable`).
    """
    gate = job.boundary()
    rules = _rules(job.rules_root)
    project = Project(root=job.root)
    analysis = assemble(spec, gate, lazy_bytes=job.lazy_bytes)
    try:
        result, records, unscored = _audit_analysis(analysis, project, rules, job.cfg, gate,
                                                    blocks)
        inputs = _fingerprints(_analysis_files(analysis), project, gate, hashed)
    finally:
        analysis.release()
        del analysis
        release_memory()
    return result, records, unscored, inputs


def lazy_bytes(share: float) -> int | None:
    """Draws larger than ``share`` of the available memory are read lazily (``None``
    when the available memory cannot be read: everything is read whole)."""
    avail = available_memory()
    return None if avail is None else int(avail * share)


def release_memory() -> None:
    """Give the memory of a released analysis back to the system.

    glibc keeps freed blocks of the heap for reuse, and after large frees raises its
    threshold for serving allocations from the heap rather than by ``mmap``; the heap
    then fragments and the process grows with every analysis read (measured with
    ``benchmarks/bench_many.py``: about 2 MB per analysis of 4 x 1000 x 200 draws).
    ``malloc_trim`` returns the free pages; elsewhere (not glibc) this only collects.
    """
    gc.collect()
    if sys.platform.startswith("linux"):
        try:
            ctypes.CDLL("libc.so.6").malloc_trim(0)
        except (OSError, AttributeError):  # not glibc (musl): nothing to trim
            pass


#: glibc's ``mallopt`` parameter for the size from which allocations are served by ``mmap``.
_M_MMAP_THRESHOLD = -3
#: Allocations from this size on are served by ``mmap`` once :func:`return_large_blocks` ran:
#: blocks of draws, windows read from a store and parsed CSV text, not the kernel's small
#: temporaries (which the heap serves faster).
MMAP_THRESHOLD = 4 * 2**20


def return_large_blocks() -> None:
    """Have glibc serve allocations of :data:`MMAP_THRESHOLD` bytes or more by ``mmap`` and
    give them back to the system when freed (the command line calls this once).

    By default glibc raises that threshold after large frees (up to 32 MiB), after which
    freed windows of a lazily read store stay in the process: reading a 305 MB posterior in
    windows peaked 300 MB higher with the default than with a fixed threshold (measured with
    ``benchmarks/bench_big.py``). Not done for library use (the Python API), where the
    process is the user's. Elsewhere than glibc this does nothing.
    """
    if sys.platform.startswith("linux"):
        try:
            ctypes.CDLL("libc.so.6").mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD)
        except (OSError, AttributeError):  # not glibc
            pass


def _failed_analysis(spec: AnalysisSpec, root: Path, error: Exception | str) -> OneResult:
    """The result of an analysis whose audit could not run at all (a worker that died,
    a task that could not be sent): one ``inputs.rule-failed`` finding."""
    project = Project(root=root)
    first = (spec.draws or spec.prior_draws or [spec.model or Path(spec.name)])[0]
    finding = _failure("the audit", None, project, error)
    finding = dataclasses.replace(finding, analysis=spec.name,
                                  location=_existing_location(project, first, None))
    result = AnalysisResult(name=spec.name, sources=[project.relpath(p) for p in spec.draws],
                            settings={}, n_chains=0, n_draws=0, diagnostics=[],
                            findings=[finding])
    return result, [], [], []


def _serial(specs: list[AnalysisSpec], job: AuditJob,
            progress: Callable[[str, int, int], None] | None) -> Iterator[tuple[int, OneResult]]:
    """Audit the analyses one after the other in this process."""
    hashed: set[Path] = set()
    for done, spec in enumerate(specs):
        if progress is not None:
            progress(f"auditing {spec.name}", done, len(specs))
        try:
            one = audit_one(spec, job, frozenset(hashed))
        except Exception as exc:  # a part outside the rules failing costs this analysis only
            one = _failed_analysis(spec, job.root, exc)
        hashed |= _spec_files(spec)
        yield done, one


def _spec_files(spec: AnalysisSpec) -> set[Path]:
    """The files of a spec that an analysis shares with others (data, program)."""
    return {p for p in (spec.data, spec.model) if p is not None}


def audit_specs(specs: list[AnalysisSpec], problems: list[InputProblem], root: Path,
                gate: Boundary, cfg: Config, rules: list[RuleMeta], policy: Policy, *,
                baseline: Path | None = None, gate_new_only: bool = False,
                today: dt.date | None = None,
                progress: Callable[[str, int, int], None] | None = None,
                scheduler: str | None = None, workers: int | None = None,
                rules_root: Path | None = None) -> AuditResult:
    """Audit the analyses ``specs`` (the part of :func:`run_audit` after finding them;
    the Python API calls it with analyses whose draws are already in memory)."""
    project = Project(root=root, problems=problems)
    job = AuditJob.of(gate, cfg, rules_root)
    # First pass, one analysis at a time (or spread over a cluster): load, audit, keep
    # the compact result, release the draws, so memory is bounded by the largest
    # analysis. Results are put back in the order of the specs, so that the report
    # does not depend on which analysis finished first.
    slots: list[OneResult | None] = [None] * len(specs)
    if scheduler is None and not workers:
        for i, one in _serial(specs, job, progress):
            slots[i] = one
    else:
        from auditor.cluster import Cluster

        with Cluster(scheduler=scheduler, workers=workers) as cluster:
            for i, one in cluster.audit(specs, job, gate, progress):
                slots[i] = one
    analyses: list[AnalysisResult] = []
    records: list[LooRecord] = []
    unscored: list[Unscored] = []
    inputs: dict[str, InputFile] = {}
    for i, one in enumerate(slots):
        if one is None:  # pragma: no cover - every runner fills every slot
            one = _failed_analysis(specs[i], root, "no result came back")
        result, loo_records, no_loo, files = one
        analyses.append(result)
        records.extend(loo_records)
        unscored.extend(no_loo)
        for f in files:
            inputs.setdefault(f.path, f)
    del slots
    if progress is not None:
        progress("comparing models", len(specs), len(specs))
    if cfg.source is not None:
        for f in _fingerprints({cfg.source}, project, gate):
            inputs.setdefault(f.path, f)
    # Second pass, on compact results only: comparison across analyses.
    sets = comparison_sets(records, unscored)
    _cover_comparison(analyses, records, sets, rules, cfg)
    _required_stages(analyses, policy, cfg)
    project.findings = _project_findings(project, cfg)
    project.findings += _comparison_findings(sets, records, analyses, rules, cfg, project)
    result = AuditResult(
        tool=TOOL_NAME,
        version=__version__,
        project_name=root.name,
        analyses=analyses,
        project_findings=project.findings,
        gate=cfg.gate,
        rules=rules,
        inputs=[inputs[k] for k in sorted(inputs)],
        comparisons=[c.as_dict() for c in sets],
        config=cfg.effective(),
        libraries=_libraries(),
        policy=policy.as_dict(),
        gate_new_only=gate_new_only,
    )
    result.project_findings += _acceptances(result, cfg, gate, project,
                                            today or dt.date.today())
    if cfg.only_rules is not None:
        result.project_findings = [f for f in result.project_findings
                                   if f.rule_id in cfg.only_rules]
    if baseline is not None:
        result.baseline = _baseline(result, baseline)
    return result


def _changed_since(specs: list[AnalysisSpec], ref: str, cfg: Config,
                   gate: Boundary) -> list[AnalysisSpec]:
    """The specs whose input files differ from git revision ``ref`` (all of them when
    the configuration file did)."""
    try:
        _, at_ref = files_at(gate.root or Path.cwd(), ref)
    except SinceError as exc:
        raise ConfigError(f"--since {ref}: {exc}") from None
    if cfg.source is not None and changed({cfg.source}, at_ref, gate.read_bytes):
        return specs
    out = []
    for spec in specs:
        inputs = {*spec.draws, *spec.prior_draws}
        for p in (spec.model, spec.data):
            if p is not None:
                inputs.add(p)
        if spec.model is not None and spec.model.suffix == ".stan":
            inputs.update(Path(i) for i in read_program(spec.model, gate).includes)
        if changed(inputs, at_ref, gate.read_bytes):
            out.append(spec)
    return out


def _baseline(result: AuditResult, path: Path) -> dict[str, Any]:
    """Mark every finding against the earlier report at ``path`` (the user's own file)."""
    try:
        text = Boundary.unconfined().read_text(path)
        earlier = earlier_findings(text, display(path))
    except (Refused, OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{display(path)}: the baseline report cannot be read ({exc})") from None
    except BaselineError as exc:
        raise ConfigError(str(exc)) from None
    return compare_baseline(result.all_findings, earlier).as_dict()
