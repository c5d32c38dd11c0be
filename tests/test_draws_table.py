"""Draws tables (CSV and Parquet), and the same draws in every form (issue 13).

Files are made here from one set of draws: CmdStan CSV in the layout of
``../shared/reference-data/cmdstan-outputs/cmdstanpy-runset-good/bern-1.csv``
(its header, our columns), draws tables written by polars, and a netCDF DataTree
written by arviz-base's ``from_dict`` (the library the project uses for DataTree
conventions). Column forms follow the tools that write them: R's posterior package
(``as_draws_df``: ``.chain``, ``.iteration``, ``.draw``, ``theta[1]``; ``write.csv``
of a data frame made with ``check.names = TRUE`` turns ``Sigma[1,2]`` into
``Sigma.1.2.``), cmdstanpy's ``draws_pd`` (``chain__``, ``iter__``, ``draw__``, the
CmdStan column names; from memory of cmdstanpy's documentation).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from auditor.discovery import discover
from auditor.engine import run_audit
from auditor.loaders import load_draws
from auditor.loaders.draws_table import sniff_draws_table
from tests.conftest import require_shared

REPO = Path(__file__).resolve().parent.parent
CHAINS, DRAWS = 4, 50
STATS = ("lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__", "divergent__",
         "energy__")


def _six(x: np.ndarray) -> np.ndarray:
    """Values as CmdStan writes them (6 significant digits), so every form holds the same."""
    return np.vectorize(lambda v: float(f"{v:.6g}"))(x)


@pytest.fixture(scope="module")
def draws() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(13)
    return {
        "mu": _six(rng.normal(size=(CHAINS, DRAWS))),
        "theta": _six(rng.normal(size=(CHAINS, DRAWS, 3))),
        "Sigma": _six(rng.gamma(2.0, size=(CHAINS, DRAWS, 2, 2))),
        "lp__": _six(-rng.gamma(5.0, size=(CHAINS, DRAWS))),
        "accept_stat__": _six(rng.uniform(0.6, 1, size=(CHAINS, DRAWS))),
        "stepsize__": np.full((CHAINS, DRAWS), 0.5),
        "treedepth__": rng.integers(1, 5, size=(CHAINS, DRAWS)).astype(float),
        "n_leapfrog__": rng.integers(1, 31, size=(CHAINS, DRAWS)).astype(float),
        "divergent__": (rng.uniform(size=(CHAINS, DRAWS)) < 0.05).astype(float),
        "energy__": _six(rng.normal(10, 2, size=(CHAINS, DRAWS))),
    }


def _scalar_columns(d: dict[str, np.ndarray], style: str) -> dict[str, np.ndarray]:
    """Column name -> (chain, draw) values; ``style`` cmdstan (theta.1, column-major),
    bracket (theta[1]) or r (theta.1, Sigma.1.2. as R's make.names writes them)."""
    out = {}
    for name in ("mu", "theta", "Sigma"):
        arr = d[name]
        if arr.ndim == 2:
            out[name] = arr
            continue
        shape = arr.shape[2:]
        for flat in range(int(np.prod(shape))):
            idx = np.unravel_index(flat, shape, order="F")  # column-major, as CmdStan
            one = [str(i + 1) for i in idx]
            label = {"cmdstan": f"{name}.{'.'.join(one)}", "bracket": f"{name}[{','.join(one)}]",
                     "r": f"{name}.{'.'.join(one)}" + ("." if len(one) > 1 else "")}[style]
            out[label] = arr[(slice(None), slice(None), *idx)]
    return out


def _cmdstan_files(folder: Path, d: dict[str, np.ndarray]) -> list[Path]:
    real = require_shared() / "cmdstan-outputs" / "cmdstanpy-runset-good" / "bern-1.csv"
    head = []
    for line in real.read_text().splitlines():
        if not line.startswith("#"):
            break
        head.append(line)
    cols = {**{s: d[s] for s in STATS}, **_scalar_columns(d, "cmdstan")}
    paths = []
    for c in range(CHAINS):
        text = "\n".join(head).replace("num_samples = 100", f"num_samples = {DRAWS}")
        text = re.sub(r"id = \d+", f"id = {c + 1}", text)
        rows = [",".join(f"{v[c, i]:.6g}" for v in cols.values()) for i in range(DRAWS)]
        path = folder / f"fit-{c + 1}.csv"
        path.write_text(text + "\n" + ",".join(cols) + "\n# Adaptation terminated\n"
                        + "\n".join(rows) + "\n# \n#  Elapsed Time: 0.01 seconds (Warm-up)\n")
        paths.append(path)
    return paths


def _table(d: dict[str, np.ndarray], style: str = "bracket", ids: str = "plain") -> pl.DataFrame:
    chain = np.repeat(np.arange(1, CHAINS + 1), DRAWS)
    draw = np.tile(np.arange(1, DRAWS + 1), CHAINS)
    lead = {"plain": {"chain": chain, "draw": draw},
            "r": {".chain": chain, ".iteration": draw, ".draw": np.arange(1, CHAINS * DRAWS + 1)},
            "cmdstanpy": {"chain__": chain, "iter__": draw,
                          "draw__": np.arange(1, CHAINS * DRAWS + 1)}}[ids]
    cols = {**lead, **{s: d[s].reshape(-1) for s in STATS},
            **{k: v.reshape(-1) for k, v in _scalar_columns(d, style).items()}}
    return pl.DataFrame(cols)


def _netcdf(path: Path, d: dict[str, np.ndarray]) -> Path:
    import arviz_base as azb

    stats = {"lp": d["lp__"], "acceptance_rate": d["accept_stat__"], "step_size": d["stepsize__"],
             "tree_depth": d["treedepth__"].astype(np.int64),
             "n_steps": d["n_leapfrog__"].astype(np.int64),
             "diverging": d["divergent__"].astype(bool), "energy": d["energy__"]}
    tree = azb.from_dict({"posterior": {k: d[k] for k in ("mu", "theta", "Sigma")},
                          "sample_stats": stats})
    tree.to_netcdf(path, engine="h5netcdf")
    return path


def _same_draws(a, b) -> None:  # noqa: ANN001
    """Posterior variables and the standard statistics are equal in value and shape."""
    pa, pb = a.tree["posterior"].to_dataset(), b.tree["posterior"].to_dataset()
    assert set(pa.data_vars) == set(pb.data_vars) == {"mu", "theta", "Sigma"}
    for v in pa.data_vars:
        np.testing.assert_array_equal(pa[v].transpose("chain", "draw", ...).values,
                                      pb[v].transpose("chain", "draw", ...).values, err_msg=v)
    sa, sb = a.tree["sample_stats"].to_dataset(), b.tree["sample_stats"].to_dataset()
    for v in ("lp", "acceptance_rate", "step_size", "tree_depth", "n_steps", "diverging",
              "energy"):
        np.testing.assert_array_equal(sa[v].values, sb[v].values, err_msg=v)
        assert sa[v].dtype == sb[v].dtype, v


def test_the_same_draws_read_equal_from_cmdstan_csv_table_csv_parquet_and_netcdf(tmp_path,
                                                                                  draws):
    cmdstan = load_draws(_cmdstan_files(tmp_path, draws))
    table = _table(draws)
    table.write_csv(tmp_path / "table.csv")
    table.write_parquet(tmp_path / "table.parquet")
    csv, parquet = load_draws([tmp_path / "table.csv"]), load_draws([tmp_path / "table.parquet"])
    nc = load_draws([_netcdf(tmp_path / "fit.nc", draws)])
    for loaded in (cmdstan, csv, parquet, nc):
        assert [p for p in loaded.problems if p.kind != "note"] == []
    for other in (csv, parquet, nc):
        _same_draws(cmdstan, other)
    np.testing.assert_array_equal(csv.tree["posterior"]["Sigma"].values, draws["Sigma"])
    assert csv.settings.chain_ids == [1, 2, 3, 4] and csv.settings.num_samples == DRAWS


@pytest.mark.parametrize("style,ids", [("r", "r"), ("cmdstan", "cmdstanpy"), ("bracket", "r")])
def test_r_and_cmdstanpy_column_forms(tmp_path, draws, style, ids):
    table = _table(draws, style, ids)
    # Rows in another order: the chain and draw columns put them back.
    table = table.sample(fraction=1.0, shuffle=True, seed=3)
    table.write_csv(tmp_path / "t.csv")
    loaded = load_draws([tmp_path / "t.csv"])
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()
    np.testing.assert_array_equal(post["Sigma"].values, draws["Sigma"])
    np.testing.assert_array_equal(post["theta"].values, draws["theta"])
    assert int(loaded.tree["sample_stats"]["diverging"].sum()) == int(draws["divergent__"].sum())


def test_statistics_by_their_pymc_names(tmp_path):
    # PyMC/nutpie statistic names as columns (stats_vocab): diverging, tree_depth,
    # maxdepth_reached, energy.
    df = pl.DataFrame({"chain": [0, 0, 1, 1], "draw": [0, 1, 0, 1], "a": [0.1, 0.2, 0.3, 0.4],
                       "diverging": [False, True, False, False], "tree_depth": [3, 4, 3, 3],
                       "maxdepth_reached": [False, False, False, True],
                       "energy": [1.0, 2.0, 3.0, 4.0]})
    df.write_parquet(tmp_path / "p.parquet")
    stats = load_draws([tmp_path / "p.parquet"]).tree["sample_stats"].to_dataset()
    assert stats["diverging"].values.tolist() == [[False, True], [False, False]]
    assert stats["reached_max_treedepth"].values.tolist() == [[False, False], [False, True]]
    assert stats["tree_depth"].dtype == np.int64


def test_broken_tables_are_reported_with_file_and_line(tmp_path, draws):
    table = _table(draws)
    # Chain 3 loses 5 draws; one value of mu is text.
    short = table.filter(~((pl.col("chain") == 3) & (pl.col("draw") > 45)))
    short.write_csv(tmp_path / "t.csv")
    lines = (tmp_path / "t.csv").read_text().splitlines()
    lines[7] = re.sub(r"^([^,]*,[^,]*,(?:[^,]*,){7})[^,]*", r"\1oops", lines[7])
    (tmp_path / "t.csv").write_text("\n".join(lines) + "\n")
    loaded = load_draws([tmp_path / "t.csv"])
    msgs = {p.message: p for p in loaded.problems}
    short_chain = [p for p in loaded.problems if p.kind == "inconsistent-chains"]
    assert len(short_chain) == 1 and "chain 3 has 45 draws" in short_chain[0].message
    (text,) = [p for p in msgs.values() if "not numbers" in p.message]
    assert text.line == 8 and "'oops'" in text.message and "'mu'" in text.message
    assert loaded.tree["posterior"].sizes["chain"] == 3


@pytest.mark.parametrize("suffix,content,defect", [
    (".parquet", b"", "empty"), (".csv", b"\x00\x01binary" * 100, "binary"),
    (".parquet", b"PAR1 not really", "Parquet"), (".parquet", None, "chain column"),
])
def test_files_that_are_not_tables(tmp_path, suffix, content, defect):
    path = tmp_path / f"x{suffix}"
    if content is None:  # a real Parquet table without chain and draw columns
        pl.DataFrame({"a": [1.0, 2.0], "b": [3.0, 4.0]}).write_parquet(path)
    else:
        path.write_bytes(content)
    loaded = load_draws([path])
    assert loaded.tree is None
    assert loaded.problems and defect.lower() in loaded.problems[0].message.lower()
    assert loaded.problems[0].path == path


def test_discovery_finds_tables_not_data(tmp_path, draws):
    root = tmp_path / "proj"
    (root / "fits").mkdir(parents=True)
    (root / "data").mkdir()
    _table(draws, "r", "r").write_csv(root / "fits" / "posterior_draws.csv")
    _table(draws).write_parquet(root / "fits" / "other.parquet")
    (root / "data" / "obs.csv").write_text("x,y\n1,2.5\n2,3.5\n")
    specs, problems = discover(root)
    assert problems == []
    assert sorted((s.name, [p.name for p in s.draws]) for s in specs) == [
        ("other", ["other.parquet"]), ("posterior_draws", ["posterior_draws.csv"])]
    header, _ = sniff_draws_table(root / "data" / "obs.csv")
    assert header is None


def test_readme_example_reads(tmp_path):
    # The draws-table example of README.md, as written there.
    text = (REPO / "README.md").read_text()
    block = re.search(r"### Draws tables.*?```csv\n(.*?)```", text, re.S).group(1)
    (tmp_path / "draws.csv").write_text(block)
    loaded = load_draws([tmp_path / "draws.csv"])
    assert loaded.problems == []
    post = loaded.tree["posterior"]
    assert post["theta"].shape == (2, 2, 2)
    assert "diverging" in loaded.tree["sample_stats"]


def test_data_table_with_an_observed_column(tmp_path):
    # A data CSV given as data = "..." with observed = "y": its columns are data.
    good = REPO / "rules" / "inputs" / "remark" / "cases" / "good"
    root = tmp_path / "proj"
    (root / "fits").mkdir(parents=True)
    for f in good.glob("fit-*.csv"):
        (root / "fits" / f.name).write_bytes(f.read_bytes())
    (root / "obs.csv").write_text("site,x,y\na,1,2.5\nb,2,NA\nc,3,4.0\n")
    (root / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "a"\ndraws = ["fits/fit-*.csv"]\ndata = "obs.csv"\n'
        'observed = "y"\n[[analysis]]\nname = "b"\ndraws = ["fits/fit-*.csv"]\n'
        'data = "obs.csv"\nobserved = "z"\n')
    from auditor.assemble import assemble
    from auditor.config import load_config

    result = run_audit([root], only_rules={"inputs.unreadable", "inputs.remark"})
    by_name = {a.name: a for a in result.analyses}
    assert not [f for f in by_name["a"].findings if f.rule_id == "inputs.unreadable"]
    (missing,) = [f for f in by_name["b"].findings if f.rule_id == "inputs.unreadable"]
    assert "no column 'z'" in missing.message and missing.location.path == "obs.csv"
    assert any("missing values" in f.message for f in by_name["a"].findings)
    cfg = load_config(root, None, {})
    assert cfg is not None
    from auditor.model import AnalysisSpec

    a = assemble(AnalysisSpec(name="a", draws=sorted((root / "fits").glob("*.csv")),
                              data=root / "obs.csv", observed="y"))
    assert a.data["x"].tolist() == [1, 2, 3] and a.data["x"].dtype == np.int64
    assert np.isnan(a.data["y"][1]) and a.data["y"][2] == 4.0
    assert a.data["site"].tolist() == ["a", "b", "c"]


def test_quantities_keep_the_labels_of_their_columns(tmp_path, draws):
    # theta[2] of the table is theta[2] in the diagnostics and in findings.
    table = _table(draws)
    table = table.with_columns(pl.when((pl.col("chain") == 2) & (pl.col("draw") == 3))
                               .then(float("nan")).otherwise(pl.col("theta[2]"))
                               .alias("theta[2]"))
    table.write_csv(tmp_path / "t.csv")
    result = run_audit([tmp_path / "t.csv"], only_rules={"inputs.nonfinite-draws"})
    (analysis,) = result.analyses
    (hit,) = analysis.findings
    assert hit.quantity == "theta[2]" and "1 NaN" in hit.message
    assert "theta[3]" in {row["quantity"] for row in analysis.diagnostics}
