"""Markdown summary: golden file, determinism, length, and escaping checked with an
independent Markdown implementation (Python-Markdown, which passes raw HTML through,
so unescaped markup from the audited files would come out as live HTML)."""

from __future__ import annotations

import re

import markdown

from auditor.reporters import markdown_report
from auditor.reporters.markdown_report import escape_md, md_text
from tests.report_fixtures import check_gold, eight_schools_nc_result, pinned


def _nc():
    return pinned(eight_schools_nc_result(report=["md", "html", "sarif"]))


def test_contract(tmp_path):
    assert markdown_report.FORMAT == "md" and markdown_report.FILENAME == "audit.md"
    path = markdown_report.write(_nc(), tmp_path)
    assert path == tmp_path / "audit.md"


def test_gold_eight_schools_nc():
    check_gold("md", "eight-schools-nc.md", markdown_report.render(_nc()))


def test_same_input_same_bytes(tmp_path):
    a = markdown_report.write(_nc(), tmp_path / "a").read_bytes()
    b = markdown_report.write(_nc(), tmp_path / "b").read_bytes()
    assert a == b


def test_short_with_top_findings_worst_first_and_fixes():
    result = _nc()
    text = markdown_report.render(result)
    total = len(result.all_findings)
    assert total > markdown_report.TOP_FINDINGS  # the shared run has 13 findings
    assert f"Top findings ({markdown_report.TOP_FINDINGS} of {total}, worst first)" in text
    levels = re.findall(r"^\d+\. \*\*(error|warning|note)\*\*", text, flags=re.M)
    assert len(levels) == markdown_report.TOP_FINDINGS
    rank = {"error": 0, "warning": 1, "note": 2}
    assert [rank[x] for x in levels] == sorted(rank[x] for x in levels)
    assert text.count("*Fix:*") == markdown_report.TOP_FINDINGS
    assert len(text.splitlines()) < 60
    # Where the full report is: the other formats asked for in the same run.
    assert "`audit.html`, `audit.sarif`" in text
    assert result.caution in text


def test_escaping_renders_inert():
    payload = ('<script>alert(1)</script> <img src="file:///etc/passwd"> '
               '[click](javascript:alert(1)) ![x](file:///etc/passwd) *bold* | cell')
    html = markdown.markdown(f"- {escape_md(payload)}")
    assert "<script" not in html and "<img" not in html and "<a " not in html
    assert "<em>" not in html and "<strong>" not in html
    # The text itself survives, shown literally.
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_code_spans_stay_code_and_stay_inert():
    html = markdown.markdown(md_text("use `<script>x</script>` then `a_b` and a_b"))
    assert "<code>&lt;script&gt;x&lt;/script&gt;</code>" in html
    assert "<code>a_b</code>" in html and "<em>" not in html
