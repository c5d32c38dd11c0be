"""Speed and memory of reading CmdStan CSV into the normalized analysis (issue 13).

Writes a synthetic run in CmdStan's layout (default 4 chains x 1000 draws x 10,000
parameters, about 100 MB per chain; see ``--params``), then in the same process times:

- ``ours``: ``auditor.assemble.assemble`` of an analysis whose draws are the files,
  i.e. the whole load: headers, parse, chain checks, reshaping into named arrays,
  settings, sampler statistics, the DataTree;
- ``line_scan``: reading every file in 8 MiB chunks and counting its lines (a floor);
- ``polars``: ``polars.read_csv(path, comment_prefix="#")`` per file, as a user would
  call it (schema inferred), and ``polars_schema``: the same with every column
  declared Float64 (polars' fastest bare parse of these files);
- ``pandas``: ``pandas.read_csv(path, comment="#", engine="c")`` per file.

Each timing is the best of ``--repeat`` runs, interleaved so that load changes on a
shared machine hit all of them alike, after a warm-up load of a small run (imports).
Peak memory of the load is measured in a child process (the script re-run with
``--child``): RSS after imports and a warm-up on a small file, the high-water mark
reset through ``/proc/self/clear_refs``, then VmHWM
after ``assemble``; ``peak_over_array`` is ``(VmHWM - RSS before) / array``, where
the array is the float64 draws of every column, i.e. what the load must allocate
anyway. The last line is one JSON object.

    PYTHONPATH=. .venv/bin/python benchmarks/bench_read.py
    PYTHONPATH=. .venv/bin/python benchmarks/bench_read.py --params 1000 --repeat 2
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from tests.tools.cmdstan_writer import HEADER, SAMPLER_COLUMNS  # noqa: E402


def _columns(params: int) -> list[str]:
    """Sampler columns, then a mix of scalars, a vector, a matrix and a replicate
    vector (column-major, as CmdStan writes them) adding up to ``params``."""
    n_scalar = min(20, params)
    rest = params - n_scalar
    rows = 30 if rest >= 60 else 1
    n_matrix = (rest * 45 // 100) // rows * rows
    n_vector = (rest - n_matrix) // 2
    n_rep = rest - n_matrix - n_vector
    cols = list(SAMPLER_COLUMNS) + [f"s{i}" for i in range(1, n_scalar + 1)]
    cols += [f"beta.{i}" for i in range(1, n_vector + 1)]
    cols += [f"z.{i}.{j}" for j in range(1, n_matrix // rows + 1) for i in range(1, rows + 1)]
    cols += [f"y_rep.{i}" for i in range(1, n_rep + 1)]
    return cols


def write_run(folder: Path, chains: int, draws: int, params: int) -> list[Path]:
    """One CSV per chain; values with 6 significant digits as CmdStan writes them."""
    rng = np.random.default_rng(13)
    pool = np.array([f"{v:.6g}" for v in rng.normal(size=100_000)
                     * 10.0 ** rng.integers(-3, 3, 100_000)], dtype=object)
    cols = _columns(params)
    n_model = len(cols) - len(SAMPLER_COLUMNS)
    paths = []
    for c in range(chains):
        path = folder / f"bench-{c + 1}.csv"
        head = HEADER.format(model="bench_model", num_samples=draws, num_warmup=1000,
                             delta=0.8, max_depth=10, chain_id=c + 1, seed=1,
                             filename=path.name)
        metric = ", ".join(["1"] * n_model)
        with path.open("w") as fh:
            fh.write(head + ",".join(cols) + "\n# Adaptation terminated\n# Step size = 0.5\n"
                     f"# Diagonal elements of inverse mass matrix:\n# {metric}\n")
            for _ in range(draws):
                stats = (f"{-abs(rng.normal()) * 100:.6g},{rng.uniform():.6g},0.5,"
                         f"{rng.integers(2, 6)},{rng.integers(3, 31)},0,{rng.normal() * 100:.6g}")
                fh.write(stats + "," + ",".join(pool[rng.integers(0, len(pool), n_model)]) + "\n")
            fh.write("# \n#  Elapsed Time: 10.1 seconds (Warm-up)\n#                12.2 seconds "
                     "(Sampling)\n#                22.3 seconds (Total)\n# \n")
        paths.append(path)
    return paths


def _ours(paths: list[Path]):  # noqa: ANN202
    from auditor.assemble import assemble
    from auditor.model import AnalysisSpec

    analysis = assemble(AnalysisSpec(name="bench", draws=list(paths)))
    bad = [p for p in analysis.problems if p.kind in ("unreadable", "inconsistent-chains")]
    assert analysis.tree is not None and not bad, bad
    return analysis


def _status(key: str) -> float:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key):
                return int(line.split()[1]) / 1024
    return float("nan")


def child(folder: Path) -> None:
    """Peak memory of one load, printed as JSON (run in a fresh process)."""
    import polars  # noqa: F401 - imported before the baseline is taken, as the load needs it
    import xarray  # noqa: F401

    paths = sorted(folder.glob("bench-*.csv"))
    warm = folder / "warm"
    warm.mkdir(exist_ok=True)
    small = write_run(warm, 2, 20, 30)
    _ours(small)  # imports and first-call set-up outside the measurement
    before = _status("VmRSS")
    reset = True
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        reset = False
    analysis = _ours(paths)
    peak = _status("VmHWM")
    post = analysis.tree["posterior"]
    print(json.dumps({"rss_before_mb": round(before, 1), "peak_rss_mb": round(peak, 1),
                      "peak_reset": reset, "chains": int(post.sizes["chain"])}))


def main() -> None:
    """Write the run, time every reader, measure the load's memory, print JSON last."""
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--params", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child)
        return
    import pandas as pd
    import polars as pl

    with tempfile.TemporaryDirectory(prefix="bench-read-") as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        paths = write_run(folder, args.chains, args.draws, args.params)
        cols = _columns(args.params)
        size_mb = sum(p.stat().st_size for p in paths) / 1e6
        print(f"wrote {len(paths)} files, {size_mb:,.0f} MB, {len(cols):,} columns, "
              f"in {time.perf_counter() - t0:.1f} s")
        schema = {c: pl.Float64 for c in cols}

        def line_scan() -> None:
            for p in paths:
                with p.open("rb") as fh:
                    while chunk := fh.read(8 << 20):
                        chunk.count(b"\n")

        def polars_default() -> None:
            for p in paths:
                pl.read_csv(p, comment_prefix="#")

        def polars_schema() -> None:
            for p in paths:
                pl.read_csv(p, comment_prefix="#", schema=schema)

        def pandas_c() -> None:
            for p in paths:
                pd.read_csv(p, comment="#", engine="c")

        warm = folder / "warm"
        warm.mkdir()
        _ours(write_run(warm, 2, 20, 30))  # imports and first calls outside the timings
        runs = {"line_scan": line_scan, "polars": polars_default, "polars_schema": polars_schema,
                "pandas": pandas_c, "ours": lambda: _ours(paths)}
        best = {k: float("inf") for k in runs}
        for rep in range(args.repeat):
            for name, fn in runs.items():
                t = time.perf_counter()
                fn()
                dt = time.perf_counter() - t
                best[name] = min(best[name], dt)
                print(f"  run {rep + 1}: {name:14s} {dt:7.3f} s")
        # Same numbers as polars reads them (spot check of the first chain).
        analysis = _ours(paths)
        ref = pl.read_csv(paths[0], comment_prefix="#", schema=schema)
        post = analysis.tree["posterior"].to_dataset()
        z = post["z"].values[0]
        same = bool(np.array_equal(ref["z.2.3"].to_numpy(), z[:, 1, 2])
                    and np.array_equal(ref[cols[-1]].to_numpy(), analysis.tree[
                        "posterior_predictive"]["y_rep"].values[0][:, -1]))
        del analysis, post, z, ref

        proc = subprocess.run([sys.executable, __file__, "--child", str(folder)],
                              capture_output=True, text=True, check=True,
                              env={**os.environ, "PYTHONPATH": str(REPO)})
        mem = json.loads(proc.stdout.strip().splitlines()[-1])

    array_mb = args.chains * args.draws * len(cols) * 8 / 1e6
    peak_above = mem["peak_rss_mb"] - mem["rss_before_mb"]
    result = {
        "chains": args.chains, "draws": args.draws, "params": args.params,
        "columns": len(cols), "file_mb": round(size_mb, 1), "workers_cpus": os.cpu_count(),
        "repeat": args.repeat,
        **{f"t_{k}_s": round(v, 3) for k, v in best.items()},
        "ratio_vs_polars": round(best["ours"] / best["polars"], 3),
        "ratio_vs_polars_schema": round(best["ours"] / best["polars_schema"], 3),
        "speedup_vs_pandas": round(best["pandas"] / best["ours"], 2),
        "ratio_vs_line_scan": round(best["ours"] / best["line_scan"], 2),
        "peak_rss_mb": mem["peak_rss_mb"], "rss_before_mb": mem["rss_before_mb"],
        "peak_above_before_mb": round(peak_above, 1), "array_mb": round(array_mb, 1),
        "peak_over_array": round(peak_above / array_mb, 3),
        "peak_over_array_uses": "(VmHWM - RSS before the load) / float64 draws array",
        "peak_reset": mem["peak_reset"], "same_values_as_polars": same,
    }
    print(f"ours {best['ours']:.2f} s; polars {best['polars']:.2f} s (ratio "
          f"{result['ratio_vs_polars']}), with schema {best['polars_schema']:.2f} s; pandas "
          f"{best['pandas']:.2f} s (speedup {result['speedup_vs_pandas']}); peak "
          f"{peak_above:.0f} MB above {mem['rss_before_mb']:.0f} MB for a {array_mb:.0f} MB array")
    print(json.dumps(result))


if __name__ == "__main__":
    main()
