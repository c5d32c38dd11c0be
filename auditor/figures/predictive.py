"""Figures of the prior and posterior predictive stages.

Each maker is a pure function of arrays (plus names for the labels) returning a
:class:`~auditor.result.Figure`, or ``None`` when there is nothing to draw:

- :func:`prior_predictive_range`: the prior predictive draws as a histogram, the
  declared plausible range (or, without one, the observed data's range) shaded,
  with the share of draws inside it;
- :func:`observed_vs_replicated`: the observed data over data replicated from the
  fitted model (bars with replicated intervals for counts, densities otherwise);
- :func:`statistic_distribution`: a test statistic over the replicated data sets,
  the observed value marked;
- :func:`loo_pit_difference`: the LOO-PIT ECDF minus the uniform CDF inside its
  simultaneous band.

The rules' ``figures.py`` compute what they pass with the functions of
:mod:`auditor.predictive_checks` (and their own check's generators), the same
ones the findings are made with, so a figure shows the numbers its finding states.

Names of variables come from the audited files: they are only ever passed to
matplotlib as text (which escapes them in the SVG), after :func:`plain_text` has
taken out what matplotlib would read as markup (``$`` for mathtext) and what XML
cannot hold (control characters).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from typing import TYPE_CHECKING, Any

import numpy as np

from auditor.figures.render import ACCENT, INK, MUTED, figure, to_svg
from auditor.figures.sampling import _max_figures, slug
from auditor.predictive_checks import BINARY, COUNT, POSITIVE, PROPORTION, share_in_range
from auditor.result import Figure

if TYPE_CHECKING:
    from auditor.predictive_checks import PitTest
    from auditor.rules_api import RuleContext

#: Colours of this module (our own): draws, the declared range, the observed range.
DRAWS = "#1f5f8b"
RANGE_FILL = "#2a9d8f"
OBSERVED_FILL = "#d99a1e"

#: The prior predictive axis shows at least this central share of the finite draws.
CENTRAL = 0.99
#: Bins of a histogram on a continuous axis.
BINS = 60
#: A linear axis becomes symmetric-logarithmic when its far end lies beyond this
#: many times the reference scale (the range's largest magnitude).
SYMLOG_FACTOR = 100.0
#: Positive draws spanning more than this many orders of magnitude get a logarithmic axis.
LOG_DECADES = 4.0
#: Replicated data sets drawn over the observed density (picked at evenly spaced draws).
REPLICATED_LINES = 40
#: Most bars of a count figure; wider counts are grouped into bars of several values.
COUNT_BARS = 40
#: Grid points of a density curve.
GRID = 256
#: Observed values marked along the bottom of a density figure (all of them up to this).
RUG_MAX = 500
#: Errors odd data can raise inside numpy or matplotlib; a figure that meets one is left out.
DRAWING_ERRORS = (ValueError, ArithmeticError, np.linalg.LinAlgError)


def plain_text(text: object) -> str:
    """``text`` as matplotlib shows it literally: ``$`` escaped, control characters replaced."""
    out = "".join(ch if ch.isprintable() else "?" for ch in str(text))
    return out.replace("$", r"\$")


def _pct(share: float) -> str:
    return f"{100 * share:.1f}%"


def _share_words(share: float) -> str:
    """A share as a percentage, "fewer than 0.1%" for small non-zero shares."""
    return "fewer than 0.1%" if 0 < share < 0.0005 else _pct(share)


def _figure(fig_id: str, title: str, svg: str, caption: str, rule_id: str | None,
            quantity: str) -> Figure:
    return Figure(id=fig_id, title=title, svg=svg, caption=caption, rule_id=rule_id,
                  quantity=quantity)


# --- prior predictive draws against a range -------------------------------------------


def _power_of_ten_below(x: float) -> float:
    return 10.0 ** math.floor(math.log10(x)) if x > 0 and math.isfinite(x) else 1.0


def _symlog_ticks(lo: float, hi: float, linthresh: float) -> list[float]:
    """0 and signed powers of ten from ``linthresh`` outwards, at most about five per side."""
    top = max(abs(lo), abs(hi))
    first = round(math.log10(linthresh))
    last = math.floor(math.log10(top)) if top > 0 else first
    exponents = list(range(first, max(first, last) + 1))
    both_sides = lo < -linthresh and hi > linthresh
    step = max(1, math.ceil(len(exponents) / (3 if both_sides else 5)))
    exponents = exponents[::step]
    ticks = [0.0] if lo <= 0 <= hi else []
    for e in exponents:
        for sign in (1.0, -1.0):
            v = sign * 10.0 ** e
            if lo <= v <= hi:
                ticks.append(v)
    return sorted(ticks)


def _bin_edges(tr: Any, lo: float, hi: float,
               band: tuple[float, float] | None) -> np.ndarray:
    """About :data:`BINS` bins of equal width on the axis's scale (``tr``) covering
    [``lo``, ``hi``], with the band's ends on bin edges when the band is at least
    half a bin wide, so the bars inside the band are exactly those between its ends."""
    t_lo, t_hi = (float(v) for v in tr.transform(np.array([lo, hi], dtype=float)))
    width = (t_hi - t_lo) / BINS
    anchor = t_lo
    if band is not None:
        b_lo, b_hi = (float(v) for v in tr.transform(np.array(band, dtype=float)))
        anchor = b_lo
        m = round((b_hi - b_lo) / width)
        if m >= 1:
            width = (b_hi - b_lo) / m
    first = math.floor((t_lo - anchor) / width + 1e-9)
    last = math.ceil((t_hi - anchor) / width - 1e-9)
    with np.errstate(over="ignore", invalid="ignore"):
        edges = np.asarray(tr.inverted().transform(anchor + width * np.arange(first, last + 1)),
                           dtype=float)
    if not np.all(np.isfinite(edges)):
        # The outermost bin overflowed (draws near the largest float): end the axis at lo, hi.
        edges = np.unique(np.clip(np.nan_to_num(edges, nan=lo), lo, hi))
    return edges


def _decade_ticks(lo: float, hi: float) -> list[float]:
    """Powers of ten between ``lo`` and ``hi`` (both positive), at most about seven."""
    first, last = math.ceil(math.log10(lo)), math.floor(math.log10(hi))
    exponents = list(range(first, last + 1))
    step = max(1, math.ceil(len(exponents) / 7))
    return [10.0 ** e for e in exponents[::step]]


def _tick_label(v: float) -> str:
    if v == 0:
        return "0"
    e = round(math.log10(abs(v)))
    text = f"{abs(v):g}" if -3 <= e <= 4 else f"1e{e}"
    return ("\u2212" if v < 0 else "") + text


def prior_predictive_range(
    quantity: str, draws: np.ndarray, *, low: float | None, high: float | None,
    declared: bool, fig_id: str, rule_id: str | None,
) -> Figure | None:
    """Histogram of prior predictive draws with a range shaded and the share inside it.

    Parameters
    ----------
    draws
        Prior predictive draws of ``quantity``, any shape (flattened).
    low, high
        The range to shade: the declared plausible range (``declared=True``) or the
        observed data's smallest and largest value; ``None`` for no range.

    The axis shows the central :data:`CENTRAL` share of the finite draws widened to
    take in the range. Positive draws spanning more than :data:`LOG_DECADES` orders of
    magnitude get a logarithmic axis; other draws reaching beyond
    :data:`SYMLOG_FACTOR` times the range's scale a symmetric-logarithmic one (linear
    near zero, logarithmic beyond), so draws many orders of magnitude apart fit on
    one axis. The caption says which.
    """
    flat = np.asarray(draws, dtype=float).reshape(-1)
    finite = flat[np.isfinite(flat)]
    if finite.size == 0:
        return None
    has_range = (low is not None and high is not None and math.isfinite(low)
                 and math.isfinite(high) and low <= high)
    tail = (1 - CENTRAL) / 2
    with np.errstate(over="ignore", invalid="ignore"):  # draws near the largest float
        q_lo, q_hi = (float(v) for v in np.quantile(finite, [tail, 1 - tail]))
    lo, hi = q_lo, q_hi
    if has_range:
        lo, hi = min(lo, low), max(hi, high)
        scale = max(abs(low), abs(high), high - low)
    else:
        scale = float(np.quantile(np.abs(finite), 0.75))
    if hi <= lo:
        pad = max(abs(lo) * 0.05, 0.5)
        lo, hi = lo - pad, hi + pad
    if not math.isfinite(hi - lo):
        return None  # an axis wider than the largest float: nothing sensible to draw
    positive = bool(np.all(finite > 0)) and (not has_range or low > 0)
    if positive and math.log10(hi / lo) > LOG_DECADES:
        axis = "log"
    elif scale > 0 and max(abs(lo), abs(hi)) > SYMLOG_FACTOR * scale:
        axis = "symlog"
    else:
        axis = "linear"
    linthresh = _power_of_ten_below(scale)
    integer = bool(np.all(finite == np.round(finite)))
    inside = share_in_range(flat, low, high) if has_range else float("nan")
    nonfinite = int(flat.size - finite.size)
    shown = plain_text(quantity)
    range_word = "declared plausible range" if declared else "range of the observed data"
    with figure(height_in=3.0) as fig:
        ax = fig.add_subplot()
        if axis == "log":
            ax.set_xscale("log")
        elif axis == "symlog":
            ax.set_xscale("symlog", linthresh=linthresh, linscale=1.0)
        if axis == "linear" and integer and hi - lo <= BINS:
            edges = np.arange(math.floor(lo) - 0.5, math.ceil(hi) + 1.0, 1.0)
        else:
            edges = _bin_edges(ax.xaxis.get_transform(), lo, hi,
                               (low, high) if has_range else None)
        beyond = float(np.mean((flat < edges[0]) | (flat > edges[-1])))
        counts, _ = np.histogram(finite, bins=edges)
        heights = 100.0 * counts / flat.size
        if has_range:
            colour = RANGE_FILL if declared else OBSERVED_FILL
            # A bar takes the range's colour when its middle (on the axis's scale) is inside.
            tr = ax.xaxis.get_transform()
            middles = tr.inverted().transform((tr.transform(edges[:-1])
                                               + tr.transform(edges[1:])) / 2)
            in_range = (middles >= low) & (middles <= high)
            ax.axvspan(low, high, color=colour, alpha=0.18, lw=0, zorder=0)
            ax.stairs(np.where(in_range, heights, 0.0), edges, fill=True, color=colour,
                      alpha=0.95, zorder=2,
                      label=f"{range_word} [{low:g}, {high:g}]: {_pct(inside)} of draws inside")
            ax.stairs(np.where(in_range, 0.0, heights), edges, fill=True, color=DRAWS,
                      alpha=0.85, zorder=2, label="draws outside it")
            for v in (low, high):
                ax.axvline(v, color=colour, lw=1.0, ls="--", zorder=3)
        else:
            ax.stairs(heights, edges, fill=True, color=DRAWS, alpha=0.85, zorder=2,
                      label=f"prior predictive draws ({flat.size})")
        ax.set_xlim(edges[0], edges[-1])
        if axis != "linear":
            from matplotlib.ticker import NullLocator

            ticks = (_decade_ticks(float(edges[0]), float(edges[-1])) if axis == "log" else
                     _symlog_ticks(float(edges[0]), float(edges[-1]), linthresh))
            ax.set_xticks(ticks, [_tick_label(v) for v in ticks])
            ax.xaxis.set_minor_locator(NullLocator())
        ax.set_xlabel({"log": f"{shown} (logarithmic axis)",
                       "symlog": f"{shown} (symmetric-log axis)"}.get(axis, shown))
        ax.set_ylabel("share of draws (%)")
        ax.set_ylim(bottom=0)
        ax.set_title(f"Prior predictive draws of {shown}", loc="left", color=INK)
        fig.legend(loc="outside lower center", ncols=2)
        svg = to_svg(fig, fig_id)
    parts = [f"{quantity}: the {flat.size} prior predictive draws (all observations, all draws "
             "pooled), as the share of draws in each bar."]
    if has_range:
        parts.append(f"The shaded band is the {range_word}, from {low:g} to {high:g}; "
                     f"{_pct(inside)} of the draws lie inside it.")
        if declared:
            parts.append("Priors that fit what is known put most draws inside the band.")
        else:
            parts.append("No plausible range is declared, so the band only shows the scale "
                         "of the data; draws far outside it mean the priors allow data of "
                         "another order of magnitude.")
    left_out = (f"{_share_words(beyond)} of the draws lie beyond its ends and are not drawn"
                if beyond > 0 else "here that is every finite draw")
    parts.append(f"The axis shows at least the central {100 * CENTRAL:.0f}% of the draws"
                 + (" and the whole band" if has_range else "") + f"; {left_out}.")
    if axis == "log":
        parts.append("The axis is logarithmic because the draws span many orders of magnitude.")
    elif axis == "symlog":
        parts.append(f"The axis is symmetric-logarithmic: linear from {_tick_label(-linthresh)} "
                     f"to {_tick_label(linthresh)}, logarithmic beyond, because the draws "
                     "span many orders of magnitude.")
    if nonfinite:
        parts.append(f"{nonfinite} draws are not finite numbers and are not drawn.")
    return _figure(fig_id, f"Prior predictive draws of {quantity}", svg, " ".join(parts),
                   rule_id, quantity)


# --- observed data over replicated data ------------------------------------------------


def _bandwidth(x: np.ndarray) -> float:
    """Silverman's rule of thumb, with a fallback for (nearly) constant data."""
    n = x.size
    sd = float(np.std(x, ddof=1)) if n > 1 else 0.0
    q75, q25 = np.quantile(x, [0.75, 0.25])
    spread = min(sd, float(q75 - q25) / 1.34) if q75 > q25 else sd
    h = 0.9 * spread * n ** -0.2
    if h > 0 and math.isfinite(h):
        return h
    return max(abs(float(np.mean(x))) * 0.05, 1e-3)


def _density(x: np.ndarray, grid: np.ndarray, lower: float | None,
             upper: float | None) -> np.ndarray:
    """Gaussian kernel density of ``x`` on ``grid``, reflected at the outcome's bounds."""
    h = _bandwidth(x)
    centers = [x]
    if lower is not None:
        centers.append(2 * lower - x)
    if upper is not None:
        centers.append(2 * upper - x)
    z = (grid[:, None] - np.concatenate(centers)[None, :]) / h
    return np.exp(-0.5 * z * z).sum(axis=1) / (x.size * h * math.sqrt(2 * math.pi))


def _picked(n_rows: int, k: int) -> np.ndarray:
    """``k`` evenly spaced row indices (first and last included), deterministic."""
    return np.unique(np.linspace(0, n_rows - 1, min(k, n_rows)).round().astype(int))


def observed_vs_replicated(
    quantity: str, y: np.ndarray, rep: np.ndarray, *, kind: str, fig_id: str,
    rule_id: str | None,
) -> Figure | None:
    """The observed data over data replicated from the fitted model.

    Parameters
    ----------
    y
        Observed values (n,).
    rep
        Replicated data sets (draws, n).
    kind
        The outcome's kind (:func:`auditor.predictive_checks.outcome_kind`): for
        ``binary`` and ``count`` the frequency of each value as bars, with the
        replicated frequencies' median and 5%-95% range; otherwise the density of
        the data over those of :data:`REPLICATED_LINES` replicated data sets.
    """
    y = np.asarray(y, dtype=float).reshape(-1)
    rep = np.asarray(rep, dtype=float)
    if rep.ndim != 2 or rep.shape[1] != y.size or y.size == 0:
        return None
    y = y[np.isfinite(y)]
    rep = rep[np.all(np.isfinite(rep), axis=1)]
    if y.size == 0 or rep.shape[0] == 0:
        return None
    if kind in (BINARY, COUNT):
        return _count_figure(quantity, y, rep, fig_id=fig_id, rule_id=rule_id)
    return _density_figure(quantity, y, rep, kind=kind, fig_id=fig_id, rule_id=rule_id)


def _count_figure(quantity: str, y: np.ndarray, rep: np.ndarray, *, fig_id: str,
                  rule_id: str | None) -> Figure:
    lo = math.floor(min(float(y.min()), float(np.quantile(rep, 0.005))))
    hi = math.ceil(max(float(y.max()), float(np.quantile(rep, 0.995))))
    width = max(1, math.ceil((hi - lo + 1) / COUNT_BARS))
    n_bars = math.ceil((hi - lo + 1) / width)
    start = lo - 0.5
    edges = start + width * np.arange(n_bars + 1)
    observed, _ = np.histogram(y, bins=edges)
    idx = np.floor((rep - start) / width).astype(np.int64)
    within = (idx >= 0) & (idx < n_bars)
    rows = np.broadcast_to(np.arange(rep.shape[0])[:, None], idx.shape)
    per_draw = np.bincount(rows[within] * n_bars + idx[within],
                           minlength=rep.shape[0] * n_bars).reshape(rep.shape[0], n_bars)
    q05, q50, q95 = np.quantile(per_draw, [0.05, 0.5, 0.95], axis=0)
    beyond = 1.0 - float(np.mean(within))
    centers = (edges[:-1] + edges[1:]) / 2
    shown = plain_text(quantity)
    with figure(height_in=3.0) as fig:
        ax = fig.add_subplot()
        ax.bar(centers, observed, width=0.8 * width, color=DRAWS, alpha=0.75, lw=0,
               label=f"observed ({y.size} values)")
        ax.errorbar(centers, q50, yerr=np.vstack([q50 - q05, q95 - q50]), fmt="o",
                    ms=3.5, color=ACCENT, ecolor=ACCENT, elinewidth=1.1, capsize=0,
                    label=f"replicated: median and 5%-95% ({rep.shape[0]} data sets)")
        ax.set_xlim(edges[0], edges[-1])
        ax.set_ylim(bottom=0)
        ax.set_xlabel(shown if width == 1 else f"{shown} (bars of {width} values)")
        ax.set_ylabel("number of observations")
        from matplotlib.ticker import MaxNLocator

        ax.yaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_title(f"Observed and replicated counts of {shown}", loc="left", color=INK)
        ax.legend(loc="upper right")
        svg = to_svg(fig, fig_id)
    grouping = "" if width == 1 else f" (bars group {width} neighbouring values)"
    caption = (
        f"{quantity}: the bars count how many of the {y.size} observations take each "
        f"value{grouping}; the dots and whiskers give the median and the 5%-95% range of "
        f"the same count over the {rep.shape[0]} data sets replicated from the fitted "
        "model. A bar that ends outside its whisker marks a value the model produces too "
        "rarely or too often, such as more zeros or a longer tail in the data than in the "
        "replications."
    )
    if beyond > 0:
        caption += (f" Of the replicated values, {_share_words(beyond)} lie beyond the axis "
                    "and are not counted.")
    return _figure(fig_id, f"Observed and replicated counts of {quantity}", svg, caption,
                   rule_id, quantity)


def _density_figure(quantity: str, y: np.ndarray, rep: np.ndarray, *, kind: str,
                    fig_id: str, rule_id: str | None) -> Figure:
    sets = rep[_picked(rep.shape[0], REPLICATED_LINES)]
    lower = 0.0 if kind in (POSITIVE, PROPORTION) else None
    upper = 1.0 if kind == PROPORTION else None
    lo = min(float(y.min()), float(np.quantile(sets, 0.005)))
    hi = max(float(y.max()), float(np.quantile(sets, 0.995)))
    span = hi - lo if hi > lo else max(abs(lo), 1.0)
    lo, hi = lo - 0.08 * span, hi + 0.08 * span
    if lower is not None:
        lo = max(lo, lower)
    if upper is not None:
        hi = min(hi, upper)
    grid = np.linspace(lo, hi, GRID)
    observed = _density(y, grid, lower, upper)
    shown = plain_text(quantity)
    with figure(height_in=3.0) as fig:
        ax = fig.add_subplot()
        for k, s in enumerate(sets):
            ax.plot(grid, _density(s, grid, lower, upper), color=DRAWS, lw=0.7, alpha=0.3,
                    label=f"replicated data sets ({len(sets)} of {rep.shape[0]})"
                    if k == 0 else None)
        ax.plot(grid, observed, color=INK, lw=1.9, label=f"observed data ({y.size} values)")
        if y.size <= RUG_MAX:
            ax.plot(y, np.full(y.size, 0.02), "|", ms=7, mew=0.8, color=INK,
                    transform=ax.get_xaxis_transform())
        ax.set_xlim(lo, hi)
        ax.set_ylim(bottom=0)
        ax.set_xlabel(shown)
        ax.set_ylabel("density")
        ax.set_title(f"Observed and replicated data of {shown}", loc="left", color=INK)
        ax.legend(loc="upper right")
        svg = to_svg(fig, fig_id)
    rug = " (with a tick for each value along the bottom)" if y.size <= RUG_MAX else ""
    bounds = {POSITIVE: " Curves are reflected at 0, below which the outcome cannot go.",
              PROPORTION: " Curves are reflected at 0 and 1, the outcome's bounds."}.get(kind, "")
    caption = (
        f"{quantity}: the dark line is the smoothed density of the {y.size} observed "
        f"values{rug}; the thin lines are the densities of {len(sets)} of the "
        f"{rep.shape[0]} data sets replicated from the fitted model, taken at evenly spaced "
        "draws. Where the dark line leaves the bundle of thin lines, the data have a shape "
        "(a peak, a tail, a second mode) the model does not produce. Densities use a "
        f"Gaussian kernel with Silverman's rule-of-thumb bandwidth.{bounds}"
    )
    return _figure(fig_id, f"Observed and replicated data of {quantity}", svg, caption,
                   rule_id, quantity)


# --- a test statistic over the replicated data -----------------------------------------


def statistic_distribution(
    quantity: str, label: str, t_rep: np.ndarray, t_obs: float, p_value: float, *,
    fig_id: str, rule_id: str | None,
) -> Figure | None:
    """Histogram of a test statistic over the replicated data sets, the observed value marked.

    ``t_rep`` is the statistic of each replicated data set
    (:func:`auditor.predictive_checks.replicated_statistic`), ``t_obs`` and
    ``p_value`` the check's (:func:`auditor.predictive_checks.check_statistics`).
    """
    t = np.asarray(t_rep, dtype=float).reshape(-1)
    t = t[np.isfinite(t)]
    if t.size == 0 or not math.isfinite(t_obs):
        return None
    t_min, t_max = float(t.min()), float(t.max())
    if np.all(t == np.round(t)) and t_max - t_min <= BINS:
        edges = np.arange(t_min - 0.5, t_max + 1.0, 1.0)
    elif t_max > t_min:
        edges = np.linspace(t_min, t_max, 41)
    else:
        pad = max(abs(t_min) * 0.01, 1e-6)
        edges = np.array([t_min - pad, t_min + pad])
    counts, _ = np.histogram(t, bins=edges)
    heights = 100.0 * counts / t.size
    x_lo, x_hi = min(float(edges[0]), t_obs), max(float(edges[-1]), t_obs)
    margin = 0.05 * (x_hi - x_lo)
    shown, shown_label = plain_text(quantity), plain_text(label)
    with figure(height_in=2.8) as fig:
        ax = fig.add_subplot()
        ax.stairs(heights, edges, fill=True, color=DRAWS, alpha=0.8,
                  label=f"replicated data sets ({t.size})")
        ax.axvline(t_obs, color=ACCENT, lw=2.0, label="observed data")
        ax.set_xlim(x_lo - margin, x_hi + margin)
        ax.set_ylim(bottom=0)
        right_half = (t_obs - (x_lo - margin)) / ((x_hi - x_lo) + 2 * margin) > 0.5
        ax.text(t_obs, 0.94, f" observed {t_obs:.4g} ", transform=ax.get_xaxis_transform(),
                ha="right" if right_half else "left", va="top", color=ACCENT, fontsize=8)
        ax.set_xlabel(f"{shown_label} of {shown}")
        ax.set_ylabel("share of replicated data sets (%)")
        ax.set_title(f"{shown_label.capitalize()} of {shown}: replicated and observed",
                     loc="left", color=INK)
        ax.legend(loc="upper left" if right_half else "upper right")
        svg = to_svg(fig, fig_id)
    caption = (
        f"{quantity}: the {label} of each of the {t.size} data sets replicated from the "
        f"fitted model (histogram) and of the observed data (vertical line, {t_obs:.4g}). "
        f"The posterior predictive p-value p = {p_value:.3g} is the share of replicated "
        "values above the observed one, ties counted half; a line in the far tail of the "
        f"histogram (p near 0 or 1) means the model seldom produces data with such a {label}."
    )
    return _figure(fig_id, f"{label.capitalize()} of {quantity}, replicated and observed",
                   svg, caption, rule_id, quantity)


# --- LOO-PIT ---------------------------------------------------------------------------


def ecdf_difference_svg(test: Any, *, fig_id: str, band: str, line: str, xlabel: str,
                        title: str) -> tuple[str, int] | None:
    """An ECDF minus the uniform CDF inside its simultaneous band (after Säilynoja, Bürkner
    & Vehtari 2022), the points outside marked: the SVG and the number of points.

    ``test`` has ``x``, ``ecdf``, ``lower``, ``upper`` (arrays over the evaluation points)
    and ``outside`` (how many points leave the band): a LOO-PIT test here, an SBC rank test
    in :mod:`auditor.figures.calibration`. ``None`` when there is nothing finite to draw.
    """
    x, ecdf = np.asarray(test.x, dtype=float), np.asarray(test.ecdf, dtype=float)
    lower, upper = np.asarray(test.lower, dtype=float), np.asarray(test.upper, dtype=float)
    if x.size < 2 or not all(np.all(np.isfinite(a)) for a in (x, ecdf, lower, upper)):
        return None
    diff = ecdf - x
    outside = (ecdf > upper) | (ecdf < lower)
    with figure(height_in=3.0) as fig:
        ax = fig.add_subplot()
        ax.fill_between(x, lower - x, upper - x, color=RANGE_FILL, alpha=0.22, lw=0,
                        label=band)
        ax.axhline(0.0, color=MUTED, lw=0.8)
        ax.plot(x, diff, color=INK, lw=1.5, label=line)
        if outside.any():
            ax.scatter(x[outside], diff[outside], s=20, color=ACCENT, zorder=3,
                       edgecolors="white", linewidths=0.4,
                       label=f"outside the band ({test.outside} of {x.size})")
        ax.set_xlim(0.0, 1.0)
        ax.set_xlabel(xlabel)
        ax.set_ylabel("ECDF minus uniform")
        ax.set_title(title, loc="left", color=INK)
        fig.legend(loc="outside lower center", ncols=3)
        return to_svg(fig, fig_id), int(x.size)


def loo_pit_difference(
    quantity: str, test: PitTest, *, alpha: float, n_obs: int, randomized: bool,
    fig_id: str, rule_id: str | None,
) -> Figure | None:
    """The LOO-PIT ECDF minus the uniform CDF inside its simultaneous band.

    ``test`` is :func:`auditor.predictive_checks.pit_band_test`'s result: evaluation
    points, ECDF and band; the points marked are those where the ECDF leaves the band,
    ``test.outside`` of them.
    """
    level = f"{100 * (1 - alpha):.0f}%"
    drawn = ecdf_difference_svg(
        test, fig_id=fig_id, band=f"{level} band of a calibrated model",
        line="LOO-PIT ECDF minus uniform", xlabel="LOO-PIT value",
        title=f"LOO-PIT of {plain_text(quantity)}")
    if drawn is None:
        return None
    svg, n_points = drawn
    randomized_note = (", randomized within the jumps of the discrete outcome"
                       if randomized else "")
    caption = (
        f"{quantity}: for each of the {n_obs} observations, the probability under the model "
        "fitted without it of a value at or below the one observed (leave-one-out PIT, "
        f"by Pareto smoothed importance sampling{randomized_note}). The line is the share of "
        "these values at or below each point minus the share a uniform distribution "
        f"would give; for a calibrated model it stays inside the shaded {level} band "
        f"everywhere at once. Here it leaves the band at {test.outside} of {n_points} points "
        f"(marked), largest excursion {test.largest_gap:.3f}. Reading the shape: above zero "
        "on the left and below on the right, predictive distributions too narrow; the "
        "reverse, too wide; below zero throughout, the model predicts too low; above zero "
        "throughout, too high."
    )
    return _figure(fig_id, f"LOO-PIT of {quantity}", svg, caption, rule_id, quantity)


# --- what the rules' figures.py call ---------------------------------------------------


def figure_limit(ctx: RuleContext) -> int:
    """Most figures a rule may make (``ctx.options["max_figures"]``; 0 without matplotlib)."""
    return _max_figures(ctx)


def check_helper(ctx: RuleContext, name: str) -> Callable[..., Any]:
    """The function ``name`` of the rule's own ``check.py`` (as the registry loaded it), so
    a figure gets its numbers from the very generator its findings come from."""
    fn = getattr(ctx.rule.module, name, None)
    if not callable(fn):
        raise LookupError(f"{ctx.rule.id}: check.py has no {name}()")
    return fn


def first_figures(makers: Iterable[Callable[[], Figure | None]], limit: int) -> list[Figure]:
    """Call ``makers`` in order until ``limit`` figures are made.

    A maker that returns ``None`` or meets odd data (:data:`DRAWING_ERRORS`) is
    skipped: a figure is left out rather than the rule failing.
    """
    out: list[Figure] = []
    for make in makers:
        if len(out) >= limit:
            break
        try:
            fig = make()
        except DRAWING_ERRORS:
            continue
        if fig is not None:
            out.append(fig)
    return out


def figure_id(ctx: RuleContext, *parts: str) -> str:
    """The figure's id: analysis, rule and ``parts``, made of ``[a-z0-9-]``."""
    return slug(ctx.analysis.name, ctx.rule.id, *parts)
