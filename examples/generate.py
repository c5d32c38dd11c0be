"""Re-create the demo project's data and fits from fixed seeds.

The CmdStan-format CSV files under ``demo/fits/`` are converted pystan output:
each Stan program is compiled and sampled with pystan (httpstan, real NUTS), and
every chain is then written in CmdStan's CSV layout by :mod:`cmdstan_csv`. The
``.nc`` files are PyMC runs (PyMC's own NUTS and nutpie) saved as DataTree
netCDF with the h5netcdf engine.

Development only; needs the ``generate`` extra (pystan, pymc, nutpie), kept out
of the main environment::

    python3.12 -m venv ../gen-venv                 # outside the checkout
    ../gen-venv/bin/pip install -e ".[generate]"
    ../gen-venv/bin/python examples/generate.py            # everything
    ../gen-venv/bin/python examples/generate.py data stan  # some steps

Steps: ``data`` (simulate the data files), ``stan`` (pystan fits), ``pymc``
(PyMC fits).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DEMO = HERE / "demo"
sys.path.insert(0, str(HERE))

import cmdstan_csv  # noqa: E402  (helper beside this script)
import pymc_fit  # noqa: E402

# ---------------------------------------------------------------- data


def _std(x: np.ndarray) -> np.ndarray:
    return np.round((x - x.mean()) / x.std(ddof=1), 4)


def _write_json(path: Path, obj: dict) -> None:
    path.write_text(json.dumps(obj, indent=1) + "\n")


def simulate_data() -> None:
    """Simulate every data set of the scenario; each has its own fixed seed."""
    data = DEMO / "data"
    data.mkdir(parents=True, exist_ok=True)

    # Mite drop: negative binomial around a log-linear mean, so the counts are
    # overdispersed relative to a Poisson, with a few large boards and a few empty
    # ones (this seed gives 3 boards without mites among the 16).
    rng = np.random.default_rng(20260114)
    n = 16
    strength = _std(rng.normal(6.0, 1.5, n))
    mu = np.exp(2.1 + 0.2 * strength)
    phi = 1.2
    y = rng.negative_binomial(phi, phi / (phi + mu))
    counts = {"N": n, "strength": strength.tolist(), "y": y.astype(int).tolist()}
    _write_json(data / "counts.json", {**counts, "prior_only": 0})
    _write_json(data / "counts_prior.json", {**counts, "prior_only": 1})

    # Weekly weight change by yard: yard means differ by far less than hives
    # differ within a yard (tau << sigma), two hives per yard.
    rng = np.random.default_rng(20260102)
    j, per = 5, 2
    theta = 1.5 + 0.25 * rng.normal(size=j)
    yard = np.repeat(np.arange(1, j + 1), per)
    sigma = 2.0
    w = np.round(rng.normal(theta[yard - 1], sigma), 2)
    yards = {"N": int(j * per), "J": j, "yard": yard.tolist(), "y": w.tolist(), "sigma": sigma}
    _write_json(data / "yards.json", {**yards, "prior_only": 0})
    _write_json(data / "yards_prior.json", {**yards, "prior_only": 1})

    # Wax rendered against forage distance: a plain linear regression.
    rng = np.random.default_rng(20260103)
    n = 8
    distance = _std(rng.gamma(4.0, 0.5, n))
    wax = np.round(5.0 - 0.8 * distance + rng.normal(0, 0.7, n), 2)
    wax_d = {"N": n, "distance": distance.tolist(), "y": wax.tolist()}
    _write_json(data / "wax.json", {**wax_d, "prior_only": 0})
    _write_json(data / "wax_prior.json", {**wax_d, "prior_only": 1})

    # Honey harvest (kg): positive, log-normal around a mean that grows with
    # the number of flowering days near the yard.
    rng = np.random.default_rng(20260104)
    n = 16
    bloom = _std(rng.normal(40.0, 8.0, n))
    harvest = np.round(np.exp(np.log(14.0) + 0.25 * bloom + rng.normal(0, 0.35, n)), 2)
    _write_json(data / "harvest.json", {"N": n, "bloom": bloom.tolist(), "y": harvest.tolist()})


# ---------------------------------------------------------------- Stan

# stem -> (data stem, seed, adapt delta)
STAN_RUNS: dict[str, tuple[str, int, float]] = {
    "counts_poisson": ("counts", 41001, 0.8),
    "counts_negbin": ("counts", 41002, 0.8),
    "yards_centered": ("yards", 41003, 0.8),
    "yards_noncentered": ("yards", 41004, 0.8),
    "wax_flat": ("wax", 41005, 0.8),
}


def _stan_version() -> tuple[int, int, int]:
    """Stan version httpstan was built with (from its bundled ``stan/version.hpp``)."""
    import httpstan

    text = (Path(httpstan.__file__).parent / "include/stan/version.hpp").read_text()
    parts = []
    for key in ("STAN_MAJOR", "STAN_MINOR", "STAN_PATCH"):
        line = next(ln for ln in text.splitlines() if ln.startswith(f"#define {key} "))
        parts.append(int(line.split()[-1]))
    return parts[0], parts[1], parts[2]


def run_stan(stem: str, data_stem: str, seed: int, delta: float, prior: bool) -> None:
    """Sample one Stan program with pystan and write its four chains as CmdStan CSV."""
    import stan

    suffix = "_prior" if prior else ""
    data_rel = f"data/{data_stem}{suffix}.json"
    data = json.loads((DEMO / data_rel).read_text())
    code = (DEMO / "models" / f"{stem}.stan").read_text()
    run_seed = seed + (500 if prior else 0)
    settings = cmdstan_csv.RunSettings(seed=run_seed, delta=delta)
    model = stan.build(code, data=data, random_seed=run_seed)
    fit = model.sample(num_chains=4, **settings.pystan_kwargs())

    columns = list(cmdstan_csv.SAMPLER_COLUMNS) + list(fit.constrained_param_names)
    param_dims = dict(zip(fit.param_names, fit.dims, strict=True))
    values = cmdstan_csv.draws_matrix(fit, columns, param_dims)
    version = _stan_version()
    out_dir = DEMO / "fits"
    out_dir.mkdir(parents=True, exist_ok=True)
    for chain in range(fit.num_chains):
        adaptation, raw_draws, timing = cmdstan_csv.chain_messages(fit.stan_outputs[chain])
        # The reshaping of fit[...] must give back exactly what Stan sent for this
        # chain, name by name and draw by draw.
        raw = np.array([[d[c] for c in columns] for d in raw_draws], dtype=float)
        np.testing.assert_array_equal(raw, values[:, chain, :])
        out_rel = f"fits/{stem}{suffix}-{chain + 1}.csv"
        header = cmdstan_csv.header_lines(
            stan_version=version,
            model_name=f"{stem}_model",
            chain_id=chain + 1,
            data_file=data_rel,
            output_file=out_rel,
            settings=settings,
        )
        cmdstan_csv.write_chain(
            DEMO / out_rel,
            header=header,
            columns=columns,
            values=values[:, chain, :],
            adaptation=adaptation,
            timing=timing,
        )
    print(f"wrote {stem}{suffix}: {len(columns)} columns", flush=True)


def run_all_stan(only: set[str] | None = None) -> None:
    for stem, (data_stem, seed, delta) in STAN_RUNS.items():
        if only and stem not in only:
            continue
        for prior in (False, True):
            run_stan(stem, data_stem, seed, delta, prior)


# ---------------------------------------------------------------- main


def main(argv: list[str]) -> int:
    steps = [a for a in argv if a in {"data", "stan", "pymc"}] or ["data", "stan", "pymc"]
    only = {a for a in argv if a not in {"data", "stan", "pymc"}} or None
    if "data" in steps:
        simulate_data()
    if "stan" in steps:
        run_all_stan(only)
    if "pymc" in steps:
        pymc_fit.run_all(DEMO, only)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
