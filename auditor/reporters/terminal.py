"""Terminal output: a verdict line per analysis, findings by stage, a count line, the caution.

Colour is used only when the stream is a terminal and ``NO_COLOR`` is unset.
"""

from __future__ import annotations

import os
from collections import defaultdict
from pathlib import Path
from typing import TextIO

from auditor.findings import STAGES, Finding
from auditor.reporters.views import coverage_text
from auditor.result import AuditResult

_COLOURS = {"error": "31", "warning": "33", "note": "36", "fail": "31", "review": "33",
            "pass": "32", "dim": "2", "bold": "1"}
VERDICT_WORDS = {"fail": "FAIL", "review": "REVIEW", "pass": "PASS"}


class _Painter:
    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled

    def __call__(self, text: str, style: str) -> str:
        if not self.enabled:
            return text
        return f"\x1b[{_COLOURS[style]}m{text}\x1b[0m"


def use_colour(stream: TextIO) -> bool:
    """Colour only on a real terminal, and never when NO_COLOR is set."""
    return bool(getattr(stream, "isatty", lambda: False)()) and "NO_COLOR" not in os.environ


def _plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word if n == 1 else (many or word + 's')}"


def _counts_text(findings: list[Finding]) -> str:
    c = defaultdict(int)
    for f in findings:
        c[f.severity.value] += 1
    parts = [_plural(c[k], k) for k in ("error", "warning", "note") if c[k]]
    return ", ".join(parts) if parts else "no findings"


def _clip(text: str, width: int = 160) -> str:
    # Keep hostile or huge strings from flooding the terminal; strip control characters.
    text = "".join(ch if ch.isprintable() else "?" for ch in text)
    return text if len(text) <= width else text[: width - 1] + "…"


def _gap(c: dict) -> tuple[str, str, str] | None:
    """A stage not (fully) checked, as a comparable key; ``None`` when checked."""
    if c["status"] in ("checked", "not applicable"):
        return None
    return c["title"], c["status"], c["note"]


def _gap_text(c: dict) -> str:
    return f"{c['title'].lower()} {c['status']}: {_clip(c['note'], 140)}"


def closing_line(result: AuditResult) -> str:
    """The one-line summary: counts, accepted and baseline counts, policy, gate, exit."""
    counts = result.counts()
    reached = "reached" if result.gate_reached else "not reached"
    extra = []
    if result.accepted_count:
        extra.append(f"{result.accepted_count} accepted")
    if result.baseline is not None:
        b = result.baseline
        extra.append(f"{b['new']} new, {b['unchanged']} unchanged, {b['gone']} gone since "
                     "the baseline")
    policy = result.policy.get("name") if result.policy else None
    gate = f"gate '{result.gate}'" + (" on new findings" if result.gate_new_only else "")
    return (
        f"{_plural(counts['error'], 'error')}, {_plural(counts['warning'], 'warning')}, "
        f"{_plural(counts['note'], 'note')}"
        + (f" ({'; '.join(extra)})" if extra else "")
        + " in " + _plural(len(result.analyses), "analysis", "analyses")
        + (f"; policy {policy}" if policy else "")
        + f"; {gate} {reached} (exit {result.exit_status})"
    )


class _NoProgress:
    """Progress for a stream that is not a terminal: nothing is shown."""

    def __call__(self, what: str, done: int, total: int) -> None:
        return None

    def close(self) -> None:
        return None


class _BarProgress:
    """A progress bar on a terminal (tqdm), per analysis and stage."""

    def __init__(self, stream: TextIO) -> None:
        from tqdm import tqdm

        self.bar = tqdm(total=0, file=stream, leave=False, unit="analysis",
                        dynamic_ncols=True, bar_format="{desc} {bar} {n_fmt}/{total_fmt}")

    def __call__(self, what: str, done: int, total: int) -> None:
        self.bar.total = total
        self.bar.n = done
        self.bar.set_description_str(_clip(what, 60))
        self.bar.refresh()

    def close(self) -> None:
        self.bar.close()


def terminal_progress(stream: TextIO) -> _NoProgress | _BarProgress:
    """A progress callback for ``run_audit``: a bar on a terminal, silence otherwise (CI
    logs and pipes stay clean)."""
    if not getattr(stream, "isatty", lambda: False)():
        return _NoProgress()
    try:
        return _BarProgress(stream)
    except ImportError:
        return _NoProgress()


def render(result: AuditResult, colour: bool = False, written: list[Path] | None = None) -> str:
    """The terminal report as one string."""
    paint = _Painter(colour)
    out: list[str] = []
    out.append(paint(f"{result.tool} {result.version}", "bold")
               + f" · project {_clip(result.project_name)} · "
               + _plural(len(result.analyses), "analysis", "analyses"))
    out.append("")
    width = max((len(_clip(a.name, 40)) for a in result.analyses), default=8)
    # Stages left unchecked in every analysis are said once, below the table.
    gaps = [{_gap(c) for c in a.coverage} - {None} for a in result.analyses]
    everywhere = set.intersection(*gaps) if len(gaps) > 1 else set()
    for a in result.analyses:
        word = VERDICT_WORDS[a.verdict]
        shape = f"{a.n_chains} x {a.n_draws} draws" if a.n_chains else "no draws"
        checked = coverage_text(a) if a.coverage else ""
        out.append(
            f"  {paint(word.ljust(6), a.verdict)}  {_clip(a.name, 40).ljust(width)}  "
            f"{shape.ljust(18)}  {checked.ljust(26)}  {_counts_text(a.findings)}"
        )
        for c in a.coverage:
            if _gap(c) and _gap(c) not in everywhere:
                out.append(paint(f"          {_gap_text(c)}", "dim"))
    if everywhere:
        out.append(paint("  in every analysis: " + "; ".join(
            _gap_text(c) for c in result.analyses[0].coverage if _gap(c) in everywhere), "dim"))
    for comp in result.comparisons:
        out.append("")
        out.append(paint(f"model comparison: {_clip(comp['data'], 80)} "
                         f"({comp['observations']} observations), best first", "bold"))
        out.append("  analysis".ljust(width + 4)
                   + "  elpd_loo      SE    diff  SE diff  p_loo  weight")
        for r in comp["models"]:
            name = _clip(r["analysis"], 40) + (" *" if r.get("chosen") else "")
            out.append(f"  {name.ljust(width + 2)}  {r['elpd_loo']:8.1f} {r['se']:7.1f} "
                       f"{r['elpd_diff']:7.1f} {r['diff_se']:8.1f} {r['p_loo']:6.1f} "
                       f"{r['stacking_weight']:7.2f}")
    by_stage: dict[str, list[Finding]] = defaultdict(list)
    for f in result.all_findings:
        by_stage[f.stage].append(f)
    for stage in sorted(by_stage, key=lambda s: STAGES.index(s) if s in STAGES else 99):
        out.append("")
        out.append(paint(stage, "bold"))
        for f in sorted(by_stage[stage], key=Finding.sort_key):
            where = ""
            if f.location is not None:
                where = f.location.path + (f":{f.location.line}" if f.location.line else "")
            scope = f"[{_clip(f.analysis, 40)}] " if f.analysis else ""
            if f.baseline == "new":
                scope = "new " + scope
            out.append(f"  {paint(f.severity.value.ljust(7), f.severity.value)} {f.rule_id}  "
                       f"{scope}{paint(_clip(where, 80), 'dim')}")
            out.append(f"          {_clip(f.message, 400)}")
            if f.accepted:
                out.append(f"          accepted by {_clip(str(f.accepted.get('by')), 60)}: "
                           f"{_clip(str(f.accepted.get('reason')), 200)}")
            else:
                out.append(f"          fix: {_clip(f.fix, 300)}")
    out.append("")
    out.append(closing_line(result))
    if written:
        out.append("reports: " + ", ".join(str(p) for p in written))
    out.append(paint("caution: " + result.caution, "dim"))
    return "\n".join(out) + "\n"
