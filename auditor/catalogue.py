"""The rule catalogue (``docs/rules.md``), generated from the rule folders.

``bayes-auditor rules --markdown > docs/rules.md`` writes it; a test keeps the file
in step with the rules.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from auditor.findings import STAGES

HEADER = """# Rule catalogue

Every rule of Bayes Auditor, by workflow stage: its id (permanent), default severity,
what it looks for, why it matters, its thresholds (each configurable as
`[rules."<id>"] <name> = value`), the fix it suggests and its sources.

Generated from `rules/<stage>/<name>/rule.toml` by `bayes-auditor rules --markdown`;
do not edit by hand.
"""


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def rule_catalogue(rules: Sequence[Any]) -> str:
    """The catalogue as Markdown, rules grouped by stage in workflow order."""
    out = [HEADER]
    by_stage: dict[str, list[Any]] = {}
    for r in rules:
        by_stage.setdefault(r.stage, []).append(r)
    for stage in sorted(by_stage, key=lambda s: STAGES.index(s) if s in STAGES else 99):
        out.append(f"\n## {stage}\n")
        for r in sorted(by_stage[stage], key=lambda r: r.id):
            out.append(f"\n### `{r.id}` — {_one_line(r.title)}\n\n")
            scope = " · runs once per comparison set" if getattr(r, "scope", "") == (
                "comparison") else ""
            out.append(f"Severity: **{r.severity.value}**{scope}\n")
            out.append(f"\n{_one_line(r.summary)}\n")
            out.append(f"\n*Why it matters.* {_one_line(r.rationale)}\n")
            if r.thresholds:
                out.append("\n| threshold | default |\n| --- | --- |\n")
                for k, v in r.thresholds.items():
                    out.append(f"| `{k}` | `{v}` |\n")
            out.append(f"\n*Fix.* {_one_line(r.fix)}\n")
            out.append("\n*Sources.*\n")
            for ref in r.references:
                out.append(f"- {_one_line(ref)}\n")
    return "".join(out)
