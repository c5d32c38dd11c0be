"""PDF report: layout through weasyprint, checked with poppler's tools (an independent
PDF reader): page count, page size, running header and page numbers; and the URL
fetcher that keeps local files and the network out of the PDF.

Page sizes: A4 is 210 x 297 mm = 595.28 x 841.89 pt (ISO 216); US Letter is
8.5 x 11 in = 612 x 792 pt (ANSI/ASME Y14.1) — common practice.
"""

from __future__ import annotations

import base64
import re
import subprocess
from functools import lru_cache
from pathlib import Path

import pytest

from auditor.figures.render import FIG_WIDTH_IN
from auditor.reporters import pdf_report
from auditor.reporters.pdf_report import RenderedPdf, render_html_to_pdf, render_pdf
from tests.report_fixtures import demo_result, tool

# A 1 x 1 PNG (the smallest valid PNG: signature, IHDR, IDAT, IEND).
PNG_1PX = base64.b64encode(bytes.fromhex(
    "89504e470d0a1a0a0000000d49484452000000010000000108060000001f15c489"
    "0000000d49444154789c6360000002000154a24f5d0000000049454e44ae426082"
)).decode()


@lru_cache(maxsize=2)
def _pdf(size: str) -> RenderedPdf:
    return render_pdf(demo_result(), size)


def _save(tmp_path: Path, rendered: RenderedPdf, name: str = "audit.pdf") -> Path:
    path = tmp_path / name
    path.write_bytes(rendered.data)
    return path


def _images(listing: str) -> int:
    # `pdfimages -list` rows after two header lines; column 3 is the type (image, smask...).
    rows = [line.split() for line in listing.strip().splitlines()[2:]]
    return sum(1 for r in rows if len(r) > 2 and r[2] == "image")


def test_contract(tmp_path):
    assert pdf_report.FORMAT == "pdf" and pdf_report.FILENAME == "audit.pdf"
    path = pdf_report.write(demo_result(), tmp_path)
    assert path == tmp_path / "audit.pdf" and path.read_bytes().startswith(b"%PDF-")


def test_page_count_matches_an_independent_reader(tmp_path):
    from PIL import Image

    rendered = _pdf("A4")
    pdf = _save(tmp_path, rendered)
    pdftoppm = tool("pdftoppm")
    subprocess.run([pdftoppm, "-r", "40", "-png", str(pdf), str(tmp_path / "page")],
                   check=True, timeout=300)
    pages = sorted(tmp_path.glob("page-*.png"))
    assert len(pages) == rendered.pages > 1
    for png in (pages[0], pages[-1]):
        with Image.open(png) as im:
            assert len(im.convert("L").getcolors(maxcolors=1 << 16) or []) > 8, png


@pytest.mark.parametrize(("size", "points"), [("A4", (595.28, 841.89)), ("letter", (612, 792))])
def test_page_size(tmp_path, size, points):
    pdfinfo = tool("pdfinfo")
    info = subprocess.run([pdfinfo, str(_save(tmp_path, _pdf(size)))], check=True,
                          capture_output=True, text=True).stdout
    m = re.search(r"Page size:\s+([0-9.]+) x ([0-9.]+) pts", info)
    assert m, info
    assert (float(m.group(1)), float(m.group(2))) == pytest.approx(points, abs=0.5)


def test_running_header_and_page_numbers(tmp_path):
    rendered = _pdf("A4")
    pdftotext = tool("pdftotext")
    text = subprocess.run([pdftotext, "-layout", str(_save(tmp_path, rendered)), "-"],
                          check=True, capture_output=True, text=True).stdout
    pages = text.split("\f")
    project = demo_result().project_name
    for k, page in enumerate(p for p in pages if p.strip()):
        head = page.strip().splitlines()[0]
        assert project in head, (k, head)
        assert f"page {k + 1} of {rendered.pages}" in page


def test_figures_fit_both_page_sizes():
    # Text block width = page width - left and right margins of print.css (16 mm each).
    margins_mm = 2 * 16
    for page_width_mm in (210.0, 215.9):  # A4, US Letter
        assert FIG_WIDTH_IN * 25.4 <= page_width_mm - margins_mm


def test_fetcher_refuses_local_files_and_network(tmp_path):
    html = (
        '<html><head><link rel="stylesheet" href="file:///etc/passwd"></head><body>'
        '<img src="file:///etc/passwd"><img src="http://127.0.0.1:9/x.png">'
        f'<img src="data:image/png;base64,{PNG_1PX}"><p>text</p></body></html>'
    )
    rendered = render_html_to_pdf(html)
    assert "file:///etc/passwd" in rendered.refused
    assert "http://127.0.0.1:9/x.png" in rendered.refused
    # A data: URL the report did not make itself is refused too.
    assert any(u.startswith("data:image/png") for u in rendered.refused)
    pdfimages = tool("pdfimages")
    listing = subprocess.run([pdfimages, "-list", str(_save(tmp_path, rendered))], check=True,
                             capture_output=True, text=True).stdout
    assert _images(listing) == 0


def test_fetcher_serves_the_reports_own_data_urls(tmp_path):
    url = f"data:image/png;base64,{PNG_1PX}"
    rendered = render_html_to_pdf(f'<img src="{url}" style="width:20px">',
                                  allowed=frozenset({url}))
    assert rendered.refused == []
    pdfimages = tool("pdfimages")
    listing = subprocess.run([pdfimages, "-list", str(_save(tmp_path, rendered))], check=True,
                             capture_output=True, text=True).stdout
    assert _images(listing) == 1
