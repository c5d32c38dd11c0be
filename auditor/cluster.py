"""Audits spread over a Dask distributed cluster (``--scheduler ADDRESS``, ``--workers N``).

Each analysis is a task: a worker runs :func:`auditor.engine.audit_one` on its spec, reading
the analysis's files itself (so every worker must reach the project's files at the same path)
and loading the rules again from their folders, and sends back only the compact result. An
analysis whose draws are larger than ``lazy_share`` is audited in this process instead, lazily,
while the workers audit the others; the blocks of its posterior are tasks (each reads its
window of the store on a worker). A CmdStan run converted to a temporary store is on this
machine only, so with a remote scheduler its blocks are computed here.

Results come back in any order; the engine puts them in the order of the specs, so the report
is the same as the serial run's. Dask is imported only here, only when a cluster is asked for
(the ``scale`` extra).
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator
from typing import TYPE_CHECKING, Any

from auditor.config import ConfigError

if TYPE_CHECKING:
    from auditor.boundary import Boundary
    from auditor.engine import AuditJob, OneResult
    from auditor.model import AnalysisSpec

#: Seconds to wait for a scheduler given with ``--scheduler``.
CONNECT_TIMEOUT = "20s"

_EXTRA = "pip install 'bayes-auditor[scale]'"


class Cluster:
    """A Dask client for the audit: connected to ``scheduler``, or to a local cluster of
    ``workers`` worker processes (one thread each) on the loopback address, started and
    stopped with the ``with`` block."""

    def __init__(self, scheduler: str | None = None, workers: int | None = None) -> None:
        if scheduler is None and not workers:
            raise ValueError("a scheduler address or a number of workers is needed")
        self.scheduler = scheduler
        self.workers = workers
        self.client: Any = None
        self.cluster: Any = None

    @property
    def local(self) -> bool:
        """Whether the workers run on this machine (they can read its temporary folder)."""
        return self.cluster is not None

    def __enter__(self) -> Cluster:
        try:
            import distributed
        except ImportError:
            raise ConfigError(f"--scheduler and --workers need Dask's distributed scheduler "
                              f"({_EXTRA})") from None
        if self.scheduler is not None:
            try:
                # Not the default client: nothing else of the audit goes to the cluster.
                self.client = distributed.Client(self.scheduler, set_as_default=False,
                                                 timeout=CONNECT_TIMEOUT)
            except (OSError, TimeoutError, ValueError, TypeError) as exc:
                raise ConfigError(f"--scheduler {self.scheduler}: cannot reach the Dask "
                                  f"scheduler ({type(exc).__name__}: {exc})") from None
        else:
            self.cluster = distributed.LocalCluster(
                n_workers=self.workers, threads_per_worker=1, processes=True,
                host="127.0.0.1", dashboard_address="127.0.0.1:0",
                silence_logs=logging.ERROR)
            self.client = distributed.Client(self.cluster, set_as_default=False)
        return self

    def __exit__(self, *exc: object) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    # ------------------------------------------------------------------ blocks
    def run_blocks(self, fn: Callable[..., Any], tasks: list[tuple[Any, ...]]) -> Iterator[Any]:
        """Run ``fn(*args)`` for every argument tuple on the cluster (Dask arrays among the
        arguments are read by the worker); yield the results in order."""
        import dask

        futures = self.client.compute([dask.delayed(fn)(*args) for args in tasks])
        try:
            for future in futures:
                yield future.result()
                future.release()
        finally:
            for future in futures:
                future.release()

    # ------------------------------------------------------------------ analyses
    def audit(self, specs: list[AnalysisSpec], job: AuditJob, gate: Boundary,
              progress: Callable[[str, int, int], None] | None = None
              ) -> Iterator[tuple[int, OneResult]]:
        """Audit every spec; yield ``(index of the spec, result)`` as each finishes."""
        import distributed

        from auditor.engine import _failed_analysis, audit_one
        from auditor.loaders import lazy

        total = len(specs)
        here: list[int] = []
        futures: dict[Any, int] = {}
        for i, spec in enumerate(specs):
            if spec.tree is not None or _large(spec, gate, job, lazy):
                here.append(i)
                continue
            futures[self.client.submit(audit_one, spec, job, pure=False)] = i
        done = 0
        for i in here:
            spec = specs[i]
            # The posterior's blocks go to the workers when they can read its store: the
            # project's own, or a converted run's temporary one on this machine.
            csv = any(p.suffix.lower() == ".csv" for p in spec.draws)
            runner = self.run_blocks if (self.local or not csv) else None
            if progress is not None:
                progress(f"auditing {spec.name}", done, total)
            try:
                one = audit_one(spec, job, blocks=runner)
            except Exception as exc:  # noqa: BLE001 - a cluster failure costs this analysis only
                one = _failed_analysis(spec, job.root, exc)
            done += 1
            yield i, one
        finished = (distributed.as_completed(list(futures), loop=self.client.loop)
                    if futures else ())
        for future in finished:
            i = futures[future]
            try:
                one = future.result()
            except Exception as exc:  # noqa: BLE001 - a worker that died, a lost task
                one = _failed_analysis(specs[i], job.root, exc)
            future.release()
            done += 1
            if progress is not None:
                progress(f"audited {specs[i].name}", done, total)
            yield i, one


def _large(spec: AnalysisSpec, gate: Boundary, job: AuditJob, lazy: Any) -> bool:
    """Whether the draws of ``spec`` are read lazily (then it is audited in this process)."""
    if job.lazy_bytes is None or lazy.missing_libraries():
        return False
    for paths in (spec.draws, spec.prior_draws):
        if paths:
            size = lazy.draws_size(paths, gate)
            if size is not None and size > job.lazy_bytes:
                return True
    return False
