"""The SBC ECDF difference figure (auditor/figures/calibration.py).

Numbers: the figure's caption states the test's own numbers (auditor/kernels/sbc.py), checked
against the SbcTest it was drawn from; the ranks are a simulated posterior too narrow (Talts et
al. 2018, arXiv:1804.06788, section 4.2), which leaves the band.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from dataclasses import replace

import numpy as np
import pytest

from auditor.figures.calibration import sbc_ecdf_difference
from auditor.figures.inline import inline_svg
from auditor.kernels.sbc import sbc_rank_tests

pytest.importorskip("matplotlib")

SVG = "{http://www.w3.org/2000/svg}"
HOSTILE = "<script>alert(1)</script>&$x$"


def _narrow_test(name: str = "theta"):
    rng = np.random.default_rng(4)
    theta = rng.normal(size=200)
    mean = rng.normal(theta, 0.3)
    draws = rng.normal(mean[:, None], 0.15, (200, 99))  # posterior sd halved
    ranks = (draws < theta[:, None]).sum(axis=1)
    return sbc_rank_tests(ranks, 99, parameters=[name])[0]


def test_figure_renders_states_the_numbers_and_is_deterministic() -> None:
    test = _narrow_test()
    assert test.outside > 0  # the miscalibrated ranks leave the band
    fig = sbc_ecdf_difference(test, fig_id="demo-calibration-sbc-theta",
                              rule_id="calibration.sbc")
    assert fig is not None
    assert fig.rule_id == "calibration.sbc" and fig.quantity == "theta"
    root = ET.fromstring(fig.svg)
    assert root.tag == f"{SVG}svg"
    text = " ".join(t.text or "" for t in root.iter(f"{SVG}text"))
    assert "Simulation-based calibration of theta" in text
    assert f"outside the band ({test.outside} of {test.x.size})" in text
    assert f"at {test.outside} of {test.x.size} points" in fig.caption
    assert f"largest excursion {test.largest_gap:.3f}" in fig.caption
    assert f"over {test.bins} bins gives p = {test.chi2_p:.3g}" in fig.caption
    again = sbc_ecdf_difference(test, fig_id="demo-calibration-sbc-theta",
                                rule_id="calibration.sbc")
    assert again is not None and again.svg == fig.svg  # same bytes
    out = inline_svg(fig.svg, "t", label=fig.title)
    assert out.startswith("<svg") and 'id="t-' in out


def test_hostile_parameter_name_stays_text() -> None:
    fig = sbc_ecdf_difference(_narrow_test(HOSTILE), fig_id="x", rule_id=None)
    assert fig is not None
    out = inline_svg(fig.svg, "h", label=fig.title)
    assert "<script" not in out
    assert re.search(r"&lt;script&gt;", out)


def test_no_chi_square_and_nothing_finite() -> None:
    test = sbc_rank_tests(np.arange(9), 99, parameters=["mu"])[0]
    fig = sbc_ecdf_difference(test, fig_id="few", rule_id=None)
    assert fig is not None and "too few simulations for the chi-square" in fig.caption
    broken = replace(test, ecdf=np.full_like(test.ecdf, math.nan))
    assert sbc_ecdf_difference(broken, fig_id="nan", rule_id=None) is None
