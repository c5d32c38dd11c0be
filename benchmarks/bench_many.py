"""Time and peak memory of auditing projects of many analyses: does the cost per analysis stay flat?

A project of ``N`` analyses is written (each a CmdStan run of 4 chains x 1000 draws x 200
quantities, with sampler columns, all paired with one Stan program), for N in 10, 50 and 200
by default. The largest project is written once; the smaller ones hold hard links to its first
files (regular files inside each project, so the boundary admits them). Each size is audited in
its own child process (this script re-run with ``--child``), through the command line's entry
point with the reports of ``--report`` (default json, html, md, sarif), so that the child's
peak memory (``VmHWM``) is that audit's. The child also records its RSS just before the audit
(interpreter and libraries imported), so the growth above it is printed too.

Printed per size: the audit's wall time, the time per analysis, the peak RSS and the peak above
the RSS before the audit. The last line is one JSON object with
``time_per_analysis_ratio_200_vs_10`` (time per analysis of the largest size over the smallest)
and ``peak_ratio_200_vs_10`` (peak RSS of the largest over the smallest); goal: both at most 1.2
(issue 15). Sizes by argument for a quick run: ``--sizes 4,8``; the ratios then compare the
largest and the smallest size given (the keys keep their names).

    PYTHONPATH=. /work/main/.venv/bin/python benchmarks/bench_many.py
    PYTHONPATH=. /work/main/.venv/bin/python benchmarks/bench_many.py --sizes 5,20 --draws 200
"""

from __future__ import annotations

import argparse
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

from tests.tools.cmdstan_writer import HEADER  # noqa: E402

PROGRAM = """data {
  int<lower=1> K;
}
parameters {
  vector[K] theta;
}
model {
  theta ~ normal(0, 10);
}
"""
STATS = ("lp__", "accept_stat__", "stepsize__", "treedepth__", "n_leapfrog__", "divergent__",
         "energy__")


def write_run(folder: Path, stem: str, rng: np.random.Generator, chains: int, draws: int,
              quantities: int) -> None:
    """One CmdStan run ``<stem>-<chain>.csv``: healthy AR(1) draws with a chain-specific
    seed, so the runs differ and no rule is expected to hit on the draws."""
    names = [*STATS, *(f"theta.{k + 1}" for k in range(quantities))]
    phi = rng.uniform(0.0, 0.6, quantities)
    for c in range(chains):
        x = np.empty((draws, quantities))
        x[0] = rng.standard_normal(quantities)
        noise = rng.standard_normal((draws, quantities)) * np.sqrt(1 - phi**2)
        for t in range(1, draws):
            x[t] = phi * x[t - 1] + noise[t]
        stats = np.column_stack([
            rng.normal(-50, 5, draws), rng.uniform(0.7, 1, draws), np.full(draws, 0.3),
            np.full(draws, 4), np.full(draws, 15), np.zeros(draws), rng.normal(80, 7, draws),
        ])  # fmt: skip
        path = folder / f"{stem}-{c + 1}.csv"
        head = HEADER.format(model="bench_model", num_samples=draws, num_warmup=1000,
                             delta=0.8, max_depth=10, chain_id=c + 1, seed=int(rng.integers(1e9)),
                             filename=path.name)
        body = io.StringIO()
        np.savetxt(body, np.hstack([stats, x]), fmt="%.6g", delimiter=",")
        path.write_text(head + ",".join(names) + "\n# Adaptation terminated\n# Step size = 0.3\n"
                        "# Diagonal elements of inverse mass matrix:\n# 1\n" + body.getvalue()
                        + "# \n#  Elapsed Time: 1 seconds (Warm-up)\n#                1 seconds "
                        "(Sampling)\n#                2 seconds (Total)\n# \n")


def write_projects(base: Path, sizes: list[int], chains: int, draws: int,
                   quantities: int) -> dict[int, Path]:
    """The largest project written, the others as hard links to its first runs."""
    largest = max(sizes)
    full = base / f"project-{largest}"
    (full / "fits").mkdir(parents=True)
    (full / "models").mkdir()
    (full / "models" / "bench.stan").write_text(PROGRAM)
    rng = np.random.default_rng(15)
    for i in range(largest):
        write_run(full / "fits", f"m{i:03d}", rng, chains, draws, quantities)
    out = {largest: full}
    for n in sizes:
        if n == largest:
            continue
        project = base / f"project-{n}"
        (project / "fits").mkdir(parents=True)
        (project / "models").mkdir()
        os.link(full / "models" / "bench.stan", project / "models" / "bench.stan")
        for i in range(n):
            for c in range(chains):
                name = f"m{i:03d}-{c + 1}.csv"
                os.link(full / "fits" / name, project / "fits" / name)
        out[n] = project
    return out


def child(project: Path, out: Path, reports: str) -> None:
    """Audit ``project`` through the CLI entry point; print one JSON line with time and memory."""
    status, elapsed, rss_before, report = timed_audit(project, out, reports)
    failed = [f["message"] for a in report["analyses"] for f in a["findings"]
              if f["rule"] == "inputs.rule-failed"]
    # What made the exit status 1 (error-level findings, by rule and analyses hit).
    errors: dict[str, int] = {}
    for a in report["analyses"]:
        for rule in sorted({f["rule"] for f in a["findings"] if f.get("severity") == "error"}):
            errors[rule] = errors.get(rule, 0) + 1
    print(json.dumps({"status": status, "t_audit_s": elapsed, "rss_before_mb": rss_before,
                      "peak_rss_mb": status_mb("VmHWM"), "analyses": len(report["analyses"]),
                      "rule_failed": failed[:3], "errors": errors}))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10,50,200", help="numbers of analyses (default 10,50,200)")
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--quantities", type=int, default=200)
    ap.add_argument("--report", default="json,html,md,sarif",
                    help="comma-separated report formats (default json,html,md,sarif)")
    ap.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child is not None:
        child(args.child, args.out, args.report)
        return

    sizes = sorted({int(s) for s in args.sizes.split(",")})
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), *filter(None, [os.environ.get("PYTHONPATH")])])}
    results: dict[int, dict] = {}
    with tempfile.TemporaryDirectory(prefix="bench-many-") as tmp:
        t0 = time.perf_counter()
        projects = write_projects(Path(tmp), sizes, args.chains, args.draws, args.quantities)
        print(f"projects of {', '.join(map(str, sizes))} analyses ({args.chains} chains x "
              f"{args.draws} draws x {args.quantities} quantities each) written in "
              f"{time.perf_counter() - t0:.0f} s")
        for n in sizes:
            out = Path(tmp) / f"report-{n}"
            proc = subprocess.run(
                [sys.executable, str(Path(__file__).resolve()), "--child", str(projects[n]),
                 "--out", str(out), "--report", args.report],
                capture_output=True, text=True, env=env, check=False)
            if proc.returncode != 0:
                raise SystemExit(f"the child for {n} analyses failed:\n{proc.stderr[-3000:]}")
            run = json.loads(proc.stdout.strip().splitlines()[-1])
            if run["status"] not in (0, 1) or run["analyses"] != n or run["rule_failed"]:
                raise SystemExit(f"the audit of {n} analyses went wrong: {run}")
            run["t_per_analysis_s"] = run["t_audit_s"] / n
            run["peak_above_before_mb"] = run["peak_rss_mb"] - run["rss_before_mb"]
            results[n] = run
            print(f"{n:4d} analyses: {run['t_audit_s']:7.1f} s, {run['t_per_analysis_s']:.3f} s "
                  f"per analysis; peak RSS {run['peak_rss_mb']:.0f} MB "
                  f"({run['peak_above_before_mb']:.0f} MB above the {run['rss_before_mb']:.0f} "
                  "MB before the audit)")
    small, large = results[sizes[0]], results[sizes[-1]]
    time_ratio = large["t_per_analysis_s"] / small["t_per_analysis_s"]
    peak_ratio = large["peak_rss_mb"] / small["peak_rss_mb"]
    above_ratio = large["peak_above_before_mb"] / small["peak_above_before_mb"]
    print(f"time per analysis, {sizes[-1]} vs {sizes[0]}: {time_ratio:.2f} (goal <= 1.2); "
          f"peak RSS: {peak_ratio:.2f} (goal <= 1.2); peak above the RSS before the audit: "
          f"{above_ratio:.2f}")
    print(json.dumps({
        "sizes": sizes, "chains": args.chains, "draws": args.draws,
        "quantities": args.quantities, "reports": args.report,
        "per_size": {str(n): {k: round(v, 3) if isinstance(v, float) else v
                              for k, v in r.items() if k != "rule_failed"}
                     for n, r in results.items()},
        "time_per_analysis_ratio_200_vs_10": round(time_ratio, 3),
        "peak_ratio_200_vs_10": round(peak_ratio, 3),
        "peak_above_before_ratio_200_vs_10": round(above_ratio, 3),
    }))


if __name__ == "__main__":
    main()
