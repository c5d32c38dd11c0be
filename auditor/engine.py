"""Run the audit: configuration, analyses, rules, figures, one result.

Findings flow one way: loaders and readers build the :class:`Project`, rules read
it and return findings, and the :class:`AuditResult` carries them to reporters.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import traceback
from pathlib import Path
from typing import Any

from auditor import TOOL_NAME, __version__
from auditor.assemble import assemble
from auditor.config import Config, check_rule_options, load_config
from auditor.diagnostics import DiagnosticsTable
from auditor.discovery import discover
from auditor.findings import Finding, Location, Severity
from auditor.model import Analysis, AnalysisSpec, InputProblem, Project
from auditor.registry import all_rules, find_rule
from auditor.result import AnalysisResult, AuditResult, InputFile
from auditor.rules_api import RuleContext, RuleMeta

#: Libraries whose versions go into the reproducibility record.
LIBRARIES = ("arviz-base", "arviz-stats", "xarray", "numpy", "scipy", "lark", "jinja2")
EXCERPT_RADIUS = 3


class NothingToAudit(Exception):
    """No analysis could be found in the given paths (exit status 2)."""


def project_root(paths: list[Path]) -> Path:
    """The project folder: the folder given, or the folder holding the files given."""
    resolved = [p.resolve() for p in paths]
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


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _input_files(project: Project, cfg: Config) -> list[InputFile]:
    files: set[Path] = set()
    if cfg.source is not None:
        files.add(cfg.source)
    for a in project.analyses:
        files.update(a.sources)
        if a.spec is not None and a.spec.data is not None:
            files.add(a.spec.data)
        if a.program is not None:
            files.add(Path(a.program.path))
            files.update(Path(p) for p in a.program.includes)
    out = []
    for path in sorted(files, key=lambda p: project.relpath(p)):
        if path.is_file():
            out.append(InputFile(project.relpath(path), _sha256(path), path.stat().st_size))
        elif path.is_dir():  # a .zarr store: hash its files in order
            digest = hashlib.sha256()
            size = 0
            for f in sorted(q for q in path.rglob("*") if q.is_file()):
                digest.update(f.relative_to(path).as_posix().encode())
                digest.update(_sha256(f).encode())
                size += f.stat().st_size
            out.append(InputFile(project.relpath(path), digest.hexdigest(), size))
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


def _failure(what: str, analysis: Analysis | None, project: Project,
             error: Exception | str) -> Finding:
    """An ``inputs.rule-failed`` finding for a part of the audit that raised."""
    failed = find_rule("inputs.rule-failed")
    where = ""
    if isinstance(error, Exception):
        tb = traceback.extract_tb(error.__traceback__) if error.__traceback__ else None
        where = f" ({Path(tb[-1].filename).name}:{tb[-1].lineno})" if tb else ""
        error = f"{type(error).__name__}: {error}"
    loc = None
    if analysis is not None and analysis.sources:
        loc = Location(project.relpath(analysis.sources[0]))
    return Finding(
        rule_id="inputs.rule-failed",
        severity=failed.severity if failed else Severity.WARNING,
        stage="inputs",
        message=(
            f"{what} could not finish on this analysis: {error}{where}; "
            "its result is missing from this audit"
        ),
        evidence={"part": what, "error": error.split(":", 1)[0]},
        fix=failed.fix if failed else "Report this to the tool's maintainers with the input files.",
        location=loc,
        analysis=analysis.name if analysis else None,
    )


def _excerpts(analysis: Analysis, project: Project, findings: list[Finding]) -> dict:
    prog = analysis.program
    if prog is None:
        return {}
    # The program's own lines, and those of the files it #includes (findings can
    # point into either).
    sources: dict[str, list[str]] = {project.relpath(prog.path): prog.source_lines}
    for inc in prog.includes:
        try:
            sources[project.relpath(inc)] = Path(inc).read_text(errors="replace").splitlines()
        except OSError:
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


def _audit_analysis(analysis: Analysis, project: Project, rules: list[RuleMeta],
                    cfg: Config) -> AnalysisResult:
    one_based = analysis.settings.library == "CmdStan"
    table = DiagnosticsTable(analysis.group("posterior"), one_based=one_based)
    findings: list[Finding] = []
    figures = []
    for rule in rules:
        enabled, severity, thresholds = _rule_settings(rule, cfg)
        if not enabled or rule.check is None:
            continue
        ctx = RuleContext(rule, analysis, project, thresholds, severity, table,
                          options={"max_figures": cfg.max_figures})
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
        excerpts=_excerpts(analysis, project, findings),
        groups=sorted(n for n in (analysis.tree.children if analysis.tree is not None else {})
                      if analysis.group(n) is not None),
        priors=_priors(analysis, project),
    )


def _project_findings(project: Project, cfg: Config) -> list[Finding]:
    rule = find_rule("inputs.config")
    out = []
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


def build_project(paths: list[Path], cfg: Config, root: Path) -> Project:
    """Find and load the analyses named by ``paths`` under ``cfg``."""
    project = Project(root=root)
    given_dir = len(paths) == 1 and paths[0].is_dir() and paths[0].suffix != ".zarr"
    problems: list[InputProblem] = []
    specs: list[AnalysisSpec]
    if cfg.analyses and given_dir:
        specs = cfg.analyses
    else:
        files = None if given_dir else [p.resolve() for p in paths]
        specs, problems = discover(root, files)
    for spec in specs:
        analysis = assemble(spec)
        analysis.problems.extend(p for p in problems if spec.model == p.path)
        project.analyses.append(analysis)
    return project


def run_audit(paths: list[Path], config_path: Path | None = None,
              overrides: dict[str, Any] | None = None,
              only_rules: set[str] | None = None) -> AuditResult:
    """Audit ``paths`` (a project folder or files) and return the one result.

    Raises
    ------
    auditor.config.ConfigError
        Unreadable or invalid configuration.
    NothingToAudit
        No analysis found.
    """
    missing = [p for p in paths if not p.exists()]
    if missing:
        raise NothingToAudit(f"{missing[0]}: no such file or folder")
    root = project_root(paths)
    cfg = load_config(root, config_path, overrides or {})
    cfg.only_rules = only_rules
    rules = all_rules()
    check_rule_options(cfg, rules)
    project = build_project(paths, cfg, root)
    if not project.analyses:
        raise NothingToAudit(
            f"{root}: no analyses found (no CmdStan CSV, .nc or .zarr draws, no Stan program, "
            "and no [[analysis]] in a configuration file)"
        )
    project.findings = _project_findings(project, cfg)
    if only_rules is not None:
        project.findings = [f for f in project.findings if f.rule_id in only_rules]
    analyses = [_audit_analysis(a, project, rules, cfg) for a in project.analyses]
    return AuditResult(
        tool=TOOL_NAME,
        version=__version__,
        project_name=root.name,
        analyses=analyses,
        project_findings=project.findings,
        gate=cfg.gate,
        rules=rules,
        inputs=_input_files(project, cfg),
        config=cfg.effective(),
        libraries=_libraries(),
    )
