"""Discovery: runs grouped, programs paired with their fits, unpaired halves reported."""

from __future__ import annotations

import shutil
from pathlib import Path

from auditor.engine import run_audit
from tests.conftest import require_shared

PROGRAM = """data {
  int<lower=0> J;
  array[J] real y;
  array[J] real<lower=0> sigma;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] theta_tilde;
}
transformed parameters {
  vector[J] theta = mu + tau * theta_tilde;
}
model {
  mu ~ normal(0, 5);
  tau ~ cauchy(0, 5);
  theta_tilde ~ normal(0, 1);
  y ~ normal(theta, sigma);
}
generated quantities {
  vector[J] log_lik;
  vector[J] y_hat;
  for (j in 1:J) {
    log_lik[j] = normal_lpdf(y[j] | theta[j], sigma[j]);
    y_hat[j] = normal_rng(theta[j], sigma[j]);
  }
}
"""


def _eight_schools(tmp_path: Path) -> Path:
    src = require_shared() / "cmdstan-outputs" / "arviz-eight-schools-nc"
    project = tmp_path / "proj"
    shutil.copytree(src, project / "fits")
    (project / "models").mkdir()
    return project


def test_stan_program_pairs_by_compiler_model_name(tmp_path):
    # The CSV header says model = eight_schools_nc_model: stanc names the model
    # <file stem>_model, so eight_schools_nc.stan is its program.
    project = _eight_schools(tmp_path)
    (project / "models" / "eight_schools_nc.stan").write_text(PROGRAM)
    (project / "models" / "unrelated.stan").write_text(PROGRAM)
    result = run_audit([project])
    by_name = {a.name: a for a in result.analyses}
    fit = by_name["eight_schools_output"]
    assert fit.program == "models/eight_schools_nc.stan"
    assert fit.n_chains == 4 and fit.sources[0] == "fits/eight_schools_output1.csv"
    # The unrelated program has no draws: reported as a warning at that file.
    lonely = [f for f in result.all_findings
              if f.rule_id == "inputs.unpaired" and f.location.path == "models/unrelated.stan"]
    assert len(lonely) == 1 and lonely[0].severity.value == "warning"
    # No program-vs-draws mismatch for the right program.
    assert not [f for f in fit.findings if f.rule_id == "inputs.stale-fit"]


def test_draws_without_program_are_a_note(tmp_path):
    project = _eight_schools(tmp_path)
    result = run_audit([project])
    (hit,) = [f for f in result.all_findings if f.rule_id == "inputs.unpaired"]
    assert hit.severity.value == "note" and "eight_schools_nc_model" in hit.message


def test_manifest_model_overrides_discovery(tmp_path):
    project = _eight_schools(tmp_path)
    (project / "models" / "renamed.stan").write_text(PROGRAM)
    (project / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "schools"\ndraws = ["fits/eight_schools_output*.csv"]\n'
        'model = "models/renamed.stan"\ndata = "fits/eight_schools.data.R"\nobserved = "y"\n'
    )
    result = run_audit([project])
    (analysis,) = result.analyses
    assert analysis.name == "schools" and analysis.program == "models/renamed.stan"
    # log_lik and y_hat columns are generated quantities the program declares.
    assert not [f for f in analysis.findings if f.rule_id == "inputs.stale-fit"]


def test_runs_in_one_folder_are_separate_analyses(tmp_path):
    shared = require_shared() / "cmdstan-outputs"
    project = tmp_path / "two"
    project.mkdir()
    for p in (shared / "cmdstanpy-runset-good").glob("*.csv"):
        shutil.copy(p, project / p.name)
    for p in (shared / "cmdstanpy-misc").glob("logistic_output_*.csv"):
        shutil.copy(p, project / p.name)
    result = run_audit([project])
    shapes = sorted((a.name, a.n_chains) for a in result.analyses)
    assert shapes == [("bern", 4), ("logistic_output", 4)]


def test_pymc_source_pairs_with_netcdf_of_same_stem(tmp_path):
    from arviz_base.datasets import LOCAL_DATASETS

    project = tmp_path / "pymc"
    project.mkdir()
    shutil.copy(LOCAL_DATASETS["centered_eight"].filename, project / "schools.nc")
    (project / "schools.py").write_text(
        "import pymc as pm\n"
        "with pm.Model() as model:\n"
        "    mu = pm.Normal('mu', mu=0, sigma=5)\n"
        "    tau = pm.HalfCauchy('tau', beta=5)\n"
        "    theta = pm.Normal('theta', mu=mu, sigma=tau, shape=8)\n"
        "    obs = pm.Normal('obs', mu=theta, sigma=10, observed=[28, 8, -3, 7, -1, 1, 18, 12])\n"
    )
    result = run_audit([project])
    (analysis,) = result.analyses
    assert analysis.program == "schools.py"
    assert not [f for f in analysis.findings if f.rule_id == "inputs.unpaired"]


def test_pymc_model_without_draws_is_reported_but_helper_scripts_are_not(tmp_path):
    project = tmp_path / "pymc-only"
    project.mkdir()
    (project / "model.py").write_text(
        "import pymc as pm\nwith pm.Model():\n    mu = pm.Normal('mu', 0, 1)\n"
    )
    (project / "plot_helpers.py").write_text("import numpy as np\n\ndef f(x):\n    return x\n")
    result = run_audit([project])
    assert [a.name for a in result.analyses] == ["model"]
    (hit,) = [f for f in result.all_findings if f.rule_id == "inputs.unpaired"]
    assert hit.location.path == "model.py" and hit.severity.value == "warning"
