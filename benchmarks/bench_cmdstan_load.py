"""Speed and memory of the CmdStan CSV loader, as ratios against a baseline in the same process.

Baseline: ``numpy.loadtxt`` of the same files (parsing only, no header, no groups). Run with
``.venv/bin/python benchmarks/bench_cmdstan_load.py [--chains 4 --draws 1000 --columns 500]``.
Machines here are noisy, so only the ratios are meaningful; each timing is the best of 3.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from auditor.loaders import load_draws  # noqa: E402
from tests.tools.cmdstan_writer import write_run  # noqa: E402


def _best(fn, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def _peak(fn) -> int:
    tracemalloc.start()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def main() -> None:
    """Write a synthetic run, then time and measure both readers."""
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--columns", type=int, default=500)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    shape = (args.chains, args.draws)
    with tempfile.TemporaryDirectory() as tmp:
        stats = {"lp": rng.normal(size=shape), "treedepth": np.full(shape, 3),
                 "divergent": np.zeros(shape), "energy": rng.normal(size=shape)}
        paths = write_run(Path(tmp), "bench", "bench_model",
                          {"x": rng.normal(size=(*shape, args.columns))}, stats)

        # Row of the column names in each file: loadtxt skips it and every comment.
        header_rows = [
            next(i for i, ln in enumerate(p.read_text().splitlines()) if not ln.startswith("#"))
            for p in paths
        ]

        def baseline() -> None:
            for p, skip in zip(paths, header_rows, strict=True):
                np.loadtxt(p, delimiter=",", comments="#", skiprows=skip + 1)

        def ours() -> None:
            loaded = load_draws(paths)
            assert loaded.tree is not None and not [q for q in loaded.problems
                                                    if q.kind == "unreadable"]

        t_base, t_ours = _best(baseline), _best(ours)
        m_base, m_ours = _peak(baseline), _peak(ours)
        size = args.chains * args.draws * (args.columns + 4) * 8
        print(f"run: {args.chains} chains x {args.draws} draws x {args.columns + 4} columns")
        print(f"time   ours / numpy.loadtxt = {t_ours / t_base:.2f}")
        print(f"memory ours / numpy.loadtxt = {m_ours / m_base:.2f} (peak traced)")
        print(f"memory ours / raw float64 size = {m_ours / size:.2f}")


if __name__ == "__main__":
    main()
