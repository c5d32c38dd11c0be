"""CmdStan CSV variants and broken chains (issue 13).

Files used, each named where it is used:

- ``../shared/reference-data/cmdstan-outputs/`` (see its README): real CmdStan
  output from 1.3 (``posterior-reference/blocker.*``) to 2.35.
- Hand-made files keep a real file's header (copied from the shared file named in
  the test) and change only what the test is about; expected values come from the
  text the test writes, never from the loader.
- Complex and tuple column names are those stanc3/CmdStan 2.32-2.33 write, as in
  StanIO.jl's test data (github.com/StanJulia/StanIO.jl, ``data/brian_tuples_python/
  output_1.csv``, column line: ``pair:1,pair:2,nested:1,nested:2:1,nested:2:2.real,
  nested:2:2.imag,arr_pair.1:1,...,arr_2d_pair.1.1:1,...``; and the program of
  ``generate_test_data/generate_test_cases.jl`` for ``complex z; complex_vector[2] zv``,
  written ``z.real,z.imag,zv.1.real,zv.1.imag,...``).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

import auditor.loaders.cmdstan_csv as cmdstan_csv
from auditor.engine import run_audit
from auditor.loaders import csv_rows, load_draws
from tests.conftest import require_shared


def _outputs() -> Path:
    return require_shared() / "cmdstan-outputs"


def _header_of(path: Path) -> str:
    """Comment header of a real file, up to (not including) its column line."""
    out = []
    for line in path.read_text().splitlines():
        if not line.startswith("#"):
            break
        out.append(line)
    return "\n".join(out) + "\n"


def _rows(path: Path) -> list[str]:
    return [ln for ln in path.read_text().splitlines()
            if ln and not ln.startswith("#") and not ln.startswith("lp__")]


FOOTER = ("# \n#  Elapsed Time: 0.01 seconds (Warm-up)\n#                0.01 seconds (Sampling)\n"
          "#                0.02 seconds (Total)\n# \n")


# ----------------------------------------------------------------- broken input, real files


def test_every_bad_runset_gives_an_inputs_finding_naming_file_line_and_defect():
    # README: in each run chain 4 is wrong: an extra column foo, 988 of 1000 draws,
    # model = foo in its header (line 4 of that file).
    folder = _outputs() / "cmdstanpy-runset-bad"
    result = run_audit([folder], only_rules={"inputs.inconsistent-chains", "inputs.unreadable"})
    by_run = {a.name: a for a in result.analyses}
    assert set(by_run) == {"bad-cols-bern", "bad-draws-bern", "bad-hdr-bern"}
    header = (folder / "bad-cols-bern-4.csv").read_text().splitlines()
    column_line = next(i + 1 for i, ln in enumerate(header) if ln.startswith("lp__"))
    assert header[column_line - 1].endswith(",foo")
    expect = {"bad-cols-bern": ("extra column foo", column_line),
              "bad-draws-bern": ("988 draws", None), "bad-hdr-bern": ("model = foo", 4)}
    for run, (defect, line) in expect.items():
        (hit,) = [f for f in by_run[run].findings if f.rule_id == "inputs.inconsistent-chains"]
        assert hit.location.path == f"{run}-4.csv" and hit.location.line == line
        assert defect in hit.message
        assert {f.location.path for f in by_run[run].findings} == {f"{run}-4.csv"}
        assert by_run[run].n_chains == 3  # the other chains are still audited


def test_output_bad_files_give_inputs_findings_with_lines():
    misc = _outputs() / "cmdstanpy-misc"
    cols, rows = misc / "output_bad_cols.csv", misc / "output_bad_rows.csv"
    result = run_audit([cols, rows], only_rules={"inputs.unreadable"})
    hits = {f.location.path: f for a in result.analyses for f in a.findings}
    text = cols.read_text().splitlines()
    bad = next(i + 1 for i, ln in enumerate(text)
               if ln and not ln.startswith("#") and ln.count(",") == 6)
    assert hits["output_bad_cols.csv"].location.line == bad
    assert "7 fields" in hits["output_bad_cols.csv"].message
    line = hits["output_bad_rows.csv"].location.line
    assert rows.read_text().splitlines()[line - 1].lstrip("# ").startswith("num_samples = 10")
    assert "promises 10 draws" in hits["output_bad_rows.csv"].message
    assert "9 data rows" in hits["output_bad_rows.csv"].message


# ----------------------------------------------------------------- header variants


def test_adaptation_block_and_timing_footer_in_settings():
    # cmdstanpy_eight_schools_warmup-1.csv: "# Step size = 0.298701", the diagonal
    # inverse metric on the line after "Diagonal elements of inverse mass matrix:",
    # "Elapsed Time: 0.042168 seconds (Warm-up)" and "0.010171 seconds (Sampling)".
    paths = sorted((_outputs() / "arviz-stan-test-data-warmup").glob("*.csv"))
    s = load_draws(paths).settings
    assert s.adapted_step_size[0] == pytest.approx(0.298701) and len(s.adapted_step_size) == 4
    assert s.inverse_metric == "diag"
    text = paths[0].read_text()
    metric = re.search(r"Diagonal elements of inverse mass matrix:\n# (.*)\n", text).group(1)
    assert s.inverse_metric_diagonal[0] == [float(v) for v in metric.split(",")]
    assert s.warmup_seconds[0] == pytest.approx(0.042168)
    assert s.sampling_seconds[0] == pytest.approx(0.010171)


def test_stan_1_3_timing_after_a_blank_line():
    # blocker.1.csv (CmdStan 1.3) has a blank line before its timing block and
    # "# Step size = 0.350484".
    path = require_shared() / "posterior-reference" / "blocker.1.csv"
    s = load_draws([path]).settings
    assert s.adapted_step_size == [pytest.approx(0.350484)]
    assert s.warmup_seconds == [pytest.approx(0.189802)]
    assert s.sampling_seconds == [pytest.approx(0.180837)]


def test_dense_metric_diagonal(tmp_path):
    # Header of cmdstanpy-runset-good/bern-1.csv with metric = dense_e; CmdStan writes
    # "# Elements of inverse mass matrix:" and one line per row (from memory of the
    # CmdStan guide's output section).
    real = _outputs() / "cmdstanpy-runset-good" / "bern-1.csv"
    head = _header_of(real).replace("metric = diag_e (Default)", "metric = dense_e")
    head = head.replace("num_samples = 100", "num_samples = 2")
    cols = "lp__,accept_stat__,stepsize__,treedepth__,n_leapfrog__,divergent__,energy__,a,b\n"
    body = ("# Adaptation terminated\n# Step size = 0.9\n# Elements of inverse mass matrix:\n"
            "# 2.5, 0.1\n# 0.1, 4\n-1,0.9,0.9,2,3,0,2,0.1,0.2\n-1,0.9,0.9,2,3,0,2,0.3,0.4\n")
    path = tmp_path / "dense-1.csv"
    path.write_text(head + cols + body + FOOTER)
    loaded = load_draws([path])
    assert loaded.problems == []
    assert loaded.settings.inverse_metric == "dense"
    assert loaded.settings.inverse_metric_diagonal == [[2.5, 4.0]]
    assert loaded.settings.adapted_step_size == [0.9]


def _edited(src: Path, dst: Path, *pairs: tuple[str, str]) -> Path:
    text = src.read_text()
    for old, new in pairs:
        assert old in text, old
        text = text.replace(old, new)
    dst.write_text(text)
    return dst


def test_settings_that_differ_between_chains_are_noted(tmp_path):
    # cmdstanpy-runset-good: 4 chains of one run (same seed and settings).
    good = sorted((_outputs() / "cmdstanpy-runset-good").glob("*.csv"))
    # Their headers say delta = 0.94999999999999996, max_depth = 11, seed = 12345.
    odd = _edited(good[3], tmp_path / "bern-4.csv",
                  ("delta = 0.94999999999999996", "delta = 0.8"),
                  ("max_depth = 11", "max_depth = 12"))
    seed = re.search(r"seed = (\d+)", good[0].read_text()).group(1)
    other = _edited(good[2], tmp_path / "bern-3.csv", (f"seed = {seed}", "seed = 777"))
    loaded = load_draws([good[0], good[1], other, odd])
    notes = [(p.path.name, p.line, p.message) for p in loaded.problems]
    assert all(p.kind == "note" for p in loaded.problems)
    lines = odd.read_text().splitlines()
    by_label = {m.split(" = ")[0].split("ran with ")[1]: (name, line) for name, line, m in notes
                if "ran with" in m}
    assert by_label["adapt delta"][0] == "bern-4.csv"
    assert lines[by_label["adapt delta"][1] - 1].strip() == "#       delta = 0.8"
    assert lines[by_label["max depth"][1] - 1].strip() == "#             max_depth = 12"
    (seed_note,) = [n for n in notes if "seed" in n[2]]
    assert seed_note[0] == "bern-3.csv" and "seed 777" in seed_note[2]
    assert f"share seed {seed}" in seed_note[2]
    assert loaded.tree["posterior"].sizes["chain"] == 4  # noted, not left out


def test_booleans_written_true_false_in_rows(tmp_path):
    # no_param_hmc_sample.csv (Stan 2.35) writes header booleans as false/true;
    # here its divergent__ column is written so too.
    real = _outputs() / "cmdstanpy-misc" / "no_param_hmc_sample.csv"
    lines = real.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("lp__"))
    rows = [i for i, ln in enumerate(lines) if i > k and ln and not ln.startswith("#")]
    for n, i in enumerate(rows):
        fields = lines[i].split(",")
        fields[5] = "true" if n % 2 else "false"
        lines[i] = ",".join(fields)
    path = tmp_path / "bools.csv"
    path.write_text("\n".join(lines) + "\n")
    loaded = load_draws([path])
    assert loaded.problems == []
    div = loaded.tree["sample_stats"]["diverging"].values[0]
    assert div.tolist() == [n % 2 == 1 for n in range(len(rows))]


def _complex_tuple_file(path: Path, draws: int = 3) -> tuple[list[str], np.ndarray]:
    """A chain with complex and tuple columns; value of row r, column j is r * 1000 + j."""
    real = _outputs() / "cmdstanpy-runset-good" / "bern-1.csv"
    head = _header_of(real).replace("num_samples = 100", f"num_samples = {draws}")
    names = ["lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__",
             "divergent__", "energy__", "base", "z.real", "z.imag", "zv.1.real", "zv.1.imag",
             "zv.2.real", "zv.2.imag", "pair:1", "pair:2", "nested:1", "nested:2:1",
             "nested:2:2.real", "nested:2:2.imag", "arr_pair.1:1", "arr_pair.1:2",
             "arr_pair.2:1", "arr_pair.2:2"]
    names += [f"arr_2d_pair.{i}.{j}:{k}" for j in (1, 2) for i in (1, 2, 3) for k in (1, 2)]
    values = np.array([[r * 1000.0 + j for j in range(len(names))] for r in range(draws)])
    body = "\n".join(",".join(f"{v:g}" for v in row) for row in values)
    path.write_text(head + ",".join(names) + "\n" + body + "\n" + FOOTER)
    return names, values


def test_complex_and_tuple_columns(tmp_path):
    names, values = _complex_tuple_file(tmp_path / "ct-1.csv")
    loaded = load_draws([tmp_path / "ct-1.csv"])
    assert loaded.problems == []
    post = loaded.tree["posterior"].to_dataset()

    def col(name: str) -> np.ndarray:
        return values[:, names.index(name)]

    z = post["z"]
    assert z.dims == ("chain", "draw", "z_complex")
    assert list(z.coords["z_complex"].values) == ["real", "imag"]
    np.testing.assert_array_equal(z.values[0, :, 1], col("z.imag"))
    np.testing.assert_array_equal(post["zv"].values[0, :, 1, 0], col("zv.2.real"))
    np.testing.assert_array_equal(post["pair:2"].values[0], col("pair:2"))
    np.testing.assert_array_equal(post["nested:2:2"].values[0, :, 1], col("nested:2:2.imag"))
    assert post["arr_pair:1"].shape == (1, 3, 2)
    np.testing.assert_array_equal(post["arr_pair:1"].values[0, :, 1], col("arr_pair.2:1"))
    assert post["arr_2d_pair:2"].shape == (1, 3, 3, 2)
    np.testing.assert_array_equal(post["arr_2d_pair:2"].values[0, :, 2, 1],
                                  col("arr_2d_pair.3.2:2"))


def test_multi_index_arrays_are_views_of_one_array():
    # multidim_vars.csv (Stan 2.26): y_rep.i.j.k written column-major; reshaped
    # without copying the draws (memory, issue 13): every variable lies inside the
    # one array the rows were parsed into (its columns interleave, so the bytes of
    # two variables are disjoint but their spans overlap).
    loaded = load_draws([_outputs() / "cmdstanpy-misc" / "multidim_vars.csv"])
    post = loaded.tree["posterior"].to_dataset()
    y_rep = post["y_rep"].values
    others = [post[v].values for v in post.data_vars if v != "y_rep"]
    assert y_rep.ndim == 5 and others
    assert all(np.may_share_memory(y_rep, o) and not o.flags.owndata for o in others)
    assert not y_rep.flags.owndata


# ----------------------------------------------------------------- chains cut short or unfinished


def _cut(src: Path, dst: Path, rows_kept: int, fields_kept: int) -> tuple[Path, int]:
    """``src`` up to ``rows_kept`` complete data rows and part of the next row, no
    footer, no line end: a chain killed mid-write. Returns the cut line's number."""
    lines = src.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("lp__"))
    data = [i for i, ln in enumerate(lines) if i > k and ln and not ln.startswith("#")]
    cut_at = data[rows_kept]
    partial = ",".join(lines[cut_at].split(",")[:fields_kept])
    dst.write_text("\n".join(lines[:cut_at]) + "\n" + partial)
    return dst, cut_at + 1


def test_chain_killed_mid_write_alone_keeps_its_complete_rows(tmp_path):
    # bern-2.csv of cmdstanpy-runset-good (8 columns, 100 draws), cut inside row 61.
    src = _outputs() / "cmdstanpy-runset-good" / "bern-2.csv"
    path, line = _cut(src, tmp_path / "bern-2.csv", 60, 3)
    loaded = load_draws([path])
    cut = [p for p in loaded.problems if "ends inside a row" in p.message]
    assert len(cut) == 1 and cut[0].line == line and cut[0].path == path
    assert "3 of the 8 fields" in cut[0].message and "60 complete rows" in cut[0].message
    assert any("promises 100 draws" in p.message and "61 data rows" in p.message
               for p in loaded.problems)
    theta = loaded.tree["posterior"]["theta"].values[0]
    assert theta.tolist() == [float(r.split(",")[-1]) for r in _rows(src)[:60]]


def test_chain_killed_mid_write_among_finished_chains(tmp_path):
    good = sorted((_outputs() / "cmdstanpy-runset-good").glob("*.csv"))
    path, _ = _cut(good[1], tmp_path / "bern-2.csv", 60, 5)
    loaded = load_draws([good[0], path, good[2], good[3]])
    mine = [p for p in loaded.problems if p.path == path]
    assert any("ends inside a row" in p.message for p in mine)
    assert any("timing footer" in p.message for p in mine)
    assert any(p.kind == "inconsistent-chains" and "60 draws" in p.message for p in mine)
    assert loaded.sources == [good[0], good[2], good[3]]


def test_chain_without_footer_while_others_have_one(tmp_path):
    good = sorted((_outputs() / "cmdstanpy-runset-good").glob("*.csv"))
    text = good[3].read_text()
    path = tmp_path / "bern-4.csv"
    path.write_text(text[: text.index("# \n#  Elapsed Time")])
    loaded = load_draws([*good[:3], path])
    (problem,) = loaded.problems
    assert problem.path == path and "timing footer" in problem.message
    assert loaded.tree["posterior"].sizes["chain"] == 4  # its 100 rows are complete


def test_chain_growing_while_read(tmp_path, monkeypatch):
    # Rows are appended to the file between reading its header and its rows, as
    # when CmdStan is still writing it.
    good = sorted((_outputs() / "cmdstanpy-runset-good").glob("*.csv"))
    text = good[0].read_text()
    rows = _rows(good[0])
    path = tmp_path / "bern-1.csv"
    path.write_text(text[: text.index("# \n#  Elapsed Time")].rsplit("\n", 41)[0] + "\n")
    real = cmdstan_csv._read_rows

    def appending(chain, *args, **kwargs):  # noqa: ANN001, ANN202
        with path.open("a") as fh:
            fh.write("\n".join(rows[60:70]) + "\n")
        return real(chain, *args, **kwargs)

    monkeypatch.setattr(cmdstan_csv, "_read_rows", appending)
    loaded = load_draws([path])
    grew = [p for p in loaded.problems if "changed while it was read" in p.message]
    assert len(grew) == 1 and grew[0].path == path and "still being written" in grew[0].message
    assert loaded.tree["posterior"].sizes["draw"] == 70


# ----------------------------------------------------------------- the two parsers agree


_ODD = ["nan", "inf", "-inf", "1e400", "true", "false", "abc", " 1.5", "1_0", "", "-", "1e",
        "0x1F", "\u0661"]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_polars_and_python_parsers_agree(seed):
    rng = np.random.default_rng(seed)
    ncol = 300
    lines = []
    for r in range(400):  # about 1 MB: above the size where polars is used
        values = [f"{v:.6g}" for v in rng.normal(size=ncol) * 10.0 ** rng.integers(-8, 8, ncol)]
        if r % 37 == 5:
            values[int(rng.integers(ncol))] = _ODD[int(rng.integers(len(_ODD)))]
        if r % 101 == 7:
            values = values[:-1]  # a short row
        if r % 89 == 3:
            values = ["  "] if r % 2 else []  # a blank line
        lines.append(",".join(values))
    region = ("\n".join(lines) + "\n").encode()
    assert len(region) >= csv_rows.SMALL_REGION
    a, b = np.full((400, ncol), -7.0), np.full((400, ncol), -7.0)
    fast = csv_rows._parse_polars(region, 400, ncol, a, 0)
    slow = csv_rows._parse_python(region, 400, ncol, b, 0)
    assert fast is not None
    np.testing.assert_array_equal(a, b)  # NaN equal to NaN, every value identical
    assert fast.n_odd == slow.n_odd and fast.odd == slow.odd
    np.testing.assert_array_equal(fast.good, slow.good)
    np.testing.assert_array_equal(fast.blank, slow.blank)
    np.testing.assert_array_equal(fast.fields[fast.good], slow.fields[slow.good])


def test_wide_file_through_the_fast_path_matches_the_text(tmp_path, monkeypatch):
    # 2 chains x 40 draws x 3000 columns (about 1 MB per chain): several regions,
    # read by polars on worker threads; every value equals Python's float of its text.
    real = _outputs() / "cmdstanpy-runset-good" / "bern-1.csv"
    rng = np.random.default_rng(5)
    names = ["lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__",
             "divergent__", "energy__"] + [f"x.{i}" for i in range(1, 3001)]
    texts = []
    for c in (1, 2):
        head = _header_of(real).replace("num_samples = 100", "num_samples = 40")
        rows = [",".join(f"{v:.6g}" for v in rng.normal(size=len(names))) for _ in range(40)]
        texts.append(rows)
        (tmp_path / f"w-{c}.csv").write_text(
            head + ",".join(names) + "\n# Adaptation terminated\n" + "\n".join(rows) + "\n"
            + FOOTER)
    monkeypatch.setattr(cmdstan_csv, "CHUNK", 256 * 1024)  # several regions per file
    monkeypatch.setattr(cmdstan_csv, "_workers", lambda total: 2)  # and two parser threads
    loaded = load_draws([tmp_path / "w-1.csv", tmp_path / "w-2.csv"])
    assert loaded.problems == []
    x = loaded.tree["posterior"]["x"].values
    expect = np.array([[[float(v) for v in r.split(",")[7:]] for r in rows] for rows in texts])
    np.testing.assert_array_equal(x, expect)


def test_tuple_and_complex_draws_match_their_declarations(tmp_path):
    # The program that would write the columns of _complex_tuple_file (types as in
    # StanIO.jl's generating programs): no stale-fit finding for tuple slots.
    _complex_tuple_file(tmp_path / "ct-1.csv")
    (tmp_path / "bernoulli.stan").write_text(
        "parameters {\n  real base;\n}\nmodel {\n  base ~ normal(0, 1);\n}\n"
        "generated quantities {\n  complex z = to_complex(base, 1);\n"
        "  complex_vector[2] zv = [z, z]';\n  tuple(real, real) pair = (base, base);\n"
        "  tuple(real, tuple(real, complex)) nested = (base, (base, z));\n"
        "  array[2] tuple(real, real) arr_pair = {pair, pair};\n"
        "  array[3, 2] tuple(real, real) arr_2d_pair;\n}\n")
    result = run_audit([tmp_path], only_rules={"inputs.stale-fit"})
    (analysis,) = result.analyses
    assert analysis.program == "bernoulli.stan"
    assert analysis.findings == []


def test_more_rows_than_the_header_promises(tmp_path, monkeypatch):
    # bern-1.csv's 100 rows under a header that promises 5: the array grows while
    # regions are being parsed on two threads; every row is kept and reported.
    real = _outputs() / "cmdstanpy-runset-good" / "bern-1.csv"
    path = _edited(real, tmp_path / "bern-1.csv", ("num_samples = 100", "num_samples = 5"))
    monkeypatch.setattr(cmdstan_csv, "CHUNK", 512)
    monkeypatch.setattr(cmdstan_csv, "_workers", lambda total: 2)
    loaded = load_draws([path])
    (problem,) = loaded.problems
    assert "promises 5 draws" in problem.message and "100 data rows" in problem.message
    theta = loaded.tree["posterior"]["theta"].values[0]
    assert theta.tolist() == [float(r.split(",")[-1]) for r in _rows(real)]


def test_windows_line_ends_read_as_the_original(tmp_path, monkeypatch):
    # cmdstan-outputs/arviz-stan-test-data-warmup chain 1 saved with CRLF line ends
    # (a file passed through a Windows editor); small regions so polars reads them.
    real = _outputs() / "arviz-stan-test-data-warmup" / "cmdstanpy_eight_schools_warmup-1.csv"
    path = tmp_path / "crlf-1.csv"
    path.write_bytes(real.read_bytes().replace(b"\n", b"\r\n"))
    monkeypatch.setattr(cmdstan_csv, "CHUNK", 96 * 1024)
    a, b = load_draws([real]), load_draws([path])
    assert b.problems == []
    for group in ("posterior", "warmup_posterior", "sample_stats"):
        for v in a.tree[group].data_vars:
            np.testing.assert_array_equal(a.tree[group][v].values, b.tree[group][v].values)
    assert a.settings.adapted_step_size == b.settings.adapted_step_size
    assert a.settings.warmup_seconds == b.settings.warmup_seconds
