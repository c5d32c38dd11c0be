"""Loaders: draws files in, normalized analysis pieces out.

:func:`load_draws` picks the reader by file type. Readers never raise on bad
input; they return :class:`~auditor.loaders.problems.Loaded` with problems.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from auditor.boundary import Boundary, Refused
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
        order; or draws tables (CSV with chain and draw columns, or ``*.parquet``;
        see :mod:`auditor.loaders.draws_table`); or a single DataTree file: netCDF
        (``*.nc``) or a Zarr store (``*.zarr`` directory).
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
    if kinds <= {"csv", "parquet"}:
        from auditor.loaders.draws_table import load_draws_table

        tables = [p for p in paths if _kind(p) == "parquet" or _is_table(p, gate)]
        if len(tables) == len(paths):
            return load_draws_table(paths, gate)
        if not tables:
            return load_cmdstan_csv(paths, gate)
        # Mixed: the CmdStan chains are read, the tables among them reported.
        loaded = load_cmdstan_csv([p for p in paths if p not in tables], gate)
        loaded.problems.extend(LoadProblem(
            p, "a draws table (one row per draw, with chain and draw columns) among CmdStan "
            "CSV chains; it is left out: give it as an analysis of its own") for p in tables)
        return loaded
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
        "not a draws file this tool reads (CmdStan CSV *.csv, draws tables *.csv/*.parquet, "
        "netCDF *.nc, Zarr *.zarr)"
        if unknown
        else "draws tables and DataTree files are mixed in one analysis; give one kind"
    )
    return Loaded(
        tree=None,
        settings=SamplerSettings(),
        problems=[LoadProblem(p, message) for p in mixed],
    )


def _is_table(path: Path, gate: Boundary | None) -> bool:
    """Whether a CSV is a draws table (chain and draw columns, no CmdStan header)."""
    from auditor.loaders.draws_table import sniff_draws_table

    try:
        header, _ = sniff_cmdstan(path, gate)
        if header is not None and ("stan_version_major" in header.settings
                                   or header.column_line != 1):
            return False
        columns, _ = sniff_draws_table(path, gate)
    except (Refused, OSError):
        return False  # the CmdStan reader reports it
    return columns is not None


def _kind(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix == ".parquet":
        return "parquet"
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
