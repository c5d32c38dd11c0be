"""HTML report: one self-contained file (inline CSS and SVG, no script, fetches nothing).

The page is rendered from ``templates/report.html.j2`` with jinja2 autoescaping
on, from view objects only (:mod:`auditor.reporters.views`). A Content Security
Policy in the page forbids scripts and every fetch, as a second line of defence.
"""

from __future__ import annotations

from pathlib import Path

import jinja2

from auditor.paths import templates_dir
from auditor.reporters.views import build_view, inline_code
from auditor.result import AuditResult

FORMAT = "html"
FILENAME = "audit.html"
TEMPLATE = "report.html.j2"
SCREEN_FIGURE_SCALE = 1.3


def environment() -> jinja2.Environment:
    """The jinja2 environment of the HTML and PDF reports (autoescape always on)."""
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_dir())),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
    )
    env.filters["code"] = inline_code
    return env


def render(result: AuditResult, *, print_mode: bool = False, page_size: str = "A4") -> str:
    """The report as an HTML string; ``print_mode`` adds the print styles and opens details."""
    # On screen figures may grow a little past their natural size; in print they keep it
    # (it was chosen to fit the A4 and Letter text block).
    view = build_view(result, figure_scale=1.0 if print_mode else SCREEN_FIGURE_SCALE)
    template = environment().get_template(TEMPLATE)
    return template.render(v=view, print=print_mode, page_size=page_size,
                           stage_order=list(view.stage_order))


def render_summary(result: AuditResult, top: int = 10) -> str:
    """A short HTML fragment of the audit (verdict, analyses, top findings), for a
    notebook; escaped like the report."""
    view = build_view(result, top=top)
    return environment().get_template("notebook.html.j2").render(v=view)


def write(result: AuditResult, out_dir: Path) -> Path:
    """Write ``audit.html`` into ``out_dir`` and return its path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / FILENAME
    # Written as the template produces it (the same text as render()), so the page is
    # never held whole as one string.
    view = build_view(result, figure_scale=SCREEN_FIGURE_SCALE)
    template = environment().get_template(TEMPLATE)
    with path.open("w", encoding="utf-8", errors="backslashreplace", newline="\n") as fh:
        for piece in template.generate(v=view, print=False, page_size="A4",
                                       stage_order=list(view.stage_order)):
            fh.write(piece)
    return path
