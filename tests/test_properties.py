"""Property-based tests: every reader, fed generated and mutated inputs, never lets an
exception escape, never hangs, and names only files that exist in the project.

Issue 8 asks for at least 10,000 generated inputs per CI run within a bounded time;
the counts below add up to that, and ``tests/conftest.py`` prints the number of
inputs and the seconds they took at the end of the run (in ``.ci/run``'s output).
Inputs are derived from a fixed seed (``derandomize``) so a CI run is repeatable;
set ``BAYES_AUDITOR_FUZZ=1`` to draw new inputs on every run when hunting for bugs.

Each test starts from real inputs (the project's Stan and PyMC corpora, CmdStan CSV
in the layout CmdStan writes, Stan data files) and mutates them the way files get
damaged or crafted: lines lost, doubled or swapped, fields replaced by odd text,
bytes that are not UTF-8, huge numbers, paths that leave the project.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
import time
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from xarray import testing as xr_testing

from auditor.boundary import Boundary
from auditor.config import ConfigError, check_rule_options, load_config
from auditor.engine import NothingToAudit, run_audit
from auditor.loaders import load_draws, sniff_cmdstan
from auditor.loaders.stan_data import read_stan_data
from auditor.programs.pymc_source import read_pymc_text
from auditor.programs.stan.reader import read_stan_text
from auditor.registry import all_rules
from tests.conftest import PROPERTY_RUNS
from tests.tools.cmdstan_writer import write_run

REPO = Path(__file__).resolve().parent.parent
STAN_CORPUS = sorted((REPO / "tests" / "stan_corpus").glob("*.stan"))
PYMC_CORPUS = sorted((REPO / "tests" / "pymc_corpus").glob("*.py"))
RULES = all_rules()

#: Generated inputs per test; the total is at least 10,000 (issue 8).
COUNTS = {
    "cmdstan": 2200,
    "cmdstan_lazy": 300,
    "tables": 500,
    "rows": 300,
    "stan": 2400,
    "includes": 600,
    "pymc": 2400,
    "data": 2000,
    "config": 1200,
    "config_audit": 150,
}


def _settings(name: str) -> settings:
    return settings(
        max_examples=COUNTS[name],
        deadline=None,
        database=None,
        derandomize=os.environ.get("BAYES_AUDITOR_FUZZ") != "1",
        suppress_health_check=list(HealthCheck),
    )


class _Counted:
    """Counts one generated input and the time spent on it, for the run's summary."""

    def __enter__(self) -> None:
        self.start = time.perf_counter()

    def __exit__(self, *exc: object) -> None:
        PROPERTY_RUNS["inputs"] += 1
        PROPERTY_RUNS["seconds"] += time.perf_counter() - self.start


# --------------------------------------------------------------------------- mutations

_ODD_TEXT = st.sampled_from([
    "", "nan", "inf", "-inf", "1e", "-", "+", "1.2.3", "1e400", "9" * 400, "true", "0x1F",
    "\x00", "\ufeff", "é", "\udcff", "a,b", '"', "#", "lp__", "theta.0", "theta.4294967296",
    "theta.1.1.1.1.1.1.1.1", "y_rep.0.0.0", "chain", "draw", "x/y", " ", "\t", "\r",
    "#include \"/etc/passwd\"", "../../x", "/" * 300, "a" * 5000,
])


@st.composite
def _mutated(draw: st.DrawFn, text: str) -> str:
    """``text`` with a few line-level and field-level edits."""
    lines = text.split("\n")
    for _ in range(draw(st.integers(0, 4))):
        if not lines:
            break
        i = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from(["drop", "double", "swap", "field", "insert", "cut",
                                   "odd_line", "join", "names"]))
        if op == "names":
            # The first line that is not a comment: CmdStan's column names.
            i = next((k for k, ln in enumerate(lines) if ln and not ln.startswith("#")), i)
            op = "field"
        if op == "drop":
            del lines[i]
        elif op == "double":
            lines.insert(i, lines[i])
        elif op == "swap":
            j = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
        elif op == "field":
            fields = lines[i].split(",")
            k = draw(st.integers(0, len(fields) - 1))
            fields[k] = draw(_ODD_TEXT)
            lines[i] = ",".join(fields)
        elif op == "insert":
            lines.insert(i, draw(_ODD_TEXT))
        elif op == "cut":
            lines[i] = lines[i][: draw(st.integers(0, max(len(lines[i]), 0)))]
            lines = lines[: i + 1]
        elif op == "odd_line":
            lines[i] = draw(st.text(max_size=40))
        else:
            lines[i : i + 2] = ["".join(lines[i : i + 2])]
    return "\n".join(lines)


def _write(path: Path, text: str) -> None:
    path.write_bytes(text.encode("utf-8", "surrogatepass"))


def _inside(project: Path, named: Path | str) -> bool:
    p = Path(os.path.abspath(named))
    return p.is_relative_to(project) and (p.exists() or p.is_symlink())


# --------------------------------------------------------------------------- CmdStan CSV


def _small_run(folder: Path) -> list[Path]:
    rng = np.random.default_rng(3)
    stats = {"lp": rng.normal(size=(2, 6)), "treedepth": np.full((2, 6), 2),
             "divergent": np.zeros((2, 6)), "energy": rng.normal(size=(2, 6)),
             "stepsize": np.full((2, 6), 0.5)}
    return write_run(folder, "fit", "m_model",
                     {"mu": rng.normal(size=(2, 6)), "theta": rng.normal(size=(2, 6, 3))},
                     stats)


@given(data=st.data())
@_settings("cmdstan")
def test_cmdstan_reader_never_raises(tmp_path_factory, data):
    folder = tmp_path_factory.mktemp("csv")
    good, other = _small_run(folder)
    text = data.draw(_mutated(other.read_text()))
    # Alone, the damaged chain reaches every step of the reader; beside a good one,
    # the chain checks.
    alone = data.draw(st.booleans())
    with _Counted():
        _write(other, text)
        loaded = load_draws([other] if alone else [good, other], Boundary(folder))
        try:
            sniff_cmdstan(other, Boundary(folder))
        except OSError:
            pass
    for problem in loaded.problems:
        assert _inside(folder, problem.path), problem
        assert isinstance(problem.message, str) and problem.message
    if loaded.tree is not None and not alone:
        # The good chain is never lost because of its damaged neighbour.
        assert good in loaded.sources


@given(data=st.data())
@_settings("cmdstan_lazy")
def test_cmdstan_reader_in_pieces_reads_what_the_whole_reader_reads(tmp_path_factory, data):
    """The conversion of a run to a temporary Zarr store (draws larger than memory) never
    raises, reports the same problems and gives the same draws as the whole-file reader, and
    leaves nothing behind once cleaned up."""
    from auditor.loaders.lazy import load_lazily

    folder = tmp_path_factory.mktemp("csv")
    systemp = tmp_path_factory.mktemp("systemp")
    good, other = _small_run(folder)
    _write(other, data.draw(_mutated(other.read_text())))
    paths = [other] if data.draw(st.booleans()) else [good, other]
    saved, tempfile.tempdir = tempfile.tempdir, str(systemp)
    try:
        with _Counted():
            whole = load_draws(paths, Boundary(folder))
            lazily, cleanup = load_lazily(paths, Boundary(folder))
    finally:
        tempfile.tempdir = saved
    try:
        assert sorted(map(str, lazily.problems)) == sorted(map(str, whole.problems))
        assert (lazily.tree is None) == (whole.tree is None)
        if whole.tree is not None:
            assert lazily.sources == whole.sources
            assert lazily.settings == whole.settings
            assert sorted(lazily.tree.children) == sorted(whole.tree.children)
            for group in whole.tree.children:
                a = whole.tree[group].to_dataset()
                b = lazily.tree[group].to_dataset().load()
                xr_testing.assert_identical(a, b)
    finally:
        for action in cleanup:
            action()
    assert list(systemp.iterdir()) == []
# --------------------------------------------------------------------------- draws tables


_TABLE = (".chain,.iteration,.draw,mu,theta[1],theta[2],Sigma.1.2.,divergent__,lp__\n"
          + "".join(f"{c},{i},{(c - 1) * 4 + i},0.{c}{i},1.5,-2.{i},3e-{i},{i % 2},-{c}.5\n"
                    for c in (1, 2) for i in (1, 2, 3, 4)))


@given(text=_mutated(_TABLE), parquet=st.booleans())
@_settings("tables")
def test_draws_table_reader_never_raises(tmp_path_factory, text, parquet):
    folder = tmp_path_factory.mktemp("table")
    path = folder / "draws.csv"
    _write(path, text)
    if parquet:
        # The same (damaged) table as Parquet when polars can read it, else the bytes.
        import polars as pl

        try:
            pl.read_csv(path).write_parquet(folder / "draws.parquet")
        except Exception:  # noqa: BLE001 - the damaged text itself becomes the file
            (folder / "draws.parquet").write_bytes(path.read_bytes())
        path = folder / "draws.parquet"
    with _Counted():
        loaded = load_draws([path], Boundary(folder))
    for problem in loaded.problems:
        assert _inside(folder, problem.path), problem
        assert isinstance(problem.message, str) and problem.message
    if loaded.tree is not None and "posterior" in loaded.tree.children:
        post = loaded.tree["posterior"]
        assert {"chain", "draw"} <= set(post.dims)


_FIELDS = st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(repr),
                    st.floats(width=32).map(lambda v: f"{v:.6g}"), _ODD_TEXT)


@given(rows=st.lists(st.lists(_FIELDS, min_size=0, max_size=6), min_size=1, max_size=12),
       ending=st.sampled_from(["\n", "\r\n"]))
@_settings("rows")
def test_row_parsers_agree(rows, ending):
    # csv_rows: the polars and the plain Python parser give the same values and
    # say the same about every line (issue 13: a fast path must not change results).
    from auditor.loaders import csv_rows

    ncol = 4
    text = "".join(",".join(r) + ending for r in rows)
    region = text.encode("utf-8", "surrogatepass")
    n = len(rows)
    if text.count("\n") != n or "\r" in text.replace("\r\n", ""):
        return  # generated fields that hold line ends are not one line each
    a, b = np.full((n, ncol), -7.0), np.full((n, ncol), -7.0)
    with _Counted():
        try:
            fast = csv_rows._parse_polars(region, n, ncol, a, 0)
        except Exception:  # noqa: BLE001 - parse_region falls back to the plain parser so
            fast = None
        slow = csv_rows._parse_python(region, n, ncol, b, 0)
    if fast is None:
        return  # polars declined (text that is not UTF-8): the plain parser decides alone
    np.testing.assert_array_equal(a, b)
    assert (fast.n_odd, fast.odd) == (slow.n_odd, slow.odd)
    good_fast = np.ones(n, bool) if fast.good is None else fast.good
    good_slow = np.ones(n, bool) if slow.good is None else slow.good
    np.testing.assert_array_equal(good_fast, good_slow)


# --------------------------------------------------------------------------- Stan programs

_STAN_TOKENS = st.sampled_from([
    "{", "}", "(", ")", "[", "]", ";", "~", "<-", "=", "|", "real", "int", "vector[N]",
    "parameters", "model", "data", "normal(0, 1)", "T[0,]", "target +=", "<lower=0>",
    "for (i in 1:N)", "if (x)", "/*", "*/", "//", "\"", "'", "1e400", "9" * 500, ".", ",",
    "#include \"x.stan\"", "#include /etc/passwd", "#include <../../etc/hostname>",
])


@st.composite
def _stan_text(draw: st.DrawFn) -> str:
    base = STAN_CORPUS[draw(st.integers(0, len(STAN_CORPUS) - 1))].read_text()
    text = draw(_mutated(base))
    for _ in range(draw(st.integers(0, 3))):
        pos = draw(st.integers(0, len(text)))
        text = text[:pos] + " " + draw(_STAN_TOKENS) + " " + text[pos:]
    return text


@given(text=_stan_text())
@_settings("stan")
def test_stan_reader_never_raises(tmp_path_factory, text):
    project = tmp_path_factory.mktemp("stan")
    path = project / "model.stan"
    _write(path, text)
    with _Counted():
        summary = read_stan_text(text, path, Boundary(project))
    for problem in summary.syntax_errors:
        assert problem.line >= 1 and problem.column >= 1
        assert _inside(project, problem.path), problem


_INCLUDE_NAMES = st.one_of(
    st.sampled_from([
        "part.stan", "sub/part.stan", "../outside.stan", "/etc/passwd", "/proc/self/environ",
        "/dev/zero", "fifo.stan", "loop.stan", "model.stan", "x" * 5000, "sub/../part.stan",
        "link-out.stan", "missing.stan", "", " ", "sub",
    ]),
    st.text(min_size=1, max_size=30).filter(lambda s: "\n" not in s and "\r" not in s),
)


@given(names=st.lists(_INCLUDE_NAMES, min_size=1, max_size=4),
       style=st.sampled_from(['"{}"', "<{}>", "{}"]))
@_settings("includes")
def test_include_resolver_stays_inside(tmp_path_factory, names, style):
    base = tmp_path_factory.mktemp("inc")
    project = base / "proj"
    (project / "sub").mkdir(parents=True)
    (base / "outside.stan").write_text("SECRET-OUTSIDE-TEXT\n")
    (project / "part.stan").write_text("real a;\n")
    (project / "sub" / "part.stan").write_text("#include part.stan\nreal b;\n")
    os.mkfifo(project / "fifo.stan")
    (project / "loop.stan").symlink_to("loop.stan")
    (project / "link-out.stan").symlink_to(base / "outside.stan")
    text = "data {\n" + "".join(f"#include {style.format(n)}\n" for n in names) + "}\n"
    _write(project / "model.stan", text)
    with _Counted():
        summary = read_stan_text(text, project / "model.stan", Boundary(project))
    for inc in summary.includes:
        assert Path(os.path.realpath(inc)).is_relative_to(os.path.realpath(project)), inc
    for problem in summary.syntax_errors:
        assert _inside(project, problem.path), problem
        assert "SECRET-OUTSIDE-TEXT" not in problem.message


# --------------------------------------------------------------------------- PyMC sources

_PY_ARGS = st.sampled_from([
    "0", "1", "-1", "1e308", "9" * 400, "-" + "9" * 400, "1j", "None", "True", "'x'", "x",
    "mu", "pm.math.exp(x)", "[1, 2]", "(1,)", "{'a': 1}", "lambda: 0", "*args", "**kw",
    "np.ones(3)", "f'{x}'", "sigma=1", "observed=y", "shape=3", "dims='g'", "tau=0",
    "lam=0", "logit_p=0.5", "mu=1e-320", "sigma=-1",
])
_PY_DISTS = st.sampled_from([
    "Normal", "HalfNormal", "Cauchy", "StudentT", "Gamma", "InverseGamma", "Uniform", "Beta",
    "Poisson", "NegativeBinomial", "Bernoulli", "Binomial", "Deterministic", "Data",
    "Truncated", "Censored", "Potential", "Mixture", "Model", "Flat", "Unknown", "dist",
])


@st.composite
def _pymc_text(draw: st.DrawFn) -> str:
    if draw(st.booleans()):
        base = PYMC_CORPUS[draw(st.integers(0, len(PYMC_CORPUS) - 1))].read_text()
        return draw(_mutated(base))
    lines = ["import pymc as pm", "import numpy as np", "with pm.Model() as m:"]
    for i in range(draw(st.integers(0, 12))):
        args = ", ".join(draw(st.lists(_PY_ARGS, max_size=4)))
        name = draw(st.sampled_from([f"'v{i}'", "'mu'", "'y'", "name", ""]))
        call = f"pm.{draw(_PY_DISTS)}({name}{', ' if name and args else ''}{args})"
        if draw(st.booleans()):
            call = f"pm.Truncated({name or repr('t')}, pm.{draw(_PY_DISTS)}.dist({args}))"
        lines.append(f"    {draw(st.sampled_from(['x', 'mu', 'y', f'v{i}']))} = {call}")
    return "\n".join(lines) + "\n"


@given(text=_pymc_text())
@_settings("pymc")
def test_pymc_reader_never_raises(tmp_path_factory, text):
    project = tmp_path_factory.mktemp("pymc")
    with _Counted():
        summary = read_pymc_text(text, project / "model.py")
    for problem in summary.syntax_errors:
        assert problem.line >= 1 and problem.path == str(project / "model.py")
    for decl in summary.declarations.values():
        for dist in decl.priors:
            for arg in dist.args:
                assert arg.value is None or isinstance(arg.value, float)


# --------------------------------------------------------------------------- data files

_JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=True)
    | st.sampled_from(["NaN", "Inf", "-inf", "x", ""]),
    lambda children: st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=5),
                                                                       children, max_size=3),
    max_leaves=20,
)
_RDUMP_PARTS = st.sampled_from([
    "N <- 3", "y <- c(1, 2, 3)", "z <- structure(c(1,2,3,4), .Dim = c(2, 2))",
    "s <- 1:1e12", "i <- integer(1e15)", "d <- double(-1)", "q <- c(1:3, 4L)", "w <- NA",
    "x <- structure(c(1), .Dim = c(NaN))", "m <- structure(c(1), .Dim = c(1e400))",
    "k <- 99999999999999999999999L", "bad <- <- 3", "\"quoted\" <- 2", "e <- c(", ")", ",",
    "t <- 1e400", "u <- -Inf", "v <- c(1,,2)", "a <- 3; b <- 4",
])


@st.composite
def _data_text(draw: st.DrawFn) -> tuple[str, str]:
    if draw(st.booleans()):
        doc = draw(st.dictionaries(st.text(max_size=8), _JSON, max_size=6))
        text = json.dumps(doc, allow_nan=True)
        if draw(st.booleans()):
            text = draw(_mutated(text))
        return "data.json", text
    parts = draw(st.lists(_RDUMP_PARTS, max_size=8))
    return "data.R", draw(_mutated("\n".join(parts)))


@given(case=_data_text())
@_settings("data")
def test_data_readers_never_raise(tmp_path_factory, case):
    name, text = case
    project = tmp_path_factory.mktemp("data")
    path = project / name
    _write(path, text)
    with _Counted():
        values, problems = read_stan_data(path, Boundary(project))
    for problem in problems:
        assert _inside(project, problem.path)
    for value in values.values():
        assert np.asarray(value).size <= 50_000_000


# --------------------------------------------------------------------------- configuration

_ANY_VALUE = st.one_of(
    st.integers(-10**20, 10**20), st.floats(allow_nan=True), st.booleans(),
    st.text(max_size=12), st.lists(st.integers(), max_size=3),
    st.lists(st.text(max_size=6), max_size=3), st.just({"a": 1}),
    st.sampled_from(["json", "html", "error", "A4", "../out", "/etc/passwd", "*.csv",
                     "fits/*.csv", "/**/passwd", "../../elsewhere/*.csv", "y", [0.0, 1.0],
                     [1, 0], ["json", "md"]]),
)
_TOP_KEYS = ["gate", "report", "out", "max_figures", "max_table_rows", "page_size",
             "max_input_share", "gates", "tool"]
_ANALYSIS_KEYS = ["name", "draws", "prior_draws", "model", "data", "observed", "log_lik",
                  "predictive", "plausible_range", "drwas"]


def _toml_value(v: object) -> str:
    """A TOML literal for a generated value (a small emitter: tomllib only reads)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)  # a JSON string is a valid TOML basic string
    if isinstance(v, list):
        if len({type(x) for x in v}) > 1:
            v = [str(x) for x in v]
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


@st.composite
def _config_text(draw: st.DrawFn) -> str:
    out = []
    for key in draw(st.lists(st.sampled_from(_TOP_KEYS), max_size=4, unique=True)):
        out.append(f"{key} = {_toml_value(draw(_ANY_VALUE))}")
    for _ in range(draw(st.integers(0, 2))):
        out.append("[[analysis]]")
        keys = draw(st.lists(st.sampled_from(_ANALYSIS_KEYS), max_size=5, unique=True))
        for key in keys:
            out.append(f"{key} = {_toml_value(draw(_ANY_VALUE))}")
    for _ in range(draw(st.integers(0, 2))):
        rule = draw(st.sampled_from([r for r in RULES if r.thresholds] or RULES))
        out.append(f'[rules."{rule.id}"]')
        for key in draw(st.lists(st.sampled_from(
                ["enabled", "severity", *rule.thresholds]), max_size=3, unique=True)):
            out.append(f"{key} = {_toml_value(draw(_ANY_VALUE))}")
    text = "\n".join(out) + "\n"
    if draw(st.integers(0, 9)) == 0:
        text = draw(_mutated(text))
    return text


def _config_project(root: Path, text: str) -> Path:
    for i in (1, 2):
        (root / f"fit-{i}.csv").write_text(_CSV_TEXT[i - 1])
    _write(root / "bayes-auditor.toml", text)
    return root


_CSV_TEXT: list[str] = []


def _ensure_csv_text(tmp: Path) -> None:
    if not _CSV_TEXT:
        _CSV_TEXT.extend(p.read_text() for p in _small_run(tmp))


@given(text=_config_text())
@_settings("config")
def test_config_reader_types_every_key(tmp_path_factory, text):
    root = tmp_path_factory.mktemp("cfg")
    _ensure_csv_text(tmp_path_factory.mktemp("runs"))
    _config_project(root, text)
    with _Counted():
        try:
            cfg = load_config(root, None, {})
            check_rule_options(cfg, RULES)
        except ConfigError as exc:
            assert "bayes-auditor.toml" in str(exc) or "command line" in str(exc)
            return
    for spec in cfg.analyses:
        for problem in spec.problems:
            assert _inside(root, problem.path)


@given(text=_config_text())
@_settings("config_audit")
def test_config_errors_never_surface_as_failed_rules(tmp_path_factory, text):
    root = tmp_path_factory.mktemp("cfgaudit")
    _ensure_csv_text(tmp_path_factory.mktemp("runs"))
    _config_project(root, text)
    with _Counted():
        try:
            result = run_audit([root])
        except (ConfigError, NothingToAudit):
            return
    failed = [f.message for f in result.all_findings if f.rule_id == "inputs.rule-failed"]
    assert failed == []
    for f in result.all_findings:
        if f.location is not None:
            assert _inside(root, root / f.location.path), f
