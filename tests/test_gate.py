"""Policies, accepted findings, baselines, --since, the Python API, CI files and the
rule catalogue (issue 14).

The numbers checked here are the project's own settings (the policies' thresholds
stated in auditor/gate/policies/*.toml with their sources); the example project
(examples/demo, see examples/README.md) provides real findings to accept and compare.
"""

from __future__ import annotations

import datetime as dt
import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
import yaml

import auditor
from auditor.cli import main
from auditor.config import ConfigError
from auditor.engine import run_audit
from auditor.registry import all_rules

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "examples" / "demo"
GOOD_RUN = REPO / "rules" / "sampling" / "divergences" / "cases" / "bad"  # 9 divergences


def _project(tmp_path: Path, toml: str = "") -> Path:
    root = tmp_path / "proj"
    root.mkdir(exist_ok=True)
    for src in GOOD_RUN.glob("fit-*.csv"):
        shutil.copy(src, root / src.name)
    if toml:
        (root / "bayes-auditor.toml").write_text(toml)
    return root


def _rules(result) -> list[str]:
    return sorted(f.rule_id for f in result.all_findings if f.accepted is None)


# --------------------------------------------------------------------------- policies


def test_submission_policy_on_the_example_project_is_stricter():
    every = run_audit([DEMO])
    strict = run_audit([DEMO], overrides={"policy": "submission"})
    assert every.policy["name"] == "everyday" and strict.policy["name"] == "submission"
    assert every.policy["sha256"] != strict.policy["sha256"]
    # Required stages: no demo analysis has simulation-based calibration ranks.
    stage = [f for f in strict.all_findings if f.rule_id == "inputs.stage-not-checked"]
    assert {f.quantity for f in stage} == {"calibration"} and len(stage) == len(strict.analyses)
    assert strict.counts()["error"] > every.counts()["error"]
    # ESS of yards-centered's tau is below 400: an error under the policy (Vehtari et al.
    # 2021), a warning by default.
    ess = [f for f in strict.all_findings if f.rule_id == "sampling.ess-bulk"]
    assert ess and all(f.severity.value == "error" for f in ess)


def test_a_lab_policy_extends_a_built_in_one(tmp_path):
    root = _project(tmp_path)
    (root / "policies").mkdir()
    (root / "policies" / "lab.toml").write_text(
        'name = "lab"\nextends = "submission"\nrequire_stages = ["sampling"]\n'
        '[rules."sampling.divergences"]\nmax_divergent = 20\n')
    (root / "bayes-auditor.toml").write_text('policy = "policies/lab.toml"\n')
    result = run_audit([root])
    assert result.policy["name"] == "lab" and len(result.policy["files"]) == 3
    assert [f["file"] for f in result.policy["files"]][:2] == ["built-in:everyday",
                                                               "built-in:submission"]
    assert "sampling.divergences" not in _rules(result)  # 9 <= 20 (the lab's setting)
    # Inherited from submission: 2 chains fail min_chains = 4 as an error.
    (hit,) = [f for f in result.all_findings if f.rule_id == "sampling.chain-count"] or [None]
    assert hit is None or hit.severity.value == "error"
    # The project's own [rules] still win over the policy.
    (root / "bayes-auditor.toml").write_text(
        'policy = "policies/lab.toml"\n[rules."sampling.divergences"]\nmax_divergent = 0\n')
    assert "sampling.divergences" in _rules(run_audit([root]))


def test_policy_errors_are_clear(tmp_path):
    root = _project(tmp_path, 'policy = "nonesuch"\n')
    with pytest.raises(ConfigError, match="not a built-in policy"):
        run_audit([root])
    (root / "a.toml").write_text('name = "a"\nextends = "b.toml"\n')
    (root / "b.toml").write_text('name = "b"\nextends = "a.toml"\n')
    (root / "bayes-auditor.toml").write_text('policy = "a.toml"\n')
    with pytest.raises(ConfigError, match="cycle"):
        run_audit([root])
    (root / "bayes-auditor.toml").write_text('policy = "/etc/passwd"\n')
    with pytest.raises(ConfigError):  # outside the project: refused by the boundary
        run_audit([root])


def test_rules_command_shows_a_policy(capsys):
    assert main(["rules", "--policy", "submission"]) == 0
    out = capsys.readouterr().out
    assert "policy submission" in out and "* sampling.ess-bulk  error" in out
    assert "min_total=400" in out


# --------------------------------------------------------------------------- acceptance


def _accept(root: Path, text: str) -> None:
    (root / "bayes-auditor-accepted.toml").write_text(text)


def test_an_accepted_finding_is_shown_and_ignored_by_the_gate(tmp_path):
    root = _project(tmp_path)
    assert run_audit([root]).exit_status == 1  # the divergences are an error
    _accept(root, '[[accept]]\nrule = "sampling.divergences"\nanalysis = "fit"\n'
                  'reason = "nine divergences in the tails, checked in the pair plot"\n'
                  'by = "the lab reviewer"\nexpires = 2099-01-01\n')
    result = run_audit([root])
    (div,) = [f for f in result.all_findings if f.rule_id == "sampling.divergences"]
    assert div.accepted == {"reason": "nine divergences in the tails, checked in the pair plot",
                            "by": "the lab reviewer", "expires": "2099-01-01"}
    assert result.accepted_count == 1 and result.exit_status == 0
    assert result.accepted_file == "bayes-auditor-accepted.toml"
    data = json.loads(json.dumps(__import__("auditor.reporters.json_report",
                                            fromlist=["to_dict"]).to_dict(result)))
    assert data["summary"]["accepted"] == 1


def test_expired_unmatched_and_incomplete_acceptances(tmp_path):
    root = _project(tmp_path)
    _accept(root, '[[accept]]\nrule = "sampling.divergences"\nanalysis = "fit"\n'
                  'reason = "was fine last year"\nby = "someone"\nexpires = 2020-01-01\n'
                  '[[accept]]\nrule = "sampling.rhat"\nanalysis = "nonesuch"\n'
                  'reason = "a typo"\nby = "someone"\n'
                  '[[accept]]\nrule = "sampling.chain-count"\nanalysis = "fit"\n'
                  'reason = ""\nby = ""\n')
    result = run_audit([root], today=dt.date(2026, 12, 2))
    problems = sorted((f.location.line, f.severity.value, f.message)
                      for f in result.all_findings if f.rule_id == "inputs.acceptance")
    assert [(line, sev) for line, sev, _ in problems] == [(1, "warning"), (7, "warning"),
                                                          (12, "note")]
    assert "expired on 2020-01-01" in problems[0][2] and "matches no finding" in problems[1][2]
    assert "no reason" in problems[2][2]
    # None of them accepts anything: the divergences still fail the gate.
    assert result.accepted_count == 0 and result.exit_status == 1


def test_the_accept_command_writes_a_starting_file_the_gate_refuses(tmp_path, capsys):
    root = _project(tmp_path)
    target = root / "bayes-auditor-accepted.toml"
    assert main(["accept", str(root), "--write", str(target)]) == 0
    text = target.read_text()
    assert 'rule = "sampling.divergences"' in text and 'reason = ""' in text
    result = run_audit([root])
    assert result.accepted_count == 0 and result.exit_status == 1
    assert main(["accept", str(root), "--write", str(target)]) == 2  # never overwritten
    assert "not overwritten" in capsys.readouterr().err


# --------------------------------------------------------------------------- baseline


def test_baseline_marks_new_unchanged_and_gone(tmp_path):
    root = _project(tmp_path)
    out = tmp_path / "first"
    assert main(["audit", str(root), "--out", str(out), "--quiet"]) == 1
    first = json.loads((out / "audit.json").read_text())
    # Change the project: no divergence any more, and a new problem (a third chain that
    # is a copy of the first).
    for p in root.glob("fit-*.csv"):
        p.write_text(p.read_text().replace(",1,", ",0,"))  # divergent__ 1 -> 0 (see below)
    shutil.copy(root / "fit-1.csv", root / "fit-3.csv")
    result = run_audit([root], baseline=out / "audit.json")
    states = {(f.rule_id, f.baseline) for f in result.all_findings}
    assert ("inputs.inconsistent-chains", "new") in states
    gone = {g["rule"] for g in result.baseline["gone_findings"]}
    before = {f["rule"] for a in first["analyses"] for f in a["findings"]}
    assert gone <= before and result.baseline["new"] >= 1
    assert result.baseline["unchanged"] + result.baseline["new"] == len(result.all_findings)


def test_gating_on_new_findings_only(tmp_path):
    root = _project(tmp_path)
    out = tmp_path / "first"
    main(["audit", str(root), "--out", str(out), "--quiet"])
    same = run_audit([root], baseline=out / "audit.json", gate_new_only=True)
    assert same.baseline["new"] == 0 and same.exit_status == 0  # nothing new
    assert run_audit([root], baseline=out / "audit.json").exit_status == 1
    (out / "broken.json").write_text("[1, 2")
    with pytest.raises(ConfigError, match="not JSON"):
        run_audit([root], baseline=out / "broken.json")


# --------------------------------------------------------------------------- --since


def _git(root: Path, *args: str) -> None:
    subprocess.run(["git", "-C", str(root), *args], check=True, capture_output=True,
                   env={"GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid",
                        "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.invalid",
                        "PATH": "/usr/bin:/bin"})


@pytest.mark.skipif(shutil.which("git") is None, reason="git is not installed")
def test_since_audits_only_analyses_whose_inputs_changed(tmp_path):
    root = tmp_path / "repo"
    (root / "a").mkdir(parents=True)
    (root / "b").mkdir()
    for folder in ("a", "b"):
        for src in GOOD_RUN.glob("fit-*.csv"):
            shutil.copy(src, root / folder / src.name.replace("fit", folder))
    _git(root, "init", "-q")
    _git(root, "add", ".")
    _git(root, "commit", "-q", "-m", "first")
    # A hostile repository configuration must not run: a clean filter and a diff driver.
    (root / ".gitattributes").write_text("*.csv filter=evil diff=evil\n")
    _git(root, "config", "filter.evil.clean", f"touch {tmp_path}/pwned-clean; cat")
    _git(root, "config", "diff.evil.command", f"touch {tmp_path}/pwned-diff")
    with pytest.raises(Exception, match="no analysis has inputs that changed"):
        run_audit([root], since="HEAD")
    p = root / "b" / "b-2.csv"
    p.write_text(p.read_text() + "\n")
    result = run_audit([root], since="HEAD")
    assert [a.name for a in result.analyses] == ["b"]
    assert not (tmp_path / "pwned-clean").exists() and not (tmp_path / "pwned-diff").exists()
    with pytest.raises(ConfigError, match="--since nonesuch"):
        run_audit([root], since="nonesuch")


# --------------------------------------------------------------------------- Python API


def test_api_on_files_and_its_dataframe():
    result = auditor.audit(DEMO)
    assert result.exit_status == 1 and result.findings == result.all_findings
    frame = result.to_dataframe("findings")
    assert len(frame) == len(result.findings) and {"rule", "severity"} <= set(frame.columns)
    assert len(result.to_dataframe("coverage")) == 8 * len(result.analyses)
    assert set(result.to_dataframe("diagnostics")["analysis"]) == {
        a.name for a in result.analyses if a.diagnostics}


def test_api_on_an_in_memory_datatree_with_its_model_source():
    tree = xr.open_datatree(DEMO / "fits" / "harvest_vague.nc", engine="h5netcdf").load()
    result = auditor.audit(tree, model=DEMO / "models" / "harvest_vague.py", name="harvest",
                           observed="y")
    (a,) = result.analyses
    assert a.name == "harvest" and a.program.endswith("harvest_vague.py")
    # Program, priors, predictive and sampling checks all ran on the draws in memory.
    cov = {c["stage"]: c["status"] for c in a.coverage}
    for stage in ("program", "priors", "prior-predictive", "sampling",
                  "posterior-predictive"):
        assert cov[stage] == "checked", stage
    assert a.pairings[0]["posterior_predictive"] == {"variable": "y", "how": "group"}
    assert result.inputs == [i for i in result.inputs if i.path.endswith("harvest_vague.py")]


def test_the_notebook_summary_is_inert_html():
    tree = xr.DataTree.from_dict({"posterior": xr.Dataset(
        {"<b onmouseover=alert(1)>x": (("chain", "draw"),
                                       np.random.default_rng(0).normal(size=(4, 100)))})})
    html = auditor.audit(tree, name="<img src=x onerror=alert(1)>")._repr_html_()
    assert "<script" not in html and "<img" not in html and "&lt;img" in html
    assert "statistician" in html  # the caution is part of the summary


# --------------------------------------------------------------------------- CI, progress


def test_the_workflow_file_is_valid_and_calls_real_commands():
    doc = yaml.safe_load((REPO / "examples" / "ci" / "github-actions-audit.yml").read_text())
    steps = doc["jobs"]["audit"]["steps"]
    runs = " ".join(s.get("run", "") for s in steps)
    uses = [s["uses"] for s in steps if "uses" in s]
    assert "github/codeql-action/upload-sarif@v3" in uses
    assert "$GITHUB_STEP_SUMMARY" in runs
    # Every bayes-auditor option the workflow uses exists.
    audit_line = next(s["run"] for s in steps if "bayes-auditor audit" in s.get("run", ""))
    options = {w for w in audit_line.split() if w.startswith("--")}
    help_text = subprocess.run([sys.executable, "-m", "auditor", "audit", "--help"],
                               capture_output=True, text=True, check=True).stdout
    assert options and all(o in help_text for o in options), options


def test_the_pre_commit_hook_calls_real_options():
    (hook,) = yaml.safe_load((REPO / ".pre-commit-hooks.yaml").read_text())
    help_text = subprocess.run([sys.executable, "-m", "auditor", "audit", "--help"],
                               capture_output=True, text=True, check=True).stdout
    options = {w for w in hook["entry"].split() if w.startswith("--")}
    assert hook["entry"].startswith("bayes-auditor audit")
    assert all(o in help_text for o in options), options


def test_quiet_prints_only_the_closing_line_and_pipes_get_no_progress(tmp_path):
    root = _project(tmp_path)
    proc = subprocess.run([sys.executable, "-m", "auditor", "audit", str(root), "--quiet",
                           "--out", str(tmp_path / "r")], capture_output=True, text=True,
                          env={"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"})
    assert proc.returncode == 1
    assert proc.stdout.count("\n") == 1 and "exit 1" in proc.stdout
    assert proc.stderr == ""  # no progress bar on a pipe
    loud = subprocess.run([sys.executable, "-m", "auditor", "audit", str(root),
                           "--out", str(tmp_path / "r2")], capture_output=True, text=True,
                          env={"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"})
    assert loud.stderr == "" and "sampling.divergences" in loud.stdout


def test_the_rule_catalogue_is_in_sync():
    from auditor.catalogue import rule_catalogue

    expected = rule_catalogue(all_rules())
    assert (REPO / "docs" / "rules.md").read_text() == expected, (
        "docs/rules.md is stale: run `bayes-auditor rules --markdown > docs/rules.md`")
