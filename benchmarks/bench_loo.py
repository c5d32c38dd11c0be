"""Speed and memory of our PSIS-LOO kernel against arviz-stats ``loo`` on the same array.

Run with ``.venv/bin/python benchmarks/bench_loo.py [--chains 4 --draws 1000 --observations
100000]`` (the default is a 3.2 GB float64 log-likelihood array; arviz-stats needs minutes on
it). Machines here are noisy, so only the ratios are meaningful.

How it measures:

- The parent writes a synthetic log-likelihood array (a normal regression with autocorrelated
  posterior draws and 0.1% outlying observations, so some Pareto k are high) to a ``.npy`` file
  through a memmap, a chunk of observations at a time, and the posterior draws to a ``.npz``.
  It never holds the array itself.
- Each computation runs in its own child process (this script with ``--child ours`` or
  ``--child arviz``), which loads the whole array into memory with ``numpy.load`` (no mmap: the
  array is in anonymous memory, as for a caller that has it in hand), records its RSS, resets
  the kernel's peak-RSS counter (``/proc/self/clear_refs``), runs, and reads the peak
  (``VmHWM``). ``peak_rss_mb`` is that raw peak (interpreter + array + work);
  ``peak_above_loaded_mb`` is the peak minus the RSS just after loading; ``peak_over_array`` is
  ``(array_mb + peak_above_loaded_mb) / array_mb``, the memory our computation needs beside the
  interpreter, relative to the array.
- Both sides use arviz-stats' rules: ``r_eff`` from the posterior draws (our
  ``posterior_r_eff``, timed with the rest) and tail length rounded down
  (``tail_rounding="floor"``). arviz-stats is called as ``loo(tree, pointwise=True)`` on a
  DataTree made by ``arviz_base.from_dict`` (the wrapping is not timed).
- Our defaults (``r_eff`` per observation from ``exp(log_lik)``, tail length rounded up, as in
  the PSIS paper and the loo package) are timed too, as ``ours_default_s`` (one run).
- Our time is the best of ``--repeat`` runs (3), arviz-stats' of ``--arviz-repeat`` (1: it
  takes over a minute at full size); use ``--arviz-repeat 3`` at small sizes.

The last line printed is one JSON object.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

MB = 1e6


def _status_kb(field: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    raise RuntimeError(f"{field} not in /proc/self/status")


def _reset_peak() -> bool:
    """Reset VmHWM to the current RSS (Linux >= 4.0); False when not allowed."""
    try:
        Path("/proc/self/clear_refs").write_text("5")
        return True
    except OSError:
        return False


def _ar1(rng: np.random.Generator, shape: tuple[int, int], phi: float) -> np.ndarray:
    x = np.empty(shape)
    x[:, 0] = rng.normal(size=shape[0])
    eps = rng.normal(size=shape) * np.sqrt(1 - phi**2)
    for t in range(1, shape[1]):
        x[:, t] = phi * x[:, t - 1] + eps[:, t]
    return x


def write_problem(folder: Path, chains: int, draws: int, n_obs: int) -> tuple[Path, Path]:
    """Write the log-likelihood array (.npy) and posterior draws (.npz) of a normal regression."""
    rng = np.random.default_rng(2024)
    shape = (chains, draws)
    post = {"alpha": 0.2 + 0.05 * _ar1(rng, shape, 0.6),
            "beta": 1.0 + 0.05 * _ar1(rng, shape, 0.6),
            "sigma": np.exp(0.03 * _ar1(rng, shape, 0.6))}
    x = rng.normal(size=n_obs)
    y = 0.2 + x + rng.normal(size=n_obs)
    bad = rng.choice(n_obs, size=max(1, n_obs // 1000), replace=False)
    # Outliers far out in x and y: influential, so their Pareto k are high (some above 0.7).
    x[bad] = rng.choice([-1, 1], size=bad.size) * rng.uniform(4, 15, size=bad.size)
    y[bad] = 0.2 + x[bad] + rng.choice([-1, 1], size=bad.size) * rng.uniform(3, 8, size=bad.size)
    ll_path, post_path = folder / "log_lik.npy", folder / "posterior.npz"
    out = np.lib.format.open_memmap(ll_path, mode="w+", dtype=np.float64,
                                    shape=(chains, draws, n_obs))
    a, b = post["alpha"][..., None], post["beta"][..., None]
    s = post["sigma"][..., None]
    step = 5000
    for i0 in range(0, n_obs, step):
        sl = slice(i0, min(n_obs, i0 + step))
        z = (y[sl] - a - b * x[sl]) / s
        out[:, :, sl] = -0.5 * z * z - np.log(s) - 0.5 * np.log(2 * np.pi)
    out.flush()
    del out
    np.savez(post_path, **post)
    return ll_path, post_path


def child(kind: str, ll_path: Path, post_path: Path, out_path: Path, chunk_mb: float | None,
          workers: int | None, repeat: int) -> None:
    """Load the array, run one side, print a JSON line with timings and memory."""
    # Import first, so the libraries' own memory is part of the baseline, not of the peak.
    from auditor.kernels import psis

    if kind == "arviz":
        import arviz_base as azb
        import arviz_stats as azs
    ll = np.load(ll_path)  # whole array in anonymous memory
    post = dict(np.load(post_path))
    rss_loaded = _status_kb("VmRSS")
    reset = _reset_peak()
    info: dict[str, object] = {"peak_reset": reset}
    chunk_bytes = None if chunk_mb is None else int(chunk_mb * 2**20)
    if kind == "ours":
        info["workers"] = psis._n_workers(workers)
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            res = psis.psis_loo(ll, r_eff=psis.posterior_r_eff(post), tail_rounding="floor",
                                chunk_bytes=chunk_bytes, workers=workers)
            times.append(time.perf_counter() - t0)
        info["time_s"] = min(times)
        t0 = time.perf_counter()
        default = psis.psis_loo(ll, chunk_bytes=chunk_bytes, workers=workers)
        info["default_time_s"] = time.perf_counter() - t0
        info["default_elpd"] = default.elpd_loo
        info["default_max_k"] = float(np.nanmax(default.pareto_k))
        elpd_i, k = res.elpd_loo_i, res.pareto_k
        elpd, se, p = res.elpd_loo, res.se, res.p_loo
    else:
        tree = azb.from_dict({"posterior": post, "log_likelihood": {"y": ll}})
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = azs.loo(tree, pointwise=True)
            times.append(time.perf_counter() - t0)
        info["time_s"] = min(times)
        elpd_i, k = res.elpd_i.values.ravel(), res.pareto_k.values.ravel()
        elpd, se, p = float(res.elpd), float(res.se), float(res.p)
    peak = _status_kb("VmHWM")
    np.savez(out_path, elpd_i=elpd_i, k=k, totals=np.array([elpd, se, p]))
    info.update(rss_loaded_kb=rss_loaded, peak_kb=peak, elpd=elpd, se=se, p_loo=p)
    print(json.dumps(info))


def _run_child(kind: str, ll_path: Path, post_path: Path, out: Path, args: argparse.Namespace
               ) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", kind, "--ll", str(ll_path),
           "--posterior", str(post_path), "--out", str(out)]
    if args.chunk_mb is not None:
        cmd += ["--chunk-mb", str(args.chunk_mb)]
    if args.workers is not None:
        cmd += ["--workers", str(args.workers)]
    cmd += ["--repeat", str(args.repeat if kind == "ours" else args.arviz_repeat)]
    run = subprocess.run(cmd, capture_output=True, text=True, env=dict(os.environ))
    if run.returncode != 0:
        raise SystemExit(f"child {kind} failed:\n{run.stderr[-4000:]}")
    return json.loads(run.stdout.strip().splitlines()[-1])


def main() -> None:
    """Write the problem, run both sides in child processes, print the comparison."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--observations", type=int, default=100_000)
    ap.add_argument("--chunk-mb", type=float, default=None,
                    help="our chunk_bytes, in MiB (default: the kernel's)")
    ap.add_argument("--workers", type=int, default=None,
                    help="our threads (default: the kernel's, the usable CPUs up to 8)")
    ap.add_argument("--repeat", type=int, default=3, help="our timing is the best of this many")
    ap.add_argument("--arviz-repeat", type=int, default=1,
                    help="arviz-stats' timing is the best of this many (slow at full size)")
    ap.add_argument("--tmp", type=Path, default=None, help="folder for the .npy (default: TMPDIR)")
    ap.add_argument("--child", choices=("ours", "arviz"), help=argparse.SUPPRESS)
    ap.add_argument("--ll", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--posterior", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child, args.ll, args.posterior, args.out, args.chunk_mb, args.workers,
              args.repeat)
        return

    with tempfile.TemporaryDirectory(dir=args.tmp) as tmp:
        folder = Path(tmp)
        ll_path, post_path = write_problem(folder, args.chains, args.draws, args.observations)
        array_mb = args.chains * args.draws * args.observations * 8 / MB
        print(f"array: {args.chains} chains x {args.draws} draws x {args.observations} "
              f"observations, float64, {array_mb:.0f} MB", flush=True)
        ours = _run_child("ours", ll_path, post_path, folder / "ours.npz", args)
        print(f"ours: {ours['time_s']:.2f} s (defaults: {ours['default_time_s']:.2f} s)",
              flush=True)
        theirs = _run_child("arviz", ll_path, post_path, folder / "arviz.npz", args)
        print(f"arviz-stats: {theirs['time_s']:.2f} s", flush=True)
        a, b = np.load(folder / "ours.npz"), np.load(folder / "arviz.npz")
        k_nan_same = bool(np.array_equal(np.isnan(a["k"]), np.isnan(b["k"])))
        finite = np.isfinite(a["k"]) & np.isfinite(b["k"])
        diffs = np.abs(a["totals"] - b["totals"])

    peak_mb = ours["peak_kb"] * 1024 / MB
    above_mb = (ours["peak_kb"] - ours["rss_loaded_kb"]) * 1024 / MB
    theirs_above_mb = (theirs["peak_kb"] - theirs["rss_loaded_kb"]) * 1024 / MB
    result = {
        "chains": args.chains, "draws": args.draws, "observations": args.observations,
        "workers": ours["workers"], "chunk_mb": args.chunk_mb,
        "repeat": args.repeat, "arviz_repeat": args.arviz_repeat,
        "ours_s": round(ours["time_s"], 3),
        "arviz_s": round(theirs["time_s"], 3),
        "speedup_vs_arviz": round(theirs["time_s"] / ours["time_s"], 2),
        "ours_default_s": round(ours["default_time_s"], 3),
        "peak_rss_mb": round(peak_mb, 1),
        "peak_above_loaded_mb": round(above_mb, 1),
        "array_mb": round(array_mb, 1),
        "peak_over_array": round((array_mb + above_mb) / array_mb, 3),
        "peak_over_array_uses": "(array_mb + peak_above_loaded_mb) / array_mb",
        "arviz_peak_rss_mb": round(theirs["peak_kb"] * 1024 / MB, 1),
        "arviz_peak_over_array": round((array_mb + theirs_above_mb) / array_mb, 3),
        "max_abs_diff_elpd": float(diffs[0]),
        "max_abs_diff_elpd_i": float(np.max(np.abs(a["elpd_i"] - b["elpd_i"]))),
        "max_abs_diff_se": float(diffs[1]),
        "max_abs_diff_p_loo": float(diffs[2]),
        "max_abs_diff_pareto_k": float(np.max(np.abs(a["k"][finite] - b["k"][finite]),
                                              initial=0.0)),
        "pareto_k_nan_same": k_nan_same,
        "elpd_loo": ours["elpd"], "max_pareto_k": float(np.nanmax(a["k"])),
        "peak_reset": bool(ours["peak_reset"] and theirs["peak_reset"]),
    }
    print(json.dumps(result))


if __name__ == "__main__":
    main()
