"""Reports of a hostile project stay inert and deterministic.

tests/projects/unsafe/ has an analysis name, file paths and file contents (a Stan
comment on a flagged line, so it lands in the source excerpt) that carry
``<script>``, ``<img src="file:///etc/passwd">`` and ``javascript:`` links. The
HTML is parsed with the standard library's parser (an HTML5-conformant browser
would see the same elements); the Markdown is rendered with Python-Markdown
(which passes raw HTML through, so anything unescaped would show); the PDF is
read back with poppler's tools.
"""

from __future__ import annotations

import subprocess
from html.parser import HTMLParser

import markdown

from auditor.engine import run_audit
from auditor.reporters import html_report, markdown_report, pdf_report, sarif_report
from tests.report_fixtures import UNSAFE, tool, unsafe_result


class Elements(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.found: list[tuple[str, dict[str, str]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.found.append((tag, {k: v or "" for k, v in attrs}))

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)

    def handle_data(self, data):
        self.text.append(data)


def _elements(html: str) -> Elements:
    p = Elements()
    p.feed(html)
    return p


def _assert_inert(page: Elements) -> None:
    tags = [t for t, _ in page.found]
    assert "script" not in tags
    for tag, attrs in page.found:
        if tag == "img":
            assert attrs.get("src", "").startswith("data:"), attrs
        for name, value in attrs.items():
            assert not name.startswith("on"), (tag, name)
            if name in ("href", "src", "xlink:href", "action", "formaction"):
                assert not value.strip().lower().startswith("javascript:"), (tag, value)
                assert not value.strip().lower().startswith("file:"), (tag, value)


def test_the_project_really_is_hostile():
    result = unsafe_result()
    a = result.analyses[0]
    assert "<script>" in a.name and "file:///etc/passwd" in a.name
    assert "<script>" in (a.program or "") and all("javascript:" in s for s in a.sources)
    excerpt_text = " ".join(t for lines in a.excerpts.values() for _, t in lines)
    assert "<script>" in excerpt_text and "javascript:" in excerpt_text


def test_html_is_inert_and_shows_the_text():
    html = html_report.render(unsafe_result())
    page = _elements(html)
    _assert_inert(page)
    text = "".join(page.text)
    # The hostile strings are shown as text, not dropped and not run.
    assert unsafe_result().analyses[0].name in text
    assert "<script>alert(2)</script>" in text  # the flagged program line's comment


def test_markdown_is_inert():
    md = markdown_report.render(unsafe_result())
    page = _elements(markdown.markdown(md, extensions=["tables"]))
    _assert_inert(page)
    assert not [a for t, a in page.found if t == "a"]  # no link at all
    assert "&lt;script&gt;" in md


def test_pdf_embeds_nothing_from_the_file_system(tmp_path):
    rendered = pdf_report.render_pdf(unsafe_result())
    # Everything was escaped, so the renderer was not even asked for a URL; and had
    # it been, the fetcher refuses (tests/test_report_pdf.py shows it asked and refused).
    assert rendered.refused == []
    pdf = tmp_path / "audit.pdf"
    pdf.write_bytes(rendered.data)
    listing = subprocess.run([tool("pdfimages"), "-list", str(pdf)], check=True,
                             capture_output=True, text=True).stdout
    assert len(listing.strip().splitlines()) == 2  # column headings only: no image
    text = subprocess.run([tool("pdftotext"), str(pdf), "-"], check=True,
                          capture_output=True, text=True).stdout
    assert "<script>alert" in text  # shown as text
    assert "root:x:0:0" not in text  # the contents of /etc/passwd never got in


def test_same_input_same_bytes(tmp_path):
    # Two independent audits of the same files, each written out.
    first, second = (run_audit([UNSAFE]) for _ in range(2))
    for module in (html_report, markdown_report, sarif_report, pdf_report):
        a = module.write(first, tmp_path / "one").read_bytes()
        b = module.write(second, tmp_path / "two").read_bytes()
        assert a == b, module.FORMAT
    # In the bytes themselves: no tag or attribute the payloads tried to make.
    html = (tmp_path / "one" / html_report.FILENAME).read_text(encoding="utf-8").lower()
    assert "<script" not in html
    assert 'src="file:' not in html and 'href="javascript:' not in html
    assert "&lt;script&gt;" in html  # the payloads are there, escaped
