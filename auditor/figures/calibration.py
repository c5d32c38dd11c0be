"""Figures of the calibration stage: the SBC rank ECDF minus the uniform CDF in its band.

:func:`sbc_ecdf_difference` draws one parameter's test from
:func:`auditor.kernels.sbc.sbc_rank_tests` (the ECDF difference plot of Säilynoja, Bürkner &
Vehtari 2022, as Modrák et al. 2023 use it for simulation-based calibration), in the look of
:func:`auditor.figures.predictive.loo_pit_difference`: the same numbers the finding states,
deterministic SVG.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from auditor.figures.predictive import ecdf_difference_svg, plain_text
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
    level = f"{100 * (1 - test.alpha):.0f}%"
    drawn = ecdf_difference_svg(
        test, fig_id=fig_id, band=f"{level} band of calibrated inference",
        line="rank ECDF minus uniform",
        xlabel="fractional rank of the true value among the posterior draws",
        title=f"Simulation-based calibration of {plain_text(test.parameter)}")
    if drawn is None:
        return None
    svg, n_points = drawn
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
        f"the band at {test.outside} of {n_points} points (marked), largest excursion "
        f"{test.largest_gap:.3f}. {chi2_words} Reading the shape: above zero on the left and "
        "below on the right, the true values fall too often in the posteriors' tails "
        "(posteriors too narrow); the reverse, posteriors too wide; above zero throughout, the "
        "posteriors lie above the true values (overestimate); below zero throughout, below them."
    )
    return Figure(id=fig_id, title=f"Simulation-based calibration of {test.parameter}",
                  svg=svg, caption=caption, rule_id=rule_id, quantity=test.parameter)
