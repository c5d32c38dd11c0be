"""Every rule on its own good and bad cases (``rules/<stage>/<name>/cases``).

The good case must give no finding of the rule; the bad case must give exactly
the hits marked inline (``expect: <rule-id>`` in a program comment, at that line)
and in ``expect.toml`` (``[[hit]]`` tables; ``exact = false`` allows more).
Entries git cannot hold (FIFOs, link loops) are listed in ``expect.toml`` as
``[[setup]]`` tables (``fifo = "name"``, or ``link = "name"`` with ``to =
"target"``) and made in a copy of the case before it is audited. Further folders
``cases/good-<label>`` and ``cases/bad-<label>`` are held to the same rules.
"""

from __future__ import annotations

import os
import re
import shutil
import tomllib
from pathlib import Path

import pytest

from auditor.engine import run_audit
from auditor.findings import Finding
from auditor.registry import all_rules

_MARK = re.compile(r"expect:\s*([a-z][\w-]*\.[\w-]+)")
RULES = all_rules()
# inputs.rule-failed needs a rule that crashes; tests/test_engine.py injects one.
ENGINE_ONLY = {"inputs.rule-failed"}


def _expected(case: Path, rule_id: str) -> tuple[list[dict], bool]:
    hits: list[dict] = []
    for path in sorted(case.rglob("*")):
        if path.suffix not in (".stan", ".py", ".toml") or path.name == "expect.toml":
            continue
        for n, line in enumerate(path.read_text(errors="replace").splitlines(), start=1):
            for m in _MARK.finditer(line):
                if m.group(1) == rule_id:
                    hits.append({"path": path.relative_to(case).as_posix(), "line": n})
    exact = True
    spec = case / "expect.toml"
    if spec.is_file():
        data = tomllib.loads(spec.read_text())
        hits.extend(data.get("hit", []))
        exact = data.get("exact", True)
    return hits, exact


def _matches(f: Finding, hit: dict) -> bool:
    loc = f.location
    for key, want in hit.items():
        got = {
            "quantity": f.quantity,
            "path": loc.path if loc else None,
            "line": loc.line if loc else None,
            "severity": f.severity.value,
        }.get(key)
        if got != want:
            return False
    return True


def _prepared(case: Path, tmp_path: Path) -> Path:
    """The case itself, or a copy with its ``[[setup]]`` entries made."""
    spec = case / "expect.toml"
    setup = tomllib.loads(spec.read_text()).get("setup", []) if spec.is_file() else []
    if not setup:
        return case
    copy = tmp_path / case.name
    shutil.copytree(case, copy)
    for entry in setup:
        if "fifo" in entry:
            os.mkfifo(copy / entry["fifo"])
        else:
            (copy / entry["link"]).symlink_to(entry["to"])
    return copy


def _hits(case: Path, rule_id: str, tmp_path: Path) -> list[Finding]:
    result = run_audit([_prepared(case, tmp_path)], only_rules={rule_id})
    return [f for f in result.all_findings if f.rule_id == rule_id]


CASES = [r for r in RULES if r.id not in ENGINE_ONLY]


def _more_cases(kind: str) -> list[tuple]:
    """Further case folders beside ``cases/<kind>``: ``cases/<kind>-<label>`` (for example a
    rule's synthetic cases in ``bad`` and real sampler runs in ``bad-pystan``)."""
    out = []
    for rule in CASES:
        folder = rule.folder / "cases"
        for case in sorted(folder.glob(f"{kind}-*")) if folder.is_dir() else []:
            if case.is_dir():
                out.append(pytest.param(rule, case, id=f"{rule.id}:{case.name}"))
    return out


def test_every_rule_has_cases():
    # examples-to-follow.md pattern 4: each rule keeps a good and a bad case.
    for rule in RULES:
        if rule.id in ENGINE_ONLY:
            continue
        for kind in ("good", "bad"):
            assert (rule.folder / "cases" / kind).is_dir(), f"{rule.id} lacks cases/{kind}"


@pytest.mark.parametrize("rule", CASES, ids=[r.id for r in CASES])
def test_good_case_has_no_hit(rule, tmp_path):
    hits = _hits(rule.folder / "cases" / "good", rule.id, tmp_path)
    assert hits == [], [f.message for f in hits]


@pytest.mark.parametrize("rule,case", _more_cases("good"))
def test_further_good_cases_have_no_hit(rule, case, tmp_path):
    hits = _hits(case, rule.id, tmp_path)
    assert hits == [], [f.message for f in hits]


@pytest.mark.parametrize("rule", CASES, ids=[r.id for r in CASES])
def test_bad_case_hits_where_marked(rule, tmp_path):
    _check_bad_case(rule, rule.folder / "cases" / "bad", tmp_path)


@pytest.mark.parametrize("rule,case", _more_cases("bad"))
def test_further_bad_cases_hit_where_marked(rule, case, tmp_path):
    _check_bad_case(rule, case, tmp_path)


def _check_bad_case(rule, case: Path, tmp_path: Path) -> None:
    expected, exact = _expected(case, rule.id)
    assert expected, f"{rule.id}: bad case marks no expected hit"
    hits = _hits(case, rule.id, tmp_path)
    for want in expected:
        assert any(_matches(f, want) for f in hits), (
            f"{rule.id}: expected hit {want} not found; got "
            f"{[(f.quantity, f.location, f.message) for f in hits]}"
        )
    if exact:
        for f in hits:
            assert any(_matches(f, want) for want in expected), f"unexpected hit: {f.message}"
