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
    modules = [reporter(fmt) for fmt in dict.fromkeys(formats)]
    for module in modules:
        target = out_dir / module.FILENAME
        # Never write through a link: in an untrusted project it could point at any file.
        if target.is_symlink() or (target.exists() and not target.is_file()):
            raise ReportPathError(f"{target} is a link or not a regular file; not overwritten")
    return [module.write(result, out_dir) for module in modules]


class ReportPathError(Exception):
    """A report file's path is taken by a link or a folder."""
