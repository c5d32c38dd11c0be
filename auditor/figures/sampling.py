"""Figures of the sampling stage, drawn from an analysis's DataTree.

- :func:`trace_rank`: the trace of each chain beside its rank histogram. Ranks
  are computed over all chains pooled; with mixed chains every chain's ranks are
  uniform (Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, "Rank-normalization,
  folding, and localization: an improved R-hat", Bayesian Analysis 16(2), rank plots).
- :func:`divergence_pair`: divergent transitions shown in the pair of quantities
  whose divergent and non-divergent draws differ most (Betancourt 2017,
  arXiv:1701.02434: divergences gather where the geometry is hard, e.g. the neck
  of a hierarchical funnel, log tau against a theta).
- :func:`energy`: marginal energy against energy transitions, both centered, with
  E-BFMI per chain (Betancourt 2016, arXiv:1604.00695).

Ranks for the rank plots come from arviz-stats (a plotting helper); E-BFMI from
:mod:`auditor.kernels.chains`, the number the rule reports.
"""

from __future__ import annotations

import importlib.util
import re
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from auditor.figures.draws import iter_quantities, quantity_draws
from auditor.figures.render import ACCENT, CHAIN_COLORS, INK, MUTED, figure, to_svg
from auditor.result import Figure

if TYPE_CHECKING:
    from auditor.findings import Finding
    from auditor.rules_api import RuleContext

#: E-BFMI below this suggests poor exploration (Betancourt 2016; he calls it provisional).
DEFAULT_BFMI_THRESHOLD = 0.3
#: How many single quantities (best 1-D separation first) the pair search considers.
PAIR_CANDIDATES = 12
#: Upper bound on quantities scanned for the pair search (keeps wide models fast).
PAIR_SCAN_LIMIT = 400
#: At most this many non-divergent draws are drawn (every k-th), to keep the SVG small;
#: every divergent draw is drawn.
SCATTER_MAX_OTHER = 1500


def slug(*parts: str) -> str:
    """A lowercase id made of ``[a-z0-9-]`` from ``parts`` (for figure and SVG ids)."""
    text = "-".join(parts).lower()
    return re.sub(r"[^a-z0-9]+", "-", text).strip("-") or "figure"


def _color(i: int) -> str:
    return CHAIN_COLORS[i % len(CHAIN_COLORS)]


# --- trace and rank plot -------------------------------------------------------------


def trace_rank(
    quantity: str, draws: np.ndarray, *, fig_id: str, rule_id: str | None, note: str = ""
) -> Figure:
    """Trace per chain (left) and rank histogram per chain (right) of one quantity.

    Parameters
    ----------
    draws
        Array (chain, draw).
    note
        Extra text for the caption (e.g. the R-hat value).
    """
    from arviz_stats.base import array_stats

    n_chains, n_draws = draws.shape
    ranks = array_stats.compute_ranks(draws, axis=(-2, -1))
    total = n_chains * n_draws
    n_bins = int(min(20, max(5, n_draws // 10)))
    edges = np.linspace(0.5, total + 0.5, n_bins + 1)
    stacked = n_chains <= 8
    rows = n_chains if stacked else 1
    with figure(height_in=max(2.6, 0.55 * rows + 0.9)) as fig:
        grid = fig.add_gridspec(rows, 2, width_ratios=(2.1, 1.0))
        ax_trace = fig.add_subplot(grid[:, 0])
        for c in range(n_chains):
            ax_trace.plot(np.arange(n_draws), draws[c], lw=0.6, color=_color(c), alpha=0.85)
        ax_trace.set_title(f"Trace of {quantity}, one colour per chain", loc="left", color=INK)
        ax_trace.set_xlabel("draw (after warmup)")
        ax_trace.set_ylabel(quantity)
        expected = total / n_bins
        for r in range(rows):
            ax = fig.add_subplot(grid[r, 1])
            chains = [r] if stacked else range(n_chains)
            for c in chains:
                counts, _ = np.histogram(ranks[c], bins=edges)
                if stacked:
                    ax.bar(edges[:-1], counts, width=np.diff(edges), align="edge",
                           color=_color(c), alpha=0.8, linewidth=0)
                else:
                    ax.stairs(counts, edges, color=_color(c), lw=0.8)
            per_chain = expected / n_chains
            ax.axhline(per_chain, color=INK, lw=0.7, ls="--")
            ax.set_yticks([])
            ax.set_xlim(edges[0], edges[-1])
            ax.grid(False)
            if stacked:
                ax.set_ylabel(f"{r + 1}", rotation=0, ha="right", va="center", color=_color(r))
            if r == 0:
                ax.set_title("Ranks, by chain", loc="left", color=INK)
            if r < rows - 1:
                ax.set_xticks([])
            else:
                ax.set_xlabel("rank over all chains")
        svg = to_svg(fig, fig_id)
    caption = (
        f"{quantity}: {n_chains} chains of {n_draws} draws. Left, the draws of each chain in "
        "order; right, how each chain's draws rank among all draws (chain number at the left of "
        "each row). Chains that explore the same distribution have flat rank histograms near "
        "the dashed line."
    )
    return Figure(
        id=fig_id,
        title=f"Trace and ranks of {quantity}",
        svg=svg,
        caption=f"{caption} {note}".strip(),
        rule_id=rule_id,
        quantity=quantity,
    )


# --- divergences in the best-separating pair ------------------------------------------


def _candidates(posterior: Any, one_based: bool) -> list[tuple[str, np.ndarray]]:
    out = []
    for k, (name, values) in enumerate(iter_quantities(posterior, one_based)):
        if k >= PAIR_SCAN_LIMIT:
            break
        flat = values.reshape(-1)
        if not np.all(np.isfinite(flat)) or np.ptp(flat) == 0:
            continue
        # Scale parameters are looked at on the log scale, where a funnel's neck opens up.
        if np.all(flat > 0):
            out.append((f"log {name}", np.log(flat)))
        else:
            out.append((name, flat))
    return out


def best_pair(
    quantities: Sequence[tuple[str, np.ndarray]], divergent: np.ndarray
) -> tuple[int, int, float] | None:
    """Indices of the pair whose divergent draws lie farthest from the others, and that distance.

    The distance is the Mahalanobis distance between the two groups' means under
    the pooled within-group covariance: a two-dimensional standardized mean
    difference. The search is limited to the :data:`PAIR_CANDIDATES` quantities
    with the largest one-dimensional standardized mean difference.
    """
    n_div = int(divergent.sum())
    if n_div < 1 or n_div == divergent.size or len(quantities) < 2:
        return None
    X = np.column_stack([v for _, v in quantities])
    a, b = X[divergent], X[~divergent]
    diff = a.mean(axis=0) - b.mean(axis=0)
    pooled_sd = X.std(axis=0)
    smd = np.abs(diff) / np.where(pooled_sd > 0, pooled_sd, np.inf)
    top = np.argsort(-smd, kind="stable")[:PAIR_CANDIDATES]
    # Within-group covariance: the divergent group may have a single draw.
    centered = np.concatenate([a - a.mean(axis=0), b - b.mean(axis=0)])
    cov = centered.T @ centered / max(1, len(X) - 2)
    best: tuple[int, int, float] | None = None
    for ii, i in enumerate(top):
        for j in top[ii + 1:]:
            sub = cov[np.ix_([i, j], [i, j])]
            d = diff[[i, j]]
            try:
                dist = float(np.sqrt(d @ np.linalg.solve(sub, d)))
            except np.linalg.LinAlgError:
                continue
            if not np.isfinite(dist):
                continue
            if best is None or dist > best[2] + 1e-12:
                best = (int(i), int(j), dist)
    return best


def divergence_pair(
    posterior: Any, diverging: np.ndarray, *, one_based: bool, fig_id: str, rule_id: str | None
) -> Figure | None:
    """Scatter of the best-separating pair, divergent draws marked; ``None`` when not drawable."""
    divergent = np.asarray(diverging, dtype=bool).reshape(-1)
    quantities = [
        q for q in _candidates(posterior, one_based) if q[1].size == divergent.size
    ]
    pair = best_pair(quantities, divergent)
    if pair is None:
        return None
    i, j, dist = pair
    (name_x, x), (name_y, y) = quantities[i], quantities[j]
    # The quantity that separates more in one dimension goes on the vertical axis.
    others = np.flatnonzero(~divergent)
    step = max(1, int(np.ceil(others.size / SCATTER_MAX_OTHER)))
    shown = others[::step]
    label = f"other draws ({others.size}" + (f", 1 in {step} shown)" if step > 1 else ")")
    with figure(height_in=3.6, width_in=5.2) as fig:
        ax = fig.add_subplot()
        ax.scatter(x[shown], y[shown], s=5, color=MUTED, alpha=0.45, linewidths=0,
                   label=label)
        ax.scatter(x[divergent], y[divergent], s=16, color=ACCENT, alpha=0.95,
                   edgecolors="white", linewidths=0.4,
                   label=f"divergent ({int(divergent.sum())})")
        ax.set_xlabel(name_x)
        ax.set_ylabel(name_y)
        ax.set_title(f"Divergent transitions: {name_y} against {name_x}", loc="left", color=INK)
        ax.legend(loc="best", markerscale=1.5)
        svg = to_svg(fig, fig_id)
    caption = (
        f"Draws of {name_x} and {name_y}, the pair in which the divergent draws lie "
        f"farthest from the others (standardized distance between the two groups' means "
        f"{dist:.2f}). Divergences gathered in one region point to geometry the sampler cannot "
        "follow there, such as the narrow neck of a hierarchical funnel."
    )
    return Figure(id=fig_id, title="Where the divergent transitions are", svg=svg,
                  caption=caption, rule_id=rule_id, quantity=f"{name_x} / {name_y}")


# --- energy ------------------------------------------------------------------------


def energy(
    energy_draws: np.ndarray, bfmi: np.ndarray, *, threshold: float, fig_id: str,
    rule_id: str | None,
) -> Figure:
    """Centered marginal energy and energy transitions (left), E-BFMI per chain (right)."""
    n_chains = energy_draws.shape[0]
    marginal = (energy_draws - energy_draws.mean(axis=1, keepdims=True)).reshape(-1)
    transition = np.diff(energy_draws, axis=1)
    transition = (transition - transition.mean(axis=1, keepdims=True)).reshape(-1)
    lo = float(min(marginal.min(), transition.min()))
    hi = float(max(marginal.max(), transition.max()))
    edges = np.linspace(lo, hi, 41)
    with figure(height_in=max(2.8, 0.3 * n_chains + 1.2)) as fig:
        grid = fig.add_gridspec(1, 2, width_ratios=(2.0, 1.0))
        ax = fig.add_subplot(grid[0, 0])
        ax.hist(marginal, bins=edges, density=True, color="#1f5f8b", alpha=0.55,
                label="marginal energy")
        ax.hist(transition, bins=edges, density=True, histtype="step", color=ACCENT, lw=1.4,
                label="energy transition")
        ax.set_title("Energy, centered per chain", loc="left", color=INK)
        ax.set_xlabel("energy minus its chain mean")
        ax.set_yticks([])
        ax.legend(loc="upper right")
        axb = fig.add_subplot(grid[0, 1])
        rows = np.arange(n_chains)
        colors = [ACCENT if v < threshold else "#2a9d8f" for v in bfmi]
        axb.barh(rows, bfmi, color=colors, height=0.6)
        axb.axvline(threshold, color=INK, lw=0.8, ls="--")
        axb.set_yticks(rows, [f"chain {c + 1}" for c in rows])
        axb.invert_yaxis()
        axb.set_xlim(0, max(1.0, float(np.nanmax(bfmi)) * 1.1))
        axb.set_title(f"E-BFMI (dashed: {threshold:g})", loc="left", color=INK)
        for r, v in zip(rows, bfmi, strict=True):
            axb.text(v, r, f" {v:.2f}", va="center", ha="left", fontsize=7.5, color=INK)
        axb.grid(axis="y", visible=False)
        svg = to_svg(fig, fig_id)
    values = ", ".join(f"chain {c + 1}: {v:.2f}" for c, v in enumerate(bfmi))
    caption = (
        "When the energy transitions (red outline) are much narrower than the marginal energy "
        "(blue), momentum resampling cannot move the sampler across the energy levels it "
        f"needs and exploration is slow. E-BFMI per chain: {values}."
    )
    return Figure(id=fig_id, title="Energy distribution and E-BFMI", svg=svg, caption=caption,
                  rule_id=rule_id)


# --- what the rules' figures.py call -------------------------------------------------


def _one_based(ctx: RuleContext) -> bool:
    return bool(getattr(ctx.diagnostics, "one_based", False))


def _max_figures(ctx: RuleContext) -> int:
    # Without matplotlib (a minimal install without the ``report`` extra) there are no
    # figures; the audit and every other report work without them.
    if importlib.util.find_spec("matplotlib") is None:
        return 0
    return max(0, int(ctx.options.get("max_figures", 4)))


def flagged_traces(
    ctx: RuleContext,
    findings: list[Finding],
    badness: Callable[[dict[str, Any]], float],
    flagged: Callable[[dict[str, Any]], bool] | None = None,
) -> list[Figure]:
    """Trace/rank figures of the flagged quantities, worst first.

    The quantities named by ``findings`` come first (each finding names the worst
    element of its variable), then the other elements of those variables for
    which ``flagged(row)`` holds. ``badness`` maps a diagnostics row to a number,
    larger is worse. At most ``ctx.options["max_figures"]`` figures.
    """
    posterior = ctx.analysis.group("posterior")
    limit = _max_figures(ctx)
    if posterior is None or limit < 1:
        return []
    rows = {r["quantity"]: r for r in ctx.diagnostics.rows}

    def worst_first(qs: list[str]) -> list[str]:
        def key(q: str) -> tuple[float, str]:
            row = rows.get(q)
            score = badness(row) if row is not None else -np.inf
            return (-score if np.isfinite(score) else np.inf, q)

        return sorted(qs, key=key)

    named = list(dict.fromkeys(f.quantity for f in findings if f.quantity))
    variables = {rows[q]["variable"] for q in named if q in rows}
    others = [
        q for q, r in rows.items()
        if q not in named and r["variable"] in variables and flagged is not None and flagged(r)
    ]
    out: list[Figure] = []
    for quantity in worst_first(named) + worst_first(others):
        if len(out) >= limit:
            break
        draws = quantity_draws(posterior, quantity, _one_based(ctx))
        if draws is None or draws.shape[1] < 2 or not np.all(np.isfinite(draws)):
            continue
        row = rows.get(quantity, {})
        note = ", ".join(
            f"{label} {row[key]:{pattern}}" for key, label, pattern in
            (("rhat", "R-hat", ".3f"), ("ess_bulk", "bulk-ESS", ".0f"),
             ("ess_tail", "tail-ESS", ".0f"))
            if row.get(key) is not None
        )
        out.append(trace_rank(
            quantity, draws, fig_id=slug(ctx.analysis.name, ctx.rule.id, quantity),
            rule_id=ctx.rule.id, note=f"Diagnostics: {note}." if note else "",
        ))
    return out


def divergence_figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """The best-separating pair plot for an analysis with divergent transitions."""
    posterior = ctx.analysis.group("posterior")
    stats = ctx.analysis.group("sample_stats")
    if not findings or _max_figures(ctx) < 1 or posterior is None or stats is None:
        return []
    if "diverging" not in stats.data_vars:
        return []
    diverging = stats["diverging"].transpose("chain", "draw").values
    fig = divergence_pair(posterior, diverging, one_based=_one_based(ctx),
                          fig_id=slug(ctx.analysis.name, ctx.rule.id), rule_id=ctx.rule.id)
    return [fig] if fig is not None else []


def energy_figures(ctx: RuleContext, findings: list[Finding]) -> list[Figure]:
    """The energy figure with E-BFMI per chain (computed by auditor.kernels.chains)."""
    stats = ctx.analysis.group("sample_stats")
    if not findings or _max_figures(ctx) < 1 or stats is None or "energy" not in stats.data_vars:
        return []
    from auditor.kernels.chains import ebfmi

    da = stats["energy"].transpose("chain", "draw").astype(float)
    if da.sizes["draw"] < 3 or not np.all(np.isfinite(da.values)):
        return []  # E-BFMI is undefined with missing energies; the check reports that
    bfmi = ebfmi(da.values)
    threshold = next(
        (float(v) for k, v in sorted(ctx.thresholds.items())
         if "bfmi" in k.lower() and isinstance(v, int | float)),
        DEFAULT_BFMI_THRESHOLD,
    )
    return [energy(da.values.astype(float), bfmi, threshold=threshold,
                   fig_id=slug(ctx.analysis.name, ctx.rule.id), rule_id=ctx.rule.id)]
