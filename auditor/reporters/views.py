"""View objects built once from an :class:`~auditor.result.AuditResult`.

Templates receive only these dataclasses and place them; every decision (order,
number formatting, which rows are flagged, what is cut) is made here, so the
HTML, PDF and Markdown reports say the same thing. Nothing is recomputed: the
views only arrange and format what the result holds.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace
from typing import Any

from markupsafe import Markup

from auditor.figures.inline import UnsafeSvgError, inline_svg
from auditor.findings import STAGES, Finding
from auditor.reporters.checklist import SOURCE as CHECKLIST_SOURCE
from auditor.reporters.checklist import STATUS_ORDER, ChecklistItem, build_checklist
from auditor.result import AnalysisResult, AuditResult

STAGE_TITLES: dict[str, str] = {
    "inputs": "Inputs",
    "model": "Model program",
    "priors": "Priors",
    "prior-predictive": "Prior predictive checks",
    "sampling": "Sampling",
    "posterior-predictive": "Posterior predictive checks",
    "loo": "Leave-one-out cross-validation",
    "comparison": "Model comparison",
    "sensitivity": "Sensitivity to the priors",
    "calibration": "Simulation-based calibration",
}

VERDICTS: dict[str, tuple[str, str]] = {
    "fail": ("Fail", "errors were found; the results should not be reported as they are"),
    "review": ("Review", "warnings were found; each needs a look before the results are used"),
    "pass": ("Pass", "no errors or warnings were found"),
    "empty": ("Nothing audited", "no analysis could be read from the files"),
}

#: Diagnostics table columns: key, heading, format.
COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("rhat", "R-hat", "{:.3f}"),
    ("ess_bulk", "bulk-ESS", "{:.0f}"),
    ("ess_tail", "tail-ESS", "{:.0f}"),
    ("mcse_mean", "MCSE of mean", "{:.3g}"),
    ("mean", "mean", "{:.4g}"),
    ("sd", "sd", "{:.3g}"),
    ("contraction", "contraction", "{:.2f}"),
)
DEFAULT_MAX_TABLE_ROWS = 1000
DASH = "\u2014"


def fmt_value(value: Any) -> str:
    """Evidence value as text: floats to 4 significant digits, lists joined."""
    if value is None:
        return DASH
    if hasattr(value, "item") and callable(value.item) and getattr(value, "ndim", 1) == 0:
        value = value.item()  # a numpy scalar
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        if math.isinf(value):
            return "\u221e" if value > 0 else "-\u221e"
        return f"{value:.4g}"
    if isinstance(value, list | tuple):
        shown = ", ".join(fmt_value(v) for v in value[:12])
        return shown + (f", \u2026 ({len(value)} in all)" if len(value) > 12 else "")
    if isinstance(value, dict):
        return ", ".join(f"{k}: {fmt_value(v)}" for k, v in value.items())
    return str(value)


def inline_code(text: str) -> Markup:
    """HTML for a text whose backtick spans are code: everything is escaped first."""
    parts = str(text).split("`")
    if len(parts) % 2 == 0:  # an unpaired backtick: no code spans at all
        return Markup.escape(text)
    out = [
        Markup("<code>{}</code>").format(p) if k % 2 else Markup.escape(p)
        for k, p in enumerate(parts)
    ]
    return Markup("").join(out)


def _cell(value: Any, pattern: str) -> str:
    if value is None:
        return DASH
    try:
        return pattern.format(float(value))
    except (TypeError, ValueError):
        return str(value)


def option(result: AuditResult, key: str, default: int) -> int:
    """A report option from the effective settings (``result.config``), else ``default``."""
    value = result.config.get(key)
    if isinstance(value, int) and not isinstance(value, bool) and value >= 0:
        return value
    return default


@dataclass(frozen=True)
class ExcerptLine:
    number: int
    text: str
    flagged: bool


@dataclass(frozen=True)
class FigureRef:
    anchor: str
    title: str


@dataclass(frozen=True)
class FindingView:
    anchor: str
    rule_id: str
    title: str
    severity: str
    stage: str
    message: str
    fix: str
    rationale: str
    references: tuple[str, ...]
    location: str
    quantity: str
    evidence: tuple[tuple[str, str], ...]
    excerpt: tuple[ExcerptLine, ...]
    figures: tuple[FigureRef, ...] = ()
    analysis: str = ""
    #: "accepted by <who> (until <date>): <reason>", or "" when not accepted.
    accepted: str = ""
    #: "new" or "unchanged" against a baseline report, or "".
    baseline: str = ""


@dataclass(frozen=True)
class StageGroup:
    stage: str
    title: str
    findings: tuple[FindingView, ...]


@dataclass(frozen=True)
class DiagRow:
    quantity: str
    cells: tuple[str, ...]
    constant: bool
    flagged_by: tuple[str, ...]


@dataclass(frozen=True)
class DiagTable:
    headings: tuple[tuple[str, bool], ...]
    flagged: tuple[DiagRow, ...]
    rows: tuple[DiagRow, ...]
    total: int
    cut: bool
    limit: int
    omitted: int


@dataclass(frozen=True)
class FigureView:
    anchor: str
    title: str
    caption: str
    svg: Markup
    rule_ids: tuple[str, ...]
    quantity: str


@dataclass(frozen=True)
class StageView:
    """One workflow stage of the coverage record, for display."""

    title: str
    status: str
    css: str
    note: str


@dataclass(frozen=True)
class PairingView:
    """An observed variable and where its companions were found."""

    observed: str
    posterior_predictive: str
    prior_predictive: str
    log_likelihood: str


@dataclass(frozen=True)
class ComparisonRowView:
    """One model of a comparison table, formatted."""

    analysis: str
    elpd_loo: str
    se: str
    elpd_diff: str
    diff_se: str
    p_loo: str
    weight: str
    chosen: bool
    note: str


@dataclass(frozen=True)
class ComparisonView:
    """A comparison set: the data it is about and its table, best model first."""

    data: str
    observations: int
    rows: tuple[ComparisonRowView, ...]
    waic_caveat: str


@dataclass(frozen=True)
class AnalysisView:
    anchor: str
    name: str
    verdict: str
    verdict_label: str
    counts: dict[str, int]
    n_chains: int
    n_draws: int
    program: str
    sources: tuple[str, ...]
    settings: tuple[tuple[str, str], ...]
    stages: tuple[StageGroup, ...]
    n_findings: int
    table: DiagTable
    figures: tuple[FigureView, ...]
    figure_problems: tuple[str, ...]
    checklist: tuple[ChecklistItem, ...]
    checklist_counts: tuple[tuple[str, int], ...]
    coverage: tuple[StageView, ...] = ()
    coverage_text: str = ""
    pairings: tuple[PairingView, ...] = ()
    #: Stages not (fully) checked here but checked elsewhere: "title status (note)".
    coverage_gaps: tuple[str, ...] = ()


@dataclass(frozen=True)
class InputView:
    path: str
    sha256: str
    size: str


@dataclass(frozen=True)
class ReportView:
    title: str
    project: str
    tool: str
    version: str
    verdict: str
    verdict_label: str
    verdict_text: str
    counts: dict[str, int]
    gate: str
    gate_reached: bool
    exit_status: int
    caution: str
    project_stages: tuple[StageGroup, ...]
    analyses: tuple[AnalysisView, ...]
    top_findings: tuple[FindingView, ...]
    inputs: tuple[InputView, ...]
    libraries: tuple[tuple[str, str], ...]
    settings: tuple[tuple[str, str], ...]
    checklist_source: str = CHECKLIST_SOURCE
    stage_order: tuple[str, ...] = field(default=STAGES)
    #: Stages not (fully) checked in any analysis, said once: "title status (note)".
    coverage_everywhere: tuple[str, ...] = ()
    comparisons: tuple[ComparisonView, ...] = ()
    #: "name (sha256 …)" of the policy applied.
    policy: str = ""
    accepted_count: int = 0
    #: "N new, N unchanged, N gone since the baseline", or "".
    baseline: str = ""
    gate_new_only: bool = False


def _counts(findings: list[Finding]) -> dict[str, int]:
    c = {"error": 0, "warning": 0, "note": 0}
    for f in findings:
        c[f.severity.value] += 1
    return c


def _verdict(counts: dict[str, int], any_analysis: bool) -> str:
    if not any_analysis:
        return "empty"
    if counts["error"]:
        return "fail"
    if counts["warning"]:
        return "review"
    return "pass"


def _flatten(prefix: str, value: Any, out: list[tuple[str, str]]) -> None:
    if isinstance(value, dict):
        for k in sorted(value, key=str):
            _flatten(f"{prefix}.{k}" if prefix else str(k), value[k], out)
    else:
        out.append((prefix, json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)))


def settings_rows(settings: dict[str, Any]) -> tuple[tuple[str, str], ...]:
    """Nested settings as sorted ``(dotted key, JSON value)`` rows."""
    out: list[tuple[str, str]] = []
    _flatten("", settings, out)
    return tuple(out)


def _size(n: int) -> str:
    for unit in ("B", "KiB", "MiB", "GiB"):
        if n < 1024 or unit == "GiB":
            return f"{n} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024  # type: ignore[assignment]
    return str(n)


def _variable(quantity: str) -> str:
    return quantity.split("[", 1)[0]


#: CSS class of each coverage status.
STAGE_CSS = {"checked": "cov-checked", "partly checked": "cov-partly",
             "not checked": "cov-missing", "not applicable": "cov-na"}
HOW = {"configured": "named in the configuration", "program": "found in the model program",
       "group": "found in its DataTree group", "name": "found by its usual name"}


def _accepted_text(accepted: dict | None) -> str:
    if not accepted:
        return ""
    until = f" until {accepted['expires']}" if accepted.get("expires") else ""
    return f"accepted by {accepted.get('by', '')}{until}: {accepted.get('reason', '')}"


def coverage_text(a: AnalysisResult) -> str:
    """``5 of 7 stages checked`` (``, 1 partly``); stages that do not apply are left out."""
    full, partly, applicable = a.stages_checked()
    return f"{full} of {applicable} stages checked" + (f", {partly} partly" if partly else "")


def _companion(entry: dict | None) -> str:
    if not entry:
        return DASH
    return f"{entry['variable']} ({HOW.get(entry['how'], entry['how'])})"


def _figures_for(f: Finding, figures: tuple[FigureView, ...],
                 variables: dict[str, set[str]] | None) -> list[FigureView]:
    """The figures a finding points to: its rule's, of its own variable when there are such."""
    mine = [g for g in figures if f.rule_id in g.rule_ids]
    if not f.quantity:
        return mine
    same = [g for g in mine if g.quantity and _variable(g.quantity) == _variable(f.quantity)]
    if same:
        return same
    named = (variables or {}).get(f.rule_id, set())
    return [g for g in mine if not g.quantity or _variable(g.quantity) not in named]


class _Builder:
    """Builds the views of one result; keeps the rule table and anchor counters."""

    def __init__(self, result: AuditResult, figure_scale: float) -> None:
        self.result = result
        self.figure_scale = figure_scale
        self.rules: dict[str, Any] = {}
        for rule in result.rules:
            self.rules[rule.id] = rule
            for alias in getattr(rule, "aliases", []) or []:
                self.rules.setdefault(alias, rule)
        self.max_rows = option(result, "max_table_rows", DEFAULT_MAX_TABLE_ROWS)

    def finding(self, f: Finding, anchor: str, a: AnalysisResult | None,
                figures: tuple[FigureView, ...] = (),
                variables: dict[str, set[str]] | None = None) -> FindingView:
        """View of one finding; ``variables`` maps a rule id to the variables its findings name
        (used to link each finding to the figures of its own variable)."""
        rule = self.rules.get(f.rule_id)
        loc = f.location
        location = ""
        excerpt: tuple[ExcerptLine, ...] = ()
        if loc is not None:
            location = loc.path
            if loc.line:
                location += f":{loc.line}" + (f":{loc.column}" if loc.column else "")
                if a is not None:
                    lines = a.excerpts.get(f"{loc.path}:{loc.line}", [])
                    excerpt = tuple(ExcerptLine(int(n), str(t), int(n) == loc.line)
                                    for n, t in lines)
        refs = tuple(FigureRef(g.anchor, g.title) for g in _figures_for(f, figures, variables))
        return FindingView(
            anchor=anchor,
            rule_id=f.rule_id,
            title=rule.title if rule else f.rule_id,
            severity=f.severity.value,
            stage=f.stage,
            message=f.message,
            fix=f.fix or (rule.fix if rule else ""),
            rationale=rule.rationale if rule else "",
            references=tuple(rule.references) if rule else (),
            location=location,
            quantity=f.quantity or "",
            evidence=tuple((str(k), fmt_value(v)) for k, v in f.evidence.items()),
            excerpt=excerpt,
            figures=refs,
            analysis=f.analysis or "",
            accepted=_accepted_text(f.accepted),
            baseline=f.baseline or "",
        )

    def stages(self, findings: list[Finding], prefix: str, a: AnalysisResult | None,
               figures: tuple[FigureView, ...] = ()) -> tuple[StageGroup, ...]:
        ordered = sorted(findings, key=Finding.sort_key)
        variables: dict[str, set[str]] = {}
        for f in ordered:
            if f.quantity:
                variables.setdefault(f.rule_id, set()).add(_variable(f.quantity))
        groups: dict[str, list[FindingView]] = {}
        for k, f in enumerate(ordered, start=1):
            groups.setdefault(f.stage, []).append(
                self.finding(f, f"{prefix}-f{k}", a, figures, variables))
        return tuple(
            StageGroup(stage, STAGE_TITLES.get(stage, stage.replace("-", " ").capitalize()),
                       tuple(items))
            for stage, items in groups.items()
        )

    def table(self, a: AnalysisResult) -> DiagTable:
        named: dict[str, list[str]] = {}
        for f in a.findings:
            if f.quantity:
                named.setdefault(f.quantity, [])
                if f.rule_id not in named[f.quantity]:
                    named[f.quantity].append(f.rule_id)
        rows = []
        for r in a.diagnostics:
            q = str(r.get("quantity", ""))
            rows.append(DiagRow(
                quantity=q,
                cells=tuple(_cell(r.get(key), pattern) for key, _, pattern in COLUMNS),
                constant=bool(r.get("constant", False)),
                flagged_by=tuple(named.get(q, ())),
            ))
        flagged = tuple(r for r in rows if r.flagged_by)
        cut = len(rows) > self.max_rows
        return DiagTable(
            headings=(("quantity", False), *((h, True) for _, h, _ in COLUMNS),
                      ("constant", False)),
            flagged=flagged,
            rows=() if cut else tuple(rows),
            total=len(rows),
            cut=cut,
            limit=self.max_rows,
            omitted=len(rows) - len(flagged) if cut else 0,
        )

    def figures(self, a: AnalysisResult, prefix: str) -> tuple[tuple[FigureView, ...],
                                                                tuple[str, ...]]:
        """Sanitized inline figures; a figure two rules both made is shown once."""
        seen: dict[tuple[str, str, str], int] = {}
        views: list[FigureView] = []
        problems: list[str] = []
        for fig in a.figures:
            key = (fig.title, fig.quantity or "", fig.caption)
            if key in seen:
                k = seen[key]
                old = views[k]
                if fig.rule_id and fig.rule_id not in old.rule_ids:
                    views[k] = FigureView(old.anchor, old.title, old.caption, old.svg,
                                          (*old.rule_ids, fig.rule_id), old.quantity)
                continue
            anchor = f"{prefix}-g{len(views) + 1}"
            try:
                # Sanitized: see auditor.figures.inline.
                svg = Markup(inline_svg(fig.svg, anchor, self.figure_scale, fig.title))
            except UnsafeSvgError as exc:
                problems.append(str(exc))
                continue
            seen[key] = len(views)
            views.append(FigureView(anchor, fig.title, fig.caption, svg,
                                    (fig.rule_id,) if fig.rule_id else (), fig.quantity or ""))
        return tuple(views), tuple(problems)

    def analysis(self, a: AnalysisResult, index: int) -> AnalysisView:
        prefix = f"a{index}"
        figures, problems = self.figures(a, prefix)
        counts = _counts(a.findings)
        verdict = a.verdict
        checklist = tuple(build_checklist(self.result, a))
        return AnalysisView(
            anchor=prefix,
            name=a.name,
            verdict=verdict,
            verdict_label=VERDICTS[verdict][0],
            counts=counts,
            n_chains=a.n_chains,
            n_draws=a.n_draws,
            program=a.program or "",
            sources=tuple(a.sources),
            settings=tuple((k, fmt_value(v)) for k, v in sorted(a.settings.items())
                           if v not in (None, [], {})),
            stages=self.stages(a.findings, prefix, a, figures),
            n_findings=len(a.findings),
            table=self.table(a),
            figures=figures,
            figure_problems=problems,
            checklist=checklist,
            checklist_counts=tuple(
                (status, n) for status in STATUS_ORDER
                if (n := sum(1 for it in checklist if it.status == status))
            ),
            coverage=tuple(StageView(c["title"], c["status"], STAGE_CSS.get(c["status"], ""),
                                     c["note"]) for c in a.coverage),
            coverage_text=coverage_text(a) if a.coverage else "",
            pairings=tuple(PairingView(p["observed"], _companion(p["posterior_predictive"]),
                                       _companion(p["prior_predictive"]),
                                       _companion(p["log_likelihood"])) for p in a.pairings),
        )


def comparison_views(result: AuditResult) -> tuple[ComparisonView, ...]:
    """The comparison tables, formatted; WAIC only beside LOO, with its caveat."""
    loo = {(a.name, rec["observed"]): rec for a in result.analyses for rec in a.loo}
    out = []
    for comp in result.comparisons:
        rows, shaky = [], []
        for r in comp["models"]:
            rec = loo.get((r["analysis"], comp["observed"]), {})
            notes = []
            if r.get("high_k"):
                notes.append(f"{r['high_k']} high Pareto k")
            if rec.get("high_p_waic"):
                shaky.append(r["analysis"])
            if rec.get("elpd_waic") is not None:
                notes.append(f"WAIC {rec['elpd_waic']:.1f}")
            rows.append(ComparisonRowView(
                analysis=r["analysis"], elpd_loo=f"{r['elpd_loo']:.1f}", se=f"{r['se']:.1f}",
                # round first so that -0.04 shows as 0.0, not -0.0
                elpd_diff=f"{round(r['elpd_diff'], 1) + 0.0:.1f}",
                diff_se=f"{r['diff_se']:.1f}",
                p_loo=f"{r['p_loo']:.1f}", weight=f"{r['stacking_weight']:.2f}",
                chosen=bool(r.get("chosen")), note="; ".join(notes)))
        caveat = ""
        if shaky:
            caveat = (f"WAIC is shown for reference only: {', '.join(shaky)} "
                      f"{'has' if len(shaky) == 1 else 'have'} observations with p_waic above "
                      "0.4, where WAIC is unreliable; rely on PSIS-LOO.")
        out.append(ComparisonView(comp["data"], int(comp["observations"]), tuple(rows), caveat))
    return tuple(out)


def _gaps(a: AnalysisResult) -> list[str]:
    return [f"{c['title'].lower()} {c['status']} ({c['note']})" for c in a.coverage
            if c["status"] in ("not checked", "partly checked")]


def build_view(result: AuditResult, top: int = 10, figure_scale: float = 1.0) -> ReportView:
    """The whole report as views.

    ``top`` findings (worst first) are picked for short summaries; figures may be
    shown up to ``figure_scale`` times their natural size (screen: larger, print: 1).
    """
    b = _Builder(result, figure_scale)
    analyses = tuple(b.analysis(a, i) for i, a in enumerate(result.analyses, start=1))
    gaps = [_gaps(a) for a in result.analyses]
    shared = [g for g in gaps[0] if all(g in other for other in gaps)] if len(gaps) > 1 else []
    analyses = tuple(replace(av, coverage_gaps=tuple(g for g in own if g not in shared))
                     for av, own in zip(analyses, gaps, strict=True))
    project_stages = b.stages(result.project_findings, "p", None)
    every = [f for g in project_stages for f in g.findings] + [
        f for av in analyses for g in av.stages for f in g.findings
    ]
    rank = {"error": 0, "warning": 1, "note": 2}
    # Worst first; ties keep report order (stage, then analysis) by the stable sort.
    # Accepted findings are shown where they belong, not among the top ones.
    top_findings = tuple(sorted((f for f in every if not f.accepted),
                                key=lambda f: rank[f.severity])[:top])
    counts = result.counts()
    verdict = _verdict(counts, bool(result.analyses))
    label, text = VERDICTS[verdict]
    return ReportView(
        title=f"Audit of {result.project_name}",
        project=result.project_name,
        tool=result.tool,
        version=result.version,
        verdict=verdict,
        verdict_label=label,
        verdict_text=text,
        counts=counts,
        gate=result.gate,
        gate_reached=result.gate_reached,
        exit_status=result.exit_status,
        caution=result.caution,
        project_stages=project_stages,
        analyses=analyses,
        top_findings=top_findings,
        inputs=tuple(InputView(i.path, i.sha256, _size(i.size)) for i in result.inputs),
        libraries=tuple(sorted(result.libraries.items())),
        settings=settings_rows(result.config),
        coverage_everywhere=tuple(shared),
        comparisons=comparison_views(result),
        policy=(f"{result.policy.get('name')} (sha256 {str(result.policy.get('sha256'))[:12]})"
                if result.policy else ""),
        accepted_count=result.accepted_count,
        baseline=(f"{result.baseline['new']} new, {result.baseline['unchanged']} unchanged, "
                  f"{result.baseline['gone']} gone since the baseline"
                  if result.baseline else ""),
        gate_new_only=result.gate_new_only,
    )
