"""Find the analyses of a project: declared in the manifest, or discovered in its folders.

Discovery rules: each ``.nc`` file or ``.zarr`` store is one analysis; CmdStan
CSV files are grouped into one analysis per run (same folder and file-name stem
without the chain number; the loader checks that the chains agree); each draws
table (a ``.parquet`` file, or a CSV that is not CmdStan's but has chain and draw
columns; see :mod:`auditor.loaders.draws_table`) is one analysis; a Stan
program pairs with the draws whose header says ``model = <stem>_model`` (the
Stan compiler's naming); a PyMC source ``.py`` pairs with a ``.nc``/``.zarr`` of
the same stem in the same folder. Programs left without draws become analyses of
their own with an ``unpaired`` problem.

Folders are walked through the project boundary (:mod:`auditor.boundary`):
links leading out of the project, link loops, FIFOs, sockets and devices are
reported, never followed or opened. A CSV that is not sampler output is left
alone, as a data table, unless it sits among the chains of a run (same stem):
then it is reported with that run, so that no chain is lost silently.
"""

from __future__ import annotations

import re
from collections import defaultdict
from pathlib import Path

from auditor.boundary import Boundary, Refused, display
from auditor.loaders import sniff_cmdstan
from auditor.loaders.draws_table import sniff_draws_table
from auditor.model import AnalysisSpec, InputProblem
from auditor.programs.read import read_program

_CHAIN_SUFFIX = re.compile(r"[-_.]?\d+$")


def _run_key(path: Path) -> tuple[Path, str]:
    return path.parent, _CHAIN_SUFFIX.sub("", path.stem)


def _candidates(
    root: Path, files: list[Path] | None, boundary: Boundary
) -> tuple[list[Path], list[InputProblem]]:
    """The files to look at, and the paths the boundary refused on the way."""
    problems: list[InputProblem] = []
    if files is None:
        walked = boundary.walk()
        for r in walked.refused:
            problems.append(InputProblem(r.kind, Path(r.path), r.reason))
        return list(walked.files), problems
    out = []
    for path in files:
        try:
            boundary.admit(path, folder=True, size=False)
        except Refused as exc:
            problems.append(InputProblem(exc.kind, path, exc.reason))
            continue
        out.append(path)
    return out, problems


def discover(
    root: Path, files: list[Path] | None = None, boundary: Boundary | None = None
) -> tuple[list[AnalysisSpec], list[InputProblem]]:
    """Analyses found under ``root`` (or among ``files`` when given).

    Returns the specs and the problems not tied to one analysis (refused paths,
    unpaired programs are attached to their own spec).
    """
    boundary = boundary or Boundary(root)
    candidates, problems = _candidates(root, files, boundary)
    csv_groups: dict[tuple[Path, str], list[Path]] = defaultdict(list)
    trees: list[Path] = []
    tables: list[Path] = []
    stan_programs: list[Path] = []
    py_sources: list[Path] = []
    for path in candidates:
        suffix = path.suffix.lower()
        if suffix == ".csv":
            csv_groups[_run_key(path)].append(path)
        elif suffix in (".nc", ".zarr"):
            trees.append(path)
        elif suffix == ".parquet" and not path.is_dir():
            tables.append(path)
        elif suffix == ".stan":
            stan_programs.append(path)
        elif suffix == ".py" and not path.is_dir():
            py_sources.append(path)

    runs: dict[tuple[Path, str], list[Path]] = {}
    run_model: dict[tuple[Path, str], str | None] = {}
    run_problems: dict[tuple[Path, str], list[InputProblem]] = defaultdict(list)
    folders_with_draws: set[Path] = set()
    strays: list[tuple[Path, str]] = []
    for key in sorted(csv_groups):
        chains: list[Path] = []
        others: list[tuple[Path, str]] = []
        for path in sorted(csv_groups[key]):
            try:
                header, why = sniff_cmdstan(path, boundary)
            except Refused:
                # Kept with its run, whose loader reports it as refused.
                chains.append(path)
                continue
            except OSError as exc:
                header, why = None, f"cannot be read ({exc.strerror or exc})"
            if header is None:
                if _is_draws_table(path, boundary):
                    tables.append(path)
                    continue
                others.append((path, why))
                continue
            chains.append(path)
            run_model.setdefault(key, header.model)
        if chains:
            runs[key] = chains
            folders_with_draws.add(key[0])
            for path, why in others:
                run_problems[key].append(InputProblem(
                    "unreadable", path,
                    f"sits among the chains of run '{key[1]}' but is {why}; it is left out"))
        else:
            strays.extend(others)
    for path, why in strays:
        # A data table is no concern of ours; an empty or binary CSV beside draws is
        # worth a note, since it may be a chain that failed to write.
        if path.parent in folders_with_draws and not why.startswith("not a CmdStan"):
            problems.append(InputProblem(
                "note", path, f"is {why}, beside sampler output; it was not read as draws"))

    specs: list[AnalysisSpec] = []
    paired: set[Path] = set()
    stan_by_model = {f"{p.stem}_model": p for p in stan_programs}
    for key in sorted(runs):
        folder, stem = key
        model = stan_by_model.get(run_model.get(key) or "")
        if model is not None:
            paired.add(model)
        specs.append(AnalysisSpec(name=stem, draws=sorted(runs[key]), model=model,
                                  problems=run_problems.get(key, [])))
    py_by_key = {(p.parent, p.stem): p for p in py_sources}
    for tree in sorted(trees):
        model = py_by_key.get((tree.parent, tree.stem))
        if model is not None:
            paired.add(model)
        specs.append(AnalysisSpec(name=tree.stem, draws=[tree], model=model))

    for table in sorted(tables):
        specs.append(AnalysisSpec(name=table.stem, draws=[table]))

    for program in sorted(stan_programs):
        if program not in paired:
            specs.append(AnalysisSpec(
                name=program.stem, draws=[], model=program,
                problems=[InputProblem(
                    "unpaired", program,
                    f"Stan program found but no draws say 'model = {program.stem}_model'")],
            ))
    for source in sorted(py_sources):
        # Any .py may be a helper script: only a file that builds a PyMC model
        # (read with ast, never run) is a program whose draws are missing.
        if source not in paired and read_program(source, boundary).declarations:
            specs.append(AnalysisSpec(
                name=source.stem, draws=[], model=source,
                problems=[InputProblem(
                    "unpaired", source,
                    f"PyMC model source found but no {source.stem}.nc or {source.stem}.zarr "
                    "beside it")],
            ))
    _unique_names(specs)
    for spec in specs:
        spec.name = display(spec.name)  # a file name may hold bytes that are not UTF-8
    return specs, problems


def _is_draws_table(path: Path, boundary: Boundary) -> bool:
    try:
        columns, _ = sniff_draws_table(path, boundary)
    except (Refused, OSError):
        return False
    return columns is not None


def _unique_names(specs: list[AnalysisSpec]) -> None:
    # Two runs with the same stem in different folders get the folder in the name.
    counts: dict[str, int] = defaultdict(int)
    for spec in specs:
        counts[spec.name] += 1
    for spec in specs:
        if counts[spec.name] > 1:
            where = (spec.draws[0] if spec.draws else spec.model or Path(spec.name)).parent.name
            spec.name = f"{where}/{spec.name}"
    # Still the same (a run and a table of one stem in one folder): the draws file
    # of the table (or tree) names it.
    counts.clear()
    for spec in specs:
        counts[spec.name] += 1
    for spec in specs:
        if counts[spec.name] > 1 and len(spec.draws) == 1:
            spec.name = f"{spec.name} ({spec.draws[0].name})"
