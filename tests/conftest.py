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


@pytest.fixture
def shared_dir() -> Path:
    """Fixture form of :func:`require_shared`."""
    return require_shared()
