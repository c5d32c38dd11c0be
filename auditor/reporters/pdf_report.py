"""PDF report: the HTML report's content laid out for print by weasyprint.

The page is the same template as the HTML report with the print style sheet
(page numbers, a running header with the project name, rows never split,
figures sized for the text block of A4 and US Letter pages). WeasyPrint is
imported only here, when a PDF is asked for.

WeasyPrint would fetch whatever URL the page names (files, network). Our page
names none, and :class:`OwnAssetsFetcher` refuses every URL except ``data:``
URLs the report made itself, so nothing from the file system or the network
can end up in the PDF even if a name from the audited files slipped through.
"""

from __future__ import annotations

import importlib.util
import json
import os
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from auditor.reporters.html_report import render
from auditor.result import AuditResult

FORMAT = "pdf"
FILENAME = "audit.pdf"
#: Page sizes the print style sheet supports (CSS ``@page size`` names).
PAGE_SIZES = {"a4": "A4", "letter": "letter"}
DEFAULT_PAGE_SIZE = "A4"


class RefusedFetch(PermissionError):
    """A URL the PDF renderer asked for and was refused."""


def _fetcher(allowed: frozenset[str]) -> Any:
    from weasyprint.urls import URLFetcher

    class OwnAssetsFetcher(URLFetcher):
        """Serves only the report's own ``data:`` URLs; refuses and records every other."""

        def __init__(self) -> None:
            super().__init__(allowed_protocols=("data",), allow_redirects=False,
                             fail_on_errors=False)
            self.refused: list[str] = []

        def fetch(self, url: str, headers: dict | None = None) -> Any:
            if url in allowed and url.startswith("data:"):
                return super().fetch(url, headers)
            self.refused.append(url)
            raise RefusedFetch(f"the report may load only its own assets; refused {url[:80]!r}")

    return OwnAssetsFetcher()


@dataclass
class RenderedPdf:
    """A rendered PDF with what the renderer was refused and its page count."""

    data: bytes
    pages: int
    refused: list[str] = field(default_factory=list)


def page_size(result: AuditResult) -> str:
    """The page size from the effective settings (``page_size``: A4 or letter), else A4."""
    value = str(result.config.get("page_size", DEFAULT_PAGE_SIZE)).lower()
    return PAGE_SIZES.get(value, DEFAULT_PAGE_SIZE)


def _render_here(html: str, allowed: frozenset[str]) -> RenderedPdf:
    import weasyprint

    fetcher = _fetcher(allowed)
    document = weasyprint.HTML(string=html, base_url=None, url_fetcher=fetcher).render()
    data = document.write_pdf()
    return RenderedPdf(data=data, pages=len(document.pages), refused=list(fetcher.refused))


def render_html_to_pdf(html: str, allowed: frozenset[str] = frozenset()) -> RenderedPdf:
    """Lay out ``html`` as a PDF; only the ``data:`` URLs in ``allowed`` may be loaded.

    The layout runs in a fresh Python process: weasyprint 70 can fail with a
    RecursionError when a process lays out a second large document, and a
    separate process also keeps its memory apart from the audit's.

    Raises
    ------
    RuntimeError
        When weasyprint is not installed, or the layout process fails (its error
        output is in the message).
    """
    if importlib.util.find_spec("weasyprint") is None:
        raise RuntimeError("PDF reports need weasyprint: pip install 'bayes-auditor[report]'")
    # The job goes in on stdin and the PDF comes back on stdout: no temporary file,
    # so the audit writes nothing outside the report folder.
    job = json.dumps({"html": html, "allowed": sorted(allowed)}).encode("utf-8")
    proc = subprocess.run(
        [sys.executable, "-m", __name__],
        input=job, capture_output=True, check=False,
        env={**os.environ, "PYTHONPATH": _import_root()},
    )
    meta_line, _, data = proc.stdout.partition(b"\n")
    if proc.returncode != 0 or not data.startswith(b"%PDF"):
        err = proc.stderr.decode("utf-8", "replace").strip().splitlines()
        raise RuntimeError(f"PDF layout failed (weasyprint): {chr(10).join(err[-5:])}")
    meta = json.loads(meta_line)
    return RenderedPdf(data=data, pages=int(meta["pages"]), refused=list(meta["refused"]))


def _import_root() -> str:
    # The folder that holds the ``auditor`` package, so the child imports this same code.
    root = str(Path(__file__).resolve().parents[2])
    extra = os.environ.get("PYTHONPATH")
    return root + (os.pathsep + extra if extra else "")


def _main() -> int:
    """Child process: lay out the job read from stdin; write one line of pages and
    refusals, then the PDF's bytes, to stdout."""
    job = json.loads(sys.stdin.buffer.read().decode("utf-8"))
    rendered = _render_here(job["html"], frozenset(job["allowed"]))
    meta = json.dumps({"pages": rendered.pages, "refused": rendered.refused})
    sys.stdout.buffer.write(meta.encode("utf-8") + b"\n" + rendered.data)
    sys.stdout.buffer.flush()
    return 0


def render_pdf(result: AuditResult, size: str | None = None) -> RenderedPdf:
    """The report as a PDF (``size``: ``"A4"`` or ``"letter"``; default from the settings)."""
    chosen = PAGE_SIZES.get((size or page_size(result)).lower(), DEFAULT_PAGE_SIZE)
    return render_html_to_pdf(render(result, print_mode=True, page_size=chosen))


def write(result: AuditResult, out_dir: Path) -> Path:
    """Write ``audit.pdf`` into ``out_dir`` and return its path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / FILENAME
    path.write_bytes(render_pdf(result).data)
    return path


if __name__ == "__main__":
    raise SystemExit(_main())
