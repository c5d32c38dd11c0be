"""Issue 15: draws read lazily give the audit read whole; audits on a Dask cluster give the
serial audit; a rule that raises on a worker is a finding; the demo's reports are
byte-identical from run to run.

The cluster tests start a real ``distributed.LocalCluster`` on the loopback address with two
worker processes (once for the module), and run the audit through ``--scheduler`` and
``--workers``.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import tomllib
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from auditor.cli import main
from auditor.diagnostics import flat_boxes, is_lazy, read_flat
from auditor.engine import run_audit
from auditor.loaders import load_draws
from auditor.reporters import write_reports

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "examples" / "demo"
FORMATS = ["json", "md", "sarif", "html"]
FILES = ["audit.json", "audit.md", "audit.sarif", "audit.html"]
#: A share of memory so small that every draws file is read lazily.
TINY = 1e-12


def _reports(out: Path) -> dict[str, bytes]:
    return {name: (out / name).read_bytes() for name in FILES}


def _cli(project: Path, out: Path, *extra: str) -> dict[str, bytes]:
    argv = ["audit", str(project), "--out", str(out), "--quiet", *extra]
    for fmt in FORMATS:
        argv += ["--report", fmt]
    assert main(argv) in (0, 1)
    return _reports(out)


def _api(project: Path, out: Path, lazy_share: float, **kwargs) -> dict[str, bytes]:
    """The audit as the command line runs it (the same report formats in the
    configuration), with ``lazy_share`` set."""
    result = run_audit([project], overrides={"report": FORMATS, "lazy_share": lazy_share},
                       **kwargs)
    write_reports(result, FORMATS, out)
    return _reports(out)


def _listing(folder: Path) -> dict[str, tuple[int, int]]:
    """Every file under ``folder`` with its size and modification time (nothing changed)."""
    return {p.relative_to(folder).as_posix(): (p.stat().st_size, p.stat().st_mtime_ns)
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo project (one copy for the module: reports name the project's folder), and
    its reports from one serial run of the command line."""
    base = tmp_path_factory.mktemp("scale")
    project = base / "demo"
    shutil.copytree(DEMO, project, ignore=shutil.ignore_patterns("audit-report"))
    return project, _cli(project, base / "serial"), base


@pytest.fixture(scope="module")
def zarr_project(tmp_path_factory):
    """A declared analysis whose posterior is a Zarr store (the demo's centered yards model,
    its theta in chunks of 2 elements), with the prior run as CmdStan CSV."""
    from auditor.loaders import load_draws

    project = tmp_path_factory.mktemp("zarr") / "yards"
    (project / "fits").mkdir(parents=True)
    for sub in ("models", "data"):
        shutil.copytree(DEMO / sub, project / sub)
    for p in sorted((DEMO / "fits").glob("yards_centered_prior-*.csv")):
        shutil.copy(p, project / "fits" / p.name)
    tree = load_draws(sorted((DEMO / "fits").glob("yards_centered-[0-9].csv"))).tree
    groups = {name: tree[name].to_dataset() for name in tree.children}
    groups["posterior"] = groups["posterior"].chunk({"theta_dim_0": 2, "y_rep_dim_0": 3,
                                                     "log_lik_dim_0": 4})
    store = xr.DataTree.from_dict(groups)
    store.attrs.update(tree.attrs)
    store.to_zarr(project / "fits" / "yards.zarr", mode="w")
    (project / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "yards"\nmodel = "models/yards_centered.stan"\n'
        'draws = "fits/yards.zarr"\nprior_draws = ["fits/yards_centered_prior-*.csv"]\n'
        'data = "data/yards.json"\nobserved = "y"\n')
    return project


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """Two analyses of the demo (the yards models: one data file, so they are compared)."""
    project = tmp_path_factory.mktemp("pair") / "yards"
    (project / "fits").mkdir(parents=True)
    for sub in ("models", "data"):
        shutil.copytree(DEMO / sub, project / sub)
    for p in sorted((DEMO / "fits").glob("yards_*.csv")):
        shutil.copy(p, project / "fits" / p.name)
    (project / "bayes-auditor.toml").write_text("".join(
        f'[[analysis]]\nname = "{m}"\nmodel = "models/yards_{m}.stan"\n'
        f'draws = "fits/yards_{m}-[0-9].csv"\nprior_draws = "fits/yards_{m}_prior-*.csv"\n'
        'data = "data/yards.json"\nobserved = "y"\n' for m in ("centered", "noncentered")))
    return project


@pytest.fixture(scope="module")
def cluster():
    """A real Dask cluster on the loopback address: two worker processes, one thread each."""
    import logging

    import distributed

    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                  silence_logs=logging.ERROR) as local:
        yield local.scheduler_address


@pytest.fixture
def own_tempdir(tmp_path, monkeypatch):
    """The system's temporary folder, for the conversions of this test (outside the project)."""
    folder = tmp_path / "systemp"
    folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(folder))
    return folder


# --------------------------------------------------------------------------- reading in blocks


@pytest.mark.parametrize("shape", [(), (7,), (3, 5), (2, 3, 4)])
def test_blocks_of_a_lazy_variable_are_its_elements_in_c_order(shape):
    import dask.array as dask_array

    rng = np.random.default_rng(15)
    values = rng.normal(size=(3, 4, *shape))
    lazy = dask_array.from_array(values, chunks=(3, 4, *(max(1, n // 2) for n in shape)))
    flat = values.reshape(3, 4, -1)
    size = flat.shape[2]
    for lo in range(size):
        for hi in range(lo + 1, size + 1):
            boxes = flat_boxes(shape, lo, hi)
            # At most two boxes per dimension and one between (common practice of range
            # decomposition); every box is rectangular.
            assert len(boxes) <= 2 * max(1, len(shape)) - 1
            np.testing.assert_array_equal(read_flat(lazy, lo, hi), flat[:, :, lo:hi])


def test_a_group_too_large_to_read_whole_is_left_out_with_a_finding():
    import dask.array as dask_array

    from auditor.loaders.lazy import settle

    big = xr.Dataset({"y_rep": (("chain", "draw", "n"),
                                dask_array.zeros((2, 10, 50), chunks=(2, 10, 10)))})
    small = xr.Dataset({"lp": (("chain", "draw"), dask_array.ones((2, 10), chunks=(2, 10)))})
    post = xr.Dataset({"theta": (("chain", "draw"), dask_array.ones((2, 10), chunks=(2, 5)))})
    groups = {"posterior_predictive": big, "sample_stats": small, "posterior": post}
    problems: list = []
    settle(groups, 1000, Path("fit.zarr"), problems)
    assert "y_rep" not in groups["posterior_predictive"].data_vars
    assert isinstance(groups["sample_stats"]["lp"].data, np.ndarray)  # loaded
    assert not isinstance(groups["posterior"]["theta"].data, np.ndarray)  # still lazy
    (problem,) = problems
    assert problem.kind == "too-large" and "y_rep" in problem.message


# --------------------------------------------------------------------------- same results


def test_the_demo_read_lazily_gives_the_same_reports(demo, own_tempdir):
    """Every CmdStan run of the demo converted to a temporary Zarr store and audited block
    by block: the same JSON, SARIF, Markdown and HTML, nothing left in the temporary folder,
    nothing changed in the project."""
    project, serial, base = demo
    before = _listing(project)
    import auditor.loaders.lazy as lazy

    seen: list[bool] = []
    original = lazy.load_lazily

    def spy(paths, gate):
        loaded, cleanup = original(paths, gate)
        posterior = loaded.tree["posterior"].to_dataset()
        seen.append(all(is_lazy(v.data) for v in posterior.data_vars.values()))
        return loaded, cleanup

    lazy.load_lazily = spy
    try:
        lazily = _api(project, base / "lazy", lazy_share=TINY)
    finally:
        lazy.load_lazily = original
    # Every CmdStan run the demo declares (posteriors and prior runs) was read lazily.
    declared = tomllib.loads((project / "bayes-auditor.toml").read_text())["analysis"]
    runs = [p for a in declared for key in ("draws", "prior_draws")
            for p in ([a[key]] if isinstance(a.get(key), str) else a.get(key, []))
            if p.endswith(".csv")]
    assert len(seen) == len(runs) and all(seen)
    for name in FILES:
        assert lazily[name] == serial[name], name
    assert list(own_tempdir.iterdir()) == []
    assert _listing(project) == before


def test_a_zarr_store_read_lazily_gives_the_same_reports(zarr_project, tmp_path, own_tempdir):
    whole = _api(zarr_project, tmp_path / "whole", lazy_share=1.0)
    lazily = _api(zarr_project, tmp_path / "lazy", lazy_share=TINY)
    assert lazily == whole
    report = json.loads(whole["audit.json"])
    (analysis,) = report["analyses"]
    # mu, tau and theta[1..5] in the table: the replicated draws and the pointwise
    # log-likelihood went to their own groups.
    assert len(analysis["diagnostics"]) == 7
    assert analysis["loo"] and analysis["sensitivity"]["rows"]
    assert list(own_tempdir.iterdir()) == []


# --------------------------------------------------------------------------- cluster


def test_on_a_cluster_lazy_blocks_are_tasks_and_the_reports_are_the_same(
        zarr_project, cluster, tmp_path, own_tempdir):
    whole = _api(zarr_project, tmp_path / "whole", lazy_share=1.0)
    import auditor.cluster

    tasks: list[int] = []
    original = auditor.cluster.Cluster.run_blocks

    def counting(self, fn, args):
        tasks.append(len(args))
        yield from original(self, fn, args)

    auditor.cluster.Cluster.run_blocks = counting
    try:
        spread = _api(zarr_project, tmp_path / "spread", lazy_share=TINY,
                      scheduler=cluster)
    finally:
        auditor.cluster.Cluster.run_blocks = original
    assert tasks and tasks[0] >= 1  # the posterior's windows went to the workers
    assert spread == whole


def test_a_rule_that_raises_on_a_worker_is_a_finding_with_its_id(pair, cluster, tmp_path):
    """Rules are loaded again from their folders on each worker: a copy of the rules with one
    more rule that raises on every analysis."""
    project = pair
    rules = tmp_path / "rules"
    shutil.copytree(REPO / "rules", rules, ignore=shutil.ignore_patterns("cases"))
    odd = rules / "sampling" / "odd-data"
    odd.mkdir()
    (odd / "rule.toml").write_text(
        'id = "sampling.odd-data"\ntitle = "Raises"\nstage = "sampling"\nseverity = "note"\n'
        'summary = "Raises."\nrationale = "A test rule."\nfix = "None."\n'
        'references = ["Common practice."]\n')
    (odd / "check.py").write_text(
        "def check(ctx):\n    raise ZeroDivisionError('odd data in ' + ctx.analysis.name)\n")
    result = run_audit([project], scheduler=cluster, rules_root=rules)
    failed = [f for f in result.all_findings if f.rule_id == "inputs.rule-failed"]
    assert len(failed) == len(result.analyses) == 2
    assert all("sampling.odd-data" in f.message and "ZeroDivisionError" in f.message
               for f in failed)
    assert {f.analysis for f in failed} == {a.name for a in result.analyses}
    # The other rules still ran on every analysis (the centered model's divergences are
    # found), and the comparison of the two ran after them.
    assert any(f.rule_id == "sampling.divergences" and f.analysis == "centered"
               for f in result.all_findings)
    assert result.comparisons and len(result.comparisons[0]["models"]) == 2


def test_the_demo_reports_are_byte_identical_run_to_run_and_with_two_workers(demo):
    project, serial, base = demo
    again = _cli(project, base / "again")
    workers = _cli(project, base / "workers", "--workers", "2")
    for name in FILES:
        assert again[name] == serial[name], name
        assert workers[name] == serial[name], name
    # No timing or host name in a report.
    text = b"".join(serial.values()).decode()
    assert "127.0.0.1" not in text and "tcp://" not in text
    host = os.uname().nodename
    assert len(host) < 6 or host not in text


def test_an_unreachable_scheduler_is_a_clear_error(demo, capsys, monkeypatch):
    import auditor.cluster

    monkeypatch.setattr(auditor.cluster, "CONNECT_TIMEOUT", "2s")
    project, _, base = demo
    status = main(["audit", str(project), "--out", str(base / "none"), "--quiet",
                   "--scheduler", "tcp://127.0.0.1:9"])
    assert status == 2
    assert "cannot reach the Dask scheduler" in capsys.readouterr().err


def test_no_conversion_inside_the_project_the_run_is_read_whole(tmp_path, monkeypatch):
    """A system temporary folder inside the project is never written to: the run is read
    whole instead, with a note."""
    project = tmp_path / "one"
    (project / "fits").mkdir(parents=True)
    for p in sorted((DEMO / "fits").glob("yards_centered-[0-9].csv")):
        shutil.copy(p, project / "fits" / p.name)
    inside = project / "tmp"
    inside.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(inside))
    before = _listing(project)
    lazily = run_audit([project], overrides={"lazy_share": TINY})
    monkeypatch.setattr(tempfile, "tempdir", None)
    whole = run_audit([project], overrides={"lazy_share": 1.0})
    assert list(inside.iterdir()) == [] and _listing(project) == before
    notes = [f for f in lazily.all_findings if "could not be converted" in f.message]
    assert len(notes) == 1 and notes[0].rule_id == "inputs.remark"
    assert lazily.analyses[0].diagnostics == whole.analyses[0].diagnostics


def test_each_analysis_is_released_before_the_next_is_loaded(demo, monkeypatch):
    """Streaming (issue 15, part 1): when an analysis is assembled, every analysis assembled
    before it is gone from memory (only its compact result is kept)."""
    import gc
    import weakref

    import auditor.engine

    real = auditor.engine.assemble
    earlier: list[weakref.ref] = []
    alive_at_load: list[int] = []

    def watched(*args, **kwargs):
        gc.collect()
        alive_at_load.append(sum(ref() is not None for ref in earlier))
        analysis = real(*args, **kwargs)
        earlier.append(weakref.ref(analysis))
        return analysis

    monkeypatch.setattr(auditor.engine, "assemble", watched)
    project, _, _ = demo
    result = run_audit([project])
    assert len(earlier) == len(result.analyses) >= 5
    assert alive_at_load == [0] * len(earlier)


def _mapped_rss_kb(name: str) -> int:
    """Resident kB of this process's mappings of files named ``name`` (``/proc/self/smaps``)."""
    total, inside = 0, False
    with open("/proc/self/smaps", encoding="utf-8", errors="replace") as fh:
        for line in fh:
            first = line.split(None, 1)[0]
            if "-" in first and not first.endswith(":"):
                inside = name in line
            elif inside and first == "Rss:":
                total += int(line.split()[1])
    return total


@pytest.mark.skipif(not Path("/proc/self/smaps").exists(), reason="Linux /proc needed")
def test_a_converted_run_holds_no_pages_of_its_rows(own_tempdir):
    """The rows of a CmdStan run converted for reading in blocks go to a mapped file whose pages
    are handed back as they are written: after the conversion the process holds none of them;
    the file was unlinked once mapped, and the store is removed by the cleanup."""
    from auditor.boundary import Boundary
    from auditor.loaders.cmdstan_csv import Run, read_run
    from auditor.loaders.lazy import load_lazily

    paths = sorted((DEMO / "fits").glob("yards_centered-[0-9].csv"))
    run = read_run(paths, Boundary(DEMO), scratch=own_tempdir)
    assert isinstance(run, Run)
    assert list(own_tempdir.iterdir()) == []  # unlinked once mapped
    assert _mapped_rss_kb("rows-1.f64") == 0
    values = np.array(run.rows(False))  # read back after the release: the same rows
    assert _mapped_rss_kb("rows-1.f64") > 0
    run.store.release()
    assert _mapped_rss_kb("rows-1.f64") == 0
    whole = load_draws(paths, Boundary(DEMO)).tree["posterior"].to_dataset()
    assert np.array_equal(values[..., run.columns.index("mu")], whole["mu"].values)
    del run, values
    loaded, cleanup = load_lazily(paths, Boundary(DEMO))
    assert is_lazy(loaded.tree["posterior"].to_dataset()["theta"].data)
    assert [p.name for p in own_tempdir.iterdir()] != []
    for action in cleanup:
        action()
    assert list(own_tempdir.iterdir()) == []


def test_no_rule_reads_a_lazily_read_posterior_whole(tmp_path, own_tempdir):
    """Every task Dask runs while a posterior larger than the blocks is audited lazily returns
    at most a block: no rule, figure or table reads the variable whole (a rule that did would
    load all of a posterior larger than memory; issue 15, part 2)."""
    from dask.callbacks import Callback

    rng = np.random.default_rng(20261202)
    chains, draws, k = 4, 100, 20_000  # 64 MB of float64, blocks of at most 16 MB
    theta = rng.standard_normal((chains, draws, k))
    theta[0, 3, 17] = np.nan  # one nonfinite draw, for the rule that counts them
    post = xr.Dataset({"theta": (("chain", "draw", "theta_dim_0"), theta)},
                      coords={"chain": np.arange(chains), "draw": np.arange(draws)})
    stats = xr.Dataset({"diverging": (("chain", "draw"), np.zeros((chains, draws), bool))})
    project = tmp_path / "wide"
    project.mkdir()
    tree = xr.DataTree.from_dict({"posterior": post.chunk({"theta_dim_0": 1000}),
                                  "sample_stats": stats})
    tree.to_zarr(project / "wide.zarr", mode="w")
    del theta, post, tree

    class Largest(Callback):
        largest = 0

        def _posttask(self, key, result, dsk, state, id):  # noqa: ANN001, A002
            Largest.largest = max(Largest.largest, int(getattr(result, "nbytes", 0)))

    with Largest():
        result = run_audit([project], overrides={"lazy_share": TINY})
    whole = chains * draws * k * 8
    assert 0 < Largest.largest <= whole // 3, (Largest.largest, whole)
    (one,) = result.analyses
    assert len(one.diagnostics) == k
    assert any(f.rule_id == "inputs.nonfinite-draws" for f in one.findings)


def _reference_runs() -> list[list[Path]]:
    """Every CmdStan run in ``../shared/reference-data/cmdstan-outputs/`` (see its README),
    chains grouped by file stem without the chain number, the broken runsets included."""
    import re

    from tests.conftest import require_shared

    runs: dict[tuple[Path, str], list[Path]] = {}
    for path in sorted((require_shared() / "cmdstan-outputs").rglob("*.csv")):
        stem = re.sub(r"[-_]?(output)?[-_]?\d+$", "", path.stem) or path.stem
        runs.setdefault((path.parent, stem), []).append(path)
    return list(runs.values())


def test_reference_runs_converted_for_blocks_read_as_the_whole_reader(own_tempdir):
    """Real CmdStan output (saved warmup, multi-index arrays, fixed_param, a model without
    parameters, the broken runsets): the conversion to a Zarr store gives the same problems,
    settings and groups, value for value, as reading the files whole."""
    from auditor.boundary import Boundary
    from auditor.loaders.lazy import load_lazily

    runs = _reference_runs()
    assert len(runs) >= 10
    compared = 0
    for paths in runs:
        gate = Boundary(paths[0].parents[1])
        whole = load_draws(paths, gate)
        lazily, cleanup = load_lazily(paths, gate)
        try:
            assert sorted(map(str, lazily.problems)) == sorted(map(str, whole.problems)), paths
            assert (lazily.tree is None) == (whole.tree is None), paths
            if whole.tree is None:
                continue
            assert lazily.settings == whole.settings
            assert sorted(lazily.tree.children) == sorted(whole.tree.children), paths
            for group in whole.tree.children:
                xr.testing.assert_identical(whole.tree[group].to_dataset(),
                                            lazily.tree[group].to_dataset().load())
            compared += 1
        finally:
            for action in cleanup:
                action()
    assert compared >= 8
    assert list(own_tempdir.iterdir()) == []


def test_a_converted_run_with_more_rows_than_promised_reads_as_the_whole_reader(tmp_path,
                                                                                 own_tempdir):
    """A header that promises fewer draws than the file holds makes the reader grow its
    array: in the mapped file of a conversion too, with the same rows and problems."""
    from auditor.boundary import Boundary
    from auditor.loaders.lazy import load_lazily
    from tests.tools.cmdstan_writer import write_run

    rng = np.random.default_rng(7)
    draws = 3000
    project = tmp_path / "project"  # own_tempdir lies beside it, outside
    paths = write_run(project / "fits", "fit", "m_model",
                      {"mu": rng.normal(size=(2, draws)), "z": rng.normal(size=(2, draws, 4))},
                      {"lp": rng.normal(size=(2, draws)), "divergent": np.zeros((2, draws)),
                       "treedepth": np.full((2, draws), 3), "stepsize": np.full((2, draws), 0.4)})
    for p in paths:
        text = p.read_text()
        assert f"num_samples = {draws}" in text
        p.write_text(text.replace(f"num_samples = {draws}", "num_samples = 10"))
    gate = Boundary(project)
    whole = load_draws(paths, gate)
    lazily, cleanup = load_lazily(paths, gate)
    try:
        assert any("promises" in str(p) for p in whole.problems)
        assert sorted(map(str, lazily.problems)) == sorted(map(str, whole.problems))
        for group in whole.tree.children:
            xr.testing.assert_identical(whole.tree[group].to_dataset(),
                                        lazily.tree[group].to_dataset().load())
        assert whole.tree["posterior"].sizes["draw"] == draws
    finally:
        for action in cleanup:
            action()
    assert list(own_tempdir.iterdir()) == []
