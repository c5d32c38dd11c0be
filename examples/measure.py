"""Measure the demo fits and print the table recorded in ``examples/README.md``.

Runs in the project's environment (numpy, xarray, arviz-stats); it reads the
CmdStan CSV files with numpy and the netCDF files with xarray, not with the
project's loaders, so the numbers are an independent record of what the files
hold::

    .venv/bin/python examples/measure.py

Measures: divergent transitions after warmup (Betancourt 2017); the largest
rank-normalized R-hat and the smallest bulk-ESS over the model's parameters
(Vehtari et al. 2021, via ``arviz_stats``); the posterior predictive check of
the variance (Gelman et al., BDA3 ch. 6): mean over draws of var(y_rep) divided
by var(y), and the posterior predictive p-value P(var(y_rep) >= var(y)); the
prior predictive share inside the declared plausible range.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import xarray as xr

DEMO = Path(__file__).resolve().parent / "demo"


def read_csv_chains(pattern: str) -> dict[str, np.ndarray]:
    """Columns of CmdStan CSV chains matching ``pattern``: name -> (chain, draw)."""
    files = sorted(DEMO.glob(pattern))
    chains = []
    names: list[str] = []
    for f in files:
        lines = [ln for ln in f.read_text().splitlines() if ln and not ln.startswith("#")]
        names = lines[0].split(",")
        chains.append(np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]]))
    arr = np.stack(chains)
    return {n: arr[:, :, j] for j, n in enumerate(names)}


def group_vars(cols: dict[str, np.ndarray], name: str) -> np.ndarray:
    """Columns ``name`` or ``name.i`` stacked as (chain, draw, i)."""
    keys = [k for k in cols if k == name or k.startswith(name + ".")]
    return np.stack([cols[k] for k in keys], axis=-1)


def parameter_names(cols: dict[str, np.ndarray], program: str) -> list[str]:
    """Columns of the parameters block (the rest are derived or generated)."""
    text = (DEMO / program).read_text()
    block = text.split("parameters {", 1)[1].split("}", 1)[0]
    declared = [ln.split(";")[0].split()[-1] for ln in block.splitlines() if ";" in ln]
    return [k for k in cols if k.split(".")[0] in declared]


def rhat_ess(draws: np.ndarray) -> tuple[float, float, float]:
    """Rank-normalized R-hat, bulk-ESS and tail-ESS of one quantity, (chain, draw) array."""
    from arviz_stats import ess, rhat

    r = float(rhat(draws, method="rank"))
    e = float(ess(draws, method="bulk"))
    # Tail-ESS: the smaller ESS of the 5% and 95% quantile indicators (same paper).
    t = float(ess(draws, method="tail", prob=(0.05, 0.95)))
    return r, e, t


def measure() -> list[dict[str, object]]:
    manifest = tomllib.loads((DEMO / "bayes-auditor.toml").read_text())
    rows = []
    for a in manifest["analysis"]:
        row: dict[str, object] = {"analysis": a["name"]}
        y = None
        if a["draws"][0].endswith(".csv"):
            cols = read_csv_chains(a["draws"][0])
            prior_cols = read_csv_chains(a["prior_draws"][0])
            y = np.asarray(json.loads((DEMO / a["data"]).read_text())[a["observed"]], float)
            row["divergent"] = int(cols["divergent__"].sum())
            row["divergent_prior_run"] = int(prior_cols["divergent__"].sum())
            # Draws whose tree reached the maximum depth (10, the header's max_depth).
            row["max_depth_prior_run"] = int((prior_cols["treedepth__"] >= 10).sum())
            params = {k: cols[k] for k in parameter_names(cols, a["model"])}
            y_rep = group_vars(cols, a["predictive"])
            prior_rep = group_vars(prior_cols, a["predictive"])
        else:
            tree = xr.open_datatree(DEMO / a["draws"][0], engine="h5netcdf")
            y = tree["observed_data"][a["observed"]].values.astype(float)
            row["divergent"] = int(tree["sample_stats"]["diverging"].values.sum())
            row["divergent_prior_run"] = "-"
            row["max_depth_prior_run"] = "-"
            post = tree["posterior"]
            params = {}
            for name, var in post.data_vars.items():
                flat = var.values.reshape(var.shape[0], var.shape[1], -1)
                for i in range(flat.shape[-1]):
                    params[f"{name}.{i}"] = flat[:, :, i]
            y_rep = tree["posterior_predictive"][a["predictive"]].values
            prior_rep = tree["prior_predictive"][a["predictive"]].values
        stats = [rhat_ess(v) for v in params.values()]
        row["max_rhat"] = max(s[0] for s in stats)
        row["min_bulk_ess"] = min(s[1] for s in stats)
        row["min_tail_ess"] = min(s[2] for s in stats)
        var_rep = y_rep.reshape(-1, y_rep.shape[-1]).var(axis=1, ddof=1)
        row["var_ratio"] = float(var_rep.mean() / y.var(ddof=1))
        row["ppp_var"] = float(np.mean(var_rep >= y.var(ddof=1)))
        lo_hi = a.get("plausible_range")
        if lo_hi:
            inside = (prior_rep >= lo_hi[0]) & (prior_rep <= lo_hi[1])
            row["prior_mass_in_range"] = float(inside.mean())
        else:
            row["prior_mass_in_range"] = "-"
        row["prior_pred_abs_max"] = float(np.nanmax(np.abs(prior_rep)))
        rows.append(row)
    return rows


def _cell(v: object) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def main() -> None:
    rows = measure()
    keys = list(rows[0])
    print("| " + " | ".join(keys) + " |")
    print("|" + "---|" * len(keys))
    for r in rows:
        print("| " + " | ".join(_cell(r[k]) for k in keys) + " |")


if __name__ == "__main__":
    main()
