"""Peak memory and time of auditing one posterior larger than the memory budget, read lazily.

A posterior of 4 chains x 1000 draws x 100,000 quantities (3.2 GB of float64; AR(1) chains,
coefficient 0 to 0.9 across quantities, varied location and scale, as in
``bench_diagnostics.py``) with its sampler statistics (a few divergent transitions) is written
as a DataTree Zarr store, chunk by chunk through Dask (the whole array is never in memory; 1024
quantities per chunk by default), or with ``--format csv`` as four CmdStan CSV files (converted
by the audit to a temporary Zarr store). A child process (this script re-run with ``--child``)
then audits the project through the command line's entry point with the reports of
``--report`` (default json, md, sarif, html) and prints its time and peak memory: ``VmHWM``
(the high-water mark of the whole process, interpreter and libraries included) and the RSS
just before the audit.

Goal (issue 15): ``peak_over_array`` = peak RSS / array size at most 0.35 (about 1.1 GB for
3.2 GB), with the same results as an audit of the same draws in memory (checked on a smaller
size by ``tests/test_scale.py``). The last line printed is one JSON object.

    PYTHONPATH=. /work/main/.venv/bin/python benchmarks/bench_big.py
    PYTHONPATH=. /work/main/.venv/bin/python benchmarks/bench_big.py --quantities 10000 \\
        --lazy-share 0.001        # a quick run (320 MB; forced to the lazy path)
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from cli_child import status_mb, timed_audit  # noqa: E402  (this folder)


def _block(chains: int, draws: int, first: int, count: int, total: int) -> np.ndarray:
    """AR(1) draws of quantities ``first`` to ``first + count - 1`` (seeded by ``first``)."""
    rng = np.random.default_rng(1000 + first)
    phi = np.linspace(0.0, 0.9, total)[first:first + count]
    innovation = np.sqrt(1.0 - phi**2)
    x = np.empty((chains, draws, count))
    x[:, 0] = rng.standard_normal((chains, count))
    for t in range(1, draws):
        np.multiply(x[:, t - 1], phi, out=x[:, t])
        x[:, t] += innovation * rng.standard_normal((chains, count))
    x *= rng.uniform(0.1, 10.0, count)
    x += rng.normal(0.0, 5.0, count)
    return x


def _stats(chains: int, draws: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(7)
    diverging = np.zeros((chains, draws), dtype=bool)
    diverging[1, 100:108] = True
    return {"lp": rng.normal(-50, 5, (chains, draws)),
            "acceptance_rate": rng.uniform(0.7, 1, (chains, draws)),
            "step_size": np.full((chains, draws), 0.3),
            "tree_depth": np.full((chains, draws), 4),
            "n_steps": np.full((chains, draws), 15),
            "diverging": diverging,
            "energy": rng.normal(80, 7, (chains, draws))}


def write_zarr(path: Path, chains: int, draws: int, quantities: int, chunk: int) -> None:
    """The DataTree store, written chunk by chunk (Dask computes one chunk per thread)."""
    import dask.array as da
    import xarray as xr

    def make(block_info=None):  # noqa: ANN001, ANN202
        lo, hi = block_info[None]["array-location"][2]
        return _block(chains, draws, lo, hi - lo, quantities)

    sizes = [min(chunk, quantities - a) for a in range(0, quantities, chunk)]
    theta = da.map_blocks(make, chunks=((chains,), (draws,), tuple(sizes)), dtype=np.float64)
    posterior = xr.Dataset({"theta": (("chain", "draw", "theta_dim_0"), theta)},
                           coords={"chain": np.arange(chains), "draw": np.arange(draws)})
    stats = xr.Dataset({k: (("chain", "draw"), v) for k, v in _stats(chains, draws).items()},
                       coords={"chain": np.arange(chains), "draw": np.arange(draws)})
    tree = xr.DataTree.from_dict({"posterior": posterior, "sample_stats": stats})
    tree.attrs["inference_library"] = "bench"
    with contextlib.redirect_stderr(io.StringIO()):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            tree.to_zarr(path, mode="w")


def write_csv(folder: Path, chains: int, draws: int, quantities: int, chunk: int) -> None:
    """Four CmdStan CSV files, written draw rows at a time (quantities in chunks)."""
    from tests.tools.cmdstan_writer import HEADER

    stats = _stats(chains, draws)
    cols = ["lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__",
            "divergent__", "energy__"]
    keys = ["lp", "acceptance_rate", "step_size", "tree_depth", "n_steps", "diverging",
            "energy"]
    names = cols + [f"theta.{k + 1}" for k in range(quantities)]
    rows_per = 100
    for c in range(chains):
        path = folder / f"fit-{c + 1}.csv"
        with path.open("w") as fh:
            fh.write(HEADER.format(model="bench_model", num_samples=draws, num_warmup=1000,
                                   delta=0.8, max_depth=10, chain_id=c + 1, seed=2,
                                   filename=path.name))
            fh.write(",".join(names) + "\n# Adaptation terminated\n# Step size = 0.3\n"
                     "# Diagonal elements of inverse mass matrix:\n# 1\n")
            for r0 in range(0, draws, rows_per):
                r1 = min(draws, r0 + rows_per)
                part = np.empty((r1 - r0, quantities))
                for a in range(0, quantities, chunk):
                    n = min(chunk, quantities - a)
                    part[:, a:a + n] = _block(chains, draws, a, n, quantities)[c, r0:r1]
                st = np.column_stack([stats[k][c, r0:r1].astype(float) for k in keys])
                np.savetxt(fh, np.hstack([st, part]), fmt="%.6g", delimiter=",")
            fh.write("# \n#  Elapsed Time: 1 seconds (Warm-up)\n#                1 seconds "
                     "(Sampling)\n#                2 seconds (Total)\n# \n")


def child(project: Path, out: Path, reports: str) -> None:
    """Audit ``project`` through the CLI entry point; print one JSON line."""
    import dask.array  # noqa: F401
    import zarr  # noqa: F401

    import auditor.loaders.lazy  # noqa: F401  (imported before the RSS reading)

    status, elapsed, rss_before, report = timed_audit(project, out, reports)
    (analysis,) = report["analyses"]
    print(json.dumps({
        "status": status, "t_audit_s": elapsed, "rss_before_mb": rss_before,
        "peak_rss_mb": status_mb("VmHWM"), "rows": len(analysis["diagnostics"]),
        "rules_hit": sorted({f["rule"] for f in analysis["findings"]}),
        "rule_failed": [f["message"] for f in analysis["findings"]
                        if f["rule"] == "inputs.rule-failed"][:3],
        "too_large": [f["message"] for f in analysis["findings"]
                      if f["rule"] == "inputs.too-large"][:3],
    }))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--quantities", type=int, default=100_000)
    ap.add_argument("--chunk", type=int, default=1024, help="quantities per store chunk")
    ap.add_argument("--format", choices=("zarr", "csv"), default="zarr")
    ap.add_argument("--report", default="json,md,sarif,html")
    ap.add_argument("--lazy-share", type=float,
                    help="lazy_share written to the project's configuration (default: the "
                         "built-in default)")
    ap.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child is not None:
        child(args.child, args.out, args.report)
        return

    array_mb = args.chains * args.draws * args.quantities * 8 / 2**20
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), *filter(None, [os.environ.get("PYTHONPATH")])])}
    with tempfile.TemporaryDirectory(prefix="bench-big-") as tmp:
        project = Path(tmp) / "project"
        project.mkdir()
        if args.lazy_share is not None:
            (project / "bayes-auditor.toml").write_text(f"lazy_share = {args.lazy_share}\n")
        t0 = time.perf_counter()
        if args.format == "zarr":
            write_zarr(project / "fit.zarr", args.chains, args.draws, args.quantities,
                       args.chunk)
        else:
            write_csv(project, args.chains, args.draws, args.quantities, args.chunk)
        t_write = time.perf_counter() - t0
        on_disk = sum(p.stat().st_size for p in project.rglob("*") if p.is_file()) / 2**20
        print(f"posterior {args.chains} x {args.draws} x {args.quantities} ({array_mb:,.0f} MB "
              f"float64) written as {args.format} ({on_disk:,.0f} MB on disk) in "
              f"{t_write:.0f} s")
        proc = subprocess.run(
            [sys.executable, str(Path(__file__).resolve()), "--child", str(project),
             "--out", str(Path(tmp) / "report"), "--report", args.report],
            capture_output=True, text=True, env=env, check=False)
        if proc.returncode != 0:
            raise SystemExit(f"the child failed:\n{proc.stderr[-3000:]}")
        run = json.loads(proc.stdout.strip().splitlines()[-1])
        leftovers = [str(p) for p in Path(tempfile.gettempdir()).glob("bayes-auditor-draws-*")]
    if run["status"] not in (0, 1) or run["rows"] != args.quantities or run["rule_failed"]:
        raise SystemExit(f"the audit went wrong: {run}")
    ratio = run["peak_rss_mb"] / array_mb
    print(f"audit: {run['t_audit_s']:.1f} s; peak RSS {run['peak_rss_mb']:,.0f} MB "
          f"(RSS before the audit {run['rss_before_mb']:,.0f} MB) = {ratio:.3f} x the array "
          f"(goal <= 0.35); rules that hit: {', '.join(run['rules_hit'])}")
    print(json.dumps({
        "chains": args.chains, "draws": args.draws, "quantities": args.quantities,
        "format": args.format, "chunk": args.chunk, "reports": args.report,
        "lazy_share": args.lazy_share, "array_mb": round(array_mb, 1),
        "t_write_s": round(t_write, 1), "t_audit_s": round(run["t_audit_s"], 2),
        "rss_before_mb": round(run["rss_before_mb"], 1),
        "peak_rss_mb": round(run["peak_rss_mb"], 1),
        "peak_over_array": round(ratio, 4),
        "peak_above_before_over_array": round(
            (run["peak_rss_mb"] - run["rss_before_mb"]) / array_mb, 4),
        "rules_hit": run["rules_hit"], "too_large": run["too_large"],
        "temporary_folders_left": leftovers,
    }))


if __name__ == "__main__":
    main()
