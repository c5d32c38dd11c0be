"""Engine behaviour that no single rule case shows."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from auditor import engine
from auditor.engine import run_audit
from auditor.registry import all_rules
from auditor.reporters.json_report import write

REPO = Path(__file__).resolve().parent.parent
CASE = REPO / "rules" / "sampling" / "divergences" / "cases" / "bad"


def test_a_rule_that_raises_becomes_a_finding_and_the_audit_goes_on(monkeypatch, tmp_path):
    rules = all_rules()
    target = next(r for r in rules if r.id == "sampling.rhat")

    def broken(ctx):
        raise ValueError("odd shape")

    patched = [r if r is not target else type(r)(**{**r.__dict__, "check": broken}) for r in rules]
    monkeypatch.setattr(engine, "all_rules", lambda: patched)
    result = run_audit([CASE])
    failed = [f for f in result.all_findings if f.rule_id == "inputs.rule-failed"]
    assert len(failed) == 1
    assert "sampling.rhat" in failed[0].message and "odd shape" in failed[0].message
    # Other rules still ran: the case's divergences are reported.
    assert any(f.rule_id == "sampling.divergences" for f in result.all_findings)


def test_json_report_is_byte_identical_and_has_no_absolute_paths(tmp_path):
    project = tmp_path / "proj"
    shutil.copytree(CASE, project)
    a, b = tmp_path / "a", tmp_path / "b"
    a.mkdir()
    b.mkdir()
    write(run_audit([project]), a)
    write(run_audit([project]), b)
    text = (a / "audit.json").read_text()
    assert text == (b / "audit.json").read_text()
    assert str(tmp_path) not in text
    data = json.loads(text)
    assert data["format_version"] == 2 and "statistician" in data["caution"]
    (analysis,) = data["analyses"]
    assert analysis["sources"] == [f"fit-{i}.csv" for i in range(1, 5)]
    assert {"rhat", "ess_bulk", "ess_tail", "mcse_mean"} <= set(analysis["diagnostics"][0])
    finding = analysis["findings"][0]
    assert {"rule", "severity", "stage", "message", "evidence", "fix", "location"} <= set(finding)
    assert data["inputs"][0]["sha256"] and data["gate"]["exit_status"] == 1


def test_audit_never_writes_into_the_project_except_its_report(tmp_path):
    from auditor.cli import main

    project = tmp_path / "proj"
    shutil.copytree(CASE, project)
    before = {p: p.read_bytes() for p in project.rglob("*") if p.is_file()}
    assert main(["audit", str(project)]) == 1
    after = {p for p in project.rglob("*") if p.is_file()}
    assert {p for p in after if p not in before} == {project / "audit-report" / "audit.json"}
    assert all(p.read_bytes() == data for p, data in before.items())


def test_a_failing_diagnostics_table_is_reported_once(monkeypatch):
    from auditor.diagnostics import DiagnosticsTable

    def broken(self):
        raise FloatingPointError("no variance")

    monkeypatch.setattr(DiagnosticsTable, "_compute", broken)
    result = run_audit([CASE])
    failed = [f for f in result.all_findings if f.rule_id == "inputs.rule-failed"]
    assert len(failed) == 1 and "diagnostics table" in failed[0].message
    assert result.analyses[0].diagnostics == []
    # Rules that do not need the table still ran.
    assert any(f.rule_id == "sampling.divergences" for f in result.all_findings)


def test_groups_and_prior_statements_are_recorded():
    case = REPO / "rules" / "model" / "centered-hierarchy" / "cases" / "bad"
    result = run_audit([case])
    analysis = next(a for a in result.analyses if a.name == "case")
    assert {"posterior", "sample_stats"} <= set(analysis.groups)
    # Each prior statement as written in the program, with its file and line.
    lines = (case / "model.stan").read_text().splitlines()
    for text in analysis.priors:
        statement, place = text.rsplit(" (", 1)
        path, line = place.rstrip(")").rsplit(":", 1)
        assert path == "model.stan"
        assert statement.split("~")[0].strip() in lines[int(line) - 1]
    assert any("theta ~ normal(mu, tau)" in p for p in analysis.priors)


def test_a_link_in_place_of_a_report_file_is_not_followed(tmp_path, capsys):
    from auditor.cli import main

    project = tmp_path / "proj"
    shutil.copytree(CASE, project)
    victim = tmp_path / "precious.txt"
    victim.write_text("keep me")
    (project / "audit-report").mkdir()
    (project / "audit-report" / "audit.json").symlink_to(victim)
    assert main(["audit", str(project)]) == 2
    assert victim.read_text() == "keep me"
    assert "not overwritten" in capsys.readouterr().err


def test_findings_in_an_included_file_get_its_excerpt(tmp_path):
    (tmp_path / "model.stan").write_text(
        "data {\n  int<lower=1> N;\n  vector[N] y;\n}\n"
        "parameters {\n  real mu;\n  real<lower=0> sigma;\n}\n"
        "model {\n#include priors.stan\n  y ~ normal(mu, sigma);\n}\n"
    )
    (tmp_path / "priors.stan").write_text("// shared priors\n  mu ~ normal(0, 1000);\n"
                                          "  sigma ~ normal(0, 1);\n")
    (tmp_path / "data.json").write_text('{"N": 4, "y": [0.1, -0.3, 0.2, 0.4]}')
    (tmp_path / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "inc"\nmodel = "model.stan"\ndata = "data.json"\nobserved = "y"\n')
    result = run_audit([tmp_path], only_rules={"priors.vague"})
    (analysis,) = result.analyses
    (hit,) = analysis.findings
    assert (hit.location.path, hit.location.line) == ("priors.stan", 2)
    excerpt = dict(analysis.excerpts["priors.stan:2"])
    assert excerpt[2] == "  mu ~ normal(0, 1000);"
