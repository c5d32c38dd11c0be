"""CmdStan CSV loader, checked against real CmdStan output files.

Every expected number here is read from the raw CSV text (by the independent
``csv`` module in :func:`_raw`) or taken from ../shared/reference-data/README.md,
which describes each file; none comes from the loader itself.
"""

from __future__ import annotations

import csv
import hashlib
from pathlib import Path

import numpy as np
import pytest

from auditor.loaders import load_draws, read_cmdstan_header
from tests.conftest import require_shared


def _outputs() -> Path:
    return require_shared() / "cmdstan-outputs"


def _files(folder: str, pattern: str = "*.csv") -> list[Path]:
    return sorted((_outputs() / folder).glob(pattern))


def _raw(path: Path) -> tuple[list[str], list[list[str]], list[int]]:
    """Column names, data rows and their 1-based line numbers, via the csv module."""
    with path.open(newline="") as fh:
        lines = fh.read().splitlines()
    columns: list[str] = []
    rows: list[list[str]] = []
    numbers: list[int] = []
    for number, line in enumerate(lines, start=1):
        if not line.strip() or line.startswith("#"):
            continue
        fields = next(csv.reader([line]))
        if not columns:
            columns = fields
        else:
            rows.append(fields)
            numbers.append(number)
    return columns, rows, numbers


def _value(path: Path, row: int, column: str) -> float:
    columns, rows, _ = _raw(path)
    return float(rows[row][columns.index(column)])


def _digest(paths: list[Path]) -> list[str]:
    return [hashlib.sha256(p.read_bytes()).hexdigest() for p in paths]


# ----------------------------------------------------------------- good runs


def test_eight_schools_nc_four_chains_of_100():
    # README: arviz-eight-schools-nc, 4 chains, 100 kept draws each, log_lik and y_hat columns.
    paths = _files("arviz-eight-schools-nc")
    before = _digest(paths)
    loaded = load_draws(paths)
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()
    assert post.sizes["chain"] == 4 and post.sizes["draw"] == 100
    assert post["theta"].shape == (4, 100, 8)
    assert {"log_lik", "y_hat", "mu", "tau", "theta_tilde"} <= set(post.data_vars)
    # First draw of theta.3 in chain 2 equals the number in the file.
    assert post["theta"].values[1, 0, 2] == _value(paths[1], 0, "theta.3")
    # Last draw of tau in chain 4.
    assert post["tau"].values[3, -1] == _value(paths[3], 99, "tau")
    assert loaded.sources == paths
    assert _digest(paths) == before  # input files are never changed


def test_eight_schools_nc_settings_from_header():
    paths = _files("arviz-eight-schools-nc")
    s = load_draws(paths).settings
    # Values as written in the header comments of eight_schools_output1.csv.
    assert s.library == "CmdStan"
    assert s.library_version == "2.18.0"
    assert s.method == "sample"
    assert s.num_samples == 100 and s.num_warmup == 1000
    assert s.save_warmup is False and s.thin == 1
    assert s.adapt_engaged is True
    assert s.adapt_delta == pytest.approx(0.8)
    assert (s.algorithm, s.engine, s.metric, s.max_depth) == ("hmc", "nuts", "diag_e", 10)
    assert s.model_name == "eight_schools_nc_model"
    # Every file says "id = 0 (Default)": not informative, so file order 1..4.
    assert s.chain_ids == [1, 2, 3, 4]
    # seed of chain 1 as in its header.
    assert s.seeds[0] == 779839997 and len(s.seeds) == 4


def test_sample_stats_standard_names_and_values():
    paths = _files("arviz-eight-schools-nc")
    stats = load_draws(paths).tree["sample_stats"].to_dataset()
    assert set(stats.data_vars) == {
        "lp",
        "acceptance_rate",
        "step_size",
        "tree_depth",
        "n_steps",
        "diverging",
        "energy",
        "reached_max_treedepth",
    }
    assert stats["diverging"].dtype == bool
    assert stats["reached_max_treedepth"].dtype == bool
    columns, rows, _ = _raw(paths[0])
    raw = np.array([[float(v) for v in r] for r in rows])
    for col, name in [
        ("lp__", "lp"),
        ("accept_stat__", "acceptance_rate"),
        ("stepsize__", "step_size"),
        ("treedepth__", "tree_depth"),
        ("n_leapfrog__", "n_steps"),
        ("energy__", "energy"),
    ]:
        np.testing.assert_array_equal(stats[name].values[0], raw[:, columns.index(col)])
    np.testing.assert_array_equal(
        stats["diverging"].values[0], raw[:, columns.index("divergent__")] == 1
    )


def test_warmup_rows_go_to_warmup_groups():
    # README: arviz-stan-test-data-warmup, save_warmup = 1, 500 warmup + 100 kept draws.
    paths = _files("arviz-stan-test-data-warmup")
    loaded = load_draws(paths)
    assert loaded.problems == []
    tree = loaded.tree
    post = tree["posterior"].to_dataset()
    warm = tree["warmup_posterior"].to_dataset()
    assert (post.sizes["chain"], post.sizes["draw"]) == (4, 100)
    assert (warm.sizes["chain"], warm.sizes["draw"]) == (4, 500)
    assert tree["warmup_sample_stats"].to_dataset().sizes["draw"] == 500
    assert tree["sample_stats"].to_dataset().sizes["draw"] == 100
    assert loaded.settings.save_warmup is True and loaded.settings.num_warmup == 500
    # id = 1..4 and seed = 31709 in the headers.
    assert loaded.settings.chain_ids == [1, 2, 3, 4]
    assert loaded.settings.seeds == [31709] * 4
    # 2-d eta written column-major: eta.1.1, eta.2.1, eta.1.2, ... (header line).
    assert post["eta"].shape == (4, 100, 2, 4)
    # Row 0 of the file is warmup; row 500 is the first kept draw.
    assert warm["eta"].values[0, 0, 1, 0] == _value(paths[0], 0, "eta.2.1")
    assert post["eta"].values[0, 0, 1, 0] == _value(paths[0], 500, "eta.2.1")
    assert post["eta"].values[2, 7, 0, 3] == _value(paths[2], 507, "eta.1.4")
    # Adapted step size from "# Step size = 0.298701" of chain 1.
    assert post.attrs["adapted_step_size"][0] == pytest.approx(0.298701)
    # "Elapsed Time: 0.042168 seconds (Warm-up)" / "0.010171 seconds (Sampling)".
    assert post.attrs["elapsed_warmup_seconds"][0] == pytest.approx(0.042168)
    assert post.attrs["elapsed_sampling_seconds"][0] == pytest.approx(0.010171)


def test_cmdstanpy_good_runset():
    # README: 4 healthy chains of a Bernoulli model (Stan 2.19, 100 draws).
    loaded = load_draws(_files("cmdstanpy-runset-good"))
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()
    assert (post.sizes["chain"], post.sizes["draw"]) == (4, 100)
    assert loaded.settings.model_name == "bernoulli_model"


def test_logistic_four_chains():
    paths = _files("cmdstanpy-misc", "logistic_output_*.csv")
    assert len(paths) == 4
    loaded = load_draws(paths)
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()
    assert post.sizes["chain"] == 4
    assert post.sizes["draw"] == len(_raw(paths[0])[1])
    assert post["beta"].values[3, 0, 1] == _value(paths[3], 0, "beta.2")


def test_corr_gauss_max_depth_8():
    # The file's header says "max_depth = 8" (the README line says 10; the header is
    # what the sampler used). 1 chain of 1000 draws.
    path = _outputs() / "cmdstanpy-misc" / "corr_gauss_depth8-1.csv"
    loaded = load_draws([path])
    assert loaded.problems == []
    assert loaded.settings.max_depth == 8
    stats = loaded.tree["sample_stats"].to_dataset()
    assert (stats.sizes["chain"], stats.sizes["draw"]) == (1, 1000)
    assert loaded.tree["posterior"].to_dataset()["x"].shape == (1, 1000, 100)
    columns, rows, _ = _raw(path)
    depth = np.array([float(r[columns.index("treedepth__")]) for r in rows])
    # reached_max_treedepth means tree_depth >= max_depth (common practice).
    assert int(stats["reached_max_treedepth"].sum()) == int((depth >= 8).sum())
    assert int(stats["reached_max_treedepth"].sum()) > 0
    assert stats["step_size"].values[0, 0] == pytest.approx(0.0270733)


def test_multidim_vars_3d_shape():
    # README: 3-d y_rep columns like y_rep.1.2.1.
    path = _outputs() / "cmdstanpy-misc" / "multidim_vars.csv"
    loaded = load_draws([path])
    post = loaded.tree["posterior"].to_dataset()
    columns = _raw(path)[0]
    y_cols = [c for c in columns if c.startswith("y_rep.")]
    dims = np.array([[int(i) for i in c.split(".")[1:]] for c in y_cols])
    shape = tuple(dims.max(axis=0))
    assert post["y_rep"].shape == (1, post.sizes["draw"], *shape)
    assert post["y_rep"].dims[2:] == ("y_rep_dim_0", "y_rep_dim_1", "y_rep_dim_2")
    # Spot checks: indices are 1-based in the file.
    for col in ("y_rep.3.2.1", "y_rep.5.4.3", "y_rep.1.1.2"):
        i, j, k = (int(x) - 1 for x in col.split(".")[1:])
        assert post["y_rep"].values[0, 1, i, j, k] == _value(path, 1, col)


def test_fixed_param_run_loads():
    # fixed_param run: only lp__ and accept_stat__ as sampler columns.
    path = _outputs() / "cmdstanpy-misc" / "fixed_param_sample.csv"
    loaded = load_draws([path])
    assert loaded.tree is not None
    stats = loaded.tree["sample_stats"].to_dataset()
    assert set(stats.data_vars) == {"lp", "acceptance_rate"}
    assert loaded.settings.algorithm == "fixed_param"
    assert loaded.settings.max_depth is None
    assert loaded.tree["posterior"].to_dataset().sizes["draw"] == 100  # num_samples = 100
    assert [p.kind for p in loaded.problems] == ["note"]
    # "id = 0 (Default)" on a single file: chain 1.
    assert loaded.settings.chain_ids == [1]


def test_no_param_model_with_true_false_booleans():
    # Stan 2.35 writes booleans as "false"/"true"; stepsize__ is nan in every row.
    path = _outputs() / "cmdstanpy-misc" / "no_param_hmc_sample.csv"
    loaded = load_draws([path])
    assert loaded.problems == []
    s = loaded.settings
    assert s.save_warmup is False and s.adapt_engaged is True
    assert s.library_version == "2.35.0"
    assert s.seeds == [2399056448]
    stats = loaded.tree["sample_stats"].to_dataset()
    assert np.isnan(stats["step_size"].values).all()
    assert loaded.tree["posterior"].to_dataset().sizes["draw"] == 100


def test_sampling_output_y_rep():
    path = _outputs() / "cmdstanpy-misc" / "sampling_output.csv"
    loaded = load_draws([path])
    post = loaded.tree["posterior"].to_dataset()
    n_rep = sum(c.startswith("y_rep.") for c in _raw(path)[0])
    assert post["y_rep"].shape[2:] == (n_rep,)


def test_blocker_stan_1_3_header():
    # README: CmdStan 1.3 CSV, 2 chains x 1000 draws, no divergent__ column;
    # header uses the old "# data = file" layout.
    folder = require_shared() / "posterior-reference"
    paths = [folder / "blocker.1.csv", folder / "blocker.2.csv"]
    loaded = load_draws(paths)
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()
    assert (post.sizes["chain"], post.sizes["draw"]) == (2, 1000)
    stats = loaded.tree["sample_stats"].to_dataset()
    assert "diverging" not in stats
    s = loaded.settings
    assert s.library_version == "1.3.0"
    assert s.adapt_delta == pytest.approx(0.65)
    assert s.chain_ids == [1, 2]
    assert s.model_name == "blocker_model"
    assert post["mu"].values[1, 0, 21] == _value(paths[1], 0, "mu.22")
    header = read_cmdstan_header(paths[0])
    assert header.settings["data"] == "src/models/bugs_examples/vol1/blocker/blocker.data.R"


# ----------------------------------------------------------------- bad input


def test_bad_cols_row_named_with_line():
    # README: a data row with 7 fields under an 8-column header.
    path = _outputs() / "cmdstanpy-misc" / "output_bad_cols.csv"
    columns, rows, numbers = _raw(path)
    bad_line = next(n for r, n in zip(rows, numbers, strict=True) if len(r) != len(columns))
    loaded = load_draws([path])
    assert len(loaded.problems) == 1
    p = loaded.problems[0]
    assert p.path == path and p.line == bad_line and p.kind == "unreadable"
    assert "7 fields" in p.message and "8 columns" in p.message
    assert loaded.tree["posterior"].to_dataset().sizes["draw"] == len(rows) - 1


def test_bad_rows_fewer_draws_than_header():
    # README: header says num_samples = 10, file has 9 draws.
    path = _outputs() / "cmdstanpy-misc" / "output_bad_rows.csv"
    loaded = load_draws([path])
    assert len(loaded.problems) == 1
    p = loaded.problems[0]
    assert p.path == path and "10" in p.message and "9" in p.message
    assert p.line is not None  # the num_samples line of the header
    assert path.read_text().splitlines()[p.line - 1].strip().startswith("#     num_samples")
    assert loaded.tree["posterior"].to_dataset().sizes["draw"] == 9


def _inconsistent(problems):
    return [p for p in problems if p.kind == "inconsistent-chains"]


def test_runset_bad_cols_names_chain_4():
    paths = _files("cmdstanpy-runset-bad", "bad-cols-*.csv")
    loaded = load_draws(paths)
    odd = _inconsistent(loaded.problems)
    assert len(odd) == 1
    assert odd[0].path.name == "bad-cols-bern-4.csv"
    assert "foo" in odd[0].message and "3 agreeing chains are kept" in odd[0].message
    assert {p.path.name for p in loaded.problems} == {"bad-cols-bern-4.csv"}
    assert loaded.sources == paths[:3]
    assert loaded.tree["posterior"].to_dataset().sizes["chain"] == 3
    assert loaded.settings.chain_ids == [1, 2, 3]


def test_runset_bad_draws_names_chain_4():
    paths = _files("cmdstanpy-runset-bad", "bad-draws-*.csv")
    loaded = load_draws(paths)
    odd = _inconsistent(loaded.problems)
    assert len(odd) == 1 and odd[0].path.name == "bad-draws-bern-4.csv"
    assert "988" in odd[0].message and "1000" in odd[0].message
    post = loaded.tree["posterior"].to_dataset()
    assert (post.sizes["chain"], post.sizes["draw"]) == (3, 1000)


def test_runset_bad_header_names_chain_4():
    paths = _files("cmdstanpy-runset-bad", "bad-hdr-*.csv")
    loaded = load_draws(paths)
    odd = _inconsistent(loaded.problems)
    assert len(odd) == 1 and odd[0].path.name == "bad-hdr-bern-4.csv"
    assert "model = foo" in odd[0].message
    assert odd[0].line == 4  # "# model = foo" is line 4 of that file
    assert len(loaded.problems) == 1


def _header_of(path: Path) -> str:
    """Comment header and column line of a real file, for hand-made variants."""
    out = []
    for line in path.read_text().splitlines():
        out.append(line)
        if not line.startswith("#"):
            break
    return "\n".join(out) + "\n"


def test_non_numeric_nan_and_inf(tmp_path):
    real = _outputs() / "cmdstanpy-misc" / "output_bad_rows.csv"  # 8 columns, num_samples 10
    good = "-6.8,0.9,0.78,1,1,0,6.8,0.2"
    rows = [good] * 10
    rows[2] = "-6.8,0.9,0.78,1,1,0,6.8,nan"
    rows[3] = "-6.8,0.9,0.78,1,1,0,6.8,inf"
    rows[4] = "-6.8,0.9,0.78,1,1,0,6.8,-inf"
    rows[6] = "-6.8,0.9,0.78,1,1,0,6.8,abc"
    path = tmp_path / "odd.csv"
    text = _header_of(real) + "\n".join(rows) + "\n"
    path.write_text(text)
    header_lines = text.count("\n") - 10
    loaded = load_draws([path])
    theta = loaded.tree["posterior"].to_dataset()["theta"].values[0]
    assert np.isnan(theta[2]) and theta[3] == np.inf and theta[4] == -np.inf
    assert np.isnan(theta[6]) and theta[0] == 0.2
    assert len(loaded.problems) == 1
    p = loaded.problems[0]
    assert "'abc'" in p.message and p.line == header_lines + 7


def test_not_a_cmdstan_csv(tmp_path):
    path = tmp_path / "table.csv"
    path.write_text("a,b,c\n1,2,3\n")
    loaded = load_draws([path])
    assert loaded.tree is None
    assert loaded.problems[0].path == path and "not a CmdStan CSV" in loaded.problems[0].message
    assert read_cmdstan_header(path) is None
    assert read_cmdstan_header(tmp_path / "missing.csv") is None
    missing = load_draws([tmp_path / "missing.csv"])
    assert missing.tree is None and "cannot read" in missing.problems[0].message


def test_header_only_file_has_no_draws(tmp_path):
    real = _outputs() / "cmdstanpy-misc" / "output_bad_rows.csv"
    path = tmp_path / "empty.csv"
    path.write_text(_header_of(real))
    loaded = load_draws([path])
    assert loaded.tree is None
    assert any("no draws" in p.message for p in loaded.problems)


def test_other_file_types_are_refused(tmp_path):
    path = tmp_path / "draws.txt"
    path.write_text("x")
    loaded = load_draws([path])
    assert loaded.tree is None and loaded.problems[0].path == path
    empty = load_draws([])
    assert empty.tree is None and empty.problems == []


def test_read_cmdstan_header_both_layouts():
    new = _outputs() / "arviz-stan-test-data-warmup" / "cmdstanpy_eight_schools_warmup-2.csv"
    h = read_cmdstan_header(new)
    assert h.model == "stan_test_data_model" and h.chain_id == 2 and h.method == "sample"
    assert h.columns[:3] == ("lp__", "accept_stat__", "stepsize__")
    assert h.columns == tuple(_raw(new)[0])
    assert h.settings["data.file"] == "/tmp/tmp2ipdytqf/x8rvpwpf.json"
    assert h.settings["method.sample.num_samples"] == "100"
    assert h.find("max_depth") == "10"  # "(Default)" stripped


def test_thinned_warmup_split(tmp_path):
    # thin = 2, num_warmup = 4, num_samples = 6, save_warmup = 1: CmdStan saves
    # ceil(4/2) = 2 warmup rows and ceil(6/2) = 3 draws (from memory: every
    # thin-th iteration starting with the first).
    real = _outputs() / "arviz-stan-test-data-warmup" / "cmdstanpy_eight_schools_warmup-1.csv"
    head = _header_of(real)
    head = head.replace("num_samples = 100", "num_samples = 6")
    head = head.replace("num_warmup = 500", "num_warmup = 4")
    head = head.replace("thin = 1 (Default)", "thin = 2")
    _, rows, _ = _raw(real)
    path = tmp_path / "thin.csv"
    path.write_text(head + "\n".join(",".join(r) for r in rows[:5]) + "\n")
    loaded = load_draws([path])
    assert loaded.problems == []
    assert loaded.tree["warmup_posterior"].to_dataset().sizes["draw"] == 2
    assert loaded.tree["posterior"].to_dataset().sizes["draw"] == 3
    assert loaded.tree["posterior"].to_dataset()["mu"].values[0, 0] == float(rows[2][7])


def test_four_by_1000_by_500_with_missing_elements(tmp_path):
    real = _outputs() / "cmdstanpy-runset-good" / "bern-1.csv"
    head = _header_of(real).rsplit("\n", 2)[0] + "\n"  # drop the column line
    head = head.replace("num_samples = 100", "num_samples = 1000")
    names = ["lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__"]
    names += ["divergent__", "energy__"] + [f"z.{i % 25 + 1}.{i // 25 + 1}" for i in range(493)]
    rng = np.random.default_rng(1)
    paths = []
    for c in range(4):
        values = rng.normal(size=(1000, len(names)))
        p = tmp_path / f"big-{c + 1}.csv"
        body = "\n".join(",".join(f"{v:.6g}" for v in r) for r in values)
        p.write_text(head + ",".join(names) + "\n" + body + "\n")
        paths.append(p)
    loaded = load_draws(paths)
    # 493 of the 500 elements of z: the array is kept, the 7 missing are NaN and
    # that is said once (speed is measured by benchmarks/, never here).
    (problem,) = loaded.problems
    assert "493 of the 500 elements" in problem.message and problem.line == 39
    z = loaded.tree["posterior"].to_dataset()["z"]
    assert z.shape == (4, 1000, 25, 20) and int(np.isnan(z.values[0, 0]).sum()) == 7


def test_same_file_twice_and_copied_chain(tmp_path):
    good = _files("cmdstanpy-runset-good")
    copy = tmp_path / "bern-5.csv"
    copy.write_bytes(good[0].read_bytes())
    loaded = load_draws([good[0], good[1], good[0], copy])
    odd = _inconsistent(loaded.problems)
    assert [p.path for p in odd] == [good[0], copy]
    assert "given twice" in odd[0].message
    assert "identical" in odd[1].message and "bern-1.csv" in odd[1].message
    assert loaded.sources == [good[0], good[1]]


def test_chains_reading_different_data_files_noted(tmp_path):
    good = _files("cmdstanpy-runset-good")
    h = read_cmdstan_header(good[1])
    data_line = h.lines["data.file"]
    lines = good[1].read_text().splitlines(keepends=True)
    lines[data_line - 1] = "#   file = other.data.json\n"
    edited = tmp_path / "bern-2.csv"
    edited.write_text("".join(lines))
    loaded = load_draws([good[0], edited])
    assert [(p.kind, p.path, p.line) for p in loaded.problems] == [("note", edited, data_line)]
    assert loaded.tree["posterior"].to_dataset().sizes["chain"] == 2


# Headers below are written by hand after the layout of the real files above
# (CmdStan guide, "Stan CSV file format"; method sections from memory).
_OPTIMIZE = """# stan_version_major = 2
# stan_version_minor = 32
# stan_version_patch = 2
# model = bernoulli_model
# method = optimize
#   optimize
#     algorithm = lbfgs (Default)
#     iter = 2000 (Default)
# id = 1 (Default)
lp__,theta
-5.00402,0.200003
"""

_VARIATIONAL = """# stan_version_major = 2
# stan_version_minor = 32
# stan_version_patch = 2
# model = bernoulli_model
# method = variational
#   variational
#     algorithm = meanfield (Default)
#     output_samples = 3
lp__,log_p__,log_g__,theta
0,0,0,0.25
0,-6.9,-0.5,0.31
0,-7.1,-0.9,0.12
0,-6.8,-0.2,0.22
"""


def test_other_methods_load(tmp_path):
    opt = tmp_path / "opt.csv"
    opt.write_text(_OPTIMIZE)
    loaded = load_draws([opt])
    assert loaded.problems == []
    assert loaded.settings.method == "optimize" and loaded.settings.algorithm == "lbfgs"
    assert loaded.tree["posterior"].to_dataset()["theta"].values.tolist() == [[0.200003]]
    vi = tmp_path / "vi.csv"
    vi.write_text(_VARIATIONAL)
    loaded = load_draws([vi])
    # The first row of a variational output is the approximation's mean, not a draw.
    assert loaded.tree["posterior"].to_dataset()["theta"].values.tolist() == [[0.31, 0.12, 0.22]]
    assert set(loaded.tree["sample_stats"].to_dataset().data_vars) == {"lp", "log_p", "log_g"}


def test_bad_warmup_row_keeps_the_split(tmp_path):
    real = _outputs() / "arviz-stan-test-data-warmup" / "cmdstanpy_eight_schools_warmup-1.csv"
    columns, rows, numbers = _raw(real)
    lines = real.read_text().splitlines(keepends=True)
    broken_line = numbers[3]  # the 4th warmup row
    lines[broken_line - 1] = lines[broken_line - 1].rsplit(",", 1)[0] + "\n"
    path = tmp_path / "warm.csv"
    path.write_text("".join(lines))
    loaded = load_draws([path])
    assert [p.line for p in loaded.problems] == [broken_line]
    assert loaded.tree["warmup_posterior"].to_dataset().sizes["draw"] == 499
    post = loaded.tree["posterior"].to_dataset()
    assert post.sizes["draw"] == 100
    assert post["mu"].values[0, 0] == float(rows[500][columns.index("mu")])
