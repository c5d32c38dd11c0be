"""Audit results and helpers shared by the report tests.

The results come from the real engine on real projects: the invented demo
project (examples/demo/, CmdStan CSV written by Stan), the shared CmdStan run of
the non-centered eight schools model (../shared/reference-data/cmdstan-outputs/),
the centered eight schools netCDF that arviz-base ships (PyMC draws), and the
unsafe project (tests/projects/unsafe/). Results are cached per process; tests
must not change them (use :func:`pinned` for a changed copy).

Golden files: :func:`check_gold` compares a text with ``tests/gold/<fmt>/<name>``.
After an intended change of a report, regenerate them with

    BAYES_AUDITOR_REGEN_GOLD=1 .venv/bin/python -m pytest tests/test_report_markdown.py \
        tests/test_report_sarif.py -q

and review the diff before committing.
"""

from __future__ import annotations

import dataclasses
import difflib
import os
import shutil
from functools import lru_cache
from pathlib import Path

import pytest

from auditor.engine import run_audit
from auditor.result import AuditResult
from tests.conftest import require_shared

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "examples" / "demo"
UNSAFE = REPO / "tests" / "projects" / "unsafe"
GOLD = REPO / "tests" / "gold"
REGEN_ENV = "BAYES_AUDITOR_REGEN_GOLD"


def _freeze(overrides: dict | None) -> tuple:
    return tuple(sorted((overrides or {}).items(), key=lambda kv: kv[0]))


@lru_cache(maxsize=16)
def _audit(path: str, frozen: tuple) -> AuditResult:
    overrides = {k: list(v) if isinstance(v, tuple) else v for k, v in frozen}
    return run_audit([Path(path)], overrides=overrides)


def audit(path: Path, **overrides: object) -> AuditResult:
    """The engine's result for the project at ``path`` (cached; do not modify it)."""
    frozen = tuple((k, tuple(v) if isinstance(v, list) else v)
                   for k, v in _freeze(overrides))
    return _audit(str(path), frozen)


def demo_result(**overrides: object) -> AuditResult:
    """The demo project's audit (has divergences, R-hat and ESS findings, program lines)."""
    if not (DEMO / "bayes-auditor.toml").is_file():
        pytest.skip(f"demo project not found at {DEMO}")
    return audit(DEMO, **overrides)


def eight_schools_nc_result(**overrides: object) -> AuditResult:
    """Audit of the shared CmdStan run of the non-centered eight schools model."""
    return audit(require_shared() / "cmdstan-outputs" / "arviz-eight-schools-nc", **overrides)


def centered_eight_path() -> Path:
    """Path of the centered eight schools netCDF shipped inside arviz-base (PyMC 5.20 draws)."""
    from arviz_base.datasets import LOCAL_DATASETS

    path = Path(LOCAL_DATASETS["centered_eight"].filename)
    if not path.is_file():
        pytest.skip(f"arviz-base example file missing: {path}")
    return path


def unsafe_result(**overrides: object) -> AuditResult:
    """Audit of the project whose names, paths and contents carry markup and links."""
    return audit(UNSAFE, **overrides)


def pinned(result: AuditResult) -> AuditResult:
    """A copy for golden files: library and tool versions pinned, and only the rules that hit.

    Golden files check the report format; pinning keeps them valid across library
    upgrades and across rules added elsewhere (the full rule list is checked by
    tests/test_report_sarif.py::test_every_rule_is_described).
    """
    hit = {f.rule_id for f in result.all_findings}
    return dataclasses.replace(
        result,
        version="0.0.0+gold",
        libraries={name: "(pinned)" for name in result.libraries},
        rules=[r for r in result.rules if r.id in hit],
    )


def check_gold(fmt: str, name: str, text: str) -> None:
    """Compare ``text`` with the golden file ``tests/gold/<fmt>/<name>``.

    With ``BAYES_AUDITOR_REGEN_GOLD=1`` the golden file is (re)written instead
    and the test passes; review the diff before committing it.
    """
    path = GOLD / fmt / name
    if os.environ.get(REGEN_ENV) == "1":
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8", newline="\n")
        return
    if not path.is_file():
        pytest.fail(f"golden file {path} missing; create it with {REGEN_ENV}=1")
    expected = path.read_text(encoding="utf-8")
    if text != expected:
        diff = "".join(difflib.unified_diff(
            expected.splitlines(keepends=True), text.splitlines(keepends=True),
            fromfile=str(path), tofile="output", n=2))
        pytest.fail(f"output differs from {path} (regenerate with {REGEN_ENV}=1 if intended):\n"
                    + diff[:6000])


def tool(name: str, path: str | None = None) -> str:
    """Path of an external program; skips when absent, fails on CI (where .ci/run installs it)."""
    found = shutil.which(name) or (path if path and Path(path).is_file() else None)
    if found:
        return found
    reason = f"{name} not installed (apt-get install chromium poppler-utils)"
    if os.environ.get("CI") == "true" or os.environ.get("BAYES_AUDITOR_REQUIRE_SHARED") == "1":
        pytest.fail(reason + "; CI must have it")
    pytest.skip(reason)
