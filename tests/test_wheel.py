"""The built wheel carries rules/ and templates/ and audits from outside the checkout.

Builds the wheel, installs it into a fresh virtual environment (dependencies from
the package index or pip's cache) and runs the console script in a temporary
folder holding a copy of a rule case.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import venv
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
CASE = REPO / "rules" / "sampling" / "divergences" / "cases" / "bad"


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    work = tmp_path_factory.mktemp("wheel")
    dist = work / "dist"
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
         "-w", str(dist), str(REPO)],
        capture_output=True, text=True,
    )
    assert build.returncode == 0, build.stderr[-2000:]
    (wheel,) = dist.glob("bayes_auditor-*.whl")
    env_dir = work / "env"
    venv.EnvBuilder(with_pip=True).create(env_dir)
    py = env_dir / "bin" / "python"
    install = subprocess.run([str(py), "-m", "pip", "install", "-q", str(wheel)],
                             capture_output=True, text=True)
    assert install.returncode == 0, install.stderr[-2000:]
    return env_dir


def test_installed_console_script_audits_outside_the_checkout(installed, tmp_path):
    project = tmp_path / "elsewhere"
    shutil.copytree(CASE, project)
    exe = installed / "bin" / "bayes-auditor"
    run = subprocess.run([str(exe), "audit", str(project), "--report", "json"],
                         capture_output=True, text=True, cwd=tmp_path)
    # The case has divergent transitions: an error, so the gate is reached.
    assert run.returncode == 1, run.stderr
    assert "sampling.divergences" in run.stdout
    assert (project / "audit-report" / "audit.json").is_file()
    # The rules came from inside the installed package, not from this checkout.
    where = subprocess.run([str(installed / "bin" / "python"), "-c",
                            "import auditor.paths as p; print(p.rules_dir())"],
                           capture_output=True, text=True, cwd=tmp_path)
    assert "_bundled" in where.stdout and str(REPO) not in where.stdout
    listed = subprocess.run([str(exe), "rules"], capture_output=True, text=True, cwd=tmp_path)
    assert "sampling.rhat" in listed.stdout and listed.returncode == 0
