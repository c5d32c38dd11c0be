"""Read a CSV of simulation-based calibration ranks, reporting bad rows instead of raising.

The file: a header row naming the columns, then one row per simulation with the rank of each
parameter's true value among that simulation's posterior draws (an integer ``0..M``) and, in the
column ``n_draws`` (the name can be changed), the number ``M`` of posterior draws. Without that
column the caller gives ``M``. Lines starting with ``#`` and blank lines are skipped. Fields may
be quoted; whole numbers written as ``12.0`` or ``1e3`` are accepted.

Rows with a defect (wrong number of fields, a rank that is not a whole number, or outside
``0..M``, a missing or non-positive number of draws) are left out, each with a
:class:`~auditor.loaders.problems.LoadProblem` naming the file, the line and the defect; the
first :data:`MAX_ROW_PROBLEMS` are reported one by one and the rest in one summary problem.
The file is opened through the project boundary (``gate``), like every loader's.
"""

from __future__ import annotations

import csv
import math
import numbers
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from auditor.boundary import Boundary, Refused
from auditor.kernels.sbc import MAX_DRAWS
from auditor.loaders.problems import LoadProblem, refused_problem

__all__ = ["DEFAULT_N_DRAWS_COLUMN", "MAX_ROW_PROBLEMS", "SbcRanks", "read_sbc_ranks"]

#: Name of the column holding the number of posterior draws per simulation.
DEFAULT_N_DRAWS_COLUMN = "n_draws"
#: Bad rows reported one by one; the rest are counted in one problem.
MAX_ROW_PROBLEMS = 20


@dataclass
class SbcRanks:
    """What :func:`read_sbc_ranks` read.

    Parameters
    ----------
    path
        The file.
    parameters
        Parameter names (the rank columns), in file order.
    ranks
        Shape (simulations, parameters), the good rows only.
    n_draws
        Posterior draws per simulation, shape (simulations,).
    lines
        1-based line of each simulation's row in the file.
    problems
        Everything that was wrong.
    """

    path: Path
    parameters: list[str] = field(default_factory=list)
    ranks: NDArray[np.int64] = field(default_factory=lambda: np.zeros((0, 0), dtype=np.int64))
    n_draws: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    lines: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    problems: list[LoadProblem] = field(default_factory=list)


def _whole(text: str) -> int | None:
    """A whole number written as an integer or as a float with no fraction, else None."""
    t = text.strip()
    if not t or len(t) > 40 or "_" in t:
        return None
    try:
        return int(t)
    except ValueError:
        pass
    try:
        v = float(t)
    except ValueError:
        return None
    if not math.isfinite(v) or v != math.floor(v) or abs(v) > 2**62:
        return None
    return int(v)


def _fields(line: str) -> list[str] | None:
    try:
        rows = list(csv.reader([line], skipinitialspace=True))
    except csv.Error:
        return None
    return [f.strip() for f in rows[0]] if rows else []


def read_sbc_ranks(
    path: str | Path,
    *,
    n_draws: int | None = None,
    n_draws_column: str = DEFAULT_N_DRAWS_COLUMN,
    gate: Boundary | None = None,
) -> SbcRanks:
    """Read an SBC ranks CSV; never raises on bad input.

    Parameters
    ----------
    path
        The CSV file.
    n_draws
        Posterior draws per simulation, for a file without the ``n_draws_column`` column.
        When the file has the column, it is used and this is ignored.
    n_draws_column
        Name of the column with the number of draws.
    gate
        The project boundary the file is opened through (default: type and size checks only).

    Returns
    -------
    SbcRanks
        The good rows and the problems; no parameters and no rows when the file cannot be used
        at all (the problems say why).
    """
    path = Path(path)
    out = SbcRanks(path)
    gate = gate or Boundary.unconfined()
    try:
        text = gate.read_text(path, errors="replace")
    except Refused as exc:
        out.problems.append(refused_problem(path, exc))
        return out
    except OSError as exc:
        out.problems.append(LoadProblem(path, f"cannot read the ranks file: {exc.strerror or exc}"))
        return out

    header: list[str] | None = None
    header_line = 0
    rows: list[tuple[int, list[str]]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        fields = _fields(line)
        if header is None:
            if fields is None:
                out.problems.append(LoadProblem(path, "the header row cannot be read as CSV",
                                                number))
                return out
            header, header_line = fields, number
            continue
        rows.append((number, fields if fields is not None else []))
    if header is None:
        out.problems.append(LoadProblem(path, "the file has no header row and no simulations"))
        return out

    names_seen: set[str] = set()
    for i, name in enumerate(header):
        if not name:
            out.problems.append(LoadProblem(
                path, f"column {i + 1} of the header has no name", header_line))
            return out
        if name in names_seen:
            out.problems.append(LoadProblem(
                path, f"the column name '{name}' appears twice in the header", header_line))
            return out
        names_seen.add(name)
    m_col = header.index(n_draws_column) if n_draws_column in header else None
    params = [(i, name) for i, name in enumerate(header) if i != m_col]
    if not params:
        out.problems.append(LoadProblem(path, "the header names no parameter columns",
                                        header_line))
        return out
    if m_col is None and n_draws is None:
        out.problems.append(LoadProblem(
            path, f"no '{n_draws_column}' column and no number of posterior draws given: the "
            "ranks cannot be tested without it", header_line))
        return out
    given_ok = (isinstance(n_draws, numbers.Integral) and not isinstance(n_draws, bool)
                and 1 <= int(n_draws) <= MAX_DRAWS)
    if m_col is None and not given_ok:
        out.problems.append(LoadProblem(
            path, f"the number of posterior draws given ({n_draws!r}) is not a whole number "
            f"from 1 to {MAX_DRAWS}"))
        return out

    good_ranks: list[list[int]] = []
    good_m: list[int] = []
    good_lines: list[int] = []
    bad = 0

    def defect(number: int, message: str) -> None:
        nonlocal bad
        bad += 1
        if bad <= MAX_ROW_PROBLEMS:
            out.problems.append(LoadProblem(path, f"simulation left out: {message}", number))

    for number, fields in rows:
        if len(fields) != len(header):
            defect(number, f"{len(fields)} fields, the header has {len(header)}")
            continue
        if m_col is not None:
            m = _whole(fields[m_col])
            if m is None or not 1 <= m <= MAX_DRAWS:
                defect(number, f"'{n_draws_column}' is '{fields[m_col][:40]}', not a whole "
                       f"number from 1 to {MAX_DRAWS}")
                continue
        else:
            m = int(n_draws)  # type: ignore[arg-type]
        values: list[int] = []
        for i, name in params:
            r = _whole(fields[i])
            if r is None:
                defect(number, f"the rank of '{name}' is '{fields[i][:40]}', not a whole number")
                break
            if not 0 <= r <= m:
                defect(number, f"the rank of '{name}' is {r}, outside 0..{m} (the ranks of "
                       f"{m} posterior draws)")
                break
            values.append(r)
        else:
            good_ranks.append(values)
            good_m.append(m)
            good_lines.append(number)
    if bad > MAX_ROW_PROBLEMS:
        out.problems.append(LoadProblem(
            path, f"{bad - MAX_ROW_PROBLEMS} more simulations left out for defects like these"))
    if not good_ranks:
        out.problems.append(LoadProblem(path, "no usable simulations in the file"))
    out.parameters = [name for _, name in params]
    out.ranks = np.array(good_ranks, dtype=np.int64).reshape(len(good_ranks), len(params))
    out.n_draws = np.array(good_m, dtype=np.int64)
    out.lines = np.array(good_lines, dtype=np.int64)
    return out
