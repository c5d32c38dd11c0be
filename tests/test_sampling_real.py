"""Sampling rules on files written by real samplers, and the command line's exit codes.

- ``centered_eight.nc`` / ``non_centered_eight.nc`` ship with arviz-base (written by
  PyMC 5.20). The centered eight schools model is the HMC literature's standard
  funnel: divergences are expected; the non-centered form has about none
  (../shared/methods.md, "Check values for tests"; Betancourt & Girolami 2015).
- ``corr_gauss_depth8-1.csv`` (../shared/reference-data, CmdStan 2.14) was run with
  max_depth = 8 and its tree depth reaches 8 (README of the reference data).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from auditor.cli import main
from auditor.engine import run_audit
from tests.conftest import require_shared


def _example(name: str) -> Path:
    from arviz_base.datasets import LOCAL_DATASETS

    return Path(LOCAL_DATASETS[name].filename)


def _rules_hit(result) -> set[str]:
    return {f.rule_id for f in result.all_findings}


def test_centered_eight_trips_divergences_and_gate(tmp_path):
    result = run_audit([_example("centered_eight")])
    hits = [f for f in result.all_findings if f.rule_id == "sampling.divergences"]
    assert len(hits) == 1
    assert hits[0].evidence["divergent"] > 0
    assert result.exit_status == 1
    # The same through the command line: exit status 1, the JSON report written.
    assert main(["audit", str(_example("centered_eight")), "--out", str(tmp_path)]) == 1
    assert (tmp_path / "audit.json").is_file()


def test_non_centered_eight_has_no_divergence_finding():
    result = run_audit([_example("non_centered_eight")])
    assert "sampling.divergences" not in _rules_hit(result)
    (analysis,) = result.analyses
    assert (analysis.n_chains, analysis.n_draws) == (4, 500)


def test_pymc_running_divergence_count_is_not_counted():
    # PyMC stores a running count `divergences` beside `diverging`; only `diverging`
    # marks a divergent transition (its sum must equal our count).
    import arviz_base as azb

    tree = azb.load_arviz_data("centered_eight")
    expected = int(tree["sample_stats"]["diverging"].values.sum())
    result = run_audit([_example("centered_eight")])
    (hit,) = [f for f in result.all_findings if f.rule_id == "sampling.divergences"]
    assert hit.evidence["divergent"] == expected


def test_tree_depth_saturation_in_real_cmdstan_run():
    csv = require_shared() / "cmdstan-outputs" / "cmdstanpy-misc" / "corr_gauss_depth8-1.csv"
    result = run_audit([csv])
    (hit,) = [f for f in result.all_findings if f.rule_id == "sampling.tree-depth"]
    assert hit.evidence["max_depth"] == 8
    # Count straight from the file's treedepth__ column (4th column).
    rows = [ln for ln in csv.read_text().splitlines() if ln and not ln.startswith("#")][1:]
    saturated = sum(1 for ln in rows if int(float(ln.split(",")[3])) >= 8)
    assert hit.evidence["saturated"] == saturated > 0
    # A single chain also trips the chain count rule (Vehtari et al. 2021: >= 4 chains).
    assert "sampling.chain-count" in _rules_hit(result)


def test_exit_codes(tmp_path, capsys):
    shared = require_shared() / "cmdstan-outputs"
    good = shared / "cmdstanpy-runset-good"
    # 0: nothing reaches the gate (non-centered eight schools: no divergences, R-hat fine).
    assert main(["audit", str(_example("non_centered_eight")), "--out", str(tmp_path / "a")]) == 0
    # 1: a note does not reach the gate 'warning' but a warning does: the short (100-draw)
    # Bernoulli run has bulk-ESS below 400, which is a warning.
    result = run_audit([good], overrides={"gate": "warning"})
    assert "sampling.ess-bulk" in _rules_hit(result)
    assert main(["audit", str(good), "--gate", "warning", "--out", str(tmp_path / "b")]) == 1
    # 2: nothing to audit, or bad usage, or an unreadable config.
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["audit", str(empty)]) == 2
    assert main(["audit", str(tmp_path / "missing")]) == 2
    bad_cfg = tmp_path / "bad.toml"
    bad_cfg.write_text("gate = [unclosed\n")
    assert main(["audit", str(good), "--config", str(bad_cfg), "--out", str(tmp_path / "c")]) == 2
    err = capsys.readouterr().err
    assert "bad.toml" in err and "Traceback" not in err
    with pytest.raises(SystemExit) as exc:
        main(["audit", "--gate", "sometimes"])
    assert exc.value.code == 2


def test_gate_never_always_exits_zero(tmp_path):
    assert main(["audit", str(_example("centered_eight")), "--gate", "never",
                 "--out", str(tmp_path)]) == 0
