"""SARIF 2.1.0 report, for code-scanning services and editors.

Every rule of the run is a ``reportingDescriptor`` in ``tool.driver.rules``;
every finding is a ``result`` pointing at its file relative to the project root
(``uriBaseId`` ``PROJECTROOT``), with the program line where there is one and
the evidence in ``properties``. The output is deterministic: no times, no
absolute paths of the machine that ran the audit (the project root is declared
by name only).

Standard: OASIS Static Analysis Results Interchange Format 2.1.0 (errata 01).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any
from urllib.parse import quote

from auditor.findings import Finding, Location
from auditor.reporters.json_report import json_safe
from auditor.result import AuditResult

FORMAT = "sarif"
FILENAME = "audit.sarif"
SARIF_VERSION = "2.1.0"
SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
BASE_ID = "PROJECTROOT"
#: Version of our ``partialFingerprints`` recipe; bump if the recipe changes.
FINGERPRINT_KEY = "bayesAuditorFinding/v1"


def _pascal(rule_id: str) -> str:
    name = rule_id.split(".", 1)[-1]
    return "".join(part.capitalize() for part in name.replace("_", "-").split("-") if part)


def artifact_location(path: str) -> dict[str, Any]:
    """``artifactLocation`` for a project-relative path (or an absolute one outside it)."""
    if path.startswith("/"):
        return {"uri": "file://" + quote(path, safe="/")}
    return {"uri": quote(path, safe="/"), "uriBaseId": BASE_ID}


def _descriptor(rule: Any) -> dict[str, Any]:
    refs = list(getattr(rule, "references", []) or [])
    help_text = f"{rule.rationale}\n\nFix: {rule.fix}"
    if refs:
        help_text += "\n\nReferences:\n" + "\n".join(f"- {r}" for r in refs)
    return {
        "id": rule.id,
        "name": _pascal(rule.id),
        "shortDescription": {"text": rule.title},
        "fullDescription": {"text": f"{rule.summary} {rule.rationale}".strip()},
        "help": {"text": help_text},
        "defaultConfiguration": {"level": rule.severity.value},
        "properties": {
            "stage": rule.stage,
            "tags": [rule.stage],
            "references": refs,
            "thresholds": json_safe(dict(rule.thresholds)),
            "aliases": list(getattr(rule, "aliases", []) or []),
        },
    }


def _fallback_descriptor(f: Finding) -> dict[str, Any]:
    # A finding whose rule is not in the run's rule list (should not happen) still
    # gets a descriptor so that ruleIndex stays valid.
    return {
        "id": f.rule_id,
        "name": _pascal(f.rule_id),
        "shortDescription": {"text": f.rule_id},
        "defaultConfiguration": {"level": f.severity.value},
        "properties": {"stage": f.stage, "tags": [f.stage]},
    }


def _fingerprint(f: Finding, occurrence: int = 0) -> str:
    """Stable across runs: rule, analysis, quantity and file, not the message (whose
    numbers change); the n-th finding with the same key gets ``n`` added, so that code
    scanning tracks each one."""
    loc: Location | None = f.location
    parts = [f.rule_id, f.analysis or "", f.quantity or "", loc.path if loc else ""]
    if occurrence:
        parts.append(str(occurrence))
    return hashlib.sha256("\x1f".join(parts).encode("utf-8")).hexdigest()


def _result(f: Finding, index: int, occurrence: int = 0) -> dict[str, Any]:
    out: dict[str, Any] = {
        "ruleId": f.rule_id,
        "ruleIndex": index,
        "level": f.severity.value,
        "message": {"text": f.message + (f" Fix: {f.fix}" if f.fix else "")},
    }
    if f.location is not None:
        physical: dict[str, Any] = {"artifactLocation": artifact_location(f.location.path)}
        if f.location.line:
            region: dict[str, Any] = {"startLine": int(f.location.line)}
            if f.location.column:
                region["startColumn"] = int(f.location.column)
            physical["region"] = region
        out["locations"] = [{"physicalLocation": physical}]
    out["partialFingerprints"] = {FINGERPRINT_KEY: _fingerprint(f, occurrence)}
    if f.accepted is not None:
        # SARIF 2.1.0, 3.35 "suppressions": accepted by the project, with its reason.
        out["suppressions"] = [{"kind": "external", "status": "accepted",
                                "justification": str(f.accepted.get("reason", ""))}]
    if f.baseline is not None:
        out["baselineState"] = f.baseline  # SARIF 2.1.0, 3.27.24: "new" or "unchanged"
    props: dict[str, Any] = {"stage": f.stage, "evidence": json_safe(f.evidence)}
    if f.analysis is not None:
        props["analysis"] = f.analysis
    if f.quantity is not None:
        props["quantity"] = f.quantity
    if f.fix:
        props["fix"] = f.fix
    out["properties"] = props
    return out


def build(result: AuditResult) -> dict[str, Any]:
    """The SARIF log as a JSON-ready dict."""
    rules = [_descriptor(r) for r in result.rules]
    index = {r["id"]: k for k, r in enumerate(rules)}
    for rule in result.rules:
        for alias in getattr(rule, "aliases", []) or []:
            index.setdefault(alias, index[rule.id])
    results = []
    seen: dict[str, int] = {}
    for f in result.all_findings:
        if f.rule_id not in index:
            index[f.rule_id] = len(rules)
            rules.append(_fallback_descriptor(f))
        base = _fingerprint(f)
        results.append(_result(f, index[f.rule_id], seen.get(base, 0)))
        seen[base] = seen.get(base, 0) + 1
    artifacts = [
        {
            "location": artifact_location(i.path),
            "length": int(i.size),
            "hashes": {"sha-256": i.sha256},
        }
        for i in result.inputs
    ]
    run: dict[str, Any] = {
        "tool": {
            "driver": {
                "name": result.tool,
                "version": result.version,
                "semanticVersion": result.version,
                "rules": rules,
            }
        },
        "originalUriBaseIds": {
            BASE_ID: {"description": {"text": f"The root folder of the audited project "
                                              f"{result.project_name!r}."}}
        },
        "artifacts": artifacts,
        "results": results,
        "columnKind": "unicodeCodePoints",
        "properties": {
            "project": result.project_name,
            "gate": result.gate,
            "gateReached": result.gate_reached,
            "exitStatus": result.exit_status,
            "counts": result.counts(),
            "caution": result.caution,
            "libraries": dict(sorted(result.libraries.items())),
            "settings": json_safe(result.config),
            "comparisons": json_safe(result.comparisons),
            "policy": json_safe(result.policy),
            "baseline": json_safe(result.baseline),
            "acceptedCount": result.accepted_count,
            "coverage": {a.name: json_safe(a.coverage) for a in result.analyses},
        },
    }
    return {"$schema": SCHEMA_URI, "version": SARIF_VERSION, "runs": [run]}


def render(result: AuditResult) -> str:
    """The SARIF log as text (two-space indent, newline at the end)."""
    return json.dumps(build(result), indent=2, ensure_ascii=False) + "\n"


def write(result: AuditResult, out_dir: Path) -> Path:
    """Write ``audit.sarif`` into ``out_dir`` and return its path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / FILENAME
    path.write_text(render(result), encoding="utf-8", errors="backslashreplace", newline="\n")
    return path
