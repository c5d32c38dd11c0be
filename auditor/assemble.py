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
from auditor.predictive import (
    CONFIGURED,
    GROUP,
    NAME,
    PROGRAM,
    Pairing,
    Source,
    name_candidates,
    observed_names,
    program_sources,
)
from auditor.programs.read import read_program
from auditor.programs.summary import ProgramSummary


def _problems(items: list, kind_default: str = "unreadable") -> list[InputProblem]:
    return [
        InputProblem(getattr(p, "kind", kind_default), Path(p.path), p.message, p.line)
        for p in items
    ]


def _groups(tree: xr.DataTree | None) -> dict[str, xr.Dataset]:
    if tree is None:
        return {}
    return {name: tree[name].to_dataset() for name in tree.children}


def _tree(groups: dict[str, xr.Dataset], attrs: dict) -> xr.DataTree:
    out = xr.DataTree.from_dict({k: v for k, v in groups.items() if v.data_vars or
                                 k in ("observed_data", "constant_data")})
    out.attrs = dict(attrs)
    return out


def _take(groups: dict[str, xr.Dataset], source: str, name: str, target: str,
          new_name: str) -> None:
    """Move variable ``name`` of group ``source`` into group ``target`` as ``new_name``."""
    ds = groups[source]
    moved = ds[[name]].rename({name: new_name})
    groups[source] = ds.drop_vars([name])
    groups[target] = groups[target].merge(moved) if target in groups else moved


def _variables(groups: dict[str, xr.Dataset], *names: str) -> list[str]:
    return [str(v) for g in names if g in groups for v in groups[g].data_vars]


def _pair(
    spec: AnalysisSpec,
    program: ProgramSummary | None,
    post: dict[str, xr.Dataset],
    prior: dict[str, xr.Dataset],
) -> list[Pairing]:
    """Find each observed variable's companions and move them into their groups.

    ``post`` are the groups of the posterior run, ``prior`` those of a separate
    prior-only run (CmdStan); both are changed in place: replicated draws end up
    in ``posterior_predictive`` / ``prior_predictive`` and the pointwise
    log-likelihood in ``log_likelihood``, under the observed variable's name when
    they came from another group.
    """
    observed = observed_names(spec.observed, program,
                              post["observed_data"].data_vars if "observed_data" in post else ())
    single = len(observed) == 1
    if not observed:
        # The observed variable is unknown (draws without a program or configuration):
        # still keep the conventionally named companions out of the parameters, so
        # that convergence rules judge parameters only.
        for name, target in (("log_lik", "log_likelihood"), ("y_rep", "posterior_predictive")):
            _companion(post, name, [(name, NAME)], target)
            _companion(prior, name, [(name, NAME)], target)
        prior.pop("log_likelihood", None)
        if "posterior_predictive" in prior:
            prior["prior_predictive"] = prior.pop("posterior_predictive")
    pairings = []
    for y in observed:
        rng, loglik = program_sources(program, y)
        mine = single or spec.observed == y
        configured_pred = spec.predictive if mine else None
        configured_ll = spec.log_lik if mine else None
        pred = [(configured_pred, CONFIGURED), (rng, PROGRAM), (y, GROUP),
                *name_candidates(y, single, "predictive")]
        logs = [(configured_ll, CONFIGURED), (loglik, PROGRAM), (y, GROUP),
                *name_candidates(y, single, "log_likelihood")]
        pairing = Pairing(y)
        pairing.posterior_predictive = _companion(post, y, pred, "posterior_predictive")
        pairing.log_likelihood = _companion(post, y, logs, "log_likelihood")
        # A prior-only run (CmdStan) holds its replicated draws among its own
        # draws; otherwise a prior_predictive group of the posterior run's file.
        # Its pointwise log-likelihood is taken out of its draws and dropped: with
        # the likelihood switched off it describes nothing.
        _companion(prior, y, logs, "log_likelihood")
        prior.pop("log_likelihood", None)
        pairing.prior_predictive = _companion(prior, y, pred, "prior_predictive") or (
            _companion(post, y, pred[:1] + [(y, GROUP)], "prior_predictive",
                       search=("prior_predictive",)))
        for key, configured, found in (
                ("predictive", configured_pred, pairing.posterior_predictive),
                ("log_lik", configured_ll, pairing.log_likelihood)):
            if configured and (found is None or found.how != CONFIGURED):
                group = "posterior_predictive" if key == "predictive" else "log_likelihood"
                listed = ", ".join(_variables(post, "posterior", group)[:12]) or "none"
                pairing.notes.append(f"the configured {key} = {configured!r} is not among the "
                                     f"draws' variables ({listed})")
        pairings.append(pairing)
    return pairings


def _companion(groups: dict[str, xr.Dataset], y: str, candidates: list[tuple[str | None, str]],
               target: str, search: tuple[str, ...] | None = None) -> Source | None:
    """The first candidate found, moved into group ``target`` when it is elsewhere.

    Each ``(name, how)`` is looked for in ``target`` and then the ``posterior``
    group (CmdStan writes generated quantities among the draws); a ``group``
    candidate only in ``target``. A variable moved into ``target`` is stored
    under ``y``'s name unless that is taken.
    """
    search = search or (target, "posterior")
    for name, how in candidates:
        if not name:
            continue
        for group in (target,) if how == GROUP else search:
            if name not in _variables(groups, group):
                continue
            if group == target:
                return Source(name, how, name)
            stored = name if y in _variables(groups, target) else y
            _take(groups, group, name, target, stored)
            return Source(name, how, stored)
    return None


def _load(paths: list[Path], gate: Boundary, analysis: Analysis | None = None,
          lazy_bytes: int | None = None) -> Loaded:
    """``load_draws``, with a reader's own failure turned into a problem of the files.

    Draws larger than ``lazy_bytes`` are read lazily (:mod:`auditor.loaders.lazy`) when
    Dask and Zarr are installed; the actions that remove a temporary store go to
    ``analysis.cleanup`` and ``analysis.whole_limit`` is set.
    """
    try:
        if lazy_bytes is not None and analysis is not None:
            from auditor.loaders import lazy

            size = lazy.draws_size(paths, gate)
            if size is not None and size > lazy_bytes and not lazy.missing_libraries():
                loaded, cleanup = lazy.load_lazily(paths, gate)
                analysis.cleanup.extend(cleanup)
                if loaded.tree is not None:
                    analysis.whole_limit = (gate.max_bytes if gate.max_bytes is not None
                                            else 2**62)
                return loaded
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


def assemble(spec: AnalysisSpec, gate: Boundary | None = None,
             lazy_bytes: int | None = None) -> Analysis:
    """Load every file of ``spec`` through ``gate``; problems are recorded, never raised.

    ``gate`` is the project boundary (default: type and size checks only). A
    reader that raises on odd input despite its own checks costs only the
    file it was reading, which is reported. Draws larger than ``lazy_bytes`` are
    read lazily (``None``: always whole); call :meth:`Analysis.release` when done.
    """
    try:
        return _assemble(spec, gate, lazy_bytes)
    except Exception as exc:  # noqa: BLE001 - last line of defence; see _assemble
        analysis = Analysis(name=spec.name, tree=None, spec=spec)
        analysis.problems.extend(spec.problems)
        first = (spec.draws or spec.prior_draws or [spec.model or spec.data or Path(spec.name)])
        analysis.problems.append(_reader_failed(first[0], "input", exc))
        return analysis


def _assemble(spec: AnalysisSpec, gate: Boundary | None = None,
              lazy_bytes: int | None = None) -> Analysis:
    """Load every file of ``spec`` through ``gate``; problems are recorded, never raised.

    ``gate`` is the project boundary (default: type and size checks only).
    """
    gate = gate or Boundary.unconfined()
    analysis = Analysis(name=spec.name, tree=None, spec=spec)
    analysis.problems.extend(spec.problems)
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
    post: dict[str, xr.Dataset] = {}
    attrs: dict = {}
    if spec.tree is not None:
        from auditor.loaders.datatree_file import normalize_tree

        loaded = normalize_tree(spec.tree, Path(f"{spec.name} (in memory)"))
        analysis.settings = loaded.settings
        analysis.problems.extend(_problems(loaded.problems))
        post = _groups(loaded.tree)
        attrs = dict(loaded.tree.attrs) if loaded.tree is not None else {}
    if spec.draws:
        missing = [p for p in spec.draws if not _exists(p)]
        for p in missing:
            analysis.problems.append(InputProblem("unreadable", p, "draws file not found"))
        present = [p for p in spec.draws if _exists(p)]
        if present:
            loaded = _load(present, gate, analysis, lazy_bytes)
            analysis.settings = loaded.settings
            analysis.sources = list(loaded.sources)
            analysis.problems.extend(_problems(loaded.problems))
            post = _groups(loaded.tree)
            attrs = dict(loaded.tree.attrs) if loaded.tree is not None else {}
    prior: dict[str, xr.Dataset] = {}
    if spec.prior_draws:
        for p in spec.prior_draws:
            if not _exists(p):
                analysis.problems.append(
                    InputProblem("unreadable", p, "prior draws file not found")
                )
        loaded = _load([p for p in spec.prior_draws if _exists(p)], gate, analysis,
                       lazy_bytes)
        analysis.problems.extend(_problems(loaded.problems))
        analysis.sources.extend(p for p in loaded.sources if p not in analysis.sources)
        prior = _groups(loaded.tree)
    analysis.pairings = _pair(spec, analysis.program, post, prior)
    # What is left of a prior-only run's draws is the prior; its sampler
    # statistics are kept apart from the posterior run's.
    if "posterior" in prior:
        post["prior"] = prior["posterior"]
    if "prior_predictive" in prior:
        post["prior_predictive"] = prior["prior_predictive"]
    if "sample_stats" in prior:
        post["sample_stats_prior"] = prior["sample_stats"]
    if analysis.whole_limit is not None:
        # Draws read lazily: what is not read block by block is loaded now, if it fits.
        from auditor.loaders.lazy import settle

        lost: list[LoadProblem] = []
        settle(post, analysis.whole_limit, (spec.draws or spec.prior_draws)[0], lost)
        analysis.problems.extend(_problems(lost))
    if post:
        analysis.tree = _tree(post, attrs)
    if spec.data is not None:
        if _exists(spec.data):
            values, problems = read_stan_data(spec.data, gate)
            analysis.data = dict(values)
            analysis.problems.extend(_problems(problems))
            if (spec.observed and spec.data.suffix.lower() in (".csv", ".parquet")
                    and values and spec.observed not in values):
                analysis.problems.append(InputProblem(
                    "unreadable", spec.data,
                    f"the data table has no column {spec.observed!r} (the configured observed "
                    f"variable); its columns: {', '.join(list(values)[:12])}", 1))
        else:
            analysis.problems.append(InputProblem("unreadable", spec.data, "data file not found"))
    elif analysis.tree is not None:
        analysis.data = _data_from_tree(analysis.tree)
    if spec.sbc_ranks is not None:
        from auditor.loaders.sbc_ranks import read_sbc_ranks

        analysis.sbc = read_sbc_ranks(spec.sbc_ranks, n_draws=spec.sbc_draws, gate=gate)
        analysis.problems.extend(_problems(analysis.sbc.problems))
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
