"""Power-scaling sensitivity, contraction and simulation-based calibration through the
audit (issue 11).

Sources of the checked numbers:
- power-scaling sensitivity: arviz-stats' ``psense`` (the reference implementation of
  Kallioinen, Paananen, Bürkner & Vehtari 2024) on the same draws;
- contraction: the closed form of the conjugate normal model (posterior variance
  1 / (1/s0^2 + N/sigma^2) against prior variance s0^2; Gelman et al., BDA3 ch. 2);
- the kernels' own tests (tests/test_kernel_psense.py, tests/test_logprior.py,
  tests/test_kernel_sbc.py) check them against arviz-stats and scipy term by term.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
import xarray as xr

from auditor.engine import run_audit

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "examples" / "demo"
CASES = REPO / "rules" / "sensitivity"


def _one(result):
    (a,) = result.analyses
    return a


def test_power_scaling_equals_arviz_stats_on_the_same_draws(tmp_path):
    import arviz_stats as azs

    shutil.copy(DEMO / "fits" / "harvest_informed.nc", tmp_path / "harvest_informed.nc")
    a = _one(run_audit([tmp_path]))
    record = a.sensitivity
    assert record["log_prior_source"] == "log_prior group"
    tree = xr.open_datatree(DEMO / "fits" / "harvest_informed.nc", engine="h5netcdf").load()
    for component in ("prior", "likelihood"):
        ref = azs.psense(tree, group=component)
        for row in record["rows"]:
            name = row["quantity"]
            if "[" in name:
                continue
            # float32 draws: arviz-stats computes in float32 (the kernel's tests use 2e-6).
            assert row[component] == pytest.approx(float(ref[name].values), abs=2e-6), name


def test_the_informed_example_is_not_flagged_and_a_conflict_is(tmp_path):
    demo = run_audit([DEMO])
    informed = next(a for a in demo.analyses if a.name == "harvest-informed")
    assert not [f for f in informed.findings if f.stage == "sensitivity"
                and f.rule_id != "sensitivity.weak-contraction"]
    assert informed.sensitivity["rows"]
    bad = run_audit([CASES / "prior-data-conflict" / "cases" / "bad"])
    (hit,) = [f for f in bad.all_findings if f.rule_id == "sensitivity.prior-data-conflict"]
    assert hit.evidence["prior_sensitivity"] >= 0.05
    assert hit.evidence["likelihood_sensitivity"] >= 0.05
    assert hit.evidence["log_prior_source"] == "program"


def test_statements_left_out_of_the_log_prior_are_named(tmp_path):
    case = CASES / "prior-data-conflict" / "cases" / "bad"
    shutil.copytree(case, tmp_path / "p")
    program = (tmp_path / "p" / "case.stan").read_text()
    # A second parameter whose prior has an argument no evaluator can read (a function
    # call): its statement is left out and named.
    program = program.replace("parameters {\n  real mu;", "parameters {\n  real mu;\n"
                              "  real<lower=0> s;")
    program = program.replace("  mu ~ normal(-3, 0.3);", "  mu ~ normal(-3, 0.3);\n"
                              "  s ~ exponential(inv_logit(mu));")
    (tmp_path / "p" / "case.stan").write_text(program)
    # Draws of s (any positive values: the statement is not evaluated).
    for path in sorted((tmp_path / "p").glob("fit-*.csv")):
        lines = path.read_text().splitlines()
        out = []
        for ln in lines:
            if ln.startswith("lp__"):
                ln += ",s"
            elif ln and not ln.startswith("#"):
                ln += ",0.5"
            out.append(ln)
        path.write_text("\n".join(out) + "\n")
    a = _one(run_audit([tmp_path / "p"]))
    (left,) = a.sensitivity["left_out"]
    assert left["variable"] == "s" and left["line"] == 12 and left["reason"]
    (hit,) = [f for f in a.findings if f.rule_id == "sensitivity.prior-data-conflict"]
    assert "left out" in hit.message and "line 12" in hit.message
    cov = {c["stage"]: c for c in a.coverage}
    assert cov["sensitivity"]["status"] == "partly checked"


def test_contraction_matches_the_conjugate_formula_and_shows_in_the_table():
    a = _one(run_audit([CASES / "weak-contraction" / "cases" / "bad"]))
    rows = {r["quantity"]: r for r in a.diagnostics}
    # mu: prior normal(0, 5), 20 readings with sd 1 -> 1 - (1 / (1/25 + 20)) / 25.
    exact = 1 - (1 / (1 / 25 + 20)) / 25
    assert rows["mu"]["contraction"] == pytest.approx(exact, abs=0.005)
    # nu is not in the likelihood: its posterior is its prior (contraction near 0; the
    # Monte Carlo error of a variance ratio from 200 draws each is about 0.14).
    assert abs(rows["nu"]["contraction"]) < 0.35
    (hit,) = [f for f in a.findings if f.rule_id == "sensitivity.weak-contraction"]
    assert hit.quantity == "nu"


def test_sbc_rule_and_figure_through_the_audit(tmp_path):
    from auditor.reporters import write_reports

    good = run_audit([REPO / "rules" / "calibration" / "sbc" / "cases" / "good"])
    assert not [f for f in good.all_findings if f.rule_id == "calibration.sbc"]
    cov = {c["stage"]: c["status"] for c in _one(good).coverage}
    assert cov["calibration"] == "checked"
    bad = run_audit([REPO / "rules" / "calibration" / "sbc" / "cases" / "bad"])
    (hit,) = [f for f in bad.all_findings if f.rule_id == "calibration.sbc"]
    assert hit.quantity == "mu" and hit.location.path == "sbc-ranks.csv"
    assert [g for g in _one(bad).figures if g.rule_id == "calibration.sbc"]
    write_reports(bad, ["json"], tmp_path)
    data = json.loads((tmp_path / "audit.json").read_text())
    assert data["analyses"][0]["findings"]


def test_without_log_prior_the_coverage_says_what_to_add(tmp_path):
    tree = xr.open_datatree(DEMO / "fits" / "harvest_informed.nc", engine="h5netcdf").load()
    del tree["log_prior"]
    tree.to_netcdf(tmp_path / "exported.nc", engine="h5netcdf")
    a = _one(run_audit([tmp_path / "exported.nc"]))
    cov = {c["stage"]: c for c in a.coverage}
    assert cov["sensitivity"]["status"] == "not checked"
    assert "lprior" in cov["sensitivity"]["note"] and a.sensitivity == {}
