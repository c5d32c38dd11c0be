"""What the benchmarks that audit a project in a child process share (bench_many, bench_big):
reading the process's memory from ``/proc/self/status`` and one timed audit through the
command line's entry point."""

from __future__ import annotations

import contextlib
import io
import json
import time
from pathlib import Path


def status_mb(key: str) -> float:
    """A ``/proc/self/status`` entry (``VmRSS``, ``VmHWM``) in MB (Linux; NaN elsewhere)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return float("nan")


def timed_audit(project: Path, out: Path, reports: str) -> tuple[int, float, float, dict]:
    """Audit ``project`` through the CLI entry point with the comma-separated ``reports``
    (``json`` among them) into ``out``, its terminal output swallowed.

    Returns the exit status, the wall time, the RSS just before the audit (the tool's modules
    imported first, so their import is not the audit's cost) and the JSON report.
    """
    import auditor.cli  # noqa: F401
    import auditor.engine  # noqa: F401
    import auditor.reporters  # noqa: F401
    from auditor.cli import main as cli_main

    rss_before = status_mb("VmRSS")
    argv = ["audit", str(project), "--out", str(out), "--quiet"]
    for fmt in reports.split(","):
        argv += ["--report", fmt.strip()]
    with contextlib.redirect_stdout(io.StringIO()):
        t0 = time.perf_counter()
        status = cli_main(argv)
        elapsed = time.perf_counter() - t0
    return status, elapsed, rss_before, json.loads((out / "audit.json").read_text())
