"""CmdStan CSV files: header settings, draws, sampler statistics.

Layout (CmdStan guide, "Stan CSV file format"): ``#`` comment lines with the run
configuration as indented ``key = value`` pairs, one line of column names, then
one row per saved iteration. Warmup rows come first when ``save_warmup`` is set;
the adaptation block (``# Adaptation terminated``, step size, inverse metric) is
written as comments after the warmup rows, and the timing block closes the file.
Array elements are columns ``name.i.j`` with 1-based indices, written in
column-major order.

Two header layouts exist: Stan 1.x writes ``# data = file`` on one line, later
versions write ``# data`` with ``#   file = ...`` below it. Both are read as a tree
of dotted paths (``data`` or ``data.file``), so lookups go by the last path part.
"""

from __future__ import annotations

import hashlib
import math
import re
import warnings
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem
from auditor.loaders.stats_vocab import CMDSTAN, normalize_sample_stats
from auditor.model import SamplerSettings

_KEY_LINE = re.compile(r"^#(\s*)([A-Za-z_][A-Za-z0-9_]*)\s*(?:=\s*(.*?))?\s*$")
_DEFAULT_TAG = re.compile(r"\s*\(Default\)\s*$")
_STEP_SIZE = re.compile(r"^#\s*Step size\s*=\s*(\S+)")
_ELAPSED = re.compile(r"^#\s*(?:Elapsed Time:)?\s*([0-9.eE+-]+)\s*seconds\s*\((\w[\w-]*)\)")

#: Sampler columns CmdStan writes for HMC; without them an HMC-labelled run is
#: a fixed_param run (CmdStan switches to fixed_param for models without parameters).
_HMC_COLUMNS = ("stepsize__", "treedepth__")

#: Problems of one kind reported per file before they are summarized.
_MAX_ROW_PROBLEMS = 5


@dataclass
class CmdStanHeader:
    """What the comment header and the column line of a CmdStan CSV say.

    Parameters
    ----------
    path
        The file.
    model
        ``model =`` value, or ``None``.
    columns
        Column names in file order.
    chain_id
        ``id =`` value, or ``None``.
    method
        ``method =`` value (``sample``, ``optimize``, ...), or ``None``.
    settings
        Every ``key = value`` of the header by dotted path
        (``method.sample.num_samples``), `` (Default)`` stripped.
    defaults
        Paths whose value was marked ``(Default)``.
    lines
        1-based line of each path.
    column_line
        1-based line of the column names, ``None`` when the file has none.
    version
        ``major.minor.patch`` of Stan, or ``None``.
    """

    path: Path
    model: str | None
    columns: tuple[str, ...]
    chain_id: int | None
    method: str | None
    settings: dict[str, str] = field(default_factory=dict)
    defaults: set[str] = field(default_factory=set)
    lines: dict[str, int] = field(default_factory=dict)
    column_line: int | None = None
    version: str | None = None

    def find(self, leaf: str, within: str | None = None) -> str | None:
        """Value of the first setting whose path ends in ``leaf``.

        ``within`` requires that path part too (``find("save_warmup", "sample")``).
        """
        key = self.find_key(leaf, within)
        return None if key is None else self.settings[key]

    def find_key(self, leaf: str, within: str | None = None) -> str | None:
        """Path of the first setting whose last part is ``leaf``."""
        for key in self.settings:
            parts = key.split(".")
            if parts[-1] == leaf and (within is None or within in parts[:-1]):
                return key
        return None


@dataclass
class _Chain:
    """One parsed file."""

    header: CmdStanHeader
    data: np.ndarray  # rows x columns, float
    n_rows_seen: int  # data rows in the file, including unusable ones
    n_warmup: int  # leading rows of ``data`` that are warmup
    step_size: float = math.nan
    elapsed: dict[str, float] = field(default_factory=dict)

    @property
    def n_kept(self) -> int:
        return self.data.shape[0] - self.n_warmup


# --------------------------------------------------------------------------- header


def _parse_header_lines(path: Path, lines: Sequence[str]) -> CmdStanHeader | None:
    """Header and column line from the first lines of a file (up to the columns)."""
    settings: dict[str, str] = {}
    defaults: set[str] = set()
    where: dict[str, int] = {}
    stack: list[tuple[int, str]] = []
    columns: tuple[str, ...] = ()
    column_line = None
    for number, raw in enumerate(lines, start=1):
        line = raw.rstrip("\r\n")
        if not line.strip():
            continue
        if not line.startswith("#"):
            columns = tuple(c.strip().strip('"') for c in line.split(","))
            column_line = number
            break
        m = _KEY_LINE.match(line)
        if not m:
            continue
        indent, key, value = len(m.group(1)), m.group(2), m.group(3)
        while stack and stack[-1][0] >= indent:
            stack.pop()
        dotted = ".".join([name for _, name in stack] + [key])
        stack.append((indent, key))
        value = "" if value is None else value
        if _DEFAULT_TAG.search(value) or value == "(Default)":
            defaults.add(dotted)
            value = _DEFAULT_TAG.sub("", value)
            value = "" if value == "(Default)" else value
        if dotted not in settings:
            settings[dotted] = value.strip()
            where[dotted] = number
    is_cmdstan = "stan_version_major" in settings or any(c.endswith("__") for c in columns)
    if not is_cmdstan:
        return None
    version = None
    parts = [settings.get(f"stan_version_{p}") for p in ("major", "minor", "patch")]
    if all(parts):
        version = ".".join(str(p) for p in parts)
    header = CmdStanHeader(
        path=path,
        model=settings.get("model") or None,
        columns=columns,
        chain_id=None,
        method=settings.get("method") or None,
        settings=settings,
        defaults=defaults,
        lines=where,
        column_line=column_line,
        version=version,
    )
    header.chain_id = _as_int(settings.get("id"))
    return header


#: Bytes read at most to find the column line (a run with a million quantities
#: has a column line of about 20 MB).
_HEAD_LIMIT = 64 * 1024 * 1024
_HEAD_CHUNK = 1 << 20
_BOM = "\ufeff"


def _looks_binary(data: bytes) -> bool:
    return b"\x00" in data[:4096]


def _head_lines(path: Path, gate: Boundary) -> tuple[list[str] | None, str | None]:
    """The lines of a file up to its column line, or (None, reason it is not CSV text).

    Reads in chunks and stops at the first complete line that is not a comment,
    so a huge or endless file costs at most :data:`_HEAD_LIMIT` bytes.

    Raises
    ------
    Refused
        The boundary refused the file (outside, special file).
    """
    buf = bytearray()
    with gate.open(path, check_size=False) as fh:
        while len(buf) < _HEAD_LIMIT:
            chunk = fh.read(_HEAD_CHUNK)
            if not chunk:
                break
            start = len(buf)
            buf += chunk
            if start == 0 and _looks_binary(buf):
                return None, "a binary file, not CSV text"
            if _first_data_line_done(buf, start):
                break
    if not buf:
        return None, "an empty file (0 bytes)"
    if _looks_binary(buf):
        return None, "a binary file, not CSV text"
    text = buf.decode("utf-8", errors="replace").removeprefix(_BOM)
    return text.splitlines(keepends=True), None


def _first_data_line_done(buf: bytearray, start: int) -> bool:
    """Whether ``buf`` holds a complete line that is neither blank nor a comment."""
    pos = 0
    while True:
        end = buf.find(b"\n", pos)
        if end < 0:
            return False
        line = bytes(buf[pos:end]).lstrip(b"\xef\xbb\xbf").strip()
        if line and not line.startswith(b"#"):
            return True
        pos = end + 1


def sniff_cmdstan(path: Path, gate: Boundary | None = None) -> tuple[CmdStanHeader | None, str]:
    """The header of a CmdStan CSV, or ``(None, why it is not one)``.

    Cheap: reads only up to the column line, never the draws.

    Raises
    ------
    Refused
        The boundary refused the file.
    """
    gate = gate or Boundary.unconfined()
    lines, reason = _head_lines(Path(path), gate)
    if lines is None:
        return None, reason or "not CSV text"
    header = _parse_header_lines(Path(path), lines)
    if header is None:
        return None, ("not a CmdStan CSV: no 'stan_version_major' header comment and no "
                      "sampler columns ending in '__'")
    return header, ""


def read_cmdstan_header(path: Path, gate: Boundary | None = None) -> CmdStanHeader | None:
    """Read only the comment header and the column line of a CmdStan CSV.

    Cheap: stops at the column line, never reads the draws.

    Returns
    -------
    CmdStanHeader or None
        ``None`` when the file cannot be read or is not a CmdStan CSV.
    """
    try:
        return sniff_cmdstan(path, gate)[0]
    except (Refused, OSError):
        return None


# --------------------------------------------------------------------------- values


def _as_int(text: str | None) -> int | None:
    if text is None or text == "":
        return None
    try:
        return int(text)
    except ValueError:
        try:
            value = float(text)
        except ValueError:
            return None
        return int(value) if value.is_integer() else None


def _as_float(text: str | None) -> float | None:
    if text is None or text == "":
        return None
    try:
        return float(text)
    except ValueError:
        return None


def _as_bool(text: str | None) -> bool | None:
    if text is None:
        return None
    t = text.strip().lower()
    if t in ("1", "true"):
        return True
    if t in ("0", "false"):
        return False
    return None


def _kept_and_warmup_expected(h: CmdStanHeader, fixed_param: bool) -> tuple[int, int] | None:
    """Rows the header promises: (kept, warmup), or ``None`` when it does not say.

    CmdStan saves every ``thin``-th iteration starting with the first, so
    ``ceil(n / thin)`` rows (from memory of the CmdStan services code); fixed_param
    runs have no warmup.
    """
    num_samples = _as_int(h.find("num_samples", "sample"))
    if num_samples is None:
        return None
    thin = _as_int(h.find("thin", "sample")) or 1
    kept = math.ceil(num_samples / thin)
    warm = 0
    save_warmup = _as_bool(h.find("save_warmup", "sample"))
    if save_warmup is None:
        save_warmup = _as_bool(h.find("save_warmup"))
    if save_warmup and not fixed_param:
        num_warmup = _as_int(h.find("num_warmup", "sample")) or 0
        warm = math.ceil(num_warmup / thin)
    return kept, warm


def _is_fixed_param(h: CmdStanHeader) -> bool:
    algorithm = h.find("algorithm", "sample")
    if algorithm == "fixed_param":
        return True
    return h.method == "sample" and not any(c in h.columns for c in _HMC_COLUMNS)


# --------------------------------------------------------------------------- one file


def _all_numbers(fields: Sequence[str]) -> bool:
    """Whether every field reads as a number (a data row where names belong)."""
    for f in fields:
        if _as_float(f) is None:
            return False
    return True


def _parse_rows(
    header: CmdStanHeader, rows: list[str], numbers: list[int], problems: list[LoadProblem]
) -> tuple[np.ndarray, np.ndarray]:
    """Numbers of the data rows, and which rows were used.

    Rows with the wrong field count are left out.
    """
    path, n_cols = header.path, len(header.columns)
    counts = [text.count(",") + 1 for text in rows]
    bad_rows = [i for i, n in enumerate(counts) if n != n_cols]
    if rows and len(bad_rows) == len(rows):
        seen = sorted(set(counts))
        problems.append(
            LoadProblem(
                path,
                f"the column line names {n_cols} columns but every data row has "
                f"{' or '.join(str(n) for n in seen)} fields; no draws can be read",
                line=header.column_line,
            )
        )
        return np.empty((0, n_cols)), np.zeros(len(rows), dtype=bool)
    for i in bad_rows[:_MAX_ROW_PROBLEMS]:
        problems.append(
            LoadProblem(
                path,
                f"row has {counts[i]} fields but the header has {n_cols} columns; "
                "the row is left out",
                line=numbers[i],
            )
        )
    if len(bad_rows) > _MAX_ROW_PROBLEMS:
        problems.append(
            LoadProblem(
                path,
                f"{len(bad_rows)} rows in all have the wrong number of fields; all left out",
            )
        )
    used = np.ones(len(rows), dtype=bool)
    used[bad_rows] = False
    good = [t for t, u in zip(rows, used, strict=True) if u]
    good_numbers = [n for n, u in zip(numbers, used, strict=True) if u]
    if not good:
        return np.empty((0, n_cols)), used
    # numpy's C parser reads the joined text without making one Python string per
    # field (a list of strings costs several times the memory of the numbers).
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            flat = np.fromstring(",".join(good), dtype=float, sep=",")
    except (ValueError, DeprecationWarning):
        flat = None
    if flat is None or flat.size != len(good) * n_cols:
        return _parse_rows_slowly(path, good, good_numbers, n_cols, problems), used
    return flat.reshape(len(good), n_cols), used


def _parse_rows_slowly(
    path: Path, rows: list[str], numbers: list[int], n_cols: int, problems: list[LoadProblem]
) -> np.ndarray:
    """Field by field, for rows with text that is not a number (it becomes NaN)."""
    out = np.empty((len(rows), n_cols))
    bad = 0
    for i, (text, number) in enumerate(zip(rows, numbers, strict=True)):
        for j, field_text in enumerate(text.split(",")):
            try:
                out[i, j] = float(field_text)
            except ValueError:
                as_bool = _as_bool(field_text)
                if as_bool is not None:
                    out[i, j] = float(as_bool)
                    continue
                out[i, j] = math.nan
                bad += 1
                if bad <= _MAX_ROW_PROBLEMS:
                    problems.append(
                        LoadProblem(
                            path,
                            f"field {j + 1} is {field_text.strip()[:40]!r}, not a number; "
                            "read as missing (NaN)",
                            line=number,
                        )
                    )
    if bad > _MAX_ROW_PROBLEMS:
        problems.append(
            LoadProblem(path, f"{bad} fields in all are not numbers; all read as missing (NaN)")
        )
    return out


def _parse_file(path: Path, problems: list[LoadProblem], gate: Boundary) -> _Chain | None:
    """Parse one CmdStan CSV; ``None`` (with a problem) when it is unusable."""
    try:
        raw = gate.read_bytes(path)
    except Refused as exc:
        problems.append(refused_problem(path, exc))
        return None
    except OSError as exc:
        problems.append(LoadProblem(path, f"cannot read the file: {exc.strerror or exc}"))
        return None
    if not raw:
        problems.append(LoadProblem(path, "an empty file (0 bytes), not a CmdStan CSV"))
        return None
    if _looks_binary(raw):
        problems.append(LoadProblem(path, "a binary file, not a CmdStan CSV"))
        return None
    text = raw.decode("utf-8", errors="replace")
    del raw
    if text.startswith(_BOM):
        text = text[1:]
        problems.append(LoadProblem(
            path, "the file starts with a byte-order mark (an editor added it); read without it",
            line=1, kind="note"))
    lines = text.splitlines()
    del text
    header = _parse_header_lines(path, lines)
    if header is None:
        problems.append(
            LoadProblem(
                path,
                "not a CmdStan CSV: no 'stan_version_major' header comment and no "
                "sampler columns ending in '__'",
            )
        )
        return None
    if not header.columns or header.column_line is None:
        problems.append(LoadProblem(path, "the file has a header but no line of column names"))
        return None
    if _all_numbers(header.columns):
        problems.append(LoadProblem(
            path, "the line of column names is missing: this line holds numbers, so the draws "
            "cannot be matched to quantities; the file is left out", line=header.column_line))
        return None
    dupes = [c for c, n in Counter(header.columns).items() if n > 1]
    if dupes:
        problems.append(
            LoadProblem(
                path,
                f"column names repeat ({', '.join(dupes[:5])}); the file cannot be read "
                "as one set of draws",
                line=header.column_line,
            )
        )
        return None

    rows: list[str] = []
    numbers: list[int] = []
    step_size = math.nan
    elapsed: dict[str, float] = {}
    for number in range(header.column_line + 1, len(lines) + 1):
        line = lines[number - 1]
        if not line.strip():
            continue
        if line.startswith("#"):
            m = _STEP_SIZE.match(line)
            if m:
                value = _as_float(m.group(1))
                step_size = math.nan if value is None else value
            m = _ELAPSED.match(line)
            if m:
                seconds = _as_float(m.group(1))
                if seconds is None:
                    problems.append(LoadProblem(
                        path, f"the timing line says {m.group(1)!r} seconds, not a number; "
                        "the time is left out", line=number, kind="note"))
                else:
                    elapsed[m.group(2).lower()] = seconds
            continue
        rows.append(line)
        numbers.append(number)
    data, used = _parse_rows(header, rows, numbers, problems)

    fixed_param = _is_fixed_param(header)
    expected = _kept_and_warmup_expected(header, fixed_param) if header.method == "sample" else None
    n_warmup = 0
    if expected is not None:
        kept, warm = expected
        if len(rows) != kept + warm:
            what = f"{kept} draws" if not warm else f"{warm} warmup rows and {kept} draws"
            line = header.lines.get(header.find_key("num_samples", "sample") or "")
            problems.append(
                LoadProblem(
                    path,
                    f"the header promises {what} (num_samples = "
                    f"{header.find('num_samples', 'sample')}) but the file has {len(rows)} "
                    "data rows; the file looks cut short or edited",
                    line=line,
                )
            )
        # Warmup rows are the first ``warm`` rows of the file, whichever were unusable.
        n_warmup = int(used[:warm].sum())
    elif header.method == "variational" and data.shape[0] > 0:
        # The first row of a variational output is the mean of the approximation,
        # not a draw (CmdStan guide, "Variational inference" output; from memory).
        data = data[1:]
    return _Chain(header, data, len(rows), n_warmup, step_size, elapsed)


# --------------------------------------------------------------------------- chains


def _column_difference(odd: tuple[str, ...], ref: tuple[str, ...]) -> str:
    extra = [c for c in odd if c not in ref]
    missing = [c for c in ref if c not in odd]
    parts = []
    if extra:
        parts.append(f"extra column{'s' if len(extra) > 1 else ''} {', '.join(extra[:8])}")
    if missing:
        parts.append(f"missing column{'s' if len(missing) > 1 else ''} {', '.join(missing[:8])}")
    if not parts:
        parts.append("the same columns in a different order")
    return " and ".join(parts)


def _check_chains(chains: list[_Chain], problems: list[LoadProblem]) -> list[_Chain]:
    """Keep the chains that agree with the majority; report the others."""
    if len(chains) < 2:
        return chains
    n_total = len(chains)
    checks = (
        ("columns", lambda c: c.header.columns),
        ("model", lambda c: c.header.model),
        ("draws", lambda c: c.n_kept),
        ("warmup", lambda c: c.n_warmup),
        ("method", lambda c: c.header.method),
    )
    kept = list(chains)
    for what, key in checks:
        counts = Counter(key(c) for c in kept)
        if len(counts) < 2:
            continue
        ref = counts.most_common(1)[0][0]
        agree = [c for c in kept if key(c) == ref]
        for c in kept:
            value = key(c)
            if value == ref:
                continue
            h = c.header
            line = None
            if what == "columns":
                diff = f"it has {_column_difference(value, ref)} compared with the other chains"
                line = h.column_line
            elif what == "model":
                diff = f"its header says model = {value} where the other chains say model = {ref}"
                line = h.lines.get("model")
            elif what == "draws":
                diff = f"it has {value} draws where the other chains have {ref}"
            elif what == "warmup":
                diff = f"it has {value} warmup rows where the other chains have {ref}"
            else:
                diff = f"its header says method = {value} where the other chains say {ref}"
                line = h.lines.get("method")
            problems.append(
                LoadProblem(
                    h.path,
                    f"chain file {h.path.name} does not match the other chains of the run: {diff}; "
                    f"this chain is left out and the {len(agree)} agreeing chain"
                    f"{'s are' if len(agree) != 1 else ' is'} kept (of {n_total} files given)",
                    line=line,
                    kind="inconsistent-chains",
                )
            )
        kept = agree
    kept = _drop_copies(kept, n_total, problems)
    _note_data_files(kept, problems)
    return kept


def _drop_copies(chains: list[_Chain], n_total: int, problems: list[LoadProblem]) -> list[_Chain]:
    """Leave out a file given twice, or a chain whose draws equal another's.

    Identical HMC chains mean a copied file or a repeated seed and chain id; kept,
    they would make the chains look perfectly mixed.
    """
    seen_paths: dict[Path, _Chain] = {}
    seen_draws: dict[bytes, _Chain] = {}
    out: list[_Chain] = []
    for c in chains:
        path = c.header.path.resolve()
        twin = seen_paths.get(path)
        reason = None
        if twin is not None:
            reason = f"the same file is given twice (as {twin.header.path} too)"
        elif not _is_fixed_param(c.header) and c.data.size:
            # A digest, not the bytes: a copy of every chain would double the memory.
            key = hashlib.blake2b(np.ascontiguousarray(c.data).data, digest_size=32).digest()
            twin = seen_draws.get(key)
            if twin is not None:
                reason = (
                    f"its draws are identical to those of {twin.header.path.name} "
                    "(a copied file, or the same seed and chain id)"
                )
            seen_draws.setdefault(key, c)
        seen_paths.setdefault(path, c)
        if reason is None:
            out.append(c)
            continue
        problems.append(
            LoadProblem(
                c.header.path,
                f"chain file {c.header.path.name}: {reason}; it is left out "
                f"(of {n_total} files given)",
                kind="inconsistent-chains",
            )
        )
    return out


def _note_data_files(chains: list[_Chain], problems: list[LoadProblem]) -> None:
    """Chains of one run should have read one data file."""
    def data_file(c: _Chain) -> str:
        h = c.header
        return h.settings.get("data.file") or h.settings.get("data") or ""

    first = data_file(chains[0]) if chains else ""
    for c in chains[1:]:
        other = data_file(c)
        if first and other and other != first:
            h = c.header
            problems.append(
                LoadProblem(
                    h.path,
                    f"this chain read data file {other} but {chains[0].header.path.name} read "
                    f"{first}; if the contents differ, the chains sample different posteriors",
                    line=h.lines.get("data.file") or h.lines.get("data"),
                    kind="note",
                )
            )


# --------------------------------------------------------------------------- datasets


#: Longest index we read as an index (CmdStan writes sizes that fit in an int).
_MAX_INDEX_DIGITS = 10
#: An array may have at most this many elements per column that names one of
#: them; beyond it the declared shape is absurd (one column ``theta.4294967296``
#: would otherwise ask for an array of 4 billion elements per draw).
_MAX_FILL = 4


def _split_column(name: str) -> tuple[str, tuple[int, ...]]:
    """``eta.2.1`` -> ("eta", (2, 1)); names that are not ``base.i.j`` -> (name, ())."""
    parts = name.split(".")
    if len(parts) > 1 and parts[0] and all(
        p.isdigit() and p.isascii() and len(p) <= _MAX_INDEX_DIGITS for p in parts[1:]
    ):
        return parts[0], tuple(int(p) for p in parts[1:])
    return name, ()


@dataclass
class _Array:
    """The columns of one array variable: positions in the file and the array's shape."""

    columns: list[int]
    flat: list[int]  # cell of each column in the C-order flattened array
    shape: tuple[int, ...]


def _layout(
    columns: Sequence[str], path: Path, line: int | None, problems: list[LoadProblem]
) -> dict[str, _Array | int]:
    """How the model columns form variables: a column number for a scalar, an
    :class:`_Array` for ``name.i.j`` columns.

    The declared shape is checked before anything is allocated: CmdStan writes
    every element of an array, so the indices of one name must fill their shape
    exactly, starting at 1. Names whose indices do not (index 0, gaps, a huge
    index, mixed numbers of indices) are reported and kept as separate columns
    under their own names.
    """
    groups: dict[str, list[tuple[int, tuple[int, ...]]]] = {}
    for j, col in enumerate(columns):
        base, idx = _split_column(col)
        groups.setdefault(base, []).append((j, idx))
    out: dict[str, _Array | int] = {}
    for base, members in groups.items():
        ndims = {len(idx) for _, idx in members}
        if ndims == {0} and len(members) == 1:
            out[base] = members[0][0]
            continue
        why = None
        if len(ndims) != 1 or 0 in ndims:
            why = "some columns have a different number of indices"
        else:
            idx = [i for _, i in members]
            shape = tuple(max(i[k] for i in idx) for k in range(len(idx[0])))
            cells = math.prod(shape)
            size = "x".join(map(str, shape))
            if any(min(i) < 1 for i in idx):
                why = "an index is 0, but CmdStan numbers elements from 1"
            elif len(set(idx)) != len(idx):
                why = "an index appears twice"
            elif cells > _MAX_FILL * len(members):
                why = (f"the indices span a {size} array ({cells:,} elements) but there are "
                       f"only {len(members):,} columns")
            elif cells != len(members):
                # A few elements missing (a hand-edited file): keep the array, with
                # the missing elements read as NaN, and say so.
                problems.append(LoadProblem(
                    path, f"columns {base}.* give {len(members):,} of the {cells:,} elements "
                    f"of a {size} array; the missing elements are read as NaN", line=line))
        if why is not None:
            problems.append(LoadProblem(
                path, f"columns {base}.*: {why}; they are kept as separate quantities named as "
                "in the file", line=line))
            for j, _ in members:
                out[columns[j]] = j
            continue
        # Indices are 1-based in the file; the column-major order CmdStan writes
        # lands in the right cells of a C-order array.
        flat = [int(np.ravel_multi_index(tuple(v - 1 for v in i), shape)) for i in idx]
        out[base] = _Array([j for j, _ in members], flat, shape)
    return _safe_names(out, path, line, problems)


def _safe_names(
    layout: dict[str, _Array | int], path: Path, line: int | None, problems: list[LoadProblem]
) -> dict[str, _Array | int]:
    """Rename variables whose names the normalized tree cannot hold.

    ``chain`` and ``draw`` are the draws' own dimensions and ``<name>_dim_<k>``
    the dimensions of arrays; a ``/`` would be read as a group path. Stan allows
    the first two as identifiers, so a real program can use them.
    """
    taken = set(layout)
    reserved = {"chain", "draw"} | {
        f"{name}_dim_{k}" for name, spec in layout.items()
        if isinstance(spec, _Array) for k in range(len(spec.shape))}
    out: dict[str, _Array | int] = {}
    for name, spec in layout.items():
        new = name.replace("/", "_")
        while new in reserved or (new != name and new in taken):
            new += "_"
        if new != name:
            problems.append(LoadProblem(
                path, f"the quantity named {name!r} is shown as {new!r}: its name is one the "
                "draws' dimensions use, or holds a '/'", line=line, kind="note"))
            taken.add(new)
        out[new] = spec
    return out


def _variables(
    layout: dict[str, _Array | int], values: np.ndarray, chain_dim: int = 2
) -> dict[str, xr.Variable]:
    """Arrays of shape (chain, draw, ...) for each variable of ``layout``.

    ``values`` has shape (chain, draw, column).
    """
    out: dict[str, xr.Variable] = {}
    lead = values.shape[:chain_dim]
    for name, spec in layout.items():
        if isinstance(spec, int):
            out[name] = xr.Variable(("chain", "draw"), values[..., spec])
            continue
        cells = math.prod(spec.shape)
        if cells == len(spec.columns):
            arr = np.empty((*lead, cells), dtype=values.dtype)
        else:  # missing elements (reported by _layout) stay NaN
            arr = np.full((*lead, cells), np.nan, dtype=values.dtype)
        arr[..., spec.flat] = values[..., spec.columns]
        dims = ("chain", "draw", *(f"{name}_dim_{k}" for k in range(len(spec.shape))))
        out[name] = xr.Variable(dims, arr.reshape(*lead, *spec.shape))
    return out


def _integral(values: np.ndarray) -> np.ndarray:
    """Cast to int64 when every value is a finite whole number."""
    if values.size and np.all(np.isfinite(values)) and np.all(values == np.round(values)):
        return values.astype(np.int64)
    return values


def _stats_dataset(columns: Sequence[str], values: np.ndarray, max_depth: int | None) -> xr.Dataset:
    """sample_stats from the ``*__`` columns, with standard names."""
    data = {}
    for j, col in enumerate(columns):
        name = CMDSTAN.get(col, col[:-2] if col.endswith("__") else col)
        v = values[..., j]
        if name in ("tree_depth", "n_steps"):
            v = _integral(v)
        data[name] = xr.Variable(("chain", "draw"), v)
    ds = xr.Dataset(data)
    return normalize_sample_stats(ds, max_depth=max_depth)


def _coords(n_chains: int, n_draws: int, variables: dict[str, xr.Variable]) -> dict:
    coords = {"chain": np.arange(n_chains), "draw": np.arange(n_draws)}
    for var in variables.values():
        for dim, size in zip(var.dims[2:], var.shape[2:], strict=True):
            coords.setdefault(dim, np.arange(size))
    return coords


def _group_datasets(
    chains: list[_Chain], warmup: bool, max_depth: int | None, layout: dict[str, _Array | int]
) -> tuple[xr.Dataset, xr.Dataset | None]:
    columns = chains[0].header.columns
    if warmup:
        stacked = np.stack([c.data[: c.n_warmup] for c in chains])
    else:
        stacked = np.stack([c.data[c.n_warmup :] for c in chains])
    n_chains, n_draws = stacked.shape[:2]
    stat_cols = [j for j, c in enumerate(columns) if c.endswith("__")]
    model_cols = [j for j, c in enumerate(columns) if not c.endswith("__")]
    variables = _variables(layout, stacked[..., model_cols])
    posterior = xr.Dataset(variables, coords=_coords(n_chains, n_draws, variables))
    stats = None
    if stat_cols:
        stats = _stats_dataset([columns[j] for j in stat_cols], stacked[..., stat_cols], max_depth)
        stats = stats.assign_coords(chain=np.arange(n_chains), draw=np.arange(n_draws))
    return posterior, stats


def _settings(chains: list[_Chain]) -> SamplerSettings:
    h = chains[0].header
    fixed_param = _is_fixed_param(h)
    save_warmup = _as_bool(h.find("save_warmup", "sample"))
    if save_warmup is None:
        save_warmup = _as_bool(h.find("save_warmup"))
    engine = None if fixed_param else h.find("engine", "hmc")
    max_depth = None
    if engine == "nuts":
        max_depth = _as_int(h.find("max_depth", "nuts"))
    ids = [c.header.chain_id for c in chains]
    by_default = any(
        c.header.chain_id == 0 and "id" in c.header.defaults for c in chains
    )
    informative = all(i is not None for i in ids) and len(set(ids)) == len(ids) and not by_default
    seeds = [_as_int(c.header.find("seed", "random")) for c in chains]
    return SamplerSettings(
        library="CmdStan",
        library_version=h.version,
        method=h.method,
        algorithm="fixed_param" if fixed_param else h.find("algorithm", h.method or "sample"),
        engine=engine,
        num_samples=_as_int(h.find("num_samples", "sample")),
        num_warmup=_as_int(h.find("num_warmup", "sample")),
        save_warmup=save_warmup,
        thin=_as_int(h.find("thin", "sample")),
        adapt_engaged=_as_bool(h.find("engaged", "adapt")),
        adapt_delta=_as_float(h.find("delta", "adapt")),
        max_depth=max_depth,
        metric=None if fixed_param else h.find("metric", "hmc"),
        chain_ids=[int(i) for i in ids] if informative else list(range(1, len(chains) + 1)),
        seeds=[s for s in seeds if s is not None] if all(s is not None for s in seeds) else [],
        model_name=h.model,
    )


def load_cmdstan_csv(paths: Sequence[Path], gate: Boundary | None = None) -> Loaded:
    """Load CmdStan CSV files that are the chains of one run.

    Parameters
    ----------
    paths
        One file per chain, in chain order.
    gate
        The boundary every file is opened through (default: type and size
        checks only).

    Returns
    -------
    Loaded
        ``posterior`` (model columns), ``sample_stats`` (``*__`` columns under
        standard names), and with saved warmup ``warmup_posterior`` and
        ``warmup_sample_stats``. The adapted step size and the elapsed times per
        chain are kept in the posterior group's attrs (``adapted_step_size``,
        ``elapsed_warmup_seconds``, ``elapsed_sampling_seconds``). Chains that
        disagree with the majority are left out with an ``inconsistent-chains``
        problem.
    """
    problems: list[LoadProblem] = []
    parsed: list[_Chain] = []
    gate = gate or Boundary.unconfined()
    for p in paths:
        chain = _parse_file(Path(p), problems, gate)
        if chain is not None:
            parsed.append(chain)
    chains = _check_chains(parsed, problems)
    if not chains:
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"), problems=problems)
    settings = _settings(chains)
    h = chains[0].header
    if settings.algorithm == "fixed_param" and h.find("algorithm", "sample") == "hmc":
        problems.append(
            LoadProblem(
                h.path,
                "the header says algorithm = hmc but there are no HMC sampler columns "
                "(stepsize__, treedepth__): read as a fixed_param run, as CmdStan does for "
                "models without parameters",
                line=h.lines.get(h.find_key("algorithm", "sample") or ""),
                kind="note",
            )
        )
    if all(c.data.shape[0] == 0 for c in chains):
        for c in chains:
            if c.n_rows_seen == 0:
                problems.append(LoadProblem(c.header.path, "the file has no draws (no data rows)"))
        return Loaded(tree=None, settings=settings, problems=problems)
    model_columns = [c for c in h.columns if not c.endswith("__")]
    layout = _layout(model_columns, h.path, h.column_line, problems)
    posterior, stats = _group_datasets(chains, False, settings.max_depth, layout)
    attrs = {
        "inference_library": "CmdStan",
        "source_format": "cmdstan-csv",
    }
    if settings.library_version:
        attrs["inference_library_version"] = settings.library_version
    posterior.attrs.update(attrs)
    posterior.attrs["adapted_step_size"] = [float(c.step_size) for c in chains]
    for phase in ("warm-up", "sampling"):
        values = [c.elapsed.get(phase, math.nan) for c in chains]
        if not all(math.isnan(v) for v in values):
            key = "warmup" if phase == "warm-up" else phase
            posterior.attrs[f"elapsed_{key}_seconds"] = values
    groups: dict[str, xr.Dataset] = {"posterior": posterior}
    if stats is not None:
        stats.attrs.update(attrs)
        groups["sample_stats"] = stats
    if any(c.n_warmup for c in chains):
        w_post, w_stats = _group_datasets(chains, True, settings.max_depth, layout)
        w_post.attrs.update(attrs)
        groups["warmup_posterior"] = w_post
        if w_stats is not None:
            w_stats.attrs.update(attrs)
            groups["warmup_sample_stats"] = w_stats
    tree = xr.DataTree.from_dict(groups)
    tree.attrs.update(attrs)
    return Loaded(
        tree=tree,
        settings=settings,
        sources=[c.header.path for c in chains],
        problems=problems,
    )
