"""Turn an :class:`AnalysisSpec` into a loaded, normalized :class:`Analysis`.

This is the one place that calls the loaders and the program readers, and that
arranges the draws into standard groups (pointwise log-likelihood, predictive
draws, the prior run).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary
from auditor.loaders import Loaded, LoadProblem, load_draws
from auditor.loaders.stan_data import read_stan_data
from auditor.model import Analysis, AnalysisSpec, InputProblem
from auditor.programs.read import read_program


def _problems(items: list, kind_default: str = "unreadable") -> list[InputProblem]:
    return [
        InputProblem(getattr(p, "kind", kind_default), Path(p.path), p.message, p.line)
        for p in items
    ]


def _move(tree: xr.DataTree, src: str, dst: str, names: dict[str, str]) -> xr.DataTree:
    """Move variables ``names`` (old -> new name) from group ``src`` into ``dst``."""
    if src not in tree.children:
        return tree
    ds = tree[src].to_dataset()
    present = {old: new for old, new in names.items() if old in ds.data_vars}
    if not present:
        return tree
    moved = ds[list(present)].rename(present)
    groups = {name: tree[name].to_dataset() for name in tree.children}
    groups[src] = ds.drop_vars(list(present))
    if dst in groups:
        groups[dst] = groups[dst].merge(moved)
    else:
        groups[dst] = moved
    out = xr.DataTree.from_dict(groups)
    out.attrs = dict(tree.attrs)
    return out


def _arrange_stan_groups(tree: xr.DataTree, spec: AnalysisSpec, prefix: str) -> xr.DataTree:
    """Put ``log_lik`` and the predictive draws of CmdStan runs into their groups.

    ``prefix`` is ``""`` for the posterior run and ``"prior"`` for the prior run.
    """
    target = spec.observed or spec.predictive
    if prefix == "prior":
        tree = _move(tree, "posterior", "prior_predictive", {spec.predictive: target})
        groups = {
            ("prior" if name == "posterior" else name): tree[name].to_dataset()
            for name in tree.children
            if name in ("posterior", "prior_predictive")
        }
        return xr.DataTree.from_dict(groups)
    tree = _move(tree, "posterior", "log_likelihood", {spec.log_lik: target})
    return _move(tree, "posterior", "posterior_predictive", {spec.predictive: target})


def _load(paths: list[Path], gate: Boundary) -> Loaded:
    """``load_draws``, with a reader's own failure turned into a problem of the files."""
    try:
        return load_draws(paths, gate)
    except Exception as exc:  # noqa: BLE001 - a reader bug must cost only these files
        return Loaded(tree=None, problems=[
            LoadProblem(p, _reader_failed(p, "draws", exc).message) for p in paths[:1]])


def _data_from_tree(tree: xr.DataTree) -> dict[str, object]:
    data: dict[str, object] = {}
    for group in ("constant_data", "observed_data"):
        if group in tree.children:
            for name, da in tree[group].to_dataset().data_vars.items():
                data[str(name)] = np.asarray(da.values)
    return data


def _exists(path: Path) -> bool:
    # A link counts as present even when it dangles or loops: the loader, through
    # the boundary, says what is wrong with it.
    try:
        return path.exists() or path.is_symlink()
    except OSError:
        return True


def _reader_failed(path: Path, what: str, exc: Exception) -> InputProblem:
    """A reader raised on odd input (a bug of ours): the file is reported, never a traceback."""
    return InputProblem(
        "unreadable", path,
        f"the {what} reader failed on this file ({type(exc).__name__}: {str(exc)[:200]}); "
        "it was left out; please report this to the tool's maintainers with the file")


def assemble(spec: AnalysisSpec, gate: Boundary | None = None) -> Analysis:
    """Load every file of ``spec`` through ``gate``; problems are recorded, never raised.

    ``gate`` is the project boundary (default: type and size checks only). A
    reader that raises on odd input despite its own checks costs only the
    file it was reading, which is reported.
    """
    try:
        return _assemble(spec, gate)
    except Exception as exc:  # noqa: BLE001 - last line of defence; see _assemble
        analysis = Analysis(name=spec.name, tree=None, spec=spec)
        analysis.problems.extend(spec.problems)
        first = (spec.draws or spec.prior_draws or [spec.model or spec.data or Path(spec.name)])
        analysis.problems.append(_reader_failed(first[0], "input", exc))
        return analysis


def _assemble(spec: AnalysisSpec, gate: Boundary | None = None) -> Analysis:
    """Load every file of ``spec`` through ``gate``; problems are recorded, never raised.

    ``gate`` is the project boundary (default: type and size checks only).
    """
    gate = gate or Boundary.unconfined()
    analysis = Analysis(name=spec.name, tree=None, spec=spec)
    analysis.problems.extend(spec.problems)
    if spec.draws:
        missing = [p for p in spec.draws if not _exists(p)]
        for p in missing:
            analysis.problems.append(InputProblem("unreadable", p, "draws file not found"))
        present = [p for p in spec.draws if _exists(p)]
        if present:
            loaded = _load(present, gate)
            analysis.settings = loaded.settings
            analysis.sources = list(loaded.sources)
            analysis.problems.extend(_problems(loaded.problems))
            tree = loaded.tree
            if tree is not None and present[0].suffix.lower() == ".csv":
                tree = _arrange_stan_groups(tree, spec, "")
            analysis.tree = tree
    if spec.prior_draws:
        for p in spec.prior_draws:
            if not _exists(p):
                analysis.problems.append(
                    InputProblem("unreadable", p, "prior draws file not found")
                )
        loaded = _load([p for p in spec.prior_draws if _exists(p)], gate)
        analysis.problems.extend(_problems(loaded.problems))
        analysis.sources.extend(p for p in loaded.sources if p not in analysis.sources)
        if loaded.tree is not None:
            prior = _arrange_stan_groups(loaded.tree, spec, "prior")
            groups = {n: analysis.tree[n].to_dataset() for n in analysis.tree.children} if (
                analysis.tree is not None
            ) else {}
            groups.update({n: prior[n].to_dataset() for n in prior.children})
            attrs = dict(analysis.tree.attrs) if analysis.tree is not None else {}
            analysis.tree = xr.DataTree.from_dict(groups)
            analysis.tree.attrs = attrs
    if spec.data is not None:
        if _exists(spec.data):
            values, problems = read_stan_data(spec.data, gate)
            analysis.data = dict(values)
            analysis.problems.extend(_problems(problems))
        else:
            analysis.problems.append(InputProblem("unreadable", spec.data, "data file not found"))
    elif analysis.tree is not None:
        analysis.data = _data_from_tree(analysis.tree)
    if spec.model is not None:
        if _exists(spec.model):
            analysis.program = read_program(spec.model, gate)
            # Includes and the program itself refused by the boundary are input
            # problems (outside the project, a FIFO, too large), not syntax errors.
            analysis.problems.extend(
                InputProblem(p.kind, Path(p.path), p.message, p.line)
                for p in analysis.program.syntax_errors if p.kind != "syntax")
        else:
            analysis.problems.append(
                InputProblem("unreadable", spec.model, "model program not found")
            )
    if analysis.tree is not None and analysis.program is None and spec.model is None:
        if analysis.sources:
            first = analysis.sources[0]
            if first.suffix.lower() == ".csv":
                what = f"no Stan program found for {analysis.settings.model_name or 'this run'}"
            else:
                what = f"no PyMC source {first.stem}.py found beside {first.name}"
            analysis.problems.append(
                InputProblem("unpaired", first, what + "; program checks were not run")
            )
    return analysis
