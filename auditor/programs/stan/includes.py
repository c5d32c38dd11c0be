"""Expand Stan ``#include`` lines before parsing, keeping a map back to each file's lines.

Stan treats ``#include <file>`` as text substitution (Stan Reference Manual,
"Includes"); we do the same so one grammar parses the whole program, and keep, for
every line of the expanded text, the file and line it came from so that positions
in findings point at what the user wrote.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from auditor.boundary import MAX_PATH_CHARS, Boundary, Refused

#: ``#include "a.stan"``, ``#include <a.stan>`` or ``#include a.stan``, alone on its line.
_INCLUDE = re.compile(
    r'^[ \t]*#include[ \t]+(?:"([^"]+)"|<([^>]+)>|([^\s"<>]+))[ \t]*(?://.*|/\*.*\*/[ \t]*)?$')
#: Any line that starts like an include, to report the ones we cannot read.
_INCLUDE_START = re.compile(r"^[ \t]*#include\b")
_MAX_DEPTH = 20


@dataclass
class IncludeProblem:
    """An ``#include`` that could not be expanded, at a position of the including file."""

    message: str
    path: str
    line: int
    column: int
    kind: str = "syntax"


@dataclass
class ExpandedSource:
    """A program's text with its includes substituted.

    ``origins[i]`` is ``(path, line)`` of line ``i + 1`` of ``text``.
    """

    text: str
    origins: list[tuple[str, int]]
    includes: list[str] = field(default_factory=list)
    problems: list[IncludeProblem] = field(default_factory=list)
    file_lines: dict[str, list[str]] = field(default_factory=dict)

    def origin(self, line: int) -> tuple[str, int]:
        """File and line of a 1-based line of the expanded text."""
        if not self.origins:
            return ("", line)
        idx = min(max(line, 1), len(self.origins)) - 1
        return self.origins[idx]


def expand_includes(path: Path, text: str, gate: Boundary | None = None) -> ExpandedSource:
    """Substitute the ``#include`` lines of ``text`` (read from ``path``), recursively.

    Included files are opened through ``gate`` (the project boundary; default:
    type and size checks only). A missing, cyclic or refused include becomes an
    :class:`IncludeProblem` and its line is left out of the text (so the rest
    still parses); this never raises.
    """
    out = ExpandedSource(text="", origins=[])
    lines: list[str] = []
    gate = gate or Boundary.unconfined()
    _expand(path, text, out, lines, stack=[_real(path)], main=path, gate=gate)
    out.text = "\n".join(lines) + ("\n" if lines else "")
    return out


def _expand(
    path: Path,
    text: str,
    out: ExpandedSource,
    lines: list[str],
    stack: list[Path],
    main: Path,
    gate: Boundary,
) -> None:
    own = text.splitlines()
    out.file_lines[str(path)] = own
    for number, line in enumerate(own, start=1):
        match = _INCLUDE.match(line)
        if not match:
            if _INCLUDE_START.match(line):
                # Without this the line would pass as an old `#` comment, silently.
                out.problems.append(IncludeProblem(
                    "this #include line names no file; write #include \"file.stan\"",
                    str(path), number, line.index("#") + 1))
                line = ""
            lines.append(line)
            out.origins.append((str(path), number))
            continue
        name = next(g for g in match.groups() if g)
        column = line.index("#") + 1
        shown = name if len(name) <= 120 else name[:80] + f"... ({len(name)} characters)"
        target = _locate(name, path, main)
        # The include line itself becomes blank so the parser sees nothing there.
        if len(name) > MAX_PATH_CHARS:
            out.problems.append(IncludeProblem(
                f"the included file name '{shown}' is too long to open",
                str(path), number, column, kind="unreadable"))
        elif target is None:
            out.problems.append(IncludeProblem(
                f"cannot find the included file '{shown}' (looked beside {path.name})",
                str(path), number, column))
        elif _real(target) in stack:
            out.problems.append(IncludeProblem(
                f"'{name}' includes itself (directly or through other files)",
                str(path), number, column))
        elif len(stack) >= _MAX_DEPTH:
            out.problems.append(IncludeProblem(
                f"includes nested more than {_MAX_DEPTH} deep at '{name}'",
                str(path), number, column))
        else:
            try:
                included = gate.read_text(target)
            except Refused as exc:
                out.problems.append(IncludeProblem(
                    f"#include '{shown}': the included file {exc.reason}",
                    str(path), number, column, kind=exc.kind))
            except (OSError, UnicodeDecodeError) as exc:
                out.problems.append(IncludeProblem(
                    f"cannot read the included file '{shown}': {_reason(exc)}",
                    str(path), number, column))
            else:
                out.includes.append(str(target))
                _expand(target, included, out, lines, [*stack, _real(target)], main, gate)
                continue
        lines.append("")
        out.origins.append((str(path), number))


def _locate(name: str, including: Path, main: Path) -> Path | None:
    """The file ``name`` refers to: beside the including file, else beside the main one.

    Only names are looked at here (``lexists`` never opens a file and never
    raises); whether the file may be read is the boundary's decision.
    """
    if len(name) > MAX_PATH_CHARS or "\x00" in name:
        return None
    for base in (including.parent, main.parent):
        candidate = base / name
        if os.path.lexists(candidate):
            return candidate
    return None


def _real(path: Path) -> Path:
    # Non-strict: a link loop resolves to some path instead of raising; the
    # boundary refuses it when the file is read.
    return Path(os.path.realpath(path))


def _reason(exc: Exception) -> str:
    if isinstance(exc, UnicodeDecodeError):
        return "it is not UTF-8 text"
    return getattr(exc, "strerror", None) or str(exc)
