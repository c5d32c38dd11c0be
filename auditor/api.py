"""The Python API: audit files or draws already in memory from a notebook or a script.

>>> import auditor
>>> result = auditor.audit("path/to/project")              # doctest: +SKIP
>>> result.findings[0].rule_id, result.exit_status          # doctest: +SKIP
>>> result.to_dataframe("findings")                         # doctest: +SKIP

An in-memory DataTree (a PyMC, NumPyro or nutpie result converted by arviz) is
audited without writing files; give ``model`` (a Stan or PyMC source) to have the
program checked too. The result is the same object the reporters format; in a
notebook it shows as the report's HTML summary.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import fields
from pathlib import Path
from typing import Any

from auditor.result import AuditResult

PathLike = str | os.PathLike


class NotebookResult(AuditResult):
    """The audit result, shown in a notebook as the report's HTML summary.

    The HTML is a fragment made like the report (every text escaped, no script,
    nothing fetched), so a notebook renders it as inert as the report file.
    """

    def _repr_html_(self) -> str:
        from auditor.reporters.html_report import render_summary

        return render_summary(self)


def _notebook(result: AuditResult) -> NotebookResult:
    return NotebookResult(**{f.name: getattr(result, f.name) for f in fields(AuditResult)})


def _is_tree(obj: Any) -> bool:
    return hasattr(obj, "children") and hasattr(obj, "to_dataset")


def _as_tree(obj: Any) -> Any:
    """A DataTree from a DataTree or anything arviz-base converts (InferenceData, dict)."""
    if _is_tree(obj):
        return obj
    from arviz_base import convert_to_datatree

    return convert_to_datatree(obj)


def audit(
    source: PathLike | Sequence[PathLike] | Any,
    *,
    model: PathLike | None = None,
    data: PathLike | None = None,
    observed: str | None = None,
    name: str = "analysis",
    config: PathLike | None = None,
    policy: str | None = None,
    gate: str | None = None,
    baseline: PathLike | None = None,
    allow_read: Sequence[PathLike] = (),
) -> AuditResult:
    """Audit a project folder, files, or draws in memory, and return the result.

    Parameters
    ----------
    source
        A project folder or file path, a list of paths, or draws in memory: an
        ``xarray.DataTree`` (or an object arviz-base can convert to one).
    model, data, observed, name
        For draws in memory: the model program (``.stan`` or PyMC ``.py``), the
        data file, the observed variable's name and the analysis's name.
    config
        A configuration file (for draws in memory, only this one is read).
    policy, gate
        A policy name or file (``everyday``, ``submission``) and the gate level.
    baseline
        An earlier JSON report to compare the findings with.
    allow_read
        Folders outside the project that may be read (trusted projects only).

    Raises
    ------
    auditor.config.ConfigError
        An unusable configuration, policy or baseline.
    auditor.engine.NothingToAudit
        No analysis found at the paths given.
    """
    from auditor.engine import _prepare, audit_specs, run_audit
    from auditor.model import AnalysisSpec

    overrides = {"policy": policy, "gate": gate}
    config_path = Path(config) if config is not None else None
    base = Path(baseline) if baseline is not None else None
    allowed = tuple(Path(p) for p in allow_read)
    if isinstance(source, str | os.PathLike) or (
            isinstance(source, Sequence) and not _is_tree(source)
            and all(isinstance(p, str | os.PathLike) for p in source)):
        paths = [Path(source)] if isinstance(source, str | os.PathLike) else [
            Path(p) for p in source]
        return _notebook(run_audit(paths, config_path=config_path, overrides=overrides,
                                   allow_read=allowed, baseline=base))
    tree = _as_tree(source)
    program = Path(model).resolve() if model is not None else None
    data_file = Path(data).resolve() if data is not None else None
    root = (program.parent if program is not None else Path.cwd()).resolve()
    # Only an explicit configuration file is read for draws in memory: the working
    # folder is not a project the caller named.
    gate_, cfg, rules, pol = _prepare(root, config_path, overrides, None, allowed, find=False)
    spec = AnalysisSpec(name=name, draws=[], model=program, data=data_file,
                        observed=observed, declared=True, tree=tree)
    return _notebook(audit_specs([spec], [], root, gate_, cfg, rules, pol, baseline=base))
