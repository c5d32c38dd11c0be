"""Regenerate the real-sampler cases of the sampling rules that explain a cause (issue 12).

Writes ``rules/sampling/{stuck-chain,step-size,thinning,nested-rhat,mcse}/cases/{good,bad}`` and
``rules/sampling/divergences/cases/{good,bad}-pystan``
from pystan (real Stan NUTS through httpstan, laid out as CmdStan CSV by
``examples/cmdstan_csv.py``) and PyMC (DataTree netCDF) fits with fixed seeds. Development
only; it needs the ``generate`` extra, kept out of the project's environment::

    python3.12 -m venv ../gen-venv && ../gen-venv/bin/pip install -e ".[generate]"
    ../gen-venv/bin/python -m tests.tools.make_sampler_cases            # every case
    ../gen-venv/bin/python -m tests.tools.make_sampler_cases thinning   # some rules

Each case is small (a few parameters, 4 chains of a few hundred draws, or 16 chains of 100)
and its scenario is invented. How each pathology arises is stated beside the run; nothing is
edited after sampling. pystan compiles each program once (about a minute; cached by httpstan).
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path
from typing import Any

import numpy as np

REPO = Path(__file__).resolve().parents[2]
RULES = REPO / "rules" / "sampling"
sys.path.insert(0, str(REPO / "examples"))

import cmdstan_csv  # noqa: E402  (the example project's CmdStan CSV layout)

# --- programs (invented scenarios) -----------------------------------------------------------

#: Moss cover change on the roofs of the (invented) town of Skellvik: 6 roofs, 2 plots each;
#: roofs differ far less than plots do, so the roof-level scale is near zero: a funnel.
ROOFS_CENTERED = """\
data {
  int<lower=1> N;
  int<lower=1> J;
  array[N] int<lower=1, upper=J> roof;
  vector[N] y;
  real<lower=0> sigma;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] theta;
}
model {
  mu ~ normal(0, 5);
  tau ~ normal(0, 2);
  theta ~ normal(mu, tau);
  y ~ normal(theta[roof], sigma);
}
"""

ROOFS_NONCENTERED = ROOFS_CENTERED.replace(
    "  vector[J] theta;", "  vector<offset=mu, multiplier=tau>[J] theta;")

#: A buoy's echo gives the square of its offset from a marker, so the sign of the offset is
#: not identified: two modes at +-3 separated by a deep valley at 0.
ECHO = """\
data {
  int<lower=1> N;
  vector[N] y;
}
parameters {
  real gap;
  real<lower=0> noise;
}
model {
  gap ~ normal(0, 10);
  noise ~ exponential(1);
  y ~ normal(square(gap), noise);
}
"""

#: Two gauges' calibration offsets are either locked together (a nearly perfectly correlated
#: component near 0, which a diagonal metric cannot rescale: only a tiny step follows it) or
#: drift apart around (6, -6) (a wide, round component, off the locked ridge).
GAUGE = """\
transformed data {
  matrix[2, 2] locked = [[1, 0.9999], [0.9999, 1]];
}
parameters {
  vector[2] shift;
}
model {
  target += log_mix(0.5, multi_normal_lpdf(shift | rep_vector(0, 2), locked),
                    normal_lpdf(shift | [6, -6]', 1));
}
"""

#: Daily pollen counts (log scale) against temperature at an invented hillside station.
POLLEN = """\
data {
  int<lower=1> N;
  vector[N] temp;
  vector[N] y;
}
parameters {
  real alpha;
  real beta;
  real<lower=0> sigma;
}
model {
  alpha ~ normal(0, 5);
  beta ~ normal(0, 2);
  sigma ~ exponential(1);
  y ~ normal(alpha + beta * temp, sigma);
}
"""


def roof_data() -> dict[str, Any]:
    rng = np.random.default_rng(61001)
    j, per = 6, 2
    theta = 1.0 + 0.2 * rng.normal(size=j)
    roof = np.repeat(np.arange(1, j + 1), per)
    y = np.round(rng.normal(theta[roof - 1], 2.0), 2)
    return {"N": int(j * per), "J": j, "roof": roof.tolist(), "y": y.tolist(), "sigma": 2.0}


def echo_data() -> dict[str, Any]:
    rng = np.random.default_rng(61002)
    return {"N": 8, "y": np.round(9.0 + rng.normal(0, 0.5, 8), 2).tolist()}


def pollen_data() -> dict[str, Any]:
    rng = np.random.default_rng(61003)
    temp = np.round(rng.normal(0, 1, 20), 2)
    y = np.round(2.0 + 0.6 * temp + rng.normal(0, 0.4, 20), 3)
    return {"N": 20, "temp": temp.tolist(), "y": y.tolist()}


# --- writing ---------------------------------------------------------------------------------


def _fresh(folder: Path) -> Path:
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir(parents=True)
    return folder


def stan_run(folder: Path, stem: str, code: str, data: dict[str, Any], *, seed: int,
             chains: int = 4, draws: int = 250, warmup: int = 500, thin: int = 1,
             delta: float = 0.8, init: list[dict[str, Any]] | None = None,
             program: bool = False) -> None:
    """Sample ``code`` with pystan and write its chains as ``<stem>-<c>.csv`` in ``folder``."""
    import stan

    settings = cmdstan_csv.RunSettings(num_samples=draws * thin, num_warmup=warmup, thin=thin,
                                       delta=delta, seed=seed)
    model = stan.build(code, data=data, random_seed=seed)
    kwargs = settings.pystan_kwargs()
    if init is not None:
        kwargs["init"] = init
    fit = model.sample(num_chains=chains, **kwargs)
    columns = list(cmdstan_csv.SAMPLER_COLUMNS) + list(fit.constrained_param_names)
    values = cmdstan_csv.draws_matrix(fit, columns, dict(zip(fit.param_names, fit.dims,
                                                             strict=True)))
    for chain in range(fit.num_chains):
        adaptation, raw_draws, timing = cmdstan_csv.chain_messages(fit.stan_outputs[chain])
        raw = np.array([[d[c] for c in columns] for d in raw_draws], dtype=float)
        np.testing.assert_array_equal(raw, values[:, chain, :])
        name = f"{stem}-{chain + 1}.csv"
        header = cmdstan_csv.header_lines(
            stan_version=(2, 39, 0), model_name=f"{stem}_model", chain_id=chain + 1,
            data_file=f"{stem}.json" if data else "", output_file=name, settings=settings)
        cmdstan_csv.write_chain(folder / name, header=header, columns=columns,
                                values=values[:, chain, :], adaptation=adaptation,
                                timing=timing)
    if program:
        (folder / f"{stem}.stan").write_text(code)
    div = int(values[:, :, columns.index("divergent__")].sum())
    print(f"{folder.relative_to(REPO)}/{stem}: {chains} x {values.shape[0]} draws, "
          f"{div} divergent", flush=True)


def pymc_run(path: Path, *, seed: int, thin: int = 1, draws: int = 250,
             sampler: str = "pymc") -> None:
    """The pollen regression in PyMC (4 chains, NUTS of ``sampler``: "pymc" or "nutpie");
    saved as DataTree netCDF with float32 draws.

    With ``thin`` > 1, every ``thin``-th draw of ``draws * thin`` is kept, in the posterior and
    the sampler statistics alike (``tree.isel(draw=slice(None, None, thin))``), as an analyst
    thinning a run after the fact would.
    """
    import pymc as pm
    import xarray as xr

    data = pollen_data()
    with pm.Model():
        alpha = pm.Normal("alpha", 0, 5)
        beta = pm.Normal("beta", 0, 2)
        sigma = pm.Exponential("sigma", 1)
        pm.Normal("y", alpha + beta * np.array(data["temp"]), sigma, observed=data["y"])
        tree = pm.sample(draws=draws * thin, tune=500, chains=4, cores=2, random_seed=seed,
                         nuts_sampler=sampler, progressbar=False,
                         compute_convergence_checks=False)
    groups = {}
    for name in ("posterior", "sample_stats"):
        ds = tree[name].to_dataset()
        if thin > 1:
            ds = ds.isel(draw=slice(None, None, thin))
        keep = [v for v in ds.data_vars if ds[v].dtype.kind in "fiub"]
        ds = ds[keep]
        for v in keep:
            if ds[v].dtype.kind == "f":
                ds[v] = ds[v].astype("float32")
        groups[f"/{name}"] = ds
    out = xr.DataTree.from_dict(groups)
    out.attrs.update(tree.attrs)
    encoding = {g: {v: {"compression": "gzip", "compression_opts": 9} for v in ds.data_vars}
                for g, ds in groups.items()}
    out.to_netcdf(path, engine="h5netcdf", encoding=encoding)
    print(f"{path.relative_to(REPO)}: PyMC ({sampler}), thin {thin}", flush=True)


def _expect(folder: Path, text: str) -> None:
    (folder / "expect.toml").write_text(text)


# --- the cases -------------------------------------------------------------------------------


def divergences() -> None:
    """Centered roofs (a funnel: divergences at small tau) and the non-centered program."""
    # cases/bad and cases/good of this rule are the synthetic fixtures other tests use
    # (tests/tools/make_rule_cases.py); the real runs live beside them.
    bad = _fresh(RULES / "divergences" / "cases" / "bad-pystan")
    stan_run(bad, "roofs", ROOFS_CENTERED, roof_data(), seed=62001, program=True)
    _expect(bad, '# Divergences in the neck of the funnel, at small tau (real pystan run).\n'
                 '[[hit]]\nquantity = "tau"\n')
    good = _fresh(RULES / "divergences" / "cases" / "good-pystan")
    stan_run(good, "roofs", ROOFS_NONCENTERED, roof_data(), seed=62002, delta=0.9,
             program=True)


def stuck_chain() -> None:
    """Echo offsets: chain 4 starts in the other mode (-2) and never leaves it."""
    bad = _fresh(RULES / "stuck-chain" / "cases" / "bad")
    init = [{"gap": 2.0, "noise": 1.0}] * 3 + [{"gap": -2.0, "noise": 1.0}]
    stan_run(bad, "echo", ECHO, echo_data(), seed=63001, init=init)
    _expect(bad, "# Chain 4 sits in the mirror mode of gap (real pystan run, its own start)."
                 '\n[[hit]]\nquantity = "gap"\n')
    good = _fresh(RULES / "stuck-chain" / "cases" / "good")
    stan_run(good, "pollen", POLLEN, pollen_data(), seed=63002)


def step_size() -> None:
    """Gauge: chain 2 starts and adapts in the locked component (its step size collapses);
    a pollen run with 60 warmup draws."""
    bad = _fresh(RULES / "step-size" / "cases" / "bad")
    init = [{"shift": [6.0, -6.0]}, {"shift": [0.0, 0.0]}, {"shift": [6.0, -6.0]},
            {"shift": [6.0, -6.0]}]
    stan_run(bad, "gauge", GAUGE, {}, seed=64001, init=init)
    stan_run(bad, "short", POLLEN, pollen_data(), seed=64002, warmup=60)
    _expect(bad, "# Chain 2's adapted step size collapsed; the short run warmed up 60 draws.\n"
                 '[[hit]]\npath = "gauge-2.csv"\n[[hit]]\npath = "short-1.csv"\n')
    good = _fresh(RULES / "step-size" / "cases" / "good")
    stan_run(good, "pollen", POLLEN, pollen_data(), seed=64003)


def thinning() -> None:
    """Pollen thinned by 4 in Stan (num_thin) and after the fact in PyMC."""
    bad = _fresh(RULES / "thinning" / "cases" / "bad")
    stan_run(bad, "pollen", POLLEN, pollen_data(), seed=65001, thin=4)
    pymc_run(bad / "pollen_pymc.nc", seed=65002, thin=4)
    _expect(bad, '[[hit]]\npath = "pollen-1.csv"\n[[hit]]\npath = "pollen_pymc.nc"\n')
    good = _fresh(RULES / "thinning" / "cases" / "good")
    stan_run(good, "pollen", POLLEN, pollen_data(), seed=65003)
    pymc_run(good / "pollen_pymc.nc", seed=65004)


def nested_rhat() -> None:
    """16 chains of 100 draws in 4 superchains of 4 chains that share their start."""
    starts = [2.0, 2.0, -2.0, -2.0]  # echo: superchains 3 and 4 start in the mirror mode
    bad = _fresh(RULES / "nested-rhat" / "cases" / "bad")
    init = [{"gap": s, "noise": 1.0} for s in starts for _ in range(4)]
    stan_run(bad, "echo", ECHO, echo_data(), seed=66001, chains=16, draws=100, warmup=150,
             init=init)
    _expect(bad, '# Superchains 3 and 4 never leave the mirror mode.\n'
                 '[[hit]]\nquantity = "gap"\n')
    good = _fresh(RULES / "nested-rhat" / "cases" / "good")
    spread = [{"alpha": a, "beta": b, "sigma": s}
              for a, b, s in [(-3, 1.5, 0.3), (4, -1, 2), (0, 0, 1), (6, 2, 0.5)]]
    init = [spread[k] for k in range(4) for _ in range(4)]
    stan_run(good, "pollen", POLLEN, pollen_data(), seed=66002, chains=16, draws=100,
             warmup=150, init=init)


def mcse() -> None:
    """The PyMC pollen fit with a precision target the analyst declares for beta."""
    for kind, target in (("bad", 0.002), ("good", 0.05)):
        folder = _fresh(RULES / "mcse" / "cases" / kind)
        pymc_run(folder / "pollen.nc", seed=67001, sampler="nutpie")
        (folder / "bayes-auditor.toml").write_text(
            f'[rules."sampling.mcse"]\ntargets = {{ beta = {target} }}\n'
            'quantiles = [0.05, 0.95]\n')
    _expect(RULES / "mcse" / "cases" / "bad",
            "# Target 0.002 for beta: its MCSE of the mean (about 0.003) and of the 5% and 95%\n"
            "# quantiles exceed it.\n"
            '[[hit]]\nquantity = "beta"\n')


CASES = {"divergences": divergences, "stuck-chain": stuck_chain, "step-size": step_size,
         "thinning": thinning, "nested-rhat": nested_rhat, "mcse": mcse}


def main(argv: list[str]) -> int:
    for name in argv or list(CASES):
        CASES[name]()
    for name in CASES:
        for folder in sorted((RULES / name / "cases").glob("*")):
            if folder.is_dir():
                kind = folder.name
                size = sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())
                print(f"{name}/{kind}: {size / 1024:.0f} KiB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
