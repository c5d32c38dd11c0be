"""The code passes ruff (configuration in pyproject.toml), so style never drifts unnoticed."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


def test_ruff_check_passes():
    pytest.importorskip("ruff")
    run = subprocess.run([sys.executable, "-m", "ruff", "check", str(REPO)],
                         capture_output=True, text=True, cwd=REPO)
    assert run.returncode == 0, run.stdout[-4000:]
