"""The machine-readable JSON report.

``format_version`` log (bump on every change of shape):

1. First version: tool, project, gate, summary, caution, analyses with sources,
   settings, diagnostics and findings; project-level findings; inputs with SHA-256.
2. Per analysis: ``pairings`` (each observed variable with its replicated draws,
   prior predictive draws and log-likelihood, and how each was found:
   configured, program, group or name), ``coverage`` (every workflow stage:
   checked, partly checked, not checked with the missing input, not applicable)
   and ``loo`` (PSIS-LOO and WAIC per observed variable); at the top level
   ``comparisons`` (analyses of the same data: elpd_loo, SE, difference to the
   best with its paired SE, p_loo, stacking weights); ``policy`` (name, hash,
   files), ``accepted_file``, ``baseline`` (new, unchanged, gone), per finding
   ``accepted`` (reason, by, expires) and ``baseline`` (new or unchanged), and
   ``gate.new_only`` and ``summary.accepted``; per analysis ``sensitivity``
   (power-scaling sensitivity of each quantity, the log-prior's source and the prior
   statements left out), and ``contraction`` in the diagnostics rows.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Any

from auditor.findings import Finding
from auditor.result import AuditResult

FORMAT = "json"
FILENAME = "audit.json"
FORMAT_VERSION = 2


def json_safe(value: Any) -> Any:
    """``value`` as plain JSON data: NaN and infinity become null ("not computable"),
    numpy scalars are unwrapped, anything else unknown becomes its text."""
    if hasattr(value, "item") and callable(value.item) and not isinstance(value, list | dict):
        value = value.item()
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(v) for v in value]
    if value is None or isinstance(value, bool | int | str):
        return value
    return str(value)


def finding_dict(f: Finding) -> dict[str, Any]:
    """JSON form of one finding (shared by reporters that embed findings)."""
    loc = None
    if f.location is not None:
        loc = {"path": f.location.path, "line": f.location.line, "column": f.location.column}
    return {
        "rule": f.rule_id,
        "severity": f.severity.value,
        "stage": f.stage,
        "analysis": f.analysis,
        "quantity": f.quantity,
        "message": f.message,
        "evidence": json_safe(f.evidence),
        "fix": f.fix,
        "location": loc,
        "accepted": json_safe(f.accepted),
        "baseline": f.baseline,
    }


def analysis_dict(a: Any) -> dict[str, Any]:
    """JSON form of one analysis's result (an item of the report's ``analyses``)."""
    return {
        "name": a.name,
        "verdict": a.verdict,
        "program": a.program,
        "sources": a.sources,
        "chains": a.n_chains,
        "draws_per_chain": a.n_draws,
        "settings": json_safe(a.settings),
        "coverage": json_safe(a.coverage),
        "pairings": json_safe(a.pairings),
        "loo": json_safe(a.loo),
        "sensitivity": json_safe(a.sensitivity),
        "diagnostics": json_safe(a.diagnostics),
        "findings": [finding_dict(f) for f in a.findings],
    }


def to_dict(result: AuditResult) -> dict[str, Any]:
    """The whole report as plain data, in a fixed order."""
    return {
        "format_version": FORMAT_VERSION,
        "tool": {"name": result.tool, "version": result.version},
        "project": result.project_name,
        "gate": {"level": result.gate, "reached": result.gate_reached,
                 "exit_status": result.exit_status, "new_only": result.gate_new_only},
        "summary": {**result.counts(), "accepted": result.accepted_count,
                    "analyses": len(result.analyses)},
        "policy": json_safe(result.policy),
        "accepted_file": result.accepted_file,
        "baseline": json_safe(result.baseline),
        "caution": result.caution,
        "project_findings": [finding_dict(f) for f in sorted(result.project_findings,
                                                              key=Finding.sort_key)],
        "comparisons": json_safe(result.comparisons),
        "analyses": [analysis_dict(a) for a in result.analyses],
        "inputs": [{"path": i.path, "sha256": i.sha256, "bytes": i.size} for i in result.inputs],
        "config": json_safe(result.config),
        "libraries": dict(sorted(result.libraries.items())),
    }


def write(result: AuditResult, out_dir: Path) -> Path:
    """Write ``audit.json`` into ``out_dir``; same result, same bytes.

    The analyses are encoded and written one at a time (the bytes of ``json.dumps`` of
    :func:`to_dict` with ``indent=2``), so a project of many analyses never holds its whole
    report, as data and as text, at once.
    """
    path = out_dir / FILENAME
    options = {"indent": 2, "ensure_ascii": False, "allow_nan": False}
    analyses = result.analyses
    head = to_dict(dataclasses.replace(result, analyses=[]))
    # The summary, gate and exit status count the analyses: take them from the whole result.
    full = to_dict_summary(result)
    head.update(full)
    text = json.dumps(head, **options)
    with path.open("w", encoding="utf-8", errors="backslashreplace") as fh:
        if not analyses:
            fh.write(text + "\n")
            return path
        before, after = text.split(_EMPTY_ANALYSES, 1)
        fh.write(before + '\n  "analyses": [')
        for k, a in enumerate(analyses):
            item = json.dumps(analysis_dict(a), **options).replace("\n", "\n    ")
            fh.write(("," if k else "") + "\n    " + item)
        fh.write("\n  ],\n" + after + "\n")
    return path


#: How ``json.dumps(..., indent=2)`` writes an empty ``analyses`` list among the top keys.
_EMPTY_ANALYSES = '\n  "analyses": [],\n'


def to_dict_summary(result: AuditResult) -> dict[str, Any]:
    """The keys of :func:`to_dict` that depend on the analyses besides the list itself."""
    return {
        "gate": {"level": result.gate, "reached": result.gate_reached,
                 "exit_status": result.exit_status, "new_only": result.gate_new_only},
        "summary": {**result.counts(), "accepted": result.accepted_count,
                    "analyses": len(result.analyses)},
    }
