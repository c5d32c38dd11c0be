"""Terminal output: verdict lines, findings by stage with numbers and fix, count line, caution."""

from __future__ import annotations

import io
from pathlib import Path

from auditor.engine import run_audit
from auditor.reporters.terminal import render, use_colour

REPO = Path(__file__).resolve().parent.parent
CASE = REPO / "rules" / "sampling" / "divergences" / "cases" / "bad"


def test_layout_and_content():
    result = run_audit([CASE])
    text = render(result, colour=False)
    lines = text.splitlines()
    assert lines[2].split()[:2] == ["FAIL", "fit"] and "4 x 200 draws" in lines[2]
    # Stage headings appear in workflow order; the divergence finding shows its numbers.
    assert text.index("\ninputs\n") < text.index("\nsampling\n")
    assert "sampling.divergences" in text and "9 of 800 transitions" in text
    assert "fix: Raise adapt_delta (now 0.8) to 0.95" in text  # the synthetic case: no hierarchy
    assert any(ln.startswith("1 error, ") and "exit 1" in ln for ln in lines)
    assert "qualified statistician" in lines[-1]
    assert "\x1b[" not in text


def test_colour_only_on_a_terminal(monkeypatch):
    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    monkeypatch.delenv("NO_COLOR", raising=False)
    assert use_colour(Tty()) and not use_colour(io.StringIO())
    monkeypatch.setenv("NO_COLOR", "1")
    assert not use_colour(Tty())
    assert "\x1b[31m" in render(run_audit([CASE]), colour=True)


def test_control_characters_in_names_are_neutralised(tmp_path):
    project = tmp_path / "p\x1b[2Jx"
    project.mkdir()
    for src in CASE.glob("*.csv"):
        (project / src.name).write_bytes(src.read_bytes())
    text = render(run_audit([project]), colour=False)
    assert "\x1b" not in text
