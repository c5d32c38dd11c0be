"""Rows of numbers in CSV text, parsed into a preallocated array.

The CmdStan CSV reader cuts a file into regions of consecutive data lines (no
comment lines among them) and hands each region to :func:`parse_region`, which
writes row ``i`` of the region into ``out[row0 + i]`` when the line has the
expected number of fields, and says which lines it could not use. Regions are
parsed on several threads at once (polars releases the GIL), so the caller
bounds how many are in flight.

Two parsers give the same values:

- polars (regions of 64 KiB and more): the region's lines go to polars as one
  text column, each line is split at the commas and every field cast to float64
  inside its list, which keeps the values in row order (a columnar CSV reader
  scatters every row over all columns; on wide files this was 20-25% faster than
  polars' own ``read_csv`` with a float schema and needed half the memory of
  exploding the fields first; ``benchmarks/README.md``). polars parses numbers
  with correct rounding, like Python's ``float``; a field polars does not take as
  a number (``true``, ``1_0``, `` 1``) is read again with Python's ``float``.
- Python (small regions, text that is not UTF-8, one-column files, anything the
  polars path declines): ``float`` per field.

A field that is not a number becomes NaN and is reported; ``true``/``false``
become 1 and 0 (Stan 2.35 writes booleans so in some places).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Regions smaller than this are parsed in Python (polars' call overhead is
#: larger than the work there).
SMALL_REGION = 64 * 1024
#: Odd cells remembered per region (the caller reports a few and counts the rest).
MAX_ODD = 5


@dataclass
class RegionResult:
    """What :func:`parse_region` found in one region.

    ``good`` marks the lines written to ``out`` (``None``: all of them);
    ``blank`` marks lines holding only white space; ``fields`` is the number of
    fields of every line (``None`` when all lines were good); ``odd`` lists the
    first cells that were not numbers (line offset in the region, 0-based
    column, text), ``n_odd`` counts them all.
    """

    n_lines: int
    good: np.ndarray | None = None
    blank: np.ndarray | None = None
    fields: np.ndarray | None = None
    odd: list[tuple[int, int, str]] = field(default_factory=list)
    n_odd: int = 0


def _bool_or_nan(text: str) -> tuple[float, bool]:
    """Value of a field Python's ``float`` refused: (value, is it odd)."""
    t = text.strip().lower()
    if t == "true":
        return 1.0, False
    if t == "false":
        return 0.0, False
    return float("nan"), True


def parse_region(region: bytes, n_lines: int, ncol: int, out: np.ndarray,
                 row0: int) -> RegionResult:
    """Parse the ``n_lines`` lines of ``region`` into ``out[row0 : row0 + n_lines]``.

    Every line but possibly the last ends with ``\\n``. Lines with another number
    of fields than ``ncol`` are not written (their rows of ``out`` are left as
    they were).
    """
    if len(region) >= SMALL_REGION:
        try:
            result = _parse_polars(region, n_lines, ncol, out, row0)
        except Exception:  # noqa: BLE001 - any surprise: the plain parser decides
            result = None
        if result is not None:
            return result
    return _parse_python(region, n_lines, ncol, out, row0)


_EXPRESSION = None


def _fields_as_floats():  # noqa: ANN202 - a polars expression, built once
    """``l`` split at commas, each field cast to float64 (null when it is no number)."""
    global _EXPRESSION
    if _EXPRESSION is None:
        import polars as pl

        _EXPRESSION = pl.col("l").cast(pl.String).str.split(",").list.eval(
            pl.element().cast(pl.Float64, strict=False)).alias("v")
    return _EXPRESSION


def _parse_polars(region: bytes, n_lines: int, ncol: int, out: np.ndarray,
                  row0: int) -> RegionResult | None:
    import polars as pl

    if ncol == 1:  # a line of white space would pass as one field
        return None
    lines = region.split(b"\n")
    if region.endswith(b"\n"):
        lines.pop()
    if len(lines) != n_lines:
        return None
    if b"\r" in region:
        lines = [line.removesuffix(b"\r") for line in lines]
    # Casting inside the lists keeps no per-field text around (about half the
    # memory of exploding the fields first, and faster). Text that is not UTF-8
    # makes the cast raise: the plain parser then reads the region.
    df = pl.DataFrame({"l": pl.Series(lines, dtype=pl.Binary)}).lazy().select(
        _fields_as_floats()).collect()
    if df.height != n_lines:
        return None
    lens = df["v"].list.len().fill_null(0).to_numpy()
    good = lens == ncol
    every = bool(good.all())
    col = (df if every else df.filter(pl.Series(good)))["v"].explode()
    del df
    if col.len() != int(good.sum()) * ncol:
        return None
    arr = col.to_numpy().reshape(-1, ncol)
    result = RegionResult(n_lines)
    rows = np.arange(n_lines) if every else np.flatnonzero(good)
    if col.null_count():
        # Fields polars did not take as numbers: read again as Python does.
        if not arr.flags.writeable:
            arr = arr.copy()
        for k in col.is_null().arg_true().to_numpy():
            r, j = divmod(int(k), ncol)
            field_text = lines[int(rows[r])].decode().split(",")[j]
            arr[r, j], odd = _float(field_text)
            if odd:
                result.n_odd += 1
                if len(result.odd) < MAX_ODD:
                    result.odd.append((int(rows[r]), j, field_text))
    if every:
        out[row0: row0 + n_lines] = arr
        return result
    out[row0 + rows] = arr
    result.good = good
    result.fields = lens
    blank = lens == 0
    for i in np.flatnonzero(lens == 1):
        blank[i] = not lines[int(i)].strip()
    result.blank = blank
    return result


def _float(text: str) -> tuple[float, bool]:
    """Value of a field as Python reads it: (value, whether it is not a number)."""
    try:
        return float(text), False
    except ValueError:
        return _bool_or_nan(text)


def _parse_python(region: bytes, n_lines: int, ncol: int, out: np.ndarray,
                  row0: int) -> RegionResult:
    text = region.decode("utf-8", errors="replace")
    lines = text.split("\n")
    if text.endswith("\n"):
        lines.pop()
    lines = lines[:n_lines]
    good = np.zeros(n_lines, dtype=bool)
    blank = np.zeros(n_lines, dtype=bool)
    fields = np.zeros(n_lines, dtype=np.int64)
    result = RegionResult(n_lines)
    for i, line in enumerate(lines):
        line = line.removesuffix("\r")
        if not line.strip():
            blank[i] = True
            continue
        parts = line.split(",")
        fields[i] = len(parts)
        if len(parts) != ncol:
            continue
        good[i] = True
        row = out[row0 + i]
        try:
            row[:] = np.array(parts, dtype=np.float64)
            continue
        except ValueError:
            pass
        for j, part in enumerate(parts):
            row[j], odd = _float(part)
            if odd:
                result.n_odd += 1
                if len(result.odd) < MAX_ODD:
                    result.odd.append((i, j, part))
    if not good.all():
        result.good, result.blank, result.fields = good, blank, fields
    return result
