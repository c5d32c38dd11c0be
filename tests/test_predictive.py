"""Prior and posterior predictive checks: pairing, coverage, and calibration of the rules.

Sources of the checked numbers:
- calibration: a statistic of data drawn from the same predictive distribution as
  the replications is exchangeable with them, so its posterior predictive p-value
  is uniform and a two-sided check at p_low/p_high fires with probability
  p_low + (1 - p_high) (Gelman, Meng & Stern 1996, Statistica Sinica 6:733-807,
  on p-values of replicated data); simultaneous ECDF bands at level 1 - alpha
  contain the ECDF of uniform values with probability 1 - alpha (their defining
  property, Säilynoja, Bürkner & Vehtari 2022, Statistics and Computing 32:32);
- Monte Carlo tolerances: binomial standard errors, 4 of them (common practice).
"""

from __future__ import annotations

import json
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from auditor.engine import run_audit
from auditor.predictive_checks import (
    check_statistics,
    loo_pit,
    outcome_kind,
    pit_band_test,
    psis_log_weights,
)
from tests.tools.cmdstan_writer import write_run

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "examples" / "demo"


def _thresholds(rule: str) -> dict:
    stage, name = rule.split(".")
    with (REPO / "rules" / stage / name / "rule.toml").open("rb") as fh:
        return tomllib.load(fh)["thresholds"]


def _hits(result, rule: str, analysis: str | None = None) -> list:
    return [f for a in result.analyses for f in a.findings
            if f.rule_id == rule and (analysis is None or a.name == analysis)]


# --------------------------------------------------------------------------- pairing

COUNTS_PROGRAM = """data {
  int<lower=0> N;
  vector[N] strength;
  array[N] int<lower=0> y;
}
parameters {
  real alpha;
  real beta;
}
model {
  alpha ~ normal(2, 1);
  beta ~ normal(0, 0.5);
  y ~ poisson_log(alpha + beta * strength);
}
generated quantities {
  vector[N] log_lik;
  array[N] int y_sim;
  array[N] real wrong_family;
  array[N + 1] int wrong_shape;
  for (n in 1:N) {
    real eta = alpha + beta * strength[n];
    log_lik[n] = poisson_log_lpmf(y[n] | eta);
    y_sim[n] = poisson_log_rng(eta);
    wrong_family[n] = normal_rng(eta, 1);
  }
  for (n in 1:(N + 1)) wrong_shape[n] = poisson_log_rng(alpha);
}
"""


def _counts_project(tmp_path: Path, toml: str | None = None) -> Path:
    """A Stan run whose replicated draws are named y_sim (no usual name to go by)."""
    rng = np.random.default_rng(5)
    n, shape = 12, (4, 100)
    strength = rng.normal(size=n)
    y = rng.poisson(np.exp(1.5 + 0.3 * strength))
    alpha = rng.normal(1.5, 0.1, shape)
    beta = rng.normal(0.3, 0.1, shape)
    eta = alpha[..., None] + beta[..., None] * strength
    params = {"alpha": alpha, "beta": beta,
              "log_lik": y * eta - np.exp(eta), "y_sim": rng.poisson(np.exp(eta)),
              "wrong_family": rng.normal(eta, 1.0),
              "wrong_shape": rng.poisson(2.0, (*shape, n + 1))}
    stats = {"lp": rng.normal(size=shape), "treedepth": np.full(shape, 3),
             "divergent": np.zeros(shape), "energy": rng.normal(size=shape)}
    root = tmp_path / "counts"
    write_run(root / "fits", "counts", "counts_model", params, stats)
    (root / "counts.stan").write_text(COUNTS_PROGRAM)
    (root / "counts.json").write_text(json.dumps(
        {"N": n, "strength": strength.tolist(), "y": y.tolist()}))
    (root / "bayes-auditor.toml").write_text(toml or (
        '[[analysis]]\nname = "counts"\nmodel = "counts.stan"\ndraws = ["fits/counts-*.csv"]\n'
        'data = "counts.json"\n'))
    return root


def test_stan_program_pairs_the_rng_of_the_likelihood_family_with_the_same_shape(tmp_path):
    result = run_audit([_counts_project(tmp_path)])
    (a,) = result.analyses
    (p,) = a.pairings
    # y ~ poisson_log(...): y_sim = poisson_log_rng(eta), not normal_rng (other family)
    # nor the poisson_log_rng of another shape; log_lik = poisson_log_lpmf(y[n] | eta).
    assert p["observed"] == "y"
    assert p["posterior_predictive"] == {"variable": "y_sim", "how": "program"}
    assert p["log_likelihood"] == {"variable": "log_lik", "how": "program"}
    assert p["prior_predictive"] is None
    assert not _hits(result, "posterior-predictive.missing")
    assert _hits(result, "prior-predictive.missing")


def test_configured_names_win_and_a_misnamed_one_is_a_clear_finding(tmp_path):
    toml = ('[[analysis]]\nname = "counts"\nmodel = "counts.stan"\ndraws = ["fits/counts-*.csv"]\n'
            'data = "counts.json"\npredictive = "wrong_family"\n')
    result = run_audit([_counts_project(tmp_path, toml)])
    assert result.analyses[0].pairings[0]["posterior_predictive"]["how"] == "configured"
    (root := tmp_path / "counts2").mkdir()
    shutil.copytree(tmp_path / "counts", root, dirs_exist_ok=True)
    (root / "bayes-auditor.toml").write_text(toml.replace("wrong_family", "y_replicated"))
    result = run_audit([root])
    (p,) = result.analyses[0].pairings
    # The program's own y_sim is still found, and the misnamed setting is said.
    assert p["posterior_predictive"] == {"variable": "y_sim", "how": "program"}
    assert "y_replicated" in p["notes"][0]
    (root / "counts.stan").write_text(COUNTS_PROGRAM.replace("poisson_log_rng(eta)",
                                                             "poisson_rng(exp(eta))"))
    result = run_audit([root])
    (hit,) = _hits(result, "posterior-predictive.missing")
    assert "y_replicated" in hit.message and hit.location.line == 13


def test_pymc_groups_pair_by_the_observed_name(tmp_path):
    root = tmp_path / "pymc"
    root.mkdir()
    for name in ("harvest_vague.nc",):
        shutil.copy(DEMO / "fits" / name, root / name)
    result = run_audit([root])
    (a,) = result.analyses
    (p,) = a.pairings
    assert p["observed"] == "y"
    for kind in ("posterior_predictive", "prior_predictive", "log_likelihood"):
        assert p[kind] == {"variable": "y", "how": "group"}, kind


# --------------------------------------------------------------------------- coverage


def _coverage(a) -> dict[str, tuple[str, str]]:
    return {c["stage"]: (c["status"], c["note"]) for c in a.coverage}


def test_coverage_of_a_netcdf_without_sampler_statistics(tmp_path):
    tree = xr.open_datatree(DEMO / "fits" / "harvest_informed.nc", engine="h5netcdf").load()
    del tree["sample_stats"]
    tree.to_netcdf(tmp_path / "exported.nc", engine="h5netcdf")
    (a,) = run_audit([tmp_path / "exported.nc"]).analyses
    cov = _coverage(a)
    status, note = cov["sampling"]
    assert status == "partly checked" and "divergences, E-BFMI and tree depth" in note
    assert cov["program"][0] == "not checked" and "no model program" in cov["program"][1]
    # The observed_data group names y, so the predictive checks still run.
    assert cov["posterior-predictive"][0] == "checked"


def test_coverage_of_a_program_alone(tmp_path):
    shutil.copy(DEMO / "models" / "counts_poisson.stan", tmp_path / "counts_poisson.stan")
    (a,) = run_audit([tmp_path]).analyses
    cov = _coverage(a)
    assert cov["program"] == ("checked", "") and cov["priors"] == ("checked", "")
    assert cov["sampling"] == ("not checked", "no posterior draws")
    assert cov["prior-predictive"] == ("not checked", "no prior predictive draws")


def test_coverage_of_draws_alone(tmp_path):
    for p in (DEMO / "fits").glob("counts_negbin-*.csv"):
        shutil.copy(p, tmp_path / p.name)
    (a,) = run_audit([tmp_path]).analyses
    cov = _coverage(a)
    assert cov["sampling"] == ("checked", "")
    for stage in ("program", "priors", "prior-predictive", "posterior-predictive"):
        assert cov[stage][0] == "not checked", stage
    assert "observed variable is unknown" in cov["posterior-predictive"][1]


@pytest.fixture(scope="module")
def demo():
    return run_audit([DEMO])


def test_coverage_of_the_demo(demo):
    for a in demo.analyses:
        cov = _coverage(a)
        # Every demo analysis has its program, prior and posterior predictive draws.
        for stage in ("program", "priors", "prior-predictive", "sampling",
                      "posterior-predictive"):
            assert cov[stage] == ("checked", ""), (a.name, stage, cov[stage])


# --------------------------------------------------------------------------- the example


def test_example_project_flags_the_misfits_and_only_them(demo):
    # examples/README.md: mites-poisson misfits overdispersed counts; harvest-vague's
    # priors put most prior predictive mass outside [0.5, 40].
    stats = {f.evidence["statistic"] for f in _hits(demo, "posterior-predictive.test-statistic",
                                                   "mites-poisson")}
    assert {"dispersion", "share_zeros"} <= stats
    (vague,) = _hits(demo, "prior-predictive.implausible", "harvest-vague")
    assert vague.evidence["share_inside"] < 0.5
    for name in ("mites-negbin", "harvest-informed"):
        for rule in ("posterior-predictive.test-statistic", "posterior-predictive.loo-pit",
                     "prior-predictive.implausible"):
            assert not _hits(demo, rule, name), (name, rule)


# --------------------------------------------------------------------------- calibration


def test_test_statistics_fire_at_their_nominal_rate_when_the_model_is_right():
    # y_obs is one more draw from the same posterior predictive distribution as the
    # replications: exchangeable with them, so each p-value is uniform.
    t = _thresholds("posterior-predictive.test-statistic")
    nominal = t["p_low"] + (1 - t["p_high"])
    rng = np.random.default_rng(7)
    reps, draws, n = 1500, 400, 25
    fired: dict[str, int] = {}
    for _ in range(reps):
        lam = rng.gamma(40.0, 1 / 8.0, draws + 1)  # a posterior for a count rate near 5
        rep = rng.poisson(lam[:, None], (draws + 1, n)).astype(float)
        y, rest = rep[0], rep[1:]
        for c in check_statistics(y, rest, outcome_kind(y, "poisson")):
            fired[c.name] = fired.get(c.name, 0) + (c.p_value < t["p_low"] or
                                                      c.p_value > t["p_high"])
    se = np.sqrt(nominal * (1 - nominal) / reps)
    for name, k in fired.items():
        # Ties of discrete statistics (min, max, share of zeros) make mid-p values
        # slightly conservative, never liberal.
        assert k / reps <= nominal + 4 * se, (name, k / reps)
        assert k / reps >= nominal - 4 * se - 0.01, (name, k / reps)


def test_test_statistics_fire_on_overdispersed_counts_under_a_poisson_fit():
    rng = np.random.default_rng(8)
    t = _thresholds("posterior-predictive.test-statistic")
    hits = 0
    for _ in range(100):
        y = rng.negative_binomial(1.2, 1.2 / (1.2 + 8.0), 30).astype(float)
        lam = rng.gamma(y.sum() + 1, 1 / y.size, 400)  # the Poisson fit's posterior
        rep = rng.poisson(lam[:, None], (400, y.size)).astype(float)
        checks = {c.name: c.p_value for c in check_statistics(y, rep, "count")}
        hits += checks["dispersion"] < t["p_low"]
    assert hits >= 95


def _normal_loo(rng: np.random.Generator, y: np.ndarray, sd: float, draws: int):
    """Exact posterior of mu (prior normal(0, 5), known sd) with log_lik and y_rep."""
    var = 1 / (1 / 25 + y.size / sd**2)
    mu = rng.normal(var * y.sum() / sd**2, np.sqrt(var), draws)
    log_lik = -0.5 * np.log(2 * np.pi * sd**2) - 0.5 * ((y[None, :] - mu[:, None]) / sd) ** 2
    rep = rng.normal(mu[:, None], sd, (draws, y.size))
    return log_lik, rep


def _pit_outside(y, log_lik, rep, discrete, rng, alpha) -> bool:
    log_w, _ = psis_log_weights(log_lik, 4)
    pit = loo_pit(y, rep, log_w, discrete, rng)
    return pit_band_test(pit, alpha, n_simulations=500).outside > 0


def test_loo_pit_bands_hold_at_their_level_when_the_model_is_right():
    # Data drawn from the model itself (mu from its prior): each LOO-PIT value is
    # uniform, so the band contains their ECDF in about 1 - alpha of repetitions.
    alpha = _thresholds("posterior-predictive.loo-pit")["alpha"]
    rng = np.random.default_rng(9)
    reps, fired = 300, 0
    for _ in range(reps):
        y = rng.normal(rng.normal(0, 5), 1.0, 30)
        log_lik, rep = _normal_loo(rng, y, 1.0, 800)
        fired += _pit_outside(y, log_lik, rep, False, rng, alpha)
    se = np.sqrt(alpha * (1 - alpha) / reps)
    assert fired / reps <= alpha + 4 * se


def test_randomized_loo_pit_of_counts_holds_its_level_and_fires_on_overdispersion():
    alpha = _thresholds("posterior-predictive.loo-pit")["alpha"]
    rng = np.random.default_rng(10)

    def poisson_fit(y):
        lam = rng.gamma(2 + y.sum(), 1 / (0.5 + y.size), 800)  # Gamma(2, 0.5) prior
        log_lik = y[None, :] * np.log(lam[:, None]) - lam[:, None] - np.array(
            [np.sum(np.log(np.arange(1, int(v) + 1))) for v in y])[None, :]
        return log_lik, rng.poisson(lam[:, None], (800, y.size)).astype(float)

    reps = 200
    right = sum(_pit_outside(y, *poisson_fit(y), True, rng, alpha) for y in (
        rng.poisson(rng.gamma(2, 2), 40).astype(float) for _ in range(reps)))
    assert right / reps <= alpha + 4 * np.sqrt(alpha * (1 - alpha) / reps)
    wrong = sum(_pit_outside(y, *poisson_fit(y), True, rng, alpha) for y in (
        rng.negative_binomial(1.0, 1.0 / 9.0, 40).astype(float) for _ in range(50)))
    assert wrong >= 45
