"""Figures of the prior and posterior predictive rules, on real draws through the real engine.

Projects: the demo (examples/demo/, draws written by Stan and PyMC: its mites-poisson
analysis is flagged by posterior-predictive.test-statistic and .loo-pit, harvest-vague
by prior-predictive.implausible against its declared range, wax-flat by the same rule
without one) and each rule's generated bad case (rules/<stage>/<name>/cases/bad).

What a figure shows is compared with what its finding states: the numbers in its
caption and its SVG text with the finding's evidence, and the figure the engine made
with one made again from the same input (the same bytes).
"""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from auditor.engine import run_audit
from auditor.figures.inline import inline_svg
from auditor.figures.predictive import (
    DRAWS,
    REPLICATED_LINES,
    first_figures,
    loo_pit_difference,
    observed_vs_replicated,
    prior_predictive_range,
    statistic_distribution,
)
from auditor.figures.sampling import slug
from auditor.predictive_checks import (
    draws_of,
    observed_values,
    outcome_kind,
    pit_band_test,
    replicated_statistic,
)
from auditor.registry import find_rule
from tests.report_fixtures import DEMO, REPO, demo_result

SVG = "{http://www.w3.org/2000/svg}"
IMPLAUSIBLE = "prior-predictive.implausible"
TEST_STATISTIC = "posterior-predictive.test-statistic"
LOO_PIT = "posterior-predictive.loo-pit"
RULES = (IMPLAUSIBLE, TEST_STATISTIC, LOO_PIT)
HOSTILE = "<script>alert(1)</script>&$x$"


@pytest.fixture(scope="module")
def demo():
    """The demo's audit (cached per process by tests.report_fixtures)."""
    return demo_result()


def _analysis(result, name: str):
    return next(a for a in result.analyses if a.name == name)


def _of(analysis, rule_id: str) -> tuple[list, list]:
    return ([f for f in analysis.findings if f.rule_id == rule_id],
            [g for g in analysis.figures if g.rule_id == rule_id])


def _valid(fig) -> ET.Element:
    """The figure's SVG parsed; it must pass the inline sanitizer unchanged in substance."""
    root = ET.fromstring(fig.svg.encode("utf-8"))
    assert root.tag == f"{SVG}svg"
    out = inline_svg(fig.svg, "t", label=fig.title)
    assert out.startswith("<svg") and "<script" not in out
    return root


def _number(pattern: str, text: str) -> float:
    m = re.search(pattern, text)
    assert m, f"{pattern!r} not in {text!r}"
    return float(m.group(1))


def _context(path: Path, analysis: str, rule_id: str, max_figures: int = 4):
    """A rule's context on one analysis, as the engine makes it (see tests/test_report_html)."""
    from auditor.config import load_config
    from auditor.diagnostics import DiagnosticsTable
    from auditor.engine import build_project, project_root
    from auditor.rules_api import RuleContext

    root = project_root([path])
    project = build_project([path], load_config(root, None, {}), root)
    a = next(x for x in project.analyses if x.name == analysis)
    rule = find_rule(rule_id)
    ctx = RuleContext(rule, a, project, dict(rule.thresholds), rule.severity,
                      DiagnosticsTable(a.group("posterior")),
                      options={"max_figures": max_figures})
    return ctx, list(rule.check(ctx))


# --- the demo -----------------------------------------------------------------------------


def test_demo_flagged_rules_yield_valid_figures_naming_their_quantity(demo):
    expected = {("mites-poisson", TEST_STATISTIC), ("mites-poisson", LOO_PIT),
                ("harvest-vague", IMPLAUSIBLE), ("wax-flat", IMPLAUSIBLE)}
    for name, rule_id in expected:
        findings, figures = _of(_analysis(demo, name), rule_id)
        assert findings and figures, (name, rule_id)
        for fig in figures:
            _valid(fig)
            assert fig.quantity == "y" and fig.caption.startswith("y: "), fig.caption
    # Rules without a finding draw nothing (the engine calls figures() only on a hit).
    for a in demo.analyses:
        for rule_id in RULES:
            findings, figures = _of(a, rule_id)
            assert findings or not figures, (a.name, rule_id)


def test_implausible_figure_states_the_findings_share_inside(demo):
    (finding,), (fig,) = _of(_analysis(demo, "harvest-vague"), IMPLAUSIBLE)
    # Source: the finding's evidence (share_inside, range); same function share_in_range.
    share = 100 * finding.evidence["share_inside"]
    assert _number(r"; (\d+\.\d)% of the draws lie inside", fig.caption) == round(share, 1)
    low, high = finding.evidence["range"]
    assert f"[{low:g}, {high:g}]: {share:.1f}% of draws inside" in fig.svg
    # The draws span about 50 orders of magnitude (evidence q01 to q99), so the axis is log.
    assert finding.evidence["q99"] / finding.evidence["q01"] > 1e20
    assert "logarithmic" in fig.caption


def test_implausible_figure_without_declared_range_marks_the_observed_range(demo):
    a = _analysis(demo, "wax-flat")
    (finding,), (fig,) = _of(a, IMPLAUSIBLE)
    assert "share_inside" not in finding.evidence  # no plausible_range in the configuration
    y = np.asarray(json.loads((DEMO / "data" / "wax.json").read_text())["y"])
    # Source: the demo's data file (data/wax.json), smallest and largest observation.
    assert f"range of the observed data, from {y.min():g} to {y.max():g}" in fig.caption
    # Draws reach 1e19 (evidence q01, q99) on both sides: a symmetric-log axis, said so.
    assert finding.evidence["q01"] < -1e18 and finding.evidence["q99"] > 1e18
    assert "symmetric-logarithmic" in fig.caption


def test_test_statistic_figures_mark_the_findings_values(demo):
    a = _analysis(demo, "mites-poisson")
    findings, figures = _of(a, TEST_STATISTIC)
    by_id = {f.id: f for f in figures}
    # The observed-over-replicated figure first, then one per flagged statistic (max 4).
    assert figures[0].id == slug(a.name, TEST_STATISTIC, "y")
    assert len(figures) == min(4, 1 + len(findings))
    counts = figures[0]
    # Source: the data file (16 observations) and the evidence (replications).
    assert f"the {findings[0].evidence['replications']} data sets" in counts.caption
    assert "16 observations" in counts.caption and "counts" in counts.title
    shown = 0
    for f in findings:
        fig = by_id.get(slug(a.name, TEST_STATISTIC, "y", f.evidence["statistic"]))
        if fig is None:
            continue
        shown += 1
        # Source: the finding's evidence (value, p_value); same function check_statistics.
        value = f.evidence["value"]
        assert f"vertical line, {value:.4g})" in fig.caption
        assert f"observed {value:.4g}" in fig.svg
        assert _number(r"p = ([0-9.e-]+) ", fig.caption) == pytest.approx(
            f.evidence["p_value"], abs=1e-4)  # evidence rounds p to 4 decimals
    assert shown == len(figures) - 1


def test_loo_pit_figure_marks_the_points_outside_the_band(demo):
    (finding,), (fig,) = _of(_analysis(demo, "mites-poisson"), LOO_PIT)
    root = _valid(fig)
    ev = finding.evidence
    # Source: the finding's evidence (points_outside, largest_excursion, alpha, observations).
    assert _number(r"leaves the band at (\d+) of", fig.caption) == ev["points_outside"]
    assert f"largest excursion {ev['largest_excursion']:.3f}" in fig.caption
    assert f"{100 * (1 - ev['alpha']):.0f}% band" in fig.caption
    assert f"each of the {ev['observations']} observations" in fig.caption
    assert ("randomized" in fig.caption) == ev["randomized"]
    # The marked points: the first scatter in the axes has one marker per point outside.
    scatter = next(g for g in root.iter(f"{SVG}g") if g.get("id") == "PathCollection_1")
    assert len(list(scatter.iter(f"{SVG}use"))) == ev["points_outside"]


def test_figures_are_the_same_bytes_when_made_again(demo):
    """The engine's figures equal those made again from the same files, twice."""
    for name, rule_id in (("mites-poisson", TEST_STATISTIC), ("mites-poisson", LOO_PIT),
                          ("harvest-vague", IMPLAUSIBLE)):
        ctx, hits = _context(DEMO, name, rule_id)
        first = ctx.rule.figures(ctx, hits)
        second = ctx.rule.figures(ctx, hits)
        engine = _of(_analysis(demo, name), rule_id)[1]
        assert [f.svg for f in first] == [f.svg for f in second] == [f.svg for f in engine]
        assert [f.caption for f in first] == [f.caption for f in engine]


def test_max_figures_caps_and_orders_the_test_statistic_figures():
    ctx, hits = _context(DEMO, "mites-poisson", TEST_STATISTIC, max_figures=2)
    figs = ctx.rule.figures(ctx, hits)
    # Source: the check's order of statistics (mean, sd, min, max, share of zeros,
    # dispersion; auditor.predictive_checks.statistics_for); sd is the first flagged.
    assert [f.id for f in figs] == [slug("mites-poisson", TEST_STATISTIC, "y"),
                                    slug("mites-poisson", TEST_STATISTIC, "y", "sd")]
    ctx.options["max_figures"] = 0
    assert ctx.rule.figures(ctx, hits) == []


def test_continuous_outcome_draws_densities_of_evenly_picked_replications():
    ctx, _ = _context(DEMO, "yards-centered", TEST_STATISTIC)
    a, p = ctx.analysis, ctx.analysis.pairings[0]
    y = observed_values(a, p.observed)
    rep = draws_of(a, p.posterior_predictive, "posterior_predictive")
    kind = outcome_kind(y)
    assert kind == "continuous"
    fig = observed_vs_replicated("y", y, rep, kind=kind, fig_id="dens", rule_id=None)
    again = observed_vs_replicated("y", y, rep, kind=kind, fig_id="dens", rule_id=None)
    assert fig.svg == again.svg
    _valid(fig)
    # Source: the demo's draws (4 chains of 1000) and the data file (10 observations).
    assert f"densities of {REPLICATED_LINES} of the 4000 data sets" in fig.caption
    assert "10 observed values" in fig.caption
    # One thin curve per picked replication: paths in the replications' colour (DRAWS),
    # outside the legend.
    root = ET.fromstring(fig.svg.encode())
    legend = {id(e) for g in root.iter(f"{SVG}g") if g.get("id", "").startswith("legend")
              for e in g.iter()}
    curves = [e for e in root.iter(f"{SVG}path") if id(e) not in legend
              and f"stroke: {DRAWS}" in e.get("style", "")]
    assert len(curves) == REPLICATED_LINES


# --- the generated bad cases ----------------------------------------------------------------


@pytest.mark.parametrize("rule_id", RULES)
def test_bad_case_yields_figures_that_agree_with_its_findings(rule_id):
    stage, name = rule_id.split(".")
    case = REPO / "rules" / stage / name / "cases" / "bad"
    result = run_audit([case], only_rules={rule_id})
    (analysis,) = result.analyses
    findings, figures = _of(analysis, rule_id)
    assert findings and figures
    for fig in figures:
        _valid(fig)
        assert fig.caption.startswith(f"{fig.quantity}: ")
        assert fig.quantity in {f.quantity for f in findings}
    first = findings[0].evidence
    if rule_id == IMPLAUSIBLE:
        # Source: the finding's evidence (share_inside); same function share_in_range.
        assert f"{100 * first['share_inside']:.1f}% of the draws lie inside" in figures[0].caption
    elif rule_id == TEST_STATISTIC:
        for f in findings:  # Source: the finding's evidence (value).
            fig = next(g for g in figures if g.id.endswith("-" + slug(f.evidence["statistic"])))
            assert f"observed {f.evidence['value']:.4g}" in fig.svg
    else:
        # Source: the finding's evidence (points_outside).
        assert f"at {first['points_outside']} of" in figures[0].caption


# --- makers on odd and hostile input --------------------------------------------------------


def test_makers_keep_names_as_text_and_never_build_markup():
    rng = np.random.default_rng(7)  # fixed seed: the inputs only need to be ordinary
    y = rng.poisson(4, 30).astype(float)
    rep = rng.poisson(4, (200, 30)).astype(float)
    figs = [
        prior_predictive_range(HOSTILE, rep, low=0, high=10, declared=True, fig_id="a",
                               rule_id=None),
        observed_vs_replicated(HOSTILE, y, rep, kind="count", fig_id="b", rule_id=None),
        observed_vs_replicated(HOSTILE, y + 0.5, rep + 0.3, kind="continuous", fig_id="c",
                               rule_id=None),
        statistic_distribution(HOSTILE, "maximum", replicated_statistic(rep, "max"),
                               float(y.max()), 0.5, fig_id="d", rule_id=None),
        loo_pit_difference(HOSTILE, pit_band_test(rng.uniform(size=30), 0.05), alpha=0.05,
                           n_obs=30, randomized=False, fig_id="e", rule_id=None),
    ]
    for fig in figs:
        root = _valid(fig)
        texts = " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))
        # matplotlib wrote the name as text (escaped by the XML writer), dollars literal.
        assert HOSTILE in texts
        assert fig.caption.startswith(HOSTILE)  # the reporters escape captions


def test_makers_return_none_or_skip_on_data_they_cannot_draw():
    nan = np.full(50, np.nan)
    assert prior_predictive_range("y", nan, low=0, high=1, declared=True, fig_id="a",
                                  rule_id=None) is None
    assert prior_predictive_range("y", np.array([-1e308, 1e308]), low=None, high=None,
                                  declared=False, fig_id="a", rule_id=None) is None
    assert observed_vs_replicated("y", np.ones(3), np.ones((5, 4)), kind="count",
                                  fig_id="b", rule_id=None) is None  # shapes disagree
    assert observed_vs_replicated("y", np.ones(3), np.full((5, 3), np.nan), kind="count",
                                  fig_id="b", rule_id=None) is None
    assert statistic_distribution("y", "mean", np.ones(9), float("nan"), 0.5, fig_id="c",
                                  rule_id=None) is None
    # A constant draw and a constant statistic still draw (a one-value axis is widened).
    assert prior_predictive_range("y", np.full(50, 3.0), low=None, high=None, declared=False,
                                  fig_id="a", rule_id=None) is not None
    assert statistic_distribution("y", "mean", np.ones(9), 1.0, 0.5, fig_id="c",
                                  rule_id=None) is not None

    def broken():
        raise ValueError("odd data")

    made = first_figures([broken, lambda: None, lambda: "fig-1", lambda: "fig-2"], limit=1)
    assert made == ["fig-1"]
