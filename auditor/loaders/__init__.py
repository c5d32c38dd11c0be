"""Loaders: draws files in, normalized analysis pieces out.

:func:`load_draws` picks the reader by file type. Readers never raise on bad
input; they return :class:`~auditor.loaders.problems.Loaded` with problems.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from auditor.boundary import Boundary
from auditor.loaders.cmdstan_csv import (
    CmdStanHeader,
    load_cmdstan_csv,
    read_cmdstan_header,
    sniff_cmdstan,
)
from auditor.loaders.problems import Loaded, LoadProblem
from auditor.model import SamplerSettings

__all__ = [
    "CmdStanHeader",
    "LoadProblem",
    "Loaded",
    "load_draws",
    "read_cmdstan_header",
    "sniff_cmdstan",
]


def load_draws(paths: Sequence[Path], gate: Boundary | None = None) -> Loaded:
    """Load the draws of one analysis.

    Parameters
    ----------
    paths
        Either CmdStan CSV files (``*.csv``), all chains of one run, in chain
        order; or a single DataTree file: netCDF (``*.nc``) or a Zarr store
        (``*.zarr`` directory).
    gate
        The project boundary every file is opened through (default: type and
        size checks only, for one's own files).

    Returns
    -------
    Loaded
        The draws, settings, source files and every problem seen (an empty
        ``paths`` gives ``tree=None`` and no problems).
    """
    paths = [Path(p) for p in paths]
    if not paths:
        # Nothing to load is the caller's business, not a defect of any file.
        return Loaded(tree=None)
    kinds = {_kind(p) for p in paths}
    if kinds == {"csv"}:
        return load_cmdstan_csv(paths, gate)
    if len(paths) == 1 and kinds <= {"netcdf", "zarr"}:
        from auditor.loaders.datatree_file import load_datatree

        return load_datatree(paths[0], gate)
    if kinds <= {"netcdf", "zarr"}:
        return Loaded(
            tree=None,
            problems=[
                LoadProblem(
                    p,
                    f"{len(paths)} DataTree files were given for one analysis; "
                    "a DataTree file holds a whole run, give one",
                )
                for p in paths
            ],
        )
    unknown = [p for p in paths if _kind(p) == "other"]
    mixed = unknown or paths
    message = (
        "not a draws file this tool reads (CmdStan CSV *.csv, netCDF *.nc, Zarr *.zarr)"
        if unknown
        else "CmdStan CSV and DataTree files are mixed in one analysis; give one kind"
    )
    return Loaded(
        tree=None,
        settings=SamplerSettings(),
        problems=[LoadProblem(p, message) for p in mixed],
    )


def _kind(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix in (".nc", ".nc4", ".netcdf", ".h5", ".hdf5"):
        return "netcdf"
    if suffix == ".zarr":
        return "zarr"
    try:
        if path.is_dir() and ((path / ".zgroup").exists() or (path / "zarr.json").exists()):
            return "zarr"
    except OSError:  # a name too long, a link loop: the loader will say so
        pass
    return "other"
