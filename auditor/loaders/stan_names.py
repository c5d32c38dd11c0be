"""Column names of flat draws tables, reshaped into array variables.

One column per scalar is how CmdStan CSV and draws tables store draws. A column
name says which variable and which element it holds:

- CmdStan (CmdStan guide, "Stan CSV file format"; the files in
  ``../shared/reference-data/cmdstan-outputs/``): ``theta``, ``theta.3``,
  ``eta.2.1`` (1-based indices, written in column-major order); complex numbers
  as ``z.real``/``z.imag`` after the indices (``zv.1.real``); tuple slots after
  ``:`` (``pair:1``, ``arr_pair.2:1``, ``nested:2:1.real``), as Stan 2.33 and
  later write them (from memory of stanc3's CSV header writer; checked on files
  written by CmdStan 2.33, StanIO.jl's test data).
- Draws tables (R's posterior/rstan exports, arviz, hand-made): also
  ``theta[3]`` and ``eta[2,1]``, and R's ``make.names`` form ``eta.2.1.``.

A complex variable gets a last axis ``<name>_complex`` of size 2 (``real``,
``imag``); each slot of a tuple is a variable of its own named ``<name>:<slot>``
(``pair:1``), with the indices of the arrays around it first.

Sizes are checked before anything is allocated: the indices of one name must
fill their shape (a single column ``theta.4294967296`` would otherwise ask for
four billion elements per draw). Names whose indices do not fit are reported and
kept as separate quantities under their own names.

We keep this reader rather than using ``stanio.reshape`` (the Stan project's
package): stanio takes the shape from the last column of a variable without
checking the others, raises on names it does not expect, copies every array, and
turns tuples into arrays of Python objects; here every name is checked, problems
are reported with the file and line, and arrays written in CmdStan's order are
views of the draws, not copies (see ``pyproject.toml``).
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from auditor.loaders.problems import LoadProblem

#: Longest index read as an index (CmdStan writes sizes that fit in an int).
MAX_INDEX_DIGITS = 10
#: An array may have at most this many elements per column that names one of
#: them; beyond it the declared shape is absurd.
MAX_FILL = 4
#: Coordinates of the complex axis.
COMPLEX_PARTS = ("real", "imag")

_BRACKET = re.compile(r"^([^\[\]]+)\[([^\[\]]*)\]$")
_TOKEN = re.compile(r"([.:])([^.:]*)")


def _index(text: str) -> int | None:
    if text.isdigit() and text.isascii() and len(text) <= MAX_INDEX_DIGITS:
        return int(text)
    return None


@dataclass(frozen=True)
class Element:
    """What one column name says: variable, 1-based indices, complex part."""

    variable: str
    index: tuple[int, ...] = ()
    part: int | None = None  # 0 real, 1 imaginary, None not complex


def parse_name(name: str, table: bool = False) -> Element:
    """The variable and element a column holds.

    ``table=True`` also reads ``theta[2,1]`` and R's ``theta.2.1.``. Names that
    are not an indexed form are a scalar of their own name.
    """
    if table:
        m = _BRACKET.match(name)
        if m:
            parts = [p.strip() for p in m.group(2).split(",")]
            idx = [_index(p) for p in parts]
            if parts and all(i is not None for i in idx):
                return Element(m.group(1), tuple(idx))  # type: ignore[arg-type]
            return Element(name)
        if name.endswith(".") and not name.endswith(".."):
            inner = parse_name(name[:-1])
            if inner.index and inner.part is None and ":" not in inner.variable:
                return inner
    head = re.split(r"[.:]", name, maxsplit=1)[0]
    if not head or head == name:
        return Element(name)
    tokens = _TOKEN.findall(name[len(head):])
    slots: list[str] = []
    idx: list[int] = []
    part = None
    for k, (sep, tok) in enumerate(tokens):
        if sep == "." and tok in COMPLEX_PARTS and k == len(tokens) - 1:
            part = COMPLEX_PARTS.index(tok)
            continue
        value = _index(tok)
        if value is None:
            return Element(name)
        if sep == ".":
            idx.append(value)
        else:
            slots.append(tok)
    variable = head + "".join(f":{s}" for s in slots)
    return Element(variable, tuple(idx), part)


@dataclass
class ArraySpec:
    """The columns of one array variable.

    ``columns`` are positions in the table, ``cells`` the C-order flat cell of
    each in an array of ``shape`` (the complex axis last, when ``complex``).
    """

    columns: list[int]
    cells: list[int]
    shape: tuple[int, ...]
    complex: bool = False

    def dims(self, name: str) -> tuple[str, ...]:
        """Names of the element dimensions (after chain and draw)."""
        n = len(self.shape) - (1 if self.complex else 0)
        out = tuple(f"{name}_dim_{k}" for k in range(n))
        return out + ((f"{name}_complex",) if self.complex else ())


Layout = dict[str, "ArraySpec | int"]


def layout(
    columns: Sequence[tuple[int, str]],
    path: Path,
    line: int | None,
    problems: list[LoadProblem],
    table: bool = False,
) -> Layout:
    """How the columns form variables: a column position for a scalar, an
    :class:`ArraySpec` for indexed names.

    ``columns`` are ``(position, name)`` pairs. Problems name ``path`` and
    ``line`` (the line of the column names).
    """
    groups: dict[str, list[tuple[int, Element]]] = {}
    for j, col in columns:
        e = parse_name(col, table)
        groups.setdefault(e.variable, []).append((j, e))
    by_name = dict(columns)
    out: Layout = {}
    for base, members in groups.items():
        first = members[0][1]
        if len(members) == 1 and not first.index and first.part is None:
            out[base] = members[0][0]
            continue
        kinds = {(len(e.index), e.part is None) for _, e in members}
        why = None
        spec = None
        if len(kinds) != 1:
            why = "some columns have a different number of indices"
        else:
            spec, why = _array(base, members, path, line, problems)
        if spec is None:
            problems.append(LoadProblem(
                path, f"columns {base}.*: {why}; they are kept as separate quantities named as "
                "in the file", line=line))
            for j, _ in members:
                out[by_name[j]] = j
            continue
        out[base] = spec
    return safe_names(out, path, line, problems)


def _array(base: str, members: list[tuple[int, Element]], path: Path, line: int | None,
           problems: list[LoadProblem]) -> tuple[ArraySpec | None, str | None]:
    is_complex = members[0][1].part is not None
    idx = [e.index + ((e.part + 1,) if is_complex else ()) for _, e in members]
    if not idx[0]:
        return None, "a name without indices"
    shape = tuple(max(i[k] for i in idx) for k in range(len(idx[0])))
    if is_complex:
        shape = (*shape[:-1], 2)
    cells = math.prod(shape)
    size = "x".join(map(str, shape))
    if any(min(i) < 1 for i in idx):
        return None, "an index is 0, but Stan numbers elements from 1"
    if len(set(idx)) != len(idx):
        return None, "an index appears twice"
    if cells > MAX_FILL * len(members):
        return None, (f"the indices span a {size} array ({cells:,} elements) but there are "
                      f"only {len(members):,} columns")
    if cells != len(members):
        # A few elements missing (a hand-edited file): keep the array, with the
        # missing elements read as NaN, and say so.
        problems.append(LoadProblem(
            path, f"columns {base}.* give {len(members):,} of the {cells:,} elements "
            f"of a {size} array; the missing elements are read as NaN", line=line))
    flat = np.ravel_multi_index(tuple(np.array(idx).T - 1), shape)
    return ArraySpec([j for j, _ in members], [int(c) for c in flat], shape, is_complex), None


def safe_names(spec: Layout, path: Path, line: int | None, problems: list[LoadProblem]) -> Layout:
    """Rename variables whose names the normalized tree cannot hold.

    ``chain`` and ``draw`` are the draws' own dimensions and ``<name>_dim_<k>``
    and ``<name>_complex`` the dimensions of arrays; a ``/`` would be read as a
    group path. Stan allows the first two as identifiers, so a real program can
    use them.
    """
    taken = set(spec)
    reserved = {"chain", "draw"} | {
        d for name, s in spec.items() if isinstance(s, ArraySpec) for d in s.dims(name)}
    out: Layout = {}
    for name, s in spec.items():
        new = name.replace("/", "_")
        while new in reserved or (new != name and new in taken):
            new += "_"
        if new != name:
            problems.append(LoadProblem(
                path, f"the quantity named {name!r} is shown as {new!r}: its name is one the "
                "draws' dimensions use, or holds a '/'", line=line, kind="note"))
            taken.add(new)
        out[new] = s
    return out


def _stan_order_view(values: np.ndarray, spec: ArraySpec) -> np.ndarray | None:
    """The variable as a view of ``values`` when its columns are contiguous and in
    CmdStan's order (column-major indices, the complex part fastest); else ``None``."""
    cols = spec.columns
    n = len(cols)
    if n != math.prod(spec.shape) or cols != list(range(cols[0], cols[0] + n)):
        return None
    axes = spec.shape[:-1] if spec.complex else spec.shape
    # Position each cell takes in CmdStan's order.
    grid = np.unravel_index(np.asarray(spec.cells), spec.shape)
    order = np.ravel_multi_index(tuple(grid[: len(axes)]), axes, order="F") if axes else 0
    if spec.complex:
        order = order * 2 + grid[-1]
    if not np.array_equal(order, np.arange(n)):
        return None
    lead = values.shape[:-1]
    block = values[..., cols[0]: cols[0] + n]
    k = len(lead)
    if spec.complex:
        view = block.reshape(*lead, *axes[::-1], 2)
        perm = (*range(k), *(k + len(axes) - 1 - a for a in range(len(axes))), k + len(axes))
    else:
        view = block.reshape(*lead, *axes[::-1])
        perm = (*range(k), *(k + len(axes) - 1 - a for a in range(len(axes))))
    return view.transpose(perm)


def extract(values: np.ndarray, spec: ArraySpec | int) -> np.ndarray:
    """One variable's draws from ``values`` (``(..., column)``), shape ``(..., *shape)``.

    Arrays written in CmdStan's order are views of ``values``; others are copied
    (missing elements are NaN).
    """
    if isinstance(spec, int):
        return values[..., spec]
    view = _stan_order_view(values, spec)
    if view is not None:
        return view
    lead = values.shape[:-1]
    cells = math.prod(spec.shape)
    if cells == len(spec.columns):
        arr = np.empty((*lead, cells), dtype=values.dtype)
    else:  # missing elements (reported by layout) stay NaN
        arr = np.full((*lead, cells), np.nan, dtype=values.dtype)
    arr[..., spec.cells] = values[..., spec.columns]
    return arr.reshape(*lead, *spec.shape)


def coords_for(name: str, spec: ArraySpec | int, start: int = 0) -> dict[str, object]:
    """Coordinates of a variable's element dimensions (integers from ``start``; the
    complex axis labelled ``real``/``imag``)."""
    if isinstance(spec, int):
        return {}
    out: dict[str, object] = {}
    for dim, size in zip(spec.dims(name), spec.shape, strict=True):
        out[dim] = (list(COMPLEX_PARTS) if dim == f"{name}_complex"
                    else np.arange(start, start + size))
    return out
