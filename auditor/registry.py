"""Find rules in ``rules/<stage>/<name>/`` and load their metadata and checks.

Adding a rule means adding a folder; nothing else changes. Rule ids are
permanent: a renamed rule keeps its old id in ``aliases`` and retired ids are
listed in ``rules/RETIRED`` so they are never reused.
"""

from __future__ import annotations

import importlib.util
import tomllib
from functools import lru_cache
from pathlib import Path
from types import ModuleType

from auditor.findings import STAGES, Severity
from auditor.paths import rules_dir
from auditor.rules_api import RuleMeta

_REQUIRED = ("id", "title", "stage", "severity", "summary", "rationale", "fix", "references")


class RuleDefinitionError(Exception):
    """A rule folder is malformed (a bug in the tool, not in the audited project)."""


def _load_module(path: Path, name: str) -> ModuleType:
    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:
        raise RuleDefinitionError(f"{path}: cannot be loaded as a module")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def load_rule(folder: Path) -> RuleMeta:
    """Read one rule folder.

    Raises
    ------
    RuleDefinitionError
        When ``rule.toml`` lacks a field, the id does not match the folder, or
        ``check.py`` has no ``check`` function.
    """
    meta_path = folder / "rule.toml"
    with meta_path.open("rb") as fh:
        meta = tomllib.load(fh)
    missing = [k for k in _REQUIRED if k not in meta]
    if missing:
        raise RuleDefinitionError(f"{meta_path}: missing {', '.join(missing)}")
    expected_id = f"{folder.parent.name}.{folder.name}"
    if meta["id"] != expected_id or meta["stage"] != folder.parent.name:
        raise RuleDefinitionError(f"{meta_path}: id must be {expected_id!r} (stage.folder)")
    if meta["stage"] not in STAGES:
        raise RuleDefinitionError(f"{meta_path}: unknown stage {meta['stage']!r}")
    module_name = "auditor_rule_" + expected_id.replace(".", "_").replace("-", "_")
    check = None
    check_mod = None
    if meta.get("emitted_by") == "engine":
        # The engine itself raises these findings (configuration problems, a rule
        # that crashed); the folder holds their metadata and cases only.
        if (folder / "check.py").exists():
            raise RuleDefinitionError(f"{folder}: an engine-emitted rule has no check.py")
    else:
        check_mod = _load_module(folder / "check.py", module_name)
        check = getattr(check_mod, "check", None)
        if not callable(check):
            raise RuleDefinitionError(f"{folder / 'check.py'}: no check(ctx) function")
    figures = None
    if (folder / "figures.py").is_file():
        figures = _load_module(folder / "figures.py", module_name + "_figures").figures
    return RuleMeta(
        id=meta["id"],
        title=meta["title"],
        stage=meta["stage"],
        severity=Severity(meta["severity"]),
        summary=meta["summary"],
        rationale=meta["rationale"].strip(),
        fix=meta["fix"].strip(),
        references=list(meta["references"]),
        thresholds=dict(meta.get("thresholds", {})),
        folder=folder,
        aliases=list(meta.get("aliases", [])),
        check=check,
        figures=figures,
        scope=_scope(meta, meta_path),
        module=check_mod,
    )


def _scope(meta: dict, meta_path: Path) -> str:
    scope = meta.get("scope", "analysis")
    if scope not in ("analysis", "comparison"):
        raise RuleDefinitionError(f"{meta_path}: scope must be 'analysis' or 'comparison'")
    return scope


@lru_cache(maxsize=4)
def _discover(root: Path) -> tuple[RuleMeta, ...]:
    rules = [
        load_rule(folder)
        for folder in sorted(root.glob("*/*/"))
        if (folder / "rule.toml").is_file()
    ]
    ids = [r.id for r in rules] + [a for r in rules for a in r.aliases]
    dupes = {i for i in ids if ids.count(i) > 1}
    if dupes:
        raise RuleDefinitionError(f"duplicate rule ids: {', '.join(sorted(dupes))}")
    retired_file = root / "RETIRED"
    if retired_file.is_file():
        retired = {ln.split("#")[0].strip() for ln in retired_file.read_text().splitlines()}
        reused = retired.intersection(ids)
        if reused:
            raise RuleDefinitionError(f"retired rule ids reused: {', '.join(sorted(reused))}")
    return tuple(sorted(rules, key=lambda r: (STAGES.index(r.stage), r.id)))


def all_rules(root: Path | None = None) -> list[RuleMeta]:
    """Every rule, ordered by workflow stage then id."""
    return list(_discover((root or rules_dir()).resolve()))


def find_rule(rule_id: str, root: Path | None = None) -> RuleMeta | None:
    """The rule with id (or alias) ``rule_id``, or ``None``."""
    for rule in all_rules(root):
        if rule_id == rule.id or rule_id in rule.aliases:
            return rule
    return None
