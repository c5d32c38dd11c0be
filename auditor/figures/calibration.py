"""Figures of the calibration stage: the SBC rank ECDF minus the uniform CDF in its band.

:func:`sbc_ecdf_difference` draws one parameter's test from
:func:`auditor.kernels.sbc.sbc_rank_tests` (the ECDF difference plot of Säilynoja, Bürkner &
Vehtari 2022, as Modrák et al. 2023 use it for simulation-based calibration), in the look of
:func:`auditor.figures.predictive.loo_pit_difference`: the same numbers the finding states,
deterministic SVG.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from auditor.figures.predictive import RANGE_FILL, plain_text
from auditor.figures.render import ACCENT, INK, MUTED, figure, to_svg
from auditor.result import Figure

if TYPE_CHECKING:
    from auditor.kernels.sbc import SbcTest

__all__ = ["sbc_ecdf_difference"]


def sbc_ecdf_difference(test: SbcTest, *, fig_id: str, rule_id: str | None = None
                        ) -> Figure | None:
    """The ECDF of one parameter's fractional SBC ranks minus the uniform CDF, in its band.

    Parameters
    ----------
    test
        One parameter's result of :func:`auditor.kernels.sbc.sbc_rank_tests`.
    fig_id
        The figure's id (``[a-z0-9-]``).
    rule_id
        The rule the figure illustrates.

    Returns
    -------
    Figure or None
        ``None`` when there is nothing finite to draw.
    """
    x, ecdf = np.asarray(test.x, dtype=float), np.asarray(test.ecdf, dtype=float)
    lower, upper = np.asarray(test.lower, dtype=float), np.asarray(test.upper, dtype=float)
    if x.size < 2 or not all(np.all(np.isfinite(a)) for a in (x, ecdf, lower, upper)):
        return None
    diff = ecdf - x
    outside = (ecdf > upper) | (ecdf < lower)
    level = f"{100 * (1 - test.alpha):.0f}%"
    shown = plain_text(test.parameter)
    with figure(height_in=3.0) as fig:
        ax = fig.add_subplot()
        ax.fill_between(x, lower - x, upper - x, color=RANGE_FILL, alpha=0.22, lw=0,
                        label=f"{level} band of calibrated inference")
        ax.axhline(0.0, color=MUTED, lw=0.8)
        ax.plot(x, diff, color=INK, lw=1.5, label="rank ECDF minus uniform")
        if outside.any():
            ax.scatter(x[outside], diff[outside], s=20, color=ACCENT, zorder=3,
                       edgecolors="white", linewidths=0.4,
                       label=f"outside the band ({test.outside} of {x.size})")
        ax.set_xlim(0.0, 1.0)
        ax.set_xlabel("fractional rank of the true value among the posterior draws")
        ax.set_ylabel("ECDF minus uniform")
        ax.set_title(f"Simulation-based calibration of {shown}", loc="left", color=INK)
        fig.legend(loc="outside lower center", ncols=3)
        svg = to_svg(fig, fig_id)
    if test.bins:
        chi2_words = (f"The rank histogram's chi-square test over {test.bins} bins gives "
                      f"p = {test.chi2_p:.3g}.")
    else:
        chi2_words = ("There are too few simulations for the chi-square test (5 expected "
                      "ranks in each of 2 bins).")
    caption = (
        f"{test.parameter}: for each of the {test.n_simulations} simulations, the rank of the "
        "value drawn from the prior among the posterior draws fitted to the data simulated "
        "from it, as a fraction of the possible ranks (made continuous by a uniform jitter "
        "within each rank, fixed seed). The line is the share of these fractions at or below "
        "each point minus the share a uniform distribution would give; for calibrated "
        f"inference it stays inside the shaded {level} band everywhere at once. Here it leaves "
        f"the band at {test.outside} of {x.size} points (marked), largest excursion "
        f"{test.largest_gap:.3f}. {chi2_words} Reading the shape: above zero on the left and "
        "below on the right, the true values fall too often in the posteriors' tails "
        "(posteriors too narrow); the reverse, posteriors too wide; above zero throughout, the "
        "posteriors lie above the true values (overestimate); below zero throughout, below them."
    )
    return Figure(id=fig_id, title=f"Simulation-based calibration of {test.parameter}",
                  svg=svg, caption=caption, rule_id=rule_id, quantity=test.parameter)
