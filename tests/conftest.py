"""Shared test set-up.

``SHARED`` is ``../shared/reference-data`` beside the repository, or ``None`` when
that folder is absent (outside the development setup). Tests that need it call
:func:`require_shared`, which skips with a reason, or fails when
``BAYES_AUDITOR_REQUIRE_SHARED=1`` (set by ``.ci/run``) so CI can never pass by
skipping them.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
_shared = REPO.parent / "shared" / "reference-data"
SHARED: Path | None = _shared if _shared.is_dir() else None


def require_shared() -> Path:
    """Return the reference-data folder, or skip/fail when it is missing."""
    if SHARED is not None:
        return SHARED
    reason = f"reference data not found at {_shared} (needs the ../shared folder beside the repo)"
    if os.environ.get("BAYES_AUDITOR_REQUIRE_SHARED") == "1":
        pytest.fail(reason + "; BAYES_AUDITOR_REQUIRE_SHARED=1 forbids skipping")
    pytest.skip(reason)


#: Generated inputs run by the property-based tests (tests/test_properties.py) and
#: the seconds they took; printed at the end of the run.
PROPERTY_RUNS: dict[str, float] = {"inputs": 0, "seconds": 0.0}


def pytest_terminal_summary(terminalreporter) -> None:  # noqa: ANN001 - pytest's hook
    """Say how many generated inputs the property-based tests ran, and how long."""
    if PROPERTY_RUNS["inputs"]:
        terminalreporter.write_line(
            f"property-based tests: {int(PROPERTY_RUNS['inputs']):,} generated inputs in "
            f"{PROPERTY_RUNS['seconds']:.0f} s of reading (budget: 120 s)")


@pytest.fixture
def shared_dir() -> Path:
    """Fixture form of :func:`require_shared`."""
    return require_shared()
