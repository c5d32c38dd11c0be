"""Reporters: each formats one :class:`~auditor.result.AuditResult`, nothing more.

A reporter is a module ``auditor.reporters.<module>`` with ``FORMAT`` (the
``--report`` name), ``FILENAME`` (the file it writes inside ``--out``) and
``write(result, out_dir) -> Path``. Heavy modules (weasyprint, matplotlib) are
imported only inside the reporter that needs them.
"""

from __future__ import annotations

import importlib
from pathlib import Path
from types import ModuleType

from auditor.result import AuditResult

#: ``--report`` name -> module name under ``auditor.reporters``.
FORMATS: dict[str, str] = {
    "json": "json_report",
    "html": "html_report",
    "pdf": "pdf_report",
    "md": "markdown_report",
    "sarif": "sarif_report",
}


def reporter(fmt: str) -> ModuleType:
    """The reporter module for ``fmt`` (a key of :data:`FORMATS`)."""
    return importlib.import_module(f"auditor.reporters.{FORMATS[fmt]}")


def write_reports(result: AuditResult, formats: list[str], out_dir: Path) -> list[Path]:
    """Write each requested format into ``out_dir``; return the files written."""
    out_dir.mkdir(parents=True, exist_ok=True)
    return [reporter(fmt).write(result, out_dir) for fmt in dict.fromkeys(formats)]
