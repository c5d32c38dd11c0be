"""Accepted findings: a project accepts one finding, with a reason, without silencing
the rule everywhere.

The file (``bayes-auditor-accepted.toml`` in the project, or ``accepted = "path"`` in
the configuration) holds ``[[accept]]`` tables::

    [[accept]]
    rule = "sampling.tree-depth"
    analysis = "growth-hier"
    quantity = ""                   # optional: only this quantity
    reason = "max depth hit in 0.2% of transitions; efficiency only"
    by = "A. Reviewer"
    expires = 2027-06-30            # optional TOML date

A finding that matches an entry (rule, analysis and, when given, quantity) is shown
as accepted with the reason and is ignored by the gate. An entry whose reason or
``by`` is empty does not accept anything (the starting file written by
``bayes-auditor accept`` has empty reasons on purpose), an expired entry no longer
accepts and is itself a finding, and so is an entry that matches nothing.
"""

from __future__ import annotations

import datetime as dt
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from auditor.findings import Finding

DEFAULT_FILE = "bayes-auditor-accepted.toml"


class AcceptedFileError(Exception):
    """The accepted-findings file cannot be used (not TOML, wrong types)."""


@dataclass(frozen=True)
class Acceptance:
    """One ``[[accept]]`` entry and the line it starts on."""

    rule: str
    analysis: str | None
    quantity: str | None
    reason: str
    by: str
    expires: dt.date | None
    line: int | None = None

    def matches(self, f: Finding) -> bool:
        """Whether this entry is about finding ``f``."""
        return (f.rule_id == self.rule
                and (self.analysis is None or f.analysis == self.analysis)
                and (self.quantity is None or f.quantity == self.quantity))

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record (shown beside an accepted finding)."""
        return {"reason": self.reason, "by": self.by,
                "expires": self.expires.isoformat() if self.expires else None}


def _text(entry: dict, key: str, where: str, required: bool = False) -> str | None:
    value = entry.get(key)
    if value is None:
        if required:
            raise AcceptedFileError(f"{where}: '{key}' is required")
        return None
    if not isinstance(value, str):
        raise AcceptedFileError(f"{where}: '{key}' must be a string, not {type(value).__name__}")
    return value


def parse(text: str, origin: str) -> list[Acceptance]:
    """The entries of an accepted-findings file.

    Raises
    ------
    AcceptedFileError
        Not valid TOML, or an entry with a value of the wrong type.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise AcceptedFileError(f"{origin}: not valid TOML ({exc})") from None
    entries = doc.get("accept", [])
    if not isinstance(entries, list):
        raise AcceptedFileError(f"{origin}: 'accept' must be an array of tables ([[accept]])")
    starts = [n for n, ln in enumerate(text.splitlines(), start=1)
              if ln.strip().replace(" ", "") == "[[accept]]"]
    out = []
    for i, entry in enumerate(entries):
        where = f"{origin}: [[accept]] #{i + 1}"
        if not isinstance(entry, dict):
            raise AcceptedFileError(f"{where}: must be a table")
        expires = entry.get("expires")
        if isinstance(expires, dt.datetime):
            expires = expires.date()
        if expires is not None and not isinstance(expires, dt.date):
            raise AcceptedFileError(f"{where}: 'expires' must be a date like 2027-06-30")
        out.append(Acceptance(
            rule=_text(entry, "rule", where, required=True) or "",
            analysis=_text(entry, "analysis", where) or None,
            quantity=_text(entry, "quantity", where) or None,
            reason=(_text(entry, "reason", where) or "").strip(),
            by=(_text(entry, "by", where) or "").strip(),
            expires=expires,
            line=starts[i] if i < len(starts) else None,
        ))
    return out


@dataclass
class Outcome:
    """What applying the entries did: problems to report as findings."""

    expired: list[Acceptance]
    unmatched: list[Acceptance]
    incomplete: list[Acceptance]


def apply(findings: list[Finding], entries: list[Acceptance], today: dt.date) -> Outcome:
    """Mark the findings that valid entries accept (``Finding.accepted``)."""
    expired = [e for e in entries if e.expires is not None and e.expires < today]
    incomplete = [e for e in entries if not e.reason or not e.by]
    valid = [e for e in entries if e not in expired and e not in incomplete]
    for f in findings:
        for e in valid:
            if e.matches(f):
                f.accepted = e.as_dict()
                break
    matched_any = {id(e) for e in entries if any(e.matches(f) for f in findings)}
    unmatched = [e for e in entries if id(e) not in matched_any and e not in expired
                 and e not in incomplete]
    return Outcome(expired, unmatched, incomplete)


def starting_file(findings: list[Finding]) -> str:
    """A starting accepted-findings file listing ``findings`` with empty reasons.

    The gate refuses these entries until someone fills in ``reason`` and ``by``.
    """
    lines = ["# Accepted findings. Each entry accepts one finding once `reason` and `by`",
             "# are filled in; until then the gate ignores it. `expires` is optional.", ""]
    seen: set[tuple[str, str | None, str | None]] = set()
    for f in findings:
        key = (f.rule_id, f.analysis, f.quantity)
        if key in seen:
            continue
        seen.add(key)
        lines += ["[[accept]]", f"rule = {_toml_str(f.rule_id)}"]
        if f.analysis:
            lines.append(f"analysis = {_toml_str(f.analysis)}")
        if f.quantity:
            lines.append(f"quantity = {_toml_str(f.quantity)}")
        lines += [f"# {_one_line(f.message)[:150]}", 'reason = ""', 'by = ""', ""]
    return "\n".join(lines) + "\n"


def _toml_str(text: str) -> str:
    import json

    return json.dumps(text, ensure_ascii=False)  # a JSON string is a TOML basic string


def _one_line(text: str) -> str:
    return " ".join(text.split())


def load(path: Path, read_text: Any) -> list[Acceptance]:
    """Entries of the file at ``path``, read with ``read_text`` (the project boundary)."""
    return parse(read_text(path), path.name)
