"""Regression tests for every hostile input issue 8 lists: no file outside the project
is read, nothing hangs, nothing crashes, nothing is lost without a finding.

Each test builds a small project in a temporary folder from a good four-chain run
(the good case of ``sampling.rhat``, made by ``tests/tools/make_rule_cases.py``),
adds one hostile element, audits it through the command line (so the exit status
and the absence of an "internal error" are checked too) and looks for the finding
that names the file, the line where there is one, and the defect. Inputs that hung
or ran for minutes before the fix are run in a child process with a timeout, which
guards against a hang (it is not a speed measurement; ``benchmarks/`` measures speed).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from auditor.cli import main
from auditor.config import ConfigError, load_config

REPO = Path(__file__).resolve().parent.parent
GOOD_RUN = REPO / "rules" / "sampling" / "rhat" / "cases" / "good"
PROGRAM = "parameters {\n  real alpha;\n  vector[3] beta;\n}\nmodel {\n  alpha ~ normal(0, 1);\n" \
          "  beta ~ normal(0, 1);\n}\n"
#: Wall-clock guard for inputs that used to hang or take minutes (generous: a hang
#: detector on a loaded 2-core machine, not a speed goal).
GUARD_SECONDS = 60


def _project(tmp_path: Path, name: str = "proj") -> Path:
    root = tmp_path / name
    (root / "fits").mkdir(parents=True)
    for src in sorted(GOOD_RUN.glob("fit-*.csv")):
        shutil.copy(src, root / "fits" / src.name)
    return root


def _audit(root: Path, tmp_path: Path, *extra: str) -> tuple[int, dict]:
    """Run the CLI; return the exit status and the JSON report."""
    out = tmp_path / "report"
    code = main(["audit", str(root), "--out", str(out), "--report", "json", "--report", "html",
                 *extra])
    report = json.loads((out / "audit.json").read_text()) if code in (0, 1) else {}
    return code, report


def _findings(report: dict, rule: str | None = None) -> list[dict]:
    found = list(report.get("project_findings", []))
    for a in report.get("analyses", []):
        found.extend(a["findings"])
    return [f for f in found if rule is None or f["rule"] == rule]


def _html(tmp_path: Path) -> str:
    return (tmp_path / "report" / "audit.html").read_text()


def _analysis(report: dict, name: str) -> dict:
    (a,) = [a for a in report["analyses"] if a["name"] == name]
    return a


# --------------------------------------------------------------------------- leaks


@pytest.mark.parametrize("target,marker", [("/etc/passwd", "root:"),
                                           ("/proc/self/environ", "PATH=")])
def test_include_outside_the_project_is_refused_and_never_shown(tmp_path, target, marker):
    root = _project(tmp_path)
    (root / "models").mkdir()
    (root / "models" / "case.stan").write_text(f'#include "{target}"\n' + PROGRAM)
    code, report = _audit(root, tmp_path)
    assert code == 1
    (hit,) = _findings(report, "inputs.outside-project")
    assert hit["location"] == {"path": "models/case.stan", "line": 1, "column": None}
    assert target in hit["message"]
    html = _html(tmp_path)
    assert marker not in html and marker not in json.dumps(report)


def test_folder_link_leading_out_is_reported_and_not_followed(tmp_path):
    elsewhere = tmp_path / "elsewhere"
    shutil.copytree(GOOD_RUN, elsewhere)
    root = _project(tmp_path)
    (root / "shared").symlink_to(elsewhere)
    code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.outside-project")
    assert hit["location"]["path"] == "shared" and "leads outside" in hit["message"]
    # Only the run inside the project is audited.
    assert [a["sources"][0] for a in report["analyses"]] == ["fits/fit-1.csv"]


@pytest.mark.parametrize("line", [
    'model = "/etc/passwd"', 'data = "/etc/passwd"', 'draws = ["/etc/*"]',
    'draws = ["/**/passwd"]', 'draws = ["../../elsewhere/*.csv"]', 'model = "../m.stan"',
])
def test_configured_paths_outside_the_project_are_refused(tmp_path, line):
    root = _project(tmp_path)
    (tmp_path / "elsewhere").mkdir()
    shutil.copy(GOOD_RUN / "fit-1.csv", tmp_path / "elsewhere" / "x-1.csv")
    (root / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "a"\n' + ("" if line.startswith("draws") else
                                        'draws = ["fits/fit-*.csv"]\n') + line + "\n")
    code, report = _audit(root, tmp_path)
    assert code == 1
    (hit,) = _findings(report, "inputs.outside-project")
    assert hit["location"]["path"] == "bayes-auditor.toml"
    assert hit["location"]["line"] == (3 if line.startswith("draws") else 4)
    assert "root:" not in json.dumps(report)
    assert not [s for a in report["analyses"] for s in a["sources"] if "elsewhere" in s]


@pytest.mark.parametrize("out", ["../escaped-out", "/tmp/bayes-auditor-escaped"])
def test_configured_out_outside_the_project_is_refused(tmp_path, out, capsys):
    root = _project(tmp_path)
    (root / "bayes-auditor.toml").write_text(f'out = "{out}"\n')
    code = main(["audit", str(root)])
    assert code == 2
    err = capsys.readouterr().err
    assert "leads outside the project" in err and "bayes-auditor.toml" in err
    assert not (tmp_path / "escaped-out").exists()
    # --out on the command line is the user's own choice.
    assert main(["audit", str(root), "--out", str(tmp_path / "mine")]) == 2  # still refused
    (root / "bayes-auditor.toml").write_text('out = "reports/here"\n')
    assert main(["audit", str(root)]) == 0 and (root / "reports" / "here" / "audit.json").is_file()


def test_allow_read_widens_the_boundary_for_a_trusted_project(tmp_path):
    elsewhere = tmp_path / "elsewhere"
    shutil.copytree(GOOD_RUN, elsewhere)
    root = _project(tmp_path)
    (root / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "a"\ndraws = ["../elsewhere/fit-*.csv"]\n')
    code, report = _audit(root, tmp_path, "--allow-read", str(elsewhere))
    assert code == 0 and _analysis(report, "a")["chains"] == 4
    assert not _findings(report, "inputs.outside-project")


# --------------------------------------------------------------------------- silent losses


@pytest.mark.parametrize("content,defect", [
    (b"", "an empty file (0 bytes)"),
    (bytes(range(256)) * 8, "a binary file"),
    (b"name,value\nx,1\n", "not a CmdStan CSV"),
])
def test_a_file_that_is_not_a_chain_among_chains_is_reported(tmp_path, content, defect):
    root = _project(tmp_path)
    (root / "fits" / "fit-5.csv").write_bytes(content)
    code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.unreadable")
    assert hit["location"]["path"] == "fits/fit-5.csv" and defect in hit["message"]
    assert _analysis(report, "fit")["chains"] == 4  # the good chains are still audited


def test_byte_order_mark_is_read_and_noted(tmp_path):
    root = _project(tmp_path)
    path = root / "fits" / "fit-2.csv"
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    code, report = _audit(root, tmp_path)
    assert _analysis(report, "fit")["chains"] == 4
    (hit,) = _findings(report, "inputs.remark")
    assert hit["location"] == {"path": "fits/fit-2.csv", "line": 1, "column": None}


CONFIG_TYPES = [
    ('gate = 1', "'gate' must be one of"), ('report = 3', "'report' must be a report format"),
    ('out = 2', "'out' must be a string"), ('max_figures = "4"', "'max_figures' must be a whole"),
    ('max_table_rows = 1.5', "'max_table_rows' must be a whole"),
    ('page_size = 4', "'page_size' must be one of"),
    ('max_input_share = 2', "'max_input_share' must be a number above 0"),
    ('lazy_share = 0', "'lazy_share' must be a number above 0"),
    ('policy = 3', "'policy' must be a string"),
    ('accepted = ["a.toml"]', "'accepted' must be a string"),
    ('rules = 1', "'rules' must be a table"), ('analysis = 1', "'analysis' must be an array"),
    ('[rules."sampling.rhat"]\nmax_rhat = "1.05"', "'max_rhat' must be a finite number"),
    ('[rules."sampling.rhat"]\nmax_rhat = nan', "'max_rhat' must be a finite number"),
    ('[rules."sampling.chain-count"]\nmin_chains = 3.5', "'min_chains' must be a whole number"),
    ('[rules."sampling.rhat"]\nenabled = "no"', "'enabled' must be true or false"),
    ('[rules."sampling.rhat"]\nseverity = 2', "'severity' must be one of"),
    ('[rules."sampling.rhat"]\nseverity = "fatal"', "'severity' must be one of"),
    ('[rules]\n"sampling.rhat" = 1', "must be a table"),
    ('[[analysis]]\nname = 1\ndraws = "fits/*.csv"', "'name' must be a string"),
    ('[[analysis]]\nname = "a"\ndraws = 1', "'draws' must be a path or a list"),
    ('[[analysis]]\nname = "a"\ndraws = [1]', "'draws' must be a path or a list"),
    ('[[analysis]]\nname = "a"\nprior_draws = {x = 1}\ndraws = "fits/*.csv"',
     "'prior_draws' must be a path"),
    ('[[analysis]]\nname = "a"\nmodel = ["m.stan"]', "'model' must be a string"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\ndata = 3', "'data' must be a string"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nobserved = 3', "'observed' must be a var"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nlog_lik = ""', "'log_lik' must be a var"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\npredictive = "y rep"',
     "'predictive' must be a var"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nplausible_range = [1, "x"]',
     "'plausible_range' must be [low, high]"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nplausible_range = [0, inf]',
     "'plausible_range' must be [low, high]"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nchosen = "yes"',
     "'chosen' must be true or false"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nlog_prior = 1',
     "'log_prior' must be a variable name"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nsbc_ranks = true',
     "'sbc_ranks' must be a string"),
    ('[[analysis]]\nname = "a"\ndraws = "fits/*.csv"\nsbc_draws = 0',
     "'sbc_draws' must be a whole number >= 1"),
]


@pytest.mark.parametrize("text,message", CONFIG_TYPES, ids=[t for t, _ in CONFIG_TYPES])
def test_every_configuration_key_has_a_type(tmp_path, text, message, capsys):
    root = _project(tmp_path)
    (root / "bayes-auditor.toml").write_text(text + "\n")
    assert main(["audit", str(root), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert message in err and "bayes-auditor.toml" in err and "internal error" not in err
    assert "must be" in err and ", not " in err  # the expected type and what was given


def test_every_top_level_and_analysis_key_is_covered_by_the_type_tests():
    from auditor.config import ANALYSIS_TYPES, TOP_TYPES

    tested = " ".join(t for t, _ in CONFIG_TYPES)
    for key in [*TOP_TYPES, *ANALYSIS_TYPES, "enabled", "severity"]:
        assert f"{key} =" in tested, key


# --------------------------------------------------------------------------- hangs


def _guarded(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "auditor", *args], cwd=cwd, timeout=GUARD_SECONDS,
                          capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(REPO)})


@pytest.mark.parametrize("name", ["fits/x.csv", "fits/x.nc", "x.stan", "bayes-auditor.toml"])
def test_fifo_beside_a_run_is_reported_never_opened(tmp_path, name):
    root = _project(tmp_path)
    os.mkfifo(root / name)
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    assert "internal error" not in proc.stderr
    if name == "bayes-auditor.toml":
        assert proc.returncode == 2 and "FIFO" in proc.stderr
        return
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    (hit,) = _findings(report, "inputs.special-file")
    assert hit["location"]["path"] == name and "FIFO" in hit["message"]
    assert _analysis(report, "fit")["chains"] == 4


def test_link_loops_are_reported_not_followed(tmp_path):
    root = _project(tmp_path)
    (root / "a").symlink_to(".")
    (root / "b").symlink_to(".")
    (root / "fits" / "c").symlink_to("d")
    (root / "fits" / "d").symlink_to("c")
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    hits = sorted(f["location"]["path"] for f in _findings(report, "inputs.special-file"))
    assert hits == ["a", "b", "fits/c", "fits/d"], proc.stderr
    assert len(report["analyses"]) == 1


def test_lost_column_line_with_a_nan_column_is_reported_at_once(tmp_path):
    # Before: the data row was read as names ('0.123' -> an array indexed up to 123...)
    # and the audit ran past 60 s.
    root = _project(tmp_path)
    path = root / "fits" / "fit-3.csv"
    lines = path.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln and not ln.startswith("#"))
    del lines[k]
    rows = [i for i, ln in enumerate(lines) if ln and not ln.startswith("#") and i >= k]
    for i in rows:
        fields = lines[i].split(",")
        fields[-1] = "nan"
        lines[i] = ",".join(fields)
    path.write_text("\n".join(lines) + "\n")
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    (hit,) = [f for f in _findings(report, "inputs.unreadable")
              if f["location"]["path"] == "fits/fit-3.csv"]
    assert "line of column names is missing" in hit["message"], proc.stderr
    first_row = next(i for i, ln in enumerate(lines) if ln and not ln.startswith("#"))
    assert hit["location"]["line"] == first_row + 1


def test_ten_thousand_column_file_without_a_header_is_read(tmp_path):
    root = tmp_path / "wide"
    root.mkdir()
    head = (GOOD_RUN / "fit-1.csv").read_text().split("lp__")[0]
    row = ",".join(f"{(i % 97) / 7:.4f}" for i in range(10_000))
    (root / "wide-1.csv").write_text(head + "\n".join([row] * 200) + "\n")
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    assert proc.returncode == 1, proc.stderr
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    assert any("column names is missing" in f["message"]
               for f in _findings(report, "inputs.unreadable"))


def test_ten_thousand_statement_pymc_source_is_read(tmp_path):
    # Before: 140 s (ast.get_source_segment split the whole source on every call).
    root = tmp_path / "gen"
    root.mkdir()
    lines = ["import pymc as pm", "with pm.Model() as m:"]
    lines += [f"    x{i} = pm.Normal('x{i}', mu={f'x{i - 1}' if i else 0}, sigma=1)"
              for i in range(10_000)]
    (root / "generated.py").write_text("\n".join(lines) + "\n")
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    assert _analysis(report, "generated")["program"] == "generated.py", proc.stderr


# --------------------------------------------------------------------------- crashes


@pytest.mark.parametrize("seconds", ["1e", "-", "+", "1.2.3"])
def test_timing_line_that_is_not_a_number(tmp_path, seconds):
    root = _project(tmp_path)
    path = root / "fits" / "fit-1.csv"
    path.write_text(path.read_text().replace("Elapsed Time: 0.01 seconds",
                                             f"Elapsed Time: {seconds} seconds"))
    code, report = _audit(root, tmp_path)
    assert code == 0
    (hit,) = _findings(report, "inputs.remark")
    assert hit["location"]["path"] == "fits/fit-1.csv" and "not a number" in hit["message"]


def _rename_column(root: Path, old: str, new: str) -> Path:
    for path in sorted((root / "fits").glob("fit-*.csv")):
        text = path.read_text()
        k = text.index("\nlp__")
        names_end = text.index("\n", k + 1)
        path.write_text(text[:k] + text[k:names_end].replace(old, new) + text[names_end:])
    return root


@pytest.mark.parametrize("new,defect", [
    ("beta.0", "an index is 0"),
    ("beta.4294967296", "the indices span a 4294967296 array"),
    ("beta.1.1", "a different number of indices"),
])
def test_odd_indices_are_reported_and_never_allocated(tmp_path, new, defect):
    root = _rename_column(_project(tmp_path), "beta.2", new)
    code, report = _audit(root, tmp_path)
    hits = [f for f in _findings(report, "inputs.unreadable") if defect in f["message"]]
    assert hits and hits[0]["location"]["path"] == "fits/fit-1.csv"
    assert hits[0]["location"]["line"] is not None
    quantities = {row["quantity"] for row in _analysis(report, "fit")["diagnostics"]}
    assert new in quantities  # kept as its own quantity, under its own name


def test_duplicated_line_is_reported(tmp_path):
    root = _project(tmp_path)
    path = root / "fits" / "fit-2.csv"
    lines = path.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("lp__"))
    lines.insert(k + 1, lines[k])  # the column line twice: a row of names among numbers
    path.write_text("\n".join(lines) + "\n")
    code, report = _audit(root, tmp_path)
    assert code == 1
    hits = [f for f in _findings(report) if f["location"] and
            f["location"]["path"] == "fits/fit-2.csv"]
    assert hits and all(f["rule"].startswith("inputs.") for f in hits)


def test_sparse_file_and_dev_zero_are_never_read(tmp_path):
    # Run in a child limited to 3 GiB of address space, as in the issue: reading either
    # into memory would fail there.
    root = _project(tmp_path)
    with (root / "fits" / "fit-5.csv").open("wb") as fh:
        fh.truncate(20 * 1024**3)  # 20 GB of holes
    (root / "fits" / "zero-1.csv").symlink_to("/dev/zero")
    script = (
        "import resource, sys; resource.setrlimit(resource.RLIMIT_AS, (3 << 30, 3 << 30));"
        "from auditor.cli import main; sys.exit(main(sys.argv[1:]))"
    )
    proc = subprocess.run(
        [sys.executable, "-c", script, "audit", str(root), "--out", str(tmp_path / "r")],
        timeout=GUARD_SECONDS, capture_output=True, text=True,
        env={**os.environ, "PYTHONPATH": str(REPO), "OPENBLAS_NUM_THREADS": "1"})
    assert proc.returncode == 1, proc.stderr
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    by_path = {f["location"]["path"]: f for f in _findings(report) if f["location"]}
    assert "binary" in by_path["fits/fit-5.csv"]["message"]
    assert by_path["fits/zero-1.csv"]["rule"] == "inputs.outside-project"
    assert _analysis(report, "fit")["chains"] == 4


def test_file_over_the_size_limit_is_not_read(tmp_path):
    root = _project(tmp_path)
    (root / "bayes-auditor.toml").write_text("max_input_share = 0.000001\n")
    big = root / "fits" / "fit-1.csv"
    with big.open("ab") as fh:  # past the 64 MB floor of the limit, as holes
        fh.truncate(80 * 1024**2)
    code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.too-large")
    assert hit["location"]["path"] == "fits/fit-1.csv" and "limit" in hit["message"]


def test_long_names(tmp_path):
    root = _project(tmp_path)
    (root / "models").mkdir()
    (root / "models" / "case.stan").write_text(f'#include "{"x" * 5000}.stan"\n' + PROGRAM)
    code, report = _audit(root, tmp_path)
    hits = [f for f in _findings(report) if f["location"] and
            f["location"]["path"] == "models/case.stan"]
    assert any("too long" in f["message"] for f in hits)
    for key in ("draws", "model", "data"):
        long = "y" * 5000 if key != "draws" else "/".join(["z" * 200] * 60)
        (root / "bayes-auditor.toml").write_text(
            '[[analysis]]\nname = "a"\ndraws = ["fits/fit-*.csv"]\n'
            + (f'{key} = "{long}"\n' if key != "draws" else
               f'[[analysis]]\nname = "b"\ndraws = ["{long}"]\n'))
        code, report = _audit(root, tmp_path)
        assert code == 1, key
        assert any("too long" in f["message"] or "not found" in f["message"]
                   for f in _findings(report)), key
    assert main(["audit", str(root / ("w" * 12_000))]) == 2


@pytest.mark.parametrize("pyproject", [b"tool = 1\n", b'tool = "x"\n',
                                       b"[tool]\nbayes-auditor = 3\n"])
def test_pyproject_without_our_table(tmp_path, pyproject):
    root = _project(tmp_path)
    (root / "pyproject.toml").write_bytes(pyproject)
    if b"bayes-auditor" in pyproject:
        with pytest.raises(ConfigError, match="must be a table"):
            load_config(root, None, {})
    else:
        assert load_config(root, None, {}).source is None


@pytest.mark.parametrize("name", ["bayes-auditor.toml", "pyproject.toml"])
def test_configuration_that_is_not_utf8(tmp_path, name, capsys):
    root = _project(tmp_path)
    body = b'gate = "warning"\n# caf\xe9\n' if name == "bayes-auditor.toml" else \
        b'[tool.bayes-auditor]\ngate = "warning"\n# caf\xe9\n'
    (root / name).write_bytes(body)
    assert main(["audit", str(root), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert f"{name}, line {body.count(b'\n')}: not UTF-8 text" in err


def test_pymc_literal_beyond_any_float(tmp_path):
    root = tmp_path / "big"
    root.mkdir()
    (root / "model.py").write_text(
        "import pymc as pm\nwith pm.Model():\n    mu = pm.Normal('mu', 0, " + "9" * 400 + ")\n")
    code, report = _audit(root, tmp_path)
    assert code in (0, 1)
    assert _analysis(report, "model")["program"] == "model.py"


def test_undecodable_file_names(tmp_path):
    root = tmp_path / "names"
    root.mkdir()
    for src in sorted(GOOD_RUN.glob("fit-*.csv")):
        chain = src.stem.split("-")[1]
        target = os.fsencode(root) + b"/fit\xff\xfe-" + chain.encode() + b".csv"
        shutil.copy(src, os.fsdecode(target))
    code, report = _audit(root, tmp_path)
    assert code == 0
    (a,) = report["analyses"]
    assert a["chains"] == 4 and a["sources"][0] == "fit\\xff\\xfe-1.csv"
    assert "fit\\xff\\xfe" in _html(tmp_path)


def test_zarr_store_with_a_link_leading_out_is_not_opened(tmp_path):
    pytest.importorskip("zarr")
    import xarray as xr
    from arviz_base.datasets import LOCAL_DATASETS

    root = tmp_path / "store"
    root.mkdir()
    tree = xr.open_datatree(LOCAL_DATASETS["centered_eight"].filename, engine="h5netcdf")
    tree.load().to_zarr(root / "schools.zarr")
    (tmp_path / "secret.txt").write_text("OUTSIDE-TEXT")
    (root / "schools.zarr" / "posterior" / "stolen").symlink_to(tmp_path / "secret.txt")
    code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.outside-project")
    assert hit["location"]["path"] == "schools.zarr"
    assert "posterior/stolen" in hit["message"] and "OUTSIDE-TEXT" not in json.dumps(report)


def test_links_that_stay_inside_are_followed_once(tmp_path):
    root = tmp_path / "inside"
    (root / ".store").mkdir(parents=True)
    shutil.copytree(GOOD_RUN, root / ".store" / "run3")  # hidden: not walked by itself
    (root / "current").symlink_to(".store/run3")
    (root / "also").symlink_to("current")
    code, report = _audit(root, tmp_path)
    assert code == 0
    # Reached through two links, audited once, under the first name met.
    (a,) = report["analyses"]
    assert a["chains"] == 4 and a["sources"][0] == "also/fit-1.csv"


def test_socket_is_reported_never_opened(tmp_path):
    import socket

    root = _project(tmp_path)
    with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as sock:
        sock.bind(str(root / "fits" / "fit-9.csv"))
        code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.special-file")
    assert hit["location"]["path"] == "fits/fit-9.csv" and "socket" in hit["message"]
    assert _analysis(report, "fit")["chains"] == 4


# --------------------------------------------------------------------------- issue 13


def test_chain_killed_mid_write_and_broken_tables_beside_good_runs(tmp_path):
    # A second run whose chain 4 was killed mid-row (no line end, no timing footer),
    # a Parquet file that is not one, an empty one: each is reported with its file
    # (and line), and every other analysis is still audited; no traceback.
    root = _project(tmp_path)
    for src in sorted((root / "fits").glob("fit-*.csv")):
        shutil.copy(src, root / "fits" / src.name.replace("fit-", "other-"))
    cut = root / "fits" / "other-4.csv"
    lines = cut.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("lp__"))
    rows = [i for i, ln in enumerate(lines) if i > k and ln and not ln.startswith("#")]
    at = rows[120]
    cut.write_text("\n".join(lines[:at]) + "\n" + lines[at][: len(lines[at]) // 2])
    (root / "fits" / "junk.parquet").write_bytes(b"not parquet at all" * 10)
    (root / "fits" / "empty.parquet").write_bytes(b"")
    proc = _guarded(["audit", str(root), "--out", str(tmp_path / "r")], tmp_path)
    assert proc.returncode == 1 and "Traceback" not in proc.stderr, proc.stderr
    report = json.loads((tmp_path / "r" / "audit.json").read_text())
    assert _analysis(report, "fit")["chains"] == 4
    assert _analysis(report, "other")["chains"] == 3
    found = {(f["rule"], f["location"]["path"], f["location"]["line"]): f["message"]
             for f in _findings(report) if f["location"]}
    assert "ends inside a row" in found[("inputs.unreadable", "fits/other-4.csv", at + 1)]
    assert any(r == "inputs.inconsistent-chains" and p == "fits/other-4.csv" for r, p, _ in found)
    assert any(p == "fits/junk.parquet" and "not a Parquet file" in m
               for (r, p, _), m in found.items())
    assert any(p == "fits/empty.parquet" and "empty" in m for (r, p, _), m in found.items())


def test_nan_and_infinite_draws_are_reported_per_quantity(tmp_path):
    root = _project(tmp_path)
    path = root / "fits" / "fit-2.csv"
    lines = path.read_text().splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith("lp__"))
    col = lines[k].split(",").index("alpha")
    rows = [i for i, ln in enumerate(lines) if i > k and ln and not ln.startswith("#")]
    for i, value in zip(rows[:3], ["nan", "inf", "-inf"], strict=True):
        fields = lines[i].split(",")
        fields[col] = value
        lines[i] = ",".join(fields)
    path.write_text("\n".join(lines) + "\n")
    code, report = _audit(root, tmp_path)
    (hit,) = _findings(report, "inputs.nonfinite-draws")
    assert hit["quantity"] == "alpha" and "1 NaN and 2 infinite" in hit["message"]
    assert _analysis(report, "fit")["chains"] == 4
