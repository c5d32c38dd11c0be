"""Speed and memory of the fused diagnostics kernel, as ratios against baselines in the same run.

Baselines, all on the same in-memory posterior (chains, draws, quantities):

(a) arviz-stats (array interface) ``rhat(method="rank")``, ``ess(method="bulk")`` and
    ``ess(method="tail", prob=(0.05, 0.95))`` against
    :func:`auditor.kernels.diagnostics.convergence` (``mcse_mean=False``: the same three measures);
(b) arviz-stats' calls for every measure of :func:`~auditor.kernels.diagnostics.summarize`
    (rhat rank, identity and split, ess bulk/tail/mean/sd/median/identity/quantile x3, mcse
    mean/sd/median/quantile x3) against ``summarize``;
(c) the "floor": one ``np.sort`` along the draws plus one ``scipy.fft.rfft`` along the draws
    (zero-padded to ``next_fast_len(2 * draws)``, as an autocovariance needs; ``workers=-1``) of
    the same array, against the three measures of (a);
(d) the peak memory of ``summarize`` in a child process (this script with ``--child-memory``).

Run ``.venv/bin/python benchmarks/bench_diagnostics.py [--chains 4 --draws 1000
--quantities 10000]``. Machines here are noisy, so only ratios are meaningful; kernel and floor
are the best of ``--repeat`` interleaved runs, arviz-stats runs once (it takes minutes at full
size; ``--arviz-quantities K`` times it on the first K quantities and scales linearly, as its
per-quantity loop is). The last line printed is one JSON object.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import scipy.fft

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from auditor.kernels.diagnostics import convergence, summarize  # noqa: E402

QUANTILES = (0.01, 0.1, 0.3)


def make_draws(chains: int, draws: int, quantities: int, seed: int = 1) -> np.ndarray:
    """AR(1) chains, coefficient 0 to 0.9 across quantities, varied location and scale.

    Built in place draw by draw, so no temporary is larger than one draw of all quantities
    (the child's memory peak is then the kernel's). Every 50th quantity is rounded to one
    decimal, so that ties (discrete-looking quantities) are part of the work.
    """
    rng = np.random.default_rng(seed)
    phi = np.linspace(0.0, 0.9, quantities)
    innovation = np.sqrt(1.0 - phi**2)
    x = np.empty((chains, draws, quantities))
    x[:, 0] = rng.standard_normal((chains, quantities))
    for t in range(1, draws):
        np.multiply(x[:, t - 1], phi, out=x[:, t])
        x[:, t] += innovation * rng.standard_normal((chains, quantities))
    scale, shift = rng.uniform(0.1, 10.0, quantities), rng.normal(0.0, 5.0, quantities)
    for c in range(chains):
        x[c] *= scale
        x[c] += shift
    x[:, :, ::50] = np.round(x[:, :, ::50], 1)
    return x


def floor(x: np.ndarray, chunk: int = 1000) -> None:
    """One sort and one padded rfft along the draws (in slices of quantities to bound memory)."""
    size = scipy.fft.next_fast_len(2 * x.shape[1], real=True)
    for start in range(0, x.shape[2], chunk):
        part = x[:, :, start : start + chunk]
        np.sort(part, axis=1)
        scipy.fft.rfft(part, n=size, axis=1, workers=-1)


def arviz_three(x: np.ndarray) -> dict[str, np.ndarray]:
    """arviz-stats' R-hat, bulk-ESS and tail-ESS (tail at 5% and 95%, given explicitly)."""
    from arviz_stats.base import array_stats

    axes = {"chain_axis": 0, "draw_axis": 1}
    return {
        "rhat_rank": array_stats.rhat(x, method="rank", **axes),
        "ess_bulk": array_stats.ess(x, method="bulk", **axes),
        "ess_tail": array_stats.ess(x, method="tail", prob=(0.05, 0.95), **axes),
    }


def arviz_full(x: np.ndarray) -> dict[str, np.ndarray]:
    """arviz-stats' calls matching every measure of ``summarize`` (reference-table methods)."""
    from arviz_stats.base import array_stats as az

    axes = {"chain_axis": 0, "draw_axis": 1}
    out = {
        "rhat_rank": az.rhat(x, method="rank", **axes),
        "rhat_raw": az.rhat(x, method="identity", **axes),
        "rhat_split": az.rhat(x, method="split", **axes),
        "ess_bulk": az.ess(x, method="bulk", **axes),
        "ess_tail": az.ess(x, method="tail", prob=(0.05, 0.95), **axes),
        "ess_mean": az.ess(x, method="mean", **axes),
        "ess_sd": az.ess(x, method="sd", **axes),
        "ess_median": az.ess(x, method="median", **axes),
        "ess_raw": az.ess(x, method="identity", **axes),
        "mcse_mean": az.mcse(x, method="mean", **axes),
        "mcse_sd": az.mcse(x, method="sd", **axes),
        "mcse_median": az.mcse(x, method="median", **axes),
    }
    for p in QUANTILES:
        out[f"ess_quantile_{p:g}"] = az.ess(x, method="quantile", prob=p, **axes)
        out[f"mcse_quantile_{p:g}"] = az.mcse(x, method="quantile", prob=p, **axes)
    return out


def _timed(fn: Callable[[], object]) -> tuple[float, object]:
    t0 = time.perf_counter()
    result = fn()
    return time.perf_counter() - t0, result


def _max_rel_diff(ours: dict[str, np.ndarray], theirs: dict[str, np.ndarray]) -> float:
    worst = 0.0
    for name, want in theirs.items():
        got, want = np.asarray(ours[name])[: np.size(want)], np.asarray(want, dtype=float)
        both = np.isfinite(got) & np.isfinite(want)
        if not np.array_equal(np.isfinite(got), np.isfinite(want)):
            return float("inf")
        if both.any():
            with np.errstate(divide="ignore", invalid="ignore"):
                rel = np.abs(got[both] - want[both]) / np.abs(want[both])
            worst = max(worst, float(np.nanmax(np.where(got[both] == want[both], 0.0, rel))))
    return worst


def _status_kb(field: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    raise KeyError(field)


def child_memory(args: argparse.Namespace) -> None:
    """In a fresh process: make the array, then report RSS before and peak RSS during summarize."""
    x = make_draws(args.chains, args.draws, args.quantities)
    before = _status_kb("VmRSS")
    try:
        # Reset the high-water mark to the current RSS (Linux >= 4.0), so the peak is the
        # kernel's and not the array's construction's.
        Path("/proc/self/clear_refs").write_text("5")
        reset = True
    except OSError:
        reset = False
    summarize(x, quantiles=QUANTILES)
    print(json.dumps({"rss_before_kb": before, "hwm_kb": _status_kb("VmHWM"),
                      "array_bytes": x.nbytes, "hwm_reset": reset}))  # fmt: skip


def main() -> None:
    """Time kernel, floor and arviz-stats on one posterior; measure memory in a child."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--quantities", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument(
        "--arviz-quantities",
        type=int,
        default=None,
        help="time arviz-stats on this many quantities and scale (default: all)",
    )
    ap.add_argument("--child-memory", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child_memory:
        child_memory(args)
        return

    x = make_draws(args.chains, args.draws, args.quantities)
    array_mb = x.nbytes / 2**20
    print(f"posterior: {args.chains} chains x {args.draws} draws x {args.quantities} quantities, "
          f"float64, {array_mb:.0f} MB")  # fmt: skip

    t_floor = t_three = t_full = float("inf")
    for _ in range(args.repeat):  # interleaved, so that load from other work hits both alike
        t_floor = min(t_floor, _timed(lambda: floor(x))[0])
        t, three = _timed(lambda: convergence(x, mcse_mean=False))
        t_three = min(t_three, t)
        t, full = _timed(lambda: summarize(x, quantiles=QUANTILES))
        t_full = min(t_full, t)

    n_az = args.quantities if args.arviz_quantities is None else args.arviz_quantities
    part = x[:, :, :n_az]
    scale = args.quantities / n_az
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        t_az3, az3 = _timed(lambda: arviz_three(part))
        t_azf, azf = _timed(lambda: arviz_full(part))
    t_az3, t_azf = t_az3 * scale, t_azf * scale
    agree = max(_max_rel_diff(three, az3), _max_rel_diff(full, azf))

    proc = subprocess.run(
        [sys.executable, __file__, "--child-memory", "--chains", str(args.chains),
         "--draws", str(args.draws), "--quantities", str(args.quantities)],
        capture_output=True, text=True, check=True,
    )  # fmt: skip
    mem = json.loads(proc.stdout.strip().splitlines()[-1])
    peak_mb, before_mb = mem["hwm_kb"] / 1024, mem["rss_before_kb"] / 1024
    extra_mb = peak_mb - before_mb
    peak_over_array = (array_mb + extra_mb) / array_mb

    scaled = "" if scale == 1 else f" (timed on {n_az} quantities, scaled x{scale:g})"
    print(
        f"(a) R-hat + bulk-ESS + tail-ESS: kernel {t_three:.2f} s, arviz-stats {t_az3:.1f} s"
        f"{scaled} -> speedup {t_az3 / t_three:.1f}"
    )
    print(
        f"(b) all {len(full)} measures:       kernel {t_full:.2f} s, arviz-stats {t_azf:.1f} s"
        f"{scaled} -> speedup {t_azf / t_full:.1f}"
    )
    print(
        f"(c) floor (np.sort + padded rfft): {t_floor:.2f} s -> kernel (a) / floor = "
        f"{t_three / t_floor:.2f}"
    )
    print(
        f"(d) summarize in a child: peak RSS {peak_mb:.0f} MB (raw, {peak_mb / array_mb:.2f} x "
        f"array), RSS before {before_mb:.0f} MB with the array allocated, peak above it "
        f"{extra_mb:.0f} MB; ratio used = (array + peak above) / array = {peak_over_array:.2f}"
        f"{'' if mem['hwm_reset'] else ' (high-water mark not reset)'}"
    )
    print(f"largest relative difference from arviz-stats: {agree:.1e}")
    print(json.dumps({
        "chains": args.chains, "draws": args.draws, "quantities": args.quantities,
        "t_kernel_three_s": round(t_three, 3), "t_arviz_three_s": round(t_az3, 2),
        "t_kernel_full_s": round(t_full, 3), "t_arviz_full_s": round(t_azf, 2),
        "t_floor_s": round(t_floor, 3), "arviz_scaled_from": n_az,
        "speedup_vs_arviz": round(t_az3 / t_three, 2),
        "speedup_full_vs_arviz": round(t_azf / t_full, 2),
        "ratio_vs_floor": round(t_three / t_floor, 2),
        "peak_rss_mb": round(peak_mb, 1), "rss_before_mb": round(before_mb, 1),
        "peak_above_before_mb": round(extra_mb, 1), "array_mb": round(array_mb, 1),
        "peak_over_array": round(peak_over_array, 3),
        "max_rel_diff_vs_arviz": agree,
    }))  # fmt: skip


if __name__ == "__main__":
    main()
