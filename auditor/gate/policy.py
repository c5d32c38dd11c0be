"""Policies: named sets of rule settings a lab or a journal adopts.

A policy file (TOML) has ``name``, ``description``, optionally ``extends`` (a
built-in policy's name, or a path relative to the file), ``require_stages`` (the
workflow stages of :mod:`auditor.coverage` that every analysis must have checked,
or whose finding it must accept with a reason), and ``[rules."<id>"]`` tables with
``enabled``, ``severity`` and thresholds, exactly as in the project's
configuration. Two are built in: ``everyday`` (the rules' own defaults) and
``submission`` (stricter; see ``auditor/gate/policies/submission.toml``).

Settings are layered: each rule's ``rule.toml``, then the policy chain (the base
first), then the project's ``[rules]``, then the command line.
"""

from __future__ import annotations

import hashlib
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

BUILT_IN = Path(__file__).resolve().parent / "policies"
DEFAULT = "everyday"
_KEYS = {"name", "description", "extends", "require_stages", "rules"}
_MAX_CHAIN = 10


class PolicyError(Exception):
    """A policy that cannot be used (unknown name, unreadable, wrong types, a cycle)."""


@dataclass
class Policy:
    """The effective policy after following ``extends``.

    ``files`` lists each file of the chain (base first) as ``(label, sha256)``.
    """

    name: str
    description: str = ""
    rules: dict[str, dict[str, Any]] = field(default_factory=dict)
    require_stages: list[str] = field(default_factory=list)
    files: list[tuple[str, str]] = field(default_factory=list)

    @property
    def sha256(self) -> str:
        """One hash over the chain's files, in order (what the report records)."""
        digest = hashlib.sha256()
        for label, sha in self.files:
            digest.update(f"{label}\x1f{sha}\n".encode())
        return digest.hexdigest()

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record for the reports."""
        return {"name": self.name, "description": self.description, "sha256": self.sha256,
                "files": [{"file": label, "sha256": sha} for label, sha in self.files],
                "require_stages": list(self.require_stages)}


def built_in_names() -> list[str]:
    """Names of the built-in policies."""
    return sorted(p.stem for p in BUILT_IN.glob("*.toml"))


def _parse(raw: bytes, label: str) -> dict[str, Any]:
    try:
        doc = tomllib.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise PolicyError(f"{label}: not a valid TOML policy ({exc})") from None
    unknown = sorted(set(doc) - _KEYS)
    if unknown:
        known = ", ".join(sorted(_KEYS))
        raise PolicyError(f"{label}: unknown key {unknown[0]!r} (known: {known})")
    for key in ("name", "description", "extends"):
        if key in doc and not isinstance(doc[key], str):
            raise PolicyError(f"{label}: {key!r} must be a string")
    stages = doc.get("require_stages", [])
    if not isinstance(stages, list) or not all(isinstance(s, str) for s in stages):
        raise PolicyError(f"{label}: 'require_stages' must be a list of stage names")
    rules = doc.get("rules", {})
    if not isinstance(rules, dict) or not all(isinstance(v, dict) for v in rules.values()):
        raise PolicyError(f"{label}: [rules] must hold one table per rule id")
    return doc


def load_policy(ref: str, base: Path | None, read_bytes: Callable[[Path], bytes]) -> Policy:
    """The policy ``ref`` names: a built-in name, or a file path (relative to ``base``).

    ``read_bytes`` opens files that are not built in (through the project boundary
    when the reference comes from the project).

    Raises
    ------
    PolicyError
        Unknown name, unreadable file, wrong types, or an ``extends`` cycle.
    """
    chain: list[tuple[str, dict[str, Any], str]] = []
    seen: set[str] = set()
    current: str | None = ref
    where = base
    while current is not None:
        if len(chain) >= _MAX_CHAIN:
            raise PolicyError(f"{ref}: 'extends' goes more than {_MAX_CHAIN} policies deep")
        if current in built_in_names():
            path, label = BUILT_IN / f"{current}.toml", f"built-in:{current}"
            raw = path.read_bytes()
        else:
            path = (where / current) if where is not None else Path(current)
            label = str(path)
            try:
                raw = read_bytes(path)
            except Exception as exc:  # noqa: BLE001 - the boundary refuses in several ways
                raise PolicyError(
                    f"{current}: not a built-in policy ({', '.join(built_in_names())}) "
                    f"and not a readable file ({exc})") from None
            where = path.parent
        if label in seen:
            raise PolicyError(f"{ref}: 'extends' makes a cycle at {label}")
        seen.add(label)
        doc = _parse(raw, label)
        chain.append((label, doc, hashlib.sha256(raw).hexdigest()))
        current = doc.get("extends")
    policy = Policy(name=chain[0][1].get("name") or Path(ref).stem,
                    description=chain[0][1].get("description", ""))
    for label, doc, sha in reversed(chain):  # the base first, each child on top
        for rule_id, opts in doc.get("rules", {}).items():
            policy.rules.setdefault(rule_id, {}).update(opts)
        if "require_stages" in doc:
            policy.require_stages = list(doc["require_stages"])
        policy.files.append((label, sha))
    return policy
