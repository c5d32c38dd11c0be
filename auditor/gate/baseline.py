"""Compare the findings of this audit with an earlier JSON report.

Findings are matched by rule, analysis and quantity (not by message text, which
carries numbers that change from run to run), as multisets: two findings with the
same key in both runs are both unchanged. Each current finding is marked ``new``
or ``unchanged``; findings of the earlier report that are not matched are
``gone``.
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass
from typing import Any

from auditor.findings import Finding


class BaselineError(Exception):
    """The earlier report cannot be used as a baseline."""


def _key(rule: str, analysis: str | None, quantity: str | None) -> tuple[str, str, str]:
    return rule, analysis or "", quantity or ""


@dataclass
class Comparison:
    """Counts of new, unchanged and gone findings, and the gone ones themselves."""

    new: int
    unchanged: int
    gone: list[dict[str, Any]]

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record."""
        return {"new": self.new, "unchanged": self.unchanged, "gone": len(self.gone),
                "gone_findings": self.gone}


def earlier_findings(text: str, origin: str) -> list[dict[str, Any]]:
    """The findings of an earlier JSON report (project-level and per analysis).

    Raises
    ------
    BaselineError
        Not JSON, or not a report of this tool.
    """
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise BaselineError(f"{origin}: not JSON ({exc.msg}, line {exc.lineno})") from None
    if not isinstance(doc, dict) or "analyses" not in doc or "format_version" not in doc:
        raise BaselineError(f"{origin}: not a JSON report of this tool")
    out = list(doc.get("project_findings") or [])
    for a in doc.get("analyses") or []:
        out.extend(a.get("findings") or [])
    if not all(isinstance(f, dict) and isinstance(f.get("rule"), str) for f in out):
        raise BaselineError(f"{origin}: its findings have no rule ids")
    return out


def compare(findings: list[Finding], earlier: list[dict[str, Any]]) -> Comparison:
    """Mark each finding ``new`` or ``unchanged`` (``Finding.baseline``)."""
    left = Counter(_key(f.get("rule", ""), f.get("analysis"), f.get("quantity"))
                   for f in earlier)
    new = unchanged = 0
    for f in findings:
        key = _key(f.rule_id, f.analysis, f.quantity)
        if left[key] > 0:
            left[key] -= 1
            f.baseline = "unchanged"
            unchanged += 1
        else:
            f.baseline = "new"
            new += 1
    gone = []
    for f in earlier:
        key = _key(f.get("rule", ""), f.get("analysis"), f.get("quantity"))
        if left[key] > 0:
            left[key] -= 1
            gone.append({"rule": key[0], "analysis": key[1] or None,
                         "quantity": key[2] or None, "message": str(f.get("message", ""))})
    return Comparison(new, unchanged, gone)
