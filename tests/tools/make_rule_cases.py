"""Regenerate the good/bad cases of the sampling and input rules (``rules/*/*/cases``).

Run ``python -m tests.tools.make_rule_cases`` from the repository root. Every case
is made from a fixed seed, so rerunning gives the same files. The pathologies are
built with known mechanisms (stated beside each case); real-sampler behaviour is
tested separately against files written by CmdStan and PyMC (tests/test_sampling_real.py).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np

from tests.tools.cmdstan_writer import write_run

RULES = Path(__file__).resolve().parents[2] / "rules"
ROOT = RULES / "sampling"
CHAINS, DRAWS = 4, 200


def _healthy_stats(rng: np.random.Generator, chains: int = CHAINS, draws: int = DRAWS) -> dict:
    # Energy drawn independently each iteration: E-BFMI near 2 for white noise.
    return {
        "lp": rng.normal(-10, 1, (chains, draws)),
        "accept_stat": rng.uniform(0.7, 1.0, (chains, draws)),
        "stepsize": np.full((chains, draws), 0.5),
        "treedepth": rng.integers(2, 4, (chains, draws)),
        "n_leapfrog": np.full((chains, draws), 7),
        "divergent": np.zeros((chains, draws)),
        "energy": rng.normal(12, 2, (chains, draws)),
    }


def _ar1(rng: np.random.Generator, phi: float, shape: tuple[int, int]) -> np.ndarray:
    # AR(1) with unit marginal variance: ESS = N (1 - phi) / (1 + phi) per chain.
    x = np.empty(shape)
    x[:, 0] = rng.normal(size=shape[0])
    eps = rng.normal(scale=np.sqrt(1 - phi**2), size=shape)
    for t in range(1, shape[1]):
        x[:, t] = phi * x[:, t - 1] + eps[:, t]
    return x


def _case(rule: str, kind: str, params: dict, stats: dict, expect: str | None = None,
          stage_dir: Path = ROOT, **kw) -> Path:
    folder = stage_dir / rule / "cases" / kind
    if folder.exists():
        shutil.rmtree(folder)
    write_run(folder, "fit", "case_model", params, stats, **kw)
    if expect is not None:
        (folder / "expect.toml").write_text(expect)
    return folder


def _input_cases(rng: np.random.Generator) -> None:
    inputs = RULES / "inputs"
    iid = {"alpha": rng.normal(size=(CHAINS, DRAWS))}
    for rule in ("unreadable", "inconsistent-chains", "config", "unpaired", "model-syntax"):
        _case(rule, "good", iid, _healthy_stats(rng), stage_dir=inputs)
    good_program = "parameters {\n  real alpha;\n}\nmodel {\n  alpha ~ normal(0, 1);\n}\n"
    for rule in ("unpaired", "model-syntax"):
        # case_model is what stanc names the program case.stan.
        (inputs / rule / "cases" / "good" / "case.stan").write_text(good_program)

    # Unreadable: chain 2 loses a field in data row 10 (like a truncated write).
    folder = _case("unreadable", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    path = folder / "fit-2.csv"
    lines = path.read_text().splitlines()
    first = next(i for i, ln in enumerate(lines) if ln and not ln.startswith("#")) + 5
    row = next(i for i in range(first, len(lines)) if not lines[i].startswith("#")) + 9
    lines[row] = lines[row].rsplit(",", 1)[0]
    path.write_text("\n".join(lines) + "\n")
    (folder / "expect.toml").write_text(f'[[hit]]\npath = "fit-2.csv"\nline = {row + 1}\n')

    # Inconsistent chains: chain 3 has 150 draws where the others have 200.
    folder = _case("inconsistent-chains", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    short = {"alpha": rng.normal(size=(1, 150))}
    stats = {k: v[:1, :150] for k, v in _healthy_stats(rng).items()}
    write_run(folder / "tmp", "fit", "case_model", short, stats)
    (folder / "tmp" / "fit-1.csv").replace(folder / "fit-3.csv")
    (folder / "tmp").rmdir()
    (folder / "expect.toml").write_text('[[hit]]\npath = "fit-3.csv"\n')

    # Config: a misspelt key in the manifest.
    folder = _case("config", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "bayes-auditor.toml").write_text('gate = "error"\nmax_figure = 2\n')
    (folder / "expect.toml").write_text('[[hit]]\npath = "bayes-auditor.toml"\n')
    (inputs / "config" / "cases" / "good" / "bayes-auditor.toml").write_text(
        'gate = "error"\nmax_figures = 2\n')

    # Unpaired: a program whose draws are missing (no run says model = lonely_model).
    folder = _case("unpaired", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "case.stan").write_text(good_program)
    (folder / "lonely.stan").write_text(good_program)
    (folder / "expect.toml").write_text('[[hit]]\npath = "lonely.stan"\n')

    # Model syntax: a missing semicolon, reported at the end of the line that lacks it.
    folder = _case("model-syntax", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "case.stan").write_text(
        "parameters {\n  real alpha  // expect: inputs.model-syntax\n}\n"
        "model {\n  alpha ~ normal(0, 1);\n}\n")
    _boundary_cases(rng, iid)
    _gate_cases(rng, iid)


def _gate_cases(rng: np.random.Generator, iid: dict) -> None:
    """Cases of the rules the engine emits for policies and accepted findings (issue 14)."""
    inputs = RULES / "inputs"
    for rule in ("stage-not-checked", "acceptance"):
        _case(rule, "good", iid, _healthy_stats(rng), stage_dir=inputs)
    # A run without its program under the submission policy: the program stage (and
    # others) are required but could not be checked.
    folder = _case("stage-not-checked", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "bayes-auditor.toml").write_text('policy = "submission"\n')
    (folder / "expect.toml").write_text(
        'exact = false\n[[hit]]\nquantity = "program"\npath = "fit-1.csv"\n')
    # An acceptance of a finding this run does not have.
    folder = _case("acceptance", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "bayes-auditor-accepted.toml").write_text(
        '[[accept]]\nrule = "sampling.divergences"\nanalysis = "fit"\n'
        'reason = "a handful of divergences in the tails, checked by hand"\n'
        'by = "the lab\'s reviewer"\n')
    (folder / "expect.toml").write_text(
        '[[hit]]\npath = "bayes-auditor-accepted.toml"\nline = 1\n')


def _boundary_cases(rng: np.random.Generator, iid: dict) -> None:
    """Cases of the rules about what the project boundary refused (issue 8)."""
    inputs = RULES / "inputs"
    for rule in ("outside-project", "special-file", "too-large", "remark"):
        _case(rule, "good", iid, _healthy_stats(rng), stage_dir=inputs)
    declared = '[[analysis]]\nname = "fit"\ndraws = ["fit-*.csv"]\n'
    (inputs / "outside-project" / "cases" / "good" / "bayes-auditor.toml").write_text(
        declared + 'data = "data.json"\n')
    (inputs / "outside-project" / "cases" / "good" / "data.json").write_text('{"N": 3}\n')

    # Outside the project: a data path that climbs out with '..' (never read).
    folder = _case("outside-project", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "bayes-auditor.toml").write_text(declared + 'data = "../../shared/data.json"\n')
    (folder / "expect.toml").write_text('[[hit]]\npath = "bayes-auditor.toml"\nline = 4\n')

    # Special files: a FIFO named like a chain and a link loop. Git can hold
    # neither, so the test makes them in a copy of the case ([[setup]]).
    folder = _case("special-file", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    (folder / "expect.toml").write_text(
        '[[setup]]\nfifo = "fit-5.csv"\n[[setup]]\nlink = "loop"\nto = "."\n'
        '[[hit]]\npath = "fit-5.csv"\n[[hit]]\npath = "loop"\n')

    # Too large: a netCDF file of a few kilobytes that declares a 4 x 1000 x 10^7
    # posterior (320 GB) and writes none of it; the sizes are checked before loading.
    import h5netcdf

    folder = inputs / "too-large" / "cases" / "bad"
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    with h5netcdf.File(folder / "huge.nc", "w") as nc:
        group = nc.create_group("posterior")
        group.dimensions = {"chain": 4, "draw": 1000, "theta_dim_0": 10_000_000}
        group.create_variable("theta", ("chain", "draw", "theta_dim_0"), dtype="f8",
                              chunks=(1, 1, 100_000))
    (folder / "expect.toml").write_text('[[hit]]\npath = "huge.nc"\n')

    # Remark: chain 1 starts with a byte-order mark (read without it, said once).
    folder = _case("remark", "bad", iid, _healthy_stats(rng), stage_dir=inputs)
    path = folder / "fit-1.csv"
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    (folder / "expect.toml").write_text('[[hit]]\npath = "fit-1.csv"\nline = 1\n')


def main() -> None:
    """Write every case."""
    rng = np.random.default_rng(20261202)
    iid = {"alpha": rng.normal(size=(CHAINS, DRAWS)), "beta": rng.normal(size=(CHAINS, DRAWS, 3))}
    for rule in ("rhat", "ess-bulk", "ess-tail", "divergences", "ebfmi", "tree-depth",
                 "chain-count", "constant"):
        _case(rule, "good", iid, _healthy_stats(rng))

    # R-hat: chain 4 of beta[2] sits one sd away from the others (a stuck chain).
    shifted = {k: v.copy() for k, v in iid.items()}
    shifted["beta"][3, :, 1] += 1.0
    _case("rhat", "bad", shifted, _healthy_stats(rng),
          '[[hit]]\nquantity = "beta[2]"\n')

    # ESS: AR(1) with phi = 0.97 gives about 200 * 0.03 / 1.97 = 3 per chain.
    sticky = {"alpha": _ar1(rng, 0.97, (CHAINS, DRAWS)), "beta": iid["beta"]}
    _case("ess-bulk", "bad", sticky, _healthy_stats(rng), '[[hit]]\nquantity = "alpha"\n')
    _case("ess-tail", "bad", sticky, _healthy_stats(rng), '[[hit]]\nquantity = "alpha"\n')

    # Divergences: 9 transitions flagged divergent in chain 2.
    stats = _healthy_stats(rng)
    stats["divergent"][1, 50:59] = 1
    _case("divergences", "bad", iid, stats, "[[hit]]\n")

    # E-BFMI: energy as a slow random walk in chain 3 (tiny changes between iterations).
    stats = _healthy_stats(rng)
    stats["energy"][2] = 12 + np.cumsum(rng.normal(0, 0.2, DRAWS))
    _case("ebfmi", "bad", iid, stats, "[[hit]]\n")

    # Tree depth: a quarter of the transitions at max_depth = 6.
    stats = _healthy_stats(rng)
    stats["treedepth"][:, ::4] = 6
    _case("tree-depth", "bad", iid, stats, "[[hit]]\n", max_depth=6)

    # Chain count: two chains only.
    two = {k: v[:2] for k, v in iid.items()}
    _case("chain-count", "bad", two, _healthy_stats(rng, chains=2), "[[hit]]\n")

    # Constant: an indicator passed through generated quantities.
    const = dict(iid, flag=np.ones((CHAINS, DRAWS)))
    _case("constant", "bad", const, _healthy_stats(rng), '[[hit]]\nquantity = "flag"\n')
    _input_cases(rng)
    _predictive_cases(np.random.default_rng(20261203))
    _comparison_cases(np.random.default_rng(20261204))
    _sensitivity_cases(np.random.default_rng(20261205))
    _nonfinite_cases(np.random.default_rng(20261206))


def _nonfinite_cases(rng: np.random.Generator) -> None:
    """inputs.nonfinite-draws (issue 13): NaN and infinite draws, reported per quantity."""
    inputs = RULES / "inputs"
    iid = {"alpha": rng.normal(size=(CHAINS, DRAWS)), "beta": rng.normal(size=(CHAINS, DRAWS, 3))}
    _case("nonfinite-draws", "good", iid, _healthy_stats(rng), stage_dir=inputs)
    # beta[2] overflows in 3 draws of chain 2 (written 'inf', '-inf', 'nan' as CmdStan
    # writes them) and alpha is NaN once in chain 4.
    bad = {k: v.copy() for k, v in iid.items()}
    bad["beta"][1, [10, 50, 90], 1] = [np.inf, -np.inf, np.nan]
    bad["alpha"][3, 7] = np.nan
    _case("nonfinite-draws", "bad", bad, _healthy_stats(rng),
          '[[hit]]\nquantity = "beta[2]"\n[[hit]]\nquantity = "alpha"\n', stage_dir=inputs)


# --------------------------------------------------------------------------- predictive

NORMAL_PROGRAM = """// Stream temperature readings at one gauge (invented scenario).
data {
  int<lower=0> N;
  vector[N] y;
}
parameters {
  real mu;
}
model {
  mu ~ normal(0, 5);
  y ~ normal(mu, 1);  // MARK
}
generated quantities {
  vector[N] log_lik;
  array[N] real y_rep;
  for (n in 1:N) {
    log_lik[n] = normal_lpdf(y[n] | mu, 1);
    y_rep[n] = normal_rng(mu, 1);
  }
}
"""
COUNT_PROGRAM = """// Nest boxes occupied per transect (invented scenario).
data {
  int<lower=0> N;
  array[N] int<lower=0> y;
}
parameters {
  real alpha;
}
model {
  alpha ~ normal(1, 1);
  y ~ poisson_log(alpha);  // MARK
}
generated quantities {
  vector[N] log_lik;
  array[N] int y_rep;
  for (n in 1:N) {
    log_lik[n] = poisson_log_lpmf(y[n] | alpha);
    y_rep[n] = poisson_log_rng(alpha);
  }
}
"""
PRED_CHAINS, PRED_DRAWS, PRED_N = 2, 100, 20


def _stats(rng: np.random.Generator) -> dict:
    return _healthy_stats(rng, PRED_CHAINS, PRED_DRAWS)


def _normal_fit(rng: np.random.Generator, y: np.ndarray, sd: float = 1.0) -> dict:
    """Exact posterior draws of mu (prior normal(0, 5), known sd 1) with log_lik and y_rep.

    ``sd`` is the spread the replications are drawn with: 1 is the model's own
    (well calibrated when the data have sd 1)."""
    n = y.size
    var = 1 / (1 / 25 + n)
    mu = rng.normal(var * y.sum(), np.sqrt(var), (PRED_CHAINS, PRED_DRAWS))
    log_lik = -0.5 * np.log(2 * np.pi) - 0.5 * (y[None, None, :] - mu[..., None]) ** 2
    y_rep = rng.normal(mu[..., None], sd, (*mu.shape, n))
    return {"mu": mu, "log_lik": log_lik, "y_rep": y_rep}


def _project(rule: str, kind: str, program: str, data: dict, posterior: dict,
             prior: dict | None, rng: np.random.Generator, extra_toml: str = "",
             mark: bool = False) -> Path:
    folder = RULES / rule.split(".")[0] / rule.split(".")[1] / "cases" / kind
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    text = program.replace("// MARK", f"// expect: {rule}" if mark else "")
    text = text.replace("  // expect", "  // expect").replace(";  \n", ";\n")
    (folder / "case.stan").write_text(text)
    (folder / "data.json").write_text(
        "{" + ", ".join(f'"{k}": {v}' for k, v in data.items()) + "}\n")
    write_run(folder, "fit", "case_model", posterior, _stats(rng))
    toml = ('[[analysis]]\nname = "fit"\nmodel = "case.stan"\ndraws = ["fit-*.csv"]\n'
            'data = "data.json"\n')
    if prior is not None:
        write_run(folder, "prior", "case_model", prior, _stats(rng))
        toml += 'prior_draws = ["prior-*.csv"]\n'
    (folder / "bayes-auditor.toml").write_text(toml + extra_toml)
    return folder


def _listed(y: np.ndarray, integer: bool = False) -> str:
    return "[" + ", ".join(str(int(v)) if integer else f"{v:.4f}" for v in y) + "]"


def _predictive_cases(rng: np.random.Generator) -> None:
    """Cases of the prior and posterior predictive rules: a normal model of readings
    and a Poisson model of counts, with draws made exactly from known posteriors."""
    shape = (PRED_CHAINS, PRED_DRAWS)
    y = rng.normal(0.3, 1.0, PRED_N)
    data = {"N": PRED_N, "y": _listed(y)}
    fit = _normal_fit(rng, y)
    # A proper prior run: mu from its prior normal(0, 5), y_rep from the likelihood.
    mu0 = rng.normal(0, 5, shape)
    prior_ok = {"mu": mu0, "y_rep": rng.normal(mu0[..., None], 1.0, (*shape, PRED_N))}

    # prior-predictive.missing: the same analysis with and without its prior run.
    _project("prior-predictive.missing", "good", NORMAL_PROGRAM, data, fit, prior_ok, rng)
    _project("prior-predictive.missing", "bad", NORMAL_PROGRAM, data, fit, None, rng, mark=True)

    # prior-predictive.implausible: readings are known to lie in [-4, 4]; a prior
    # normal(0, 50) on mu puts most prior predictive draws outside.
    wide = rng.normal(0, 50, shape)
    prior_wide = {"mu": wide, "y_rep": rng.normal(wide[..., None], 1.0, (*shape, PRED_N))}
    rng_toml = "plausible_range = [-4.0, 4.0]\n"
    narrow = rng.normal(0, 1, shape)
    prior_narrow = {"mu": narrow,
                    "y_rep": rng.normal(narrow[..., None], 1.0, (*shape, PRED_N))}
    _project("prior-predictive.implausible", "good", NORMAL_PROGRAM, data, fit, prior_narrow,
             rng, rng_toml)
    _project("prior-predictive.implausible", "bad", NORMAL_PROGRAM, data, fit, prior_wide,
             rng, rng_toml, mark=True)

    # prior-predictive.runaway: a prior-only run of a parameter without a proper
    # prior: a random walk with steps growing geometrically, as a flat-prior run drifts.
    steps = rng.normal(0, 1, shape) * np.logspace(0, 14, PRED_DRAWS)[None, :]
    drift = np.cumsum(steps, axis=1)
    prior_drift = {"mu": drift, "y_rep": rng.normal(drift[..., None], 1.0, (*shape, PRED_N))}
    _project("prior-predictive.runaway", "good", NORMAL_PROGRAM, data, fit, prior_ok, rng)
    folder = _project("prior-predictive.runaway", "bad", NORMAL_PROGRAM, data, fit,
                      prior_drift, rng)
    (folder / "expect.toml").write_text('[[hit]]\nquantity = "mu"\n')

    # posterior-predictive.missing: the fit without its y_rep column.
    _project("posterior-predictive.missing", "good", NORMAL_PROGRAM, data, fit, None, rng)
    no_rep = {k: v for k, v in fit.items() if k != "y_rep"}
    _project("posterior-predictive.missing", "bad",
             NORMAL_PROGRAM.replace("y_rep[n] = normal_rng(mu, 1);", "").replace(
                 "array[N] real y_rep;", ""), data, no_rep, None, rng, mark=True)

    # posterior-predictive.test-statistic: counts from a negative binomial (shape 1.5,
    # mean 6: variance 30) fitted by a Poisson; the good case's counts are Poisson.
    def count_fit(counts: np.ndarray) -> dict:
        # Exact posterior of log rate under a flat-ish prior: Gamma(sum + 1, n) for the rate.
        lam = rng.gamma(counts.sum() + 1, 1 / counts.size, shape)
        alpha = np.log(lam)
        log_lik = counts[None, None, :] * alpha[..., None] - lam[..., None] - np.array(
            [np.sum(np.log(np.arange(1, int(c) + 1))) for c in counts])[None, None, :]
        return {"alpha": alpha, "log_lik": log_lik,
                "y_rep": rng.poisson(lam[..., None], (*shape, counts.size))}

    poisson_counts = rng.poisson(6.0, PRED_N)
    nb_counts = rng.negative_binomial(1.5, 1.5 / (1.5 + 6.0), PRED_N)
    _project("posterior-predictive.test-statistic", "good", COUNT_PROGRAM,
             {"N": PRED_N, "y": _listed(poisson_counts, True)}, count_fit(poisson_counts),
             None, rng)
    folder = _project("posterior-predictive.test-statistic", "bad", COUNT_PROGRAM,
                      {"N": PRED_N, "y": _listed(nb_counts, True)}, count_fit(nb_counts),
                      None, rng)
    (folder / "expect.toml").write_text(
        'exact = false\n[[hit]]\nquantity = "y"\npath = "case.stan"\nline = 11\n')

    # posterior-predictive.loo-pit: readings with sd 3 under a model that assumes sd 1:
    # predictive distributions far too narrow. The good case's readings have sd 1.
    spread = rng.normal(0.3, 3.0, PRED_N)
    _project("posterior-predictive.loo-pit", "good", NORMAL_PROGRAM, data, fit, None, rng)
    _project("posterior-predictive.loo-pit", "bad", NORMAL_PROGRAM,
             {"N": PRED_N, "y": _listed(spread)}, _normal_fit(rng, spread), None, rng,
             mark=True)



# --------------------------------------------------------------------------- comparison


def _models_project(rule: str, kind: str, data: dict, fits: dict[str, dict],
                    rng: np.random.Generator, chosen: str | None = None,
                    program: str = NORMAL_PROGRAM) -> Path:
    """A project of several analyses of one data file (one run per analysis)."""
    stage, name = rule.split(".")
    folder = RULES / stage / name / "cases" / kind
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    (folder / "case.stan").write_text(program.replace("  // MARK", ""))
    (folder / "data.json").write_text(
        "{" + ", ".join(f'"{k}": {v}' for k, v in data.items()) + "}\n")
    toml = ""
    for model, posterior in fits.items():
        write_run(folder, model, "case_model", posterior, _stats(rng))
        toml += (f'[[analysis]]\nname = "{model}"\nmodel = "case.stan"\n'
                 f'draws = ["{model}-*.csv"]\ndata = "data.json"\n'
                 + ("chosen = true\n" if model == chosen else ""))
    (folder / "bayes-auditor.toml").write_text(toml)
    return folder


def _comparison_cases(rng: np.random.Generator) -> None:
    """Cases of the PSIS-LOO and comparison rules: exact posterior draws of the
    normal model of readings (tests/tools above), fitted to data of known shape."""
    y = rng.normal(0.3, 1.0, PRED_N)
    data = {"N": PRED_N, "y": _listed(y)}
    fit = _normal_fit(rng, y)

    # comparison.loo-missing: the fit without its log_lik column (and program line).
    _project("comparison.loo-missing", "good", NORMAL_PROGRAM, data, fit, None, rng)
    no_ll = {k: v for k, v in fit.items() if k != "log_lik"}
    _project("comparison.loo-missing", "bad",
             NORMAL_PROGRAM.replace("log_lik[n] = normal_lpdf(y[n] | mu, 1);", "").replace(
                 "vector[N] log_lik;", ""), data, no_ll, None, rng, mark=True)

    # comparison.pareto-k and comparison.p-loo: two gross outliers among 20 readings
    # under a normal likelihood with sd 1; leaving either out moves the posterior far,
    # so its importance weights have a heavy tail (high k), and the in-sample fit
    # gains far more than one parameter's worth (p_loo > 1 = p).
    wild = y.copy()
    wild[[3, 11]] = [9.0, -8.0]
    wild_data = {"N": PRED_N, "y": _listed(wild)}
    for rule in ("comparison.pareto-k", "comparison.p-loo"):
        _project(rule, "good", NORMAL_PROGRAM, data, fit, None, rng)
        _project(rule, "bad", NORMAL_PROGRAM, wild_data, _normal_fit(rng, wild), None, rng,
                 mark=True)

    # Comparison sets. "twin" is a second fit of the same model: LOO cannot tell the
    # two apart. "wide" assumes sd 0.3 for readings of sd 1: clearly worse.
    twin = _normal_fit(rng, y)
    wide = _normal_fit_sd(rng, y, 0.3)
    note = '[[hit]]\nseverity = "note"\n'
    _models_project("comparison.difference-small", "good", data,
                    {"fit": fit, "wide": wide}, rng)
    folder = _models_project("comparison.difference-small", "bad", data,
                             {"fit": fit, "twin": twin}, rng)
    (folder / "expect.toml").write_text(note)
    _models_project("comparison.chosen-worse", "good", data, {"fit": fit, "wide": wide}, rng,
                    chosen="fit")
    folder = _models_project("comparison.chosen-worse", "bad", data,
                             {"fit": fit, "wide": wide}, rng, chosen="wide")
    (folder / "expect.toml").write_text('[[hit]]\npath = "wide-1.csv"\n')
    _models_project("comparison.not-chosen", "good", data, {"fit": fit, "wide": wide}, rng,
                    chosen="fit")
    folder = _models_project("comparison.not-chosen", "bad", data, {"fit": fit, "wide": wide},
                             rng)
    (folder / "expect.toml").write_text('[[hit]]\npath = "bayes-auditor.toml"\n')

    # comparison.unscored: the second model of the same data saved no log_lik.
    _models_project("comparison.unscored", "good", data, {"fit": fit, "wide": wide}, rng,
                    chosen="fit")
    folder = _models_project("comparison.unscored", "bad", data,
                             {"fit": fit, "bare": {k: v for k, v in wide.items()
                                                   if k != "log_lik"}}, rng, chosen="fit")
    (folder / "expect.toml").write_text('[[hit]]\npath = "bare-1.csv"\n')


def _normal_fit_sd(rng: np.random.Generator, y: np.ndarray, sd: float) -> dict:
    """Exact posterior draws of mu under a normal likelihood with known ``sd``."""
    n = y.size
    var = 1 / (1 / 25 + n / sd**2)
    mu = rng.normal(var * y.sum() / sd**2, np.sqrt(var), (PRED_CHAINS, PRED_DRAWS))
    log_lik = (-0.5 * np.log(2 * np.pi * sd**2)
               - 0.5 * ((y[None, None, :] - mu[..., None]) / sd) ** 2)
    y_rep = rng.normal(mu[..., None], sd, (*mu.shape, n))
    return {"mu": mu, "log_lik": log_lik, "y_rep": y_rep}



# --------------------------------------------------------------------------- sensitivity


def _conjugate(rng: np.random.Generator, y: np.ndarray, m0: float, s0: float) -> dict:
    """Exact posterior draws of mu (prior normal(m0, s0), known sd 1), with log_lik and y_rep."""
    var = 1 / (1 / s0**2 + y.size)
    mu = rng.normal(var * (m0 / s0**2 + y.sum()), np.sqrt(var), (PRED_CHAINS, PRED_DRAWS))
    log_lik = -0.5 * np.log(2 * np.pi) - 0.5 * (y[None, None, :] - mu[..., None]) ** 2
    return {"mu": mu, "log_lik": log_lik,
            "y_rep": rng.normal(mu[..., None], 1.0, (*mu.shape, y.size))}


def _sensitivity_cases(rng: np.random.Generator) -> None:
    """Cases of the sensitivity and calibration rules, from exact conjugate draws."""
    y = rng.normal(3.0, 1.0, PRED_N)
    data = {"N": PRED_N, "y": _listed(y)}
    weak = NORMAL_PROGRAM.replace("normal(0, 5)", "normal(0, 10)")

    # Prior-data conflict: a prior normal(-3, 0.3) against readings around 3.
    conflict = NORMAL_PROGRAM.replace("normal(0, 5)", "normal(-3, 0.3)")
    _project("sensitivity.prior-data-conflict", "good", weak, data, _conjugate(rng, y, 0, 10),
             None, rng)
    folder = _project("sensitivity.prior-data-conflict", "bad", conflict, data,
                      _conjugate(rng, y, -3, 0.3), None, rng)
    (folder / "expect.toml").write_text('[[hit]]\nquantity = "mu"\n')

    # A prior that dominates: normal(0, 0.05) with two readings near it.
    few = rng.normal(0.0, 1.0, 2)
    few_data = {"N": 2, "y": _listed(few)}
    strong = NORMAL_PROGRAM.replace("normal(0, 5)", "normal(0, 0.05)")
    _project("sensitivity.prior-dominated", "good", weak, data, _conjugate(rng, y, 0, 10),
             None, rng)
    folder = _project("sensitivity.prior-dominated", "bad", strong, few_data,
                      _conjugate(rng, few, 0, 0.05), None, rng)
    (folder / "expect.toml").write_text('[[hit]]\nquantity = "mu"\n')

    # Weak contraction: a second parameter the likelihood does not mention, so its
    # posterior is its prior normal(0, 1); mu is informed by 20 readings.
    spare = NORMAL_PROGRAM.replace("parameters {\n  real mu;",
                                   "parameters {\n  real mu;\n  real nu;").replace(
        "  mu ~ normal(0, 5);", "  mu ~ normal(0, 5);\n  nu ~ normal(0, 1);")
    shape = (PRED_CHAINS, PRED_DRAWS)
    post = _conjugate(rng, y, 0, 5)
    prior = {"mu": rng.normal(0, 5, shape), "nu": rng.normal(0, 1, shape)}
    prior["y_rep"] = rng.normal(prior["mu"][..., None], 1.0, (*shape, PRED_N))
    _project("sensitivity.weak-contraction", "good", NORMAL_PROGRAM, data, post,
             {k: v for k, v in prior.items() if k != "nu"}, rng)
    folder = _project("sensitivity.weak-contraction", "bad", spare, data,
                      {**post, "nu": rng.normal(0, 1, shape)}, prior, rng)
    (folder / "expect.toml").write_text('[[hit]]\nquantity = "nu"\n')

    # Calibration: ranks of the true mu among 99 exact posterior draws over 400
    # simulations; the bad case's posterior sd is halved (too narrow).
    def ranks(sd_factor: float) -> list[int]:
        out = []
        for _ in range(400):
            mu = rng.normal(0, 1)
            yy = rng.normal(mu, 1.0, 10)
            var = 1 / (1 + yy.size)
            draws = rng.normal(var * yy.sum(), sd_factor * np.sqrt(var), 99)
            out.append(int(np.sum(draws < mu)))
        return out

    for kind, factor in (("good", 1.0), ("bad", 0.5)):
        folder = _project("calibration.sbc", kind, NORMAL_PROGRAM, data, fit_for_sbc(rng, y),
                          None, rng)
        (folder / "sbc-ranks.csv").write_text(
            "mu,n_draws\n" + "".join(f"{r},99\n" for r in ranks(factor)))
        with (folder / "bayes-auditor.toml").open("a") as fh:
            fh.write('sbc_ranks = "sbc-ranks.csv"\n')
        if kind == "bad":
            (folder / "expect.toml").write_text('[[hit]]\nquantity = "mu"\n'
                                                'path = "sbc-ranks.csv"\n')


def fit_for_sbc(rng: np.random.Generator, y: np.ndarray) -> dict:
    """The analysis the calibration belongs to (its draws are not what SBC tests)."""
    return _conjugate(rng, y, 0, 5)


if __name__ == "__main__":
    main()
