"""Uniformity of simulation-based calibration ranks, per parameter."""

from __future__ import annotations

from auditor.findings import Location
from auditor.kernels.sbc import sbc_rank_tests


def tests(ctx):
    """The rank tests of every parameter of the analysis's SBC ranks file."""
    sbc = ctx.analysis.sbc
    if sbc is None or not sbc.parameters or sbc.ranks is None or len(sbc.ranks) == 0:
        return []
    return sbc_rank_tests(sbc.ranks, sbc.n_draws, parameters=sbc.parameters,
                          alpha=float(ctx.thresholds["alpha"]),
                          max_bins=int(ctx.thresholds["max_bins"]))


def check(ctx):
    """One finding per parameter whose ranks fail the chi-square or the band test."""
    sbc = ctx.analysis.sbc
    for t in tests(ctx):
        failed = []
        if t.chi2_rejects:
            failed.append(f"chi-square over {t.bins} bins p = {t.chi2_p:.3g}")
        if t.outside:
            failed.append(f"the ECDF leaves its {100 * (1 - t.alpha):.0f}% simultaneous band "
                          f"at {t.outside} points (by up to {t.largest_gap:.3f})")
        if not failed:
            continue
        yield ctx.finding(
            f"The SBC ranks of `{t.parameter}` over {t.n_simulations} simulations are not "
            "uniform: " + "; ".join(failed) + ". The inference does not recover the "
            "simulated values as it should.",
            evidence={"parameter": t.parameter, "simulations": t.n_simulations,
                      "bins": t.bins, "chi2": t.chi2, "chi2_p": t.chi2_p,
                      "points_outside": t.outside, "largest_gap": t.largest_gap,
                      "alpha": t.alpha},
            quantity=t.parameter,
            location=Location(ctx.project.relpath(sbc.path)),
        )
