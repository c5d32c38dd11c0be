"""Create figures in the house style and export them as deterministic SVG.

Determinism: ``svg.hashsalt`` is fixed so generated ids do not change between
runs, the ``Date`` and ``Creator`` metadata are dropped, and the figure size is
fixed. Text stays text (``svg.fonttype = "none"``) so the SVG is small and its
labels are searchable in the HTML page.
"""

from __future__ import annotations

import io
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

#: Width fits the text block of both A4 (210 mm) and US Letter (8.5 in) pages
#: with 18 mm margins (174 mm = 6.85 in), so figures never need rescaling in print.
FIG_WIDTH_IN = 6.6

#: Chain colours (our own qualitative palette, distinguishable in grey print too).
CHAIN_COLORS = (
    "#1f5f8b",
    "#c8553d",
    "#2a9d8f",
    "#8c6bb1",
    "#d99a1e",
    "#5c6b73",
    "#a23b72",
    "#6a994e",
)
INK = "#1d2433"
MUTED = "#8a8f99"
ACCENT = "#c8553d"

_STYLE: dict[str, Any] = {
    "svg.hashsalt": "bayes-auditor",
    "svg.fonttype": "none",
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.titlesize": 9,
    "axes.labelsize": 8.5,
    "axes.edgecolor": "#b9bcc3",
    "axes.labelcolor": INK,
    "axes.linewidth": 0.7,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#e6e4de",
    "grid.linewidth": 0.6,
    "xtick.color": "#50545c",
    "ytick.color": "#50545c",
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "path.simplify": True,
}


@contextmanager
def figure(height_in: float, width_in: float = FIG_WIDTH_IN) -> Iterator[Any]:
    """Yield a fresh matplotlib ``Figure`` of fixed size in the house style.

    The figure is not registered with pyplot (no global state, nothing to close).
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(width_in, height_in), dpi=72, layout="constrained")
        yield fig


def to_svg(fig: Any, svg_id: str) -> str:
    """Render ``fig`` to an SVG document string, the same bytes for the same figure."""
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context({**_STYLE, "svg.id": svg_id}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return buf.getvalue()
