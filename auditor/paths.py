"""Where the bundled rules and templates are, installed or in a checkout."""

from __future__ import annotations

from pathlib import Path

_PKG = Path(__file__).resolve().parent


def _bundled(name: str) -> Path:
    # An installed wheel carries them in auditor/_bundled/; a checkout (editable
    # install or tests) has them at the repository root beside auditor/.
    inside = _PKG / "_bundled" / name
    return inside if inside.is_dir() else _PKG.parent / name


def rules_dir() -> Path:
    """Folder holding ``<stage>/<name>/`` rule folders."""
    return _bundled("rules")


def templates_dir() -> Path:
    """Folder holding the report templates."""
    return _bundled("templates")
