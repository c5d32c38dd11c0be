"""Data files: Stan JSON, R dump, and data tables (CSV or Parquet).

Formats (CmdStan guide, "JSON format for CmdStan" and "RDump format for CmdStan";
common practice):

- JSON: one object; each member a number, an array of numbers (nested arrays are
  row-major arrays) or one of the strings ``"NaN"``, ``"Inf"``, ``"-Inf"``,
  ``"Infinity"``, ``"-Infinity"``.
- R dump: ``name <- value`` lines, the value a number, ``c(...)``, an integer
  sequence ``a:b``, ``integer(0)``/``double(0)``, or
  ``structure(c(...), .Dim = c(...))`` for arrays, whose values are listed in
  column-major (R) order.

- Data tables (CSV with a header line, or Parquet): one column per variable, one
  row per observation; each column becomes a vector (whole numbers stay
  integers, text columns stay text). The analysis's ``observed`` names the
  column that holds the outcome.

Nothing is evaluated: the formats are parsed as text (tables by polars).
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from auditor.boundary import Boundary, Refused
from auditor.loaders.problems import LoadProblem, refused_problem

Value = np.ndarray | int | float

_SPECIAL_STRINGS = {
    "nan": math.nan,
    "inf": math.inf,
    "+inf": math.inf,
    "-inf": -math.inf,
    "infinity": math.inf,
    "+infinity": math.inf,
    "-infinity": -math.inf,
}


#: Most values one variable may hold: an R dump ``1:n`` or ``integer(n)`` of a few
#: bytes can ask for billions of elements, which would exhaust memory.
MAX_VALUES = 50_000_000
_INT64_MAX = 2**63 - 1


def read_stan_data(
    path: Path, gate: Boundary | None = None
) -> tuple[dict[str, Value], list[LoadProblem]]:
    """Read a Stan data file (JSON, or R dump for ``.R``/``.data.R``/others).

    The file is opened through ``gate`` (default: type and size checks only).

    Returns
    -------
    values, problems
        Variable name to value (``int``/``float`` for scalars, numpy arrays
        otherwise; integer data stays integer), and every problem seen, with the
        line where there is one. Variables that could not be read are left out.
    """
    path = Path(path)
    gate = gate or Boundary.unconfined()
    if path.suffix.lower() in (".csv", ".parquet"):
        return read_data_table(path, gate)
    try:
        text = gate.read_text(path, errors="replace")
    except Refused as exc:
        return {}, [refused_problem(path, exc)]
    except OSError as exc:
        return {}, [LoadProblem(path, f"cannot read the data file: {exc.strerror or exc}")]
    if path.suffix.lower() == ".json" or (
        path.suffix.lower() not in (".r", ".rdump", ".dump") and text.lstrip().startswith("{")
    ):
        return _read_json(path, text)
    return _read_rdump(path, text)


# --------------------------------------------------------------------------- JSON


_JSON_KEY = re.compile(r'"((?:[^"\\\n]|\\.)*)"\s*:')


def _key_lines(text: str) -> dict[str, int]:
    """Line of the first ``"name":`` of every key, in one pass over the text."""
    out: dict[str, int] = {}
    line, pos = 1, 0
    for m in _JSON_KEY.finditer(text):
        line += text.count("\n", pos, m.start())
        pos = m.start()
        out.setdefault(m.group(1), line)
    return out


def _json_value(value: Any) -> tuple[Value | None, str | None]:
    """Stan value of a JSON member, or (None, reason)."""
    if isinstance(value, bool):
        return None, "true/false is not a Stan data value"
    if isinstance(value, int):
        if abs(value) > _INT64_MAX:
            return None, "an integer too large for Stan (beyond 64 bits)"
        return value, None
    if isinstance(value, float):
        return value, None
    if isinstance(value, str):
        special = _SPECIAL_STRINGS.get(value.strip().lower())
        if special is None:
            return None, f"the string {value[:40]!r} is not a number"
        return special, None
    if isinstance(value, dict):
        return None, "an object (a Stan tuple) is not read by this tool"
    if isinstance(value, list):
        flat, shape, reason = _flatten(value)
        if reason:
            return None, reason
        if not flat:
            return np.zeros(shape, dtype=float), None
        if all(isinstance(v, int) for v in flat):
            return np.array(flat, dtype=np.int64).reshape(shape), None
        return np.array(flat, dtype=float).reshape(shape), None
    return None, f"unexpected value {value!r}"


def _flatten(value: list) -> tuple[list, tuple[int, ...], str | None]:
    """Row-major values and shape of a nested list; a reason when ragged."""
    if not value:
        return [], (0,), None
    if all(isinstance(v, list) for v in value):
        parts = [_flatten(v) for v in value]
        for _, _, reason in parts:
            if reason:
                return [], (), reason
        shapes = {shape for _, shape, _ in parts}
        if len(shapes) != 1:
            return [], (), "the nested arrays have different lengths (a ragged array)"
        flat = [x for f, _, _ in parts for x in f]
        return flat, (len(value), *shapes.pop()), None
    if any(isinstance(v, list) for v in value):
        return [], (), "an array mixes numbers and arrays"
    flat = []
    for v in value:
        scalar, reason = _json_value(v)
        if reason:
            return [], (), f"element {repr(v)[:40]}: {reason}"
        flat.append(scalar)
    return flat, (len(value),), None


def _read_json(path: Path, text: str) -> tuple[dict[str, Value], list[LoadProblem]]:
    problems: list[LoadProblem] = []
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        message = f"not valid JSON: {exc.msg} (column {exc.colno})"
        return {}, [LoadProblem(path, message, exc.lineno)]
    except RecursionError:
        return {}, [LoadProblem(path, "the JSON is nested too deeply to read", 1)]
    if not isinstance(doc, dict):
        return {}, [LoadProblem(path, "Stan JSON data must be one object {...} of variables", 1)]
    values: dict[str, Value] = {}
    lines: dict[str, int] | None = None
    for name, raw in doc.items():
        try:
            value, reason = _json_value(raw)
        except RecursionError:
            value, reason = None, "the array is nested too deeply to read"
        if reason:
            lines = _key_lines(text) if lines is None else lines
            problems.append(
                LoadProblem(path, f"variable {name[:80]!r} left out: {reason}", lines.get(name))
            )
            continue
        values[name] = value
    return values, problems


# --------------------------------------------------------------------------- R dump

_TOKEN = re.compile(
    r"""
    (?P<ws>[ \t\r\f]+)
  | (?P<nl>\n)
  | (?P<comment>\#[^\n]*)
  | (?P<assign><-|=)
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?L?)
  | (?P<string>"[^"\n]*"|'[^'\n]*'|`[^`\n]*`)
  | (?P<name>[A-Za-z.][A-Za-z0-9._]*)
  | (?P<punct>[(),:;+-])
    """,
    re.VERBOSE,
)


@dataclass
class _Tok:
    kind: str
    text: str
    line: int
    first: bool = False  # first token on its line


class _DumpError(Exception):
    def __init__(self, message: str, line: int):
        super().__init__(message)
        self.line = line


def _tokenize(text: str) -> list[_Tok]:
    tokens: list[_Tok] = []
    line = 1
    pos = 0
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None:
            # Kept as a token so the parser reports it with the variable it breaks.
            kind, token_text, end = "bad", text[pos], pos + 1
        else:
            kind, token_text, end = m.lastgroup or "", m.group(), m.end()
        if kind == "nl":
            line += 1
        elif kind not in ("ws", "comment"):
            first = not tokens or tokens[-1].line != line
            tokens.append(_Tok(kind, token_text, line, first))
        pos = end
    return tokens


class _DumpParser:
    """Recursive descent over R dump tokens."""

    def __init__(self, tokens: list[_Tok]):
        self.toks = tokens
        self.i = 0

    def peek(self, offset: int = 0) -> _Tok | None:
        j = self.i + offset
        return self.toks[j] if j < len(self.toks) else None

    def next(self) -> _Tok:
        tok = self.peek()
        if tok is None:
            last = self.toks[-1].line if self.toks else 1
            raise _DumpError("the file ends in the middle of a value", last)
        self.i += 1
        return tok

    def expect(self, text: str) -> _Tok:
        tok = self.next()
        if tok.text != text:
            raise _DumpError(f"expected {text!r} but found {tok.text!r}", tok.line)
        return tok

    def at_assignment(self, line_start: bool = False) -> bool:
        a, b = self.peek(), self.peek(1)
        if a is None or b is None or a.kind not in ("name", "string") or b.kind != "assign":
            return False
        return a.first or not line_start

    def skip_to_next_assignment(self, start: int) -> None:
        """Resume at the first ``name <-`` that opens a line after token ``start``."""
        self.i = start + 1
        while self.peek() is not None and not self.at_assignment(line_start=True):
            self.i += 1

    # values -------------------------------------------------------------

    def scalar(self) -> tuple[float | int, bool]:
        """A signed number; returns (value, is_integer)."""
        tok = self.next()
        sign = 1
        while tok.text in ("-", "+"):
            sign = -sign if tok.text == "-" else sign
            tok = self.next()
        if tok.kind == "number":
            t = tok.text
            if t.endswith("L") or re.fullmatch(r"\d+", t):
                number = float(t.removesuffix("L"))
                if not number.is_integer() or abs(number) > _INT64_MAX:
                    raise _DumpError(f"{t[:40]} is not a whole number Stan can hold", tok.line)
                return sign * int(t) if t.isdigit() else sign * int(number), True
            return sign * float(t), False
        if tok.kind == "name":
            special = {"Inf": math.inf, "NaN": math.nan, "NA": math.nan}.get(tok.text)
            if special is not None:
                return sign * special, False
        raise _DumpError(f"expected a number but found {tok.text!r}", tok.line)

    def element(self) -> tuple[list[float | int], bool]:
        """A number, or a sequence ``a:b``."""
        first, is_int = self.scalar()
        tok = self.peek()
        if tok is not None and tok.text == ":":
            self.next()
            last, last_int = self.scalar()
            if not (is_int or float(first).is_integer()) or not (
                last_int or float(last).is_integer()
            ):
                raise _DumpError("a sequence a:b needs whole numbers", tok.line)
            if not all(math.isfinite(v) for v in (first, last)):
                raise _DumpError("a sequence a:b needs finite ends", tok.line)
            a, b = int(first), int(last)
            _check_count(abs(b - a) + 1, tok.line)
            step = 1 if b >= a else -1
            return list(range(a, b + step, step)), True
        return [first], is_int

    def vector(self) -> tuple[list[float | int], bool]:
        """``c(...)``, ``integer(n)``, ``double(n)``, ``numeric(n)`` or an element."""
        tok = self.peek()
        if tok is not None and tok.kind == "name" and tok.text in (
            "c",
            "integer",
            "double",
            "numeric",
        ):
            self.next()
            self.expect("(")
            if tok.text != "c":
                n, _ = self.scalar()
                end = self.expect(")")
                if not (math.isfinite(n) and float(n).is_integer() and n >= 0):
                    raise _DumpError(f"{tok.text}(n) needs a whole number n >= 0", end.line)
                _check_count(int(n), end.line)
                return [0 if tok.text == "integer" else 0.0] * int(n), tok.text == "integer"
            values: list[float | int] = []
            all_int = True
            if self.peek() is not None and self.peek().text == ")":
                self.next()
                return values, True
            while True:
                part, is_int = self.element()
                values.extend(part)
                _check_count(len(values), self.toks[self.i - 1].line)
                all_int = all_int and is_int
                sep = self.next()
                if sep.text == ")":
                    return values, all_int
                if sep.text != ",":
                    raise _DumpError(f"expected ',' or ')' but found {sep.text!r}", sep.line)
        return self.element()

    def value(self) -> Value:
        tok = self.peek()
        if tok is not None and tok.kind == "name" and tok.text == "structure":
            self.next()
            self.expect("(")
            values, all_int = self.vector()
            dims: list[int] | None = None
            while self.peek() is not None and self.peek().text == ",":
                self.next()
                key = self.next()
                self.expect("=")
                arg, _ = self.vector()
                if key.text in (".Dim", "dim", '".Dim"'):
                    if not all(math.isfinite(d) and float(d).is_integer() and d >= 0
                               for d in arg):
                        raise _DumpError(".Dim needs whole numbers >= 0", key.line)
                    dims = [int(d) for d in arg]
            end = self.expect(")")
            if dims is None:
                raise _DumpError("structure(...) without .Dim", end.line)
            if math.prod(dims) != len(values):
                raise _DumpError(
                    f".Dim = {tuple(dims)} needs {math.prod(dims)} values but "
                    f"{len(values)} are given",
                    end.line,
                )
            arr = np.array(values, dtype=np.int64 if all_int else float)
            return arr.reshape(dims, order="F")  # R stores arrays column-major
        is_c = tok is not None and tok.kind == "name" and tok.text in (
            "c",
            "integer",
            "double",
            "numeric",
        )
        values, all_int = self.vector()
        if is_c or len(values) != 1:  # c(x) is an array of length 1, x a scalar
            return np.array(values, dtype=np.int64 if all_int else float)
        return values[0]


def _check_count(n: int, line: int) -> None:
    if n > MAX_VALUES:
        raise _DumpError(
            f"asks for {n:,} values, more than the {MAX_VALUES:,} this tool reads for one "
            "variable", line)


def _read_rdump(path: Path, text: str) -> tuple[dict[str, Value], list[LoadProblem]]:
    problems: list[LoadProblem] = []
    tokens = _tokenize(text)
    parser = _DumpParser(tokens)
    values: dict[str, Value] = {}
    while parser.peek() is not None:
        start, start_index = parser.peek(), parser.i
        if not parser.at_assignment():
            problems.append(
                LoadProblem(
                    path,
                    f"expected 'name <- value' but found {start.text!r}; text up to the "
                    "next assignment is skipped",
                    start.line,
                )
            )
            parser.skip_to_next_assignment(start_index)
            continue
        name = start.text.strip("\"'`")
        try:
            parser.next()
            parser.next()  # the assignment arrow
            value = parser.value()
            tail = parser.peek()
            if tail is not None and tail.text == ";":
                parser.next()
                tail = parser.peek()
            if tail is not None and not parser.at_assignment():
                raise _DumpError(f"unexpected {tail.text!r} after the value", tail.line)
        except _DumpError as exc:
            problems.append(
                LoadProblem(
                    path,
                    f"variable {name!r} (from line {start.line}) left out: {exc}",
                    exc.line,
                )
            )
            parser.skip_to_next_assignment(start_index)
            continue
        if name in values:
            problems.append(
                LoadProblem(path, f"variable {name!r} is given twice; the last one is used",
                            start.line, kind="note")
            )
        values[name] = value
    return values, problems


# --------------------------------------------------------------------------- tables


def read_data_table(
    path: Path, gate: Boundary | None = None
) -> tuple[dict[str, Value], list[LoadProblem]]:
    """Columns of a data table (CSV or Parquet) as variables.

    ``NA`` and empty fields are missing values: a numeric column with missing
    values becomes float with NaN, and is reported.
    """
    import io

    import polars as pl

    path = Path(path)
    gate = gate or Boundary.unconfined()
    try:
        data = gate.read_bytes(path)
    except Refused as exc:
        return {}, [refused_problem(path, exc)]
    except OSError as exc:
        return {}, [LoadProblem(path, f"cannot read the data file: {exc.strerror or exc}")]
    if not data.strip():
        return {}, [LoadProblem(path, "an empty data file")]
    try:
        if path.suffix.lower() == ".parquet":
            df = pl.read_parquet(io.BytesIO(data))
        else:
            if b"\x00" in data[:4096]:
                return {}, [LoadProblem(path, "a binary file, not a CSV data table")]
            df = pl.read_csv(data, null_values=["NA"], infer_schema_length=None,
                             encoding="utf8-lossy")
    except Exception as exc:  # noqa: BLE001 - readers raise many types; report, never crash
        line = None
        m = re.search(r"line (\d+)", str(exc))
        if m:
            line = int(m.group(1))
        return {}, [LoadProblem(path, f"not a readable data table: {type(exc).__name__}: "
                                f"{str(exc).splitlines()[0][:200]}", line)]
    values: dict[str, Value] = {}
    problems: list[LoadProblem] = []
    for name in df.columns:
        col = df[name]
        missing = col.null_count()
        if col.dtype == pl.Boolean:
            col = col.cast(pl.Int64)
        if col.dtype.is_integer() and not missing:
            values[name] = col.to_numpy().astype(np.int64)
        elif col.dtype.is_numeric():
            values[name] = col.cast(pl.Float64).fill_null(float("nan")).to_numpy()
        else:
            values[name] = np.asarray(col.cast(pl.String).to_list(), dtype=object)
        if missing:
            problems.append(LoadProblem(
                path, f"column {name!r} has {missing} missing values (NA or empty); read as NaN",
                kind="note"))
    return values, problems
