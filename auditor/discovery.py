"""Find the analyses of a project: declared in the manifest, or discovered in its folders.

Discovery rules: each ``.nc`` file or ``.zarr`` store is one analysis; CmdStan
CSV files are grouped into one analysis per run (same folder and file-name stem
without the chain number; the loader checks that the chains agree); a Stan
program pairs with the draws whose header says ``model = <stem>_model`` (the
Stan compiler's naming); a PyMC source ``.py`` pairs with a ``.nc``/``.zarr`` of
the same stem in the same folder. Programs left without draws become analyses of
their own with an ``unpaired`` problem.
"""

from __future__ import annotations

import re
from collections import defaultdict
from collections.abc import Iterable
from pathlib import Path

from auditor.loaders import read_cmdstan_header
from auditor.model import AnalysisSpec, InputProblem
from auditor.programs.read import read_program

#: Folders never searched: our own output, version control, environments.
SKIP_DIRS = frozenset(
    {"audit-report", ".git", ".hg", ".venv", "venv", "node_modules", "__pycache__"}
)
_CHAIN_SUFFIX = re.compile(r"[-_.]?\d+$")


def _walk(root: Path) -> Iterable[Path]:
    for path in sorted(root.iterdir()):
        if path.name.startswith(".") or path.name in SKIP_DIRS:
            continue
        if path.is_dir() and path.suffix != ".zarr":
            yield from _walk(path)
        else:
            yield path


def _run_key(path: Path) -> tuple[Path, str]:
    return path.parent, _CHAIN_SUFFIX.sub("", path.stem)


def discover(
    root: Path, files: list[Path] | None = None
) -> tuple[list[AnalysisSpec], list[InputProblem]]:
    """Analyses found under ``root`` (or among ``files`` when given).

    Returns the specs and problems about unpaired programs.
    """
    candidates = list(files) if files is not None else list(_walk(root))
    runs: dict[tuple[Path, str], list[Path]] = defaultdict(list)
    run_model: dict[tuple[Path, str], str | None] = {}
    trees: list[Path] = []
    stan_programs: list[Path] = []
    py_sources: list[Path] = []
    for path in candidates:
        suffix = path.suffix.lower()
        if suffix == ".csv":
            header = read_cmdstan_header(path)
            if header is None:
                continue  # a data table, not draws
            key = _run_key(path)
            runs[key].append(path)
            run_model.setdefault(key, header.model)
        elif suffix in (".nc", ".zarr"):
            trees.append(path)
        elif suffix == ".stan":
            stan_programs.append(path)
        elif suffix == ".py" and path.is_file():
            py_sources.append(path)

    specs: list[AnalysisSpec] = []
    paired: set[Path] = set()
    stan_by_model = {f"{p.stem}_model": p for p in stan_programs}
    for key in sorted(runs):
        folder, stem = key
        model = stan_by_model.get(run_model.get(key) or "")
        if model is not None:
            paired.add(model)
        specs.append(AnalysisSpec(name=stem, draws=sorted(runs[key]), model=model))
    py_by_key = {(p.parent, p.stem): p for p in py_sources}
    for tree in sorted(trees):
        model = py_by_key.get((tree.parent, tree.stem))
        if model is not None:
            paired.add(model)
        specs.append(AnalysisSpec(name=tree.stem, draws=[tree], model=model))

    problems: list[InputProblem] = []
    for program in sorted(stan_programs):
        if program not in paired:
            problems.append(
                InputProblem(
                    "unpaired",
                    program,
                    f"Stan program found but no draws say 'model = {program.stem}_model'",
                )
            )
            specs.append(AnalysisSpec(name=program.stem, draws=[], model=program))
    for source in sorted(py_sources):
        # Any .py may be a helper script: only a file that builds a PyMC model
        # (read with ast, never run) is a program whose draws are missing.
        if source not in paired and read_program(source).declarations:
            problems.append(
                InputProblem(
                    "unpaired",
                    source,
                    f"PyMC model source found but no {source.stem}.nc or {source.stem}.zarr "
                    "beside it",
                )
            )
            specs.append(AnalysisSpec(name=source.stem, draws=[], model=source))
    _unique_names(specs)
    return specs, problems


def _unique_names(specs: list[AnalysisSpec]) -> None:
    # Two runs with the same stem in different folders get the folder in the name.
    counts: dict[str, int] = defaultdict(int)
    for spec in specs:
        counts[spec.name] += 1
    for spec in specs:
        if counts[spec.name] > 1:
            where = (spec.draws[0] if spec.draws else spec.model or Path(spec.name)).parent.name
            spec.name = f"{where}/{spec.name}"
