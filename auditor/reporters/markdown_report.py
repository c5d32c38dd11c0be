"""Markdown summary for a pull-request comment or a CI job summary.

Short by design: the verdict, counts per analysis, the top findings with their
fixes, and where the full report is. Every text that comes from the audited
files (names, paths, messages) is escaped for Markdown and HTML, since both
GitHub and GitLab render HTML inside Markdown: no text from the files can make
a link, an image, a tag or a table cell.
"""

from __future__ import annotations

import re
from pathlib import Path

import jinja2

from auditor.paths import templates_dir
from auditor.reporters.views import build_view
from auditor.result import AuditResult

FORMAT = "md"
FILENAME = "audit.md"
TEMPLATE = "summary.md.j2"
#: How many findings (worst first) the summary lists.
TOP_FINDINGS = 10

# Markdown punctuation that can make emphasis, code, links, headings, tables or
# strike-through; each gets a backslash (CommonMark "backslash escapes"). With
# brackets escaped, parentheses cannot form a link and need no escape.
_MD_SPECIAL = re.compile(r"([\\`*_\[\]#|~+])")
# A list marker, heading underline or numbered item at the start of a text that
# the template places at the start of a line.
_LINE_START = re.compile(r"^(\s*\d+)?(\s*)([-=.)])")
_HTML = {"&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;"}


class MdSafe(str):
    """Markdown made by this module from escaped parts; not escaped again."""


def _one_line(text: object) -> str:
    return re.sub(r"\s+", " ", str(text))


def _line_start(s: str) -> str:
    m = _LINE_START.match(s)
    if m is None or (m.group(1) is None and m.group(3) in ".)"):
        return s
    return s[: m.start(3)] + "\\" + s[m.start(3):]


def _escape(s: str) -> str:
    s = "".join(_HTML.get(ch, ch) for ch in s)
    return _MD_SPECIAL.sub(r"\\\1", s)


def escape_md(text: object) -> MdSafe:
    """``text`` as inert Markdown on one line: HTML characters as entities, punctuation escaped."""
    if isinstance(text, MdSafe):
        return text
    s = _escape(_one_line(text))
    return MdSafe(_line_start(s))


def md_text(text: object) -> MdSafe:
    """Like :func:`escape_md`, but backtick spans stay code spans (their content is literal)."""
    line = _one_line(text)
    parts = line.split("`")
    if len(parts) % 2 == 0:  # an unpaired backtick: no code spans
        return escape_md(line)
    out = []
    for k, part in enumerate(parts):
        if k % 2 and part.strip():
            out.append(f"`{part}`")
        else:
            out.append(_escape(part))
    return MdSafe(_line_start("".join(out)))


def _finalize(value: object) -> object:
    return value if isinstance(value, MdSafe) else escape_md(value)


def environment() -> jinja2.Environment:
    """Jinja2 environment whose every ``{{ }}`` output is escaped for Markdown and HTML."""
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_dir())),
        autoescape=False,  # HTML autoescape would not cover Markdown; finalize does both
        finalize=_finalize,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["md"] = md_text
    return env


def other_reports(result: AuditResult) -> list[str]:
    """File names of the other reports asked for in the same run (from the settings)."""
    from auditor.reporters import FORMATS, reporter

    asked = result.config.get("report") or []
    names = []
    for fmt in dict.fromkeys(asked):
        if fmt in FORMATS and fmt != FORMAT:
            names.append(str(reporter(fmt).FILENAME))
    return names


def render(result: AuditResult) -> str:
    """The Markdown summary as a string."""
    view = build_view(result, top=TOP_FINDINGS)
    total = sum(len(g.findings) for g in view.project_stages) + sum(
        a.n_findings for a in view.analyses
    )
    return environment().get_template(TEMPLATE).render(
        v=view, total=total, others=other_reports(result),
        br=MdSafe("  "),  # a hard line break (two spaces) that the escaping must not eat
    )


def write(result: AuditResult, out_dir: Path) -> Path:
    """Write ``audit.md`` into ``out_dir`` and return its path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / FILENAME
    path.write_text(render(result), encoding="utf-8", errors="backslashreplace", newline="\n")
    return path
