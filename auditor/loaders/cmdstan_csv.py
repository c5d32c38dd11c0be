"""CmdStan CSV files: header settings, draws, sampler statistics.

Layout (CmdStan guide, "Stan CSV file format"): ``#`` comment lines with the run
configuration as indented ``key = value`` pairs, one line of column names, then
one row per saved iteration. Warmup rows come first when ``save_warmup`` is set;
the adaptation block (``# Adaptation terminated``, step size, inverse metric) is
written as comments after the warmup rows, and the timing block closes the file.
Array elements are columns ``name.i.j`` with 1-based indices, written in
column-major order (see :mod:`auditor.loaders.stan_names`).

Two header layouts exist: Stan 1.x writes ``# data = file`` on one line, later
versions write ``# data`` with ``#   file = ...`` below it. Both are read as a tree
of dotted paths (``data`` or ``data.file``), so lookups go by the last path part.

Reading is built for wide runs (issue 13): the headers of all chains are read
first, so that the draws of the chains that agree go straight into one
preallocated ``(chain, row, column)`` array; each file is then read in chunks of
:data:`CHUNK` bytes and its data lines are parsed on several threads
(:mod:`auditor.loaders.csv_rows`). Variables are views of that array where the
file's column order allows (it always does for CmdStan's own files), so peak
memory stays close to the draws themselves. Numbers in ``benchmarks/README.md``.
"""

from __future__ import annotations

import hashlib
import math
import mmap
import os
import re
from collections import Counter
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from auditor.boundary import Boundary, Refused
from auditor.loaders import stan_names
from auditor.loaders.csv_rows import RegionResult, parse_region
from auditor.loaders.problems import Loaded, LoadProblem, refused_problem
from auditor.loaders.stats_vocab import CMDSTAN, normalize_sample_stats
from auditor.model import SamplerSettings

_KEY_LINE = re.compile(r"^#(\s*)([A-Za-z_][A-Za-z0-9_]*)\s*(?:=\s*(.*?))?\s*$")
_DEFAULT_TAG = re.compile(r"\s*\(Default\)\s*$")
_STEP_SIZE = re.compile(r"^#\s*Step size\s*=\s*(\S+)")
_ELAPSED = re.compile(r"^#\s*(?:Elapsed Time:)?\s*([0-9.eE+-]+)\s*seconds\s*\((\w[\w-]*)\)")
_DIAG_METRIC = re.compile(r"^#\s*Diagonal elements of inverse mass matrix", re.IGNORECASE)
_DENSE_METRIC = re.compile(r"^#\s*Elements of inverse mass matrix", re.IGNORECASE)

#: Sampler columns CmdStan writes for HMC; without them an HMC-labelled run is
#: a fixed_param run (CmdStan switches to fixed_param for models without parameters).
_HMC_COLUMNS = ("stepsize__", "treedepth__")

#: Problems of one kind reported per file before they are summarized.
_MAX_ROW_PROBLEMS = 5

#: Bytes read from a file at a time, and so the largest region parsed at once
#: (unless one line is longer). polars' peak while parsing a region was about
#: 15 times the region (its text, the fields, allocator slack); 2 MiB regions were
#: as fast as 8 MiB ones and kept the load's peak well under 1.5 times the draws
#: array with two parsers at work (benchmarks/README.md).
CHUNK = 2 * 1024 * 1024

#: Header settings compared between the chains of one run: a difference is
#: reported as a note (path part that must appear, leaf, label).
_COMPARED = (
    ("adapt", "delta", "adapt delta"),
    ("nuts", "max_depth", "max depth"),
    ("hmc", "metric", "metric"),
    ("hmc", "engine", "engine"),
    ("sample", "num_warmup", "num_warmup"),
    ("sample", "thin", "thin"),
    ("adapt", "engaged", "adaptation"),
    ("hmc", "stepsize_jitter", "stepsize_jitter"),
)


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
class _Head:
    """A file whose header was read: where its rows start and how it looked then."""

    header: CmdStanHeader
    body_offset: int  # byte just after the column line
    size: int
    mtime_ns: int


@dataclass
class _Chain:
    """One file whose rows were read into slot ``slot`` of the shared array."""

    head: _Head
    slot: int
    n_rows: int = 0  # usable rows, compacted to the start of the slot
    n_rows_seen: int = 0  # data lines that are not blank, including unusable ones
    n_warmup: int = 0  # leading usable rows that are warmup
    start: int = 0  # first row that is a draw (1 for variational output)
    step_size: float = math.nan
    metric: str | None = None  # "diag" or "dense", as the adaptation block says
    inv_metric: np.ndarray | None = None  # its diagonal
    elapsed: dict[str, float] = field(default_factory=dict)
    grew: str | None = None  # how the file changed while it was read
    cut_last_line: bool = False  # the file ends inside a line

    @property
    def header(self) -> CmdStanHeader:
        return self.head.header

    @property
    def n_kept(self) -> int:
        return self.n_rows - self.n_warmup - self.start


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
_BOM = b"\xef\xbb\xbf"
#: With a file-backed store, its pages are released after about this many bytes of rows.
RELEASE_BYTES = 128 * 2**20


def _looks_binary(data: bytes | bytearray) -> bool:
    return b"\x00" in data[:4096]


@dataclass
class _RawHead:
    lines: list[str]  # up to and including the column line
    body_offset: int
    bom: bool
    size: int
    mtime_ns: int


def _read_head(path: Path, gate: Boundary, check_size: bool = False) -> tuple[_RawHead | None, str]:
    """The lines of a file up to its column line, or (None, why it is not CSV text).

    Reads in chunks and stops at the first complete line that is neither blank nor
    a comment, so a huge or endless file costs at most :data:`_HEAD_LIMIT` bytes.

    Raises
    ------
    Refused
        The boundary refused the file (outside, special file, too large when
        ``check_size``).
    """
    buf = bytearray()
    end = None  # byte just after the column line
    with gate.open(path, check_size=check_size) as fh:
        st = os.fstat(fh.fileno())
        scanned = 0  # lines before this offset are complete and not the column line
        while len(buf) < _HEAD_LIMIT:
            chunk = fh.read(_HEAD_CHUNK)
            if not chunk:
                break
            first = not buf
            buf += chunk
            if first and _looks_binary(buf):
                return None, "a binary file, not CSV text"
            end, scanned = _column_line_end(buf, scanned)
            if end is not None:
                break
    if not buf:
        return None, "an empty file (0 bytes)"
    if _looks_binary(buf):
        return None, "a binary file, not CSV text"
    bom = buf.startswith(_BOM)
    head = bytes(buf[: end if end is not None else len(buf)])
    if end is None and len(buf) >= _HEAD_LIMIT:
        return None, (f"no line of column names in the first {_HEAD_LIMIT // 2**20} MB "
                      "(only comments or one endless line)")
    text = head.decode("utf-8", errors="replace").removeprefix("\ufeff")
    lines = text.split("\n")
    if text.endswith("\n"):
        lines.pop()
    return _RawHead(lines, end if end is not None else len(buf), bom, st.st_size,
                    st.st_mtime_ns), ""


def _column_line_end(buf: bytearray, pos: int) -> tuple[int | None, int]:
    """Offset just after the first complete line that is neither blank nor a
    comment (``None`` when there is none yet), and where to resume looking."""
    while True:
        end = buf.find(b"\n", pos)
        if end < 0:
            return None, pos
        line = bytes(buf[pos:end])
        if pos == 0:
            line = line.removeprefix(_BOM)
        line = line.strip()
        if line and not line.startswith(b"#"):
            return end + 1, pos
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
    raw, reason = _read_head(Path(path), gate)
    if raw is None:
        return None, reason or "not CSV text"
    header = _parse_header_lines(Path(path), raw.lines)
    if header is None:
        return None, _NOT_CMDSTAN
    return header, ""


_NOT_CMDSTAN = ("not a CmdStan CSV: no 'stan_version_major' header comment and no "
                "sampler columns ending in '__'")


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


def _open_head(path: Path, problems: list[LoadProblem], gate: Boundary) -> _Head | None:
    """The header of one file; ``None`` (with a problem) when the file is unusable."""
    try:
        raw, reason = _read_head(path, gate, check_size=True)
    except Refused as exc:
        problems.append(refused_problem(path, exc))
        return None
    except OSError as exc:
        problems.append(LoadProblem(path, f"cannot read the file: {exc.strerror or exc}"))
        return None
    if raw is None:
        if reason.startswith("an empty file"):
            reason = "an empty file (0 bytes), not a CmdStan CSV"
        elif reason.startswith("a binary file"):
            reason = "a binary file, not a CmdStan CSV"
        problems.append(LoadProblem(path, reason))
        return None
    if raw.bom:
        problems.append(LoadProblem(
            path, "the file starts with a byte-order mark (an editor added it); read without it",
            line=1, kind="note"))
    header = _parse_header_lines(path, raw.lines)
    if header is None:
        problems.append(LoadProblem(path, _NOT_CMDSTAN))
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
        problems.append(LoadProblem(
            path, f"column names repeat ({', '.join(dupes[:5])}); the file cannot be read "
            "as one set of draws", line=header.column_line))
        return None
    return _Head(header, raw.body_offset, raw.size, raw.mtime_ns)


def _promised_rows(h: CmdStanHeader) -> int | None:
    """Data rows the header promises (warmup, draws, and the mean row of variational
    output), or ``None`` when it does not say."""
    if h.method == "variational":
        n = _as_int(h.find("output_samples", "variational"))
        return None if n is None else n + 1
    if h.method != "sample":
        return None
    expected = _kept_and_warmup_expected(h, _is_fixed_param(h))
    return None if expected is None else sum(expected)


class _Comments:
    """What the comment lines among the rows say: adaptation and timing."""

    def __init__(self, path: Path, problems: list[LoadProblem]) -> None:
        self.path, self.problems = path, problems
        self.step_size = math.nan
        self.metric: str | None = None
        self.diag: list[float] = []
        self.elapsed: dict[str, float] = {}
        self._expect: str | None = None  # "diag" or "dense": values follow

    def line(self, text: str, number: int) -> None:
        m = _STEP_SIZE.match(text)
        if m:
            value = _as_float(m.group(1))
            self.step_size = math.nan if value is None else value
            return
        if _DIAG_METRIC.match(text):
            self.metric, self._expect, self.diag = "diag", "diag", []
            return
        if _DENSE_METRIC.match(text):
            self.metric, self._expect, self.diag = "dense", "dense", []
            return
        if self._expect is not None:
            body = text.lstrip("#").strip()
            values = [_as_float(v) for v in body.split(",")] if body else []
            if not values or any(v is None for v in values):
                self._expect = None  # the block has ended
            elif self._expect == "diag":
                self.diag = [float(v) for v in values]  # type: ignore[arg-type]
                self._expect = None
                return
            else:
                k = len(self.diag)
                self.diag.append(float(values[k]) if k < len(values) else math.nan)
                return
        m = _ELAPSED.match(text)
        if m:
            seconds = _as_float(m.group(1))
            if seconds is None:
                self.problems.append(LoadProblem(
                    self.path, f"the timing line says {m.group(1)!r} seconds, not a number; "
                    "the time is left out", line=number, kind="note"))
            else:
                self.elapsed[m.group(2).lower()] = seconds


@dataclass
class _Region:
    """A region of data lines handed to a parser."""

    first_line: int  # 1-based line number of its first line
    first_row: int  # row of the slot its first line goes to
    n_lines: int
    last_is_cut: bool  # its last line has no line end (the file ends there)
    future: Future | None = None
    result: RegionResult | None = None


class _Store:
    """The shared ``(chain, row, column)`` array, grown when a file has more rows
    than its header promised.

    With ``scratch`` (a folder outside the project) the array is a shared mapping of a
    raw float64 file there instead of memory, for runs larger than memory
    (:mod:`auditor.loaders.cmdstan_lazy`): :meth:`release` hands the pages written so
    far back to the page cache, so the process holds only what it touched since.
    """

    def __init__(self, n_chains: int, rows: int, ncol: int, scratch: Path | None = None) -> None:
        self.scratch = scratch
        self._maps: list[mmap.mmap] = []
        self._generation = 0
        self.arr = self._new((n_chains, max(rows, 1), ncol))

    def _new(self, shape: tuple[int, int, int]) -> np.ndarray:
        if self.scratch is None:
            return np.empty(shape)
        self._generation += 1
        path = self.scratch / f"rows-{self._generation}.f64"
        nbytes = max(8, 8 * math.prod(shape))
        with open(path, "w+b") as fh:
            reserve(fh.fileno(), nbytes)
            mm = mmap.mmap(fh.fileno(), nbytes)
        path.unlink()  # the mapping keeps it until released; nothing is left behind
        self._maps.append(mm)
        return np.frombuffer(mm, dtype=np.float64, count=math.prod(shape)).reshape(shape)

    def ensure(self, rows: int, pending: list[_Region]) -> None:
        if rows <= self.arr.shape[1]:
            return
        for r in pending:  # nothing may write into the old array any more
            _finish(r)
        new = self._new((self.arr.shape[0], max(rows, 2 * self.arr.shape[1]),
                         self.arr.shape[2]))
        new[:, : self.arr.shape[1]] = self.arr
        self.arr = new
        # The old mapping goes with the last view of it (its file was unlinked).
        self._maps = self._maps[-1:]
        self.release()

    def release(self) -> None:
        """Drop the file-backed pages from this process (they stay in the file); where the
        system has no ``madvise`` (Windows) the pages stay until the mapping goes."""
        if hasattr(mmap, "MADV_DONTNEED"):
            for mm in self._maps:
                mm.madvise(mmap.MADV_DONTNEED)


def reserve(fd: int, nbytes: int) -> None:
    """Reserve ``nbytes`` of disk for the file ``fd`` now, so that a full disk is an
    :class:`OSError` here rather than a fault (SIGBUS) when a page of a sparse mapped
    file is written later; where ``posix_fallocate`` is missing (macOS), the file is
    only extended."""
    if hasattr(os, "posix_fallocate"):
        os.posix_fallocate(fd, 0, nbytes)
    else:
        os.ftruncate(fd, nbytes)


def _finish(region: _Region) -> None:
    if region.future is not None:
        region.result = region.future.result()
        region.future = None


def _count_lines(part: bytes) -> int:
    """Line ends in ``part`` (numpy's count is about twice as fast as ``bytes.count``
    on a region, and lets the parser threads run meanwhile)."""
    if len(part) < 65536:
        return part.count(b"\n")
    return int(np.count_nonzero(np.frombuffer(part, dtype=np.uint8) == 0x0A))


def _next_comment(buf: bytes, pos: int) -> int:
    """Offset of the first comment line at or after ``pos`` (``len(buf)`` if none).

    Looks for ``#`` alone (a one-byte search is several times faster than looking
    for ``\n#``) and checks that it starts a line.
    """
    while True:
        k = buf.find(b"#", pos)
        if k < 0:
            return len(buf)
        if buf[k - 1] == 0x0A:  # k > pos here: pos starts a line that is not a comment
            return k
        pos = k + 1


def _read_rows(chain: _Chain, gate: Boundary, store: _Store, pool: ThreadPoolExecutor | None,
               workers: int, problems: list[LoadProblem]) -> list[_Region]:
    """Read the rows of one file into its slot; the regions say what each parser found.

    Comment lines among the rows are read here (adaptation block, timing footer).
    """
    h = chain.header
    path, ncol = h.path, len(h.columns)
    comments = _Comments(path, problems)
    regions: list[_Region] = []
    in_flight: list[_Region] = []
    line_no = (h.column_line or 0) + 1
    row = 0
    since = 0  # bytes read since the file-backed pages were last released
    with gate.open(path) as fh:
        fh.seek(chain.head.body_offset)
        size = CHUNK
        while True:
            buf = fh.read(size)
            if not buf:
                break
            n = len(buf)
            if n == size:  # more may follow: stop at the last complete line, read on from it
                last = buf.rfind(b"\n") + 1
                if last == 0:  # one line longer than the chunk: read it whole
                    fh.seek(-n, os.SEEK_CUR)
                    size *= 2
                    continue
                if last < n:
                    fh.seek(last - n, os.SEEK_CUR)
                    buf = buf[:last]
                    n = last
                size = CHUNK
            pos = 0
            while pos < n:
                if buf[pos] == 0x23:  # '#': a comment line
                    end = buf.find(b"\n", pos)
                    end = n if end < 0 else end
                    text = buf[pos:end].decode("utf-8", errors="replace").removesuffix("\r")
                    comments.line(text, line_no)
                    line_no += 1
                    pos = end + 1
                    continue
                end = _next_comment(buf, pos)
                part = buf if (pos == 0 and end == n) else buf[pos:end]
                cut = not part.endswith(b"\n")
                lines = _count_lines(part) + (1 if cut else 0)
                store.ensure(row + lines, regions)
                region = _Region(line_no, row, lines, cut)
                out = store.arr[chain.slot]
                if pool is None:
                    region.result = parse_region(part, lines, ncol, out, row)
                else:
                    while sum(r.future is not None and not r.future.done() for r in in_flight) \
                            >= workers:
                        _finish(in_flight.pop(0))
                    region.future = pool.submit(parse_region, part, lines, ncol, out, row)
                    in_flight.append(region)
                regions.append(region)
                line_no += lines
                row += lines
                pos = end
            since += n
            if store.scratch is not None and since >= RELEASE_BYTES:
                for r in in_flight:  # their rows must be written before the pages go
                    _finish(r)
                in_flight.clear()
                store.release()
                since = 0
        st = os.fstat(fh.fileno())
    for region in regions:
        _finish(region)
    if store.scratch is not None:
        store.release()
    chain.step_size = comments.step_size
    chain.metric = comments.metric
    chain.inv_metric = np.asarray(comments.diag, dtype=float) if comments.diag else None
    chain.elapsed = comments.elapsed
    before = chain.head
    if st.st_size != before.size or st.st_mtime_ns != before.mtime_ns:
        chain.grew = (f"it changed while it was read ({before.size:,} bytes when its header "
                      f"was read, {st.st_size:,} bytes after its rows were)")
    chain.cut_last_line = bool(regions) and regions[-1].last_is_cut
    return regions


def _settle_rows(chain: _Chain, regions: list[_Region], store: _Store,
                 problems: list[LoadProblem]) -> None:
    """Report the lines that could not be used, move the usable rows to the start
    of the slot, and split warmup from draws."""
    h = chain.header
    path, ncol = h.path, len(h.columns)
    n = sum(r.n_lines for r in regions)
    used = np.ones(n, dtype=bool)
    blank = np.zeros(n, dtype=bool)
    fields = np.full(n, ncol, dtype=np.int64)
    ragged: list[tuple[int, int]] = []  # (line, fields)
    odd: list[tuple[int, int, str]] = []
    n_odd = 0
    cut: tuple[int, int] | None = None
    for r in regions:
        res = r.result
        assert res is not None
        span = slice(r.first_row, r.first_row + r.n_lines)
        if res.good is not None:
            used[span] = res.good
            blank[span] = res.blank
            fields[span] = res.fields
            for i in np.flatnonzero(~res.good & ~res.blank):
                if r.last_is_cut and i == r.n_lines - 1:
                    cut = (r.first_line + int(i), int(res.fields[i]))
                else:
                    ragged.append((r.first_line + int(i), int(res.fields[i])))
        n_odd += res.n_odd
        odd.extend((r.first_line + i, j, text) for i, j, text in res.odd)
    chain.n_rows_seen = int((~blank).sum())
    if ragged and len(ragged) + (cut is not None) == chain.n_rows_seen:
        seen = sorted({k for _, k in ragged} | ({cut[1]} if cut else set()))
        problems.append(LoadProblem(
            path, f"the column line names {ncol} columns but every data row has "
            f"{' or '.join(str(k) for k in seen)} fields; no draws can be read",
            line=h.column_line))
        chain.n_rows = 0
        return
    for line, k in ragged[:_MAX_ROW_PROBLEMS]:
        problems.append(LoadProblem(
            path, f"row has {k} fields but the header has {ncol} columns; the row is left out",
            line=line))
    if len(ragged) > _MAX_ROW_PROBLEMS:
        problems.append(LoadProblem(
            path, f"{len(ragged)} rows in all have the wrong number of fields; all left out"))
    for line, j, text in odd:
        problems.append(LoadProblem(
            path, f"field {j + 1} is {text.strip()[:40]!r}, not a number; read as missing (NaN)",
            line=line))
    if n_odd > len(odd):
        problems.append(LoadProblem(
            path, f"{n_odd} fields in all are not numbers; all read as missing (NaN)"))
    good_rows = np.flatnonzero(used & ~blank)
    if cut is not None:
        problems.append(LoadProblem(
            path, f"the file ends inside a row: its last line has {cut[1]} of the {ncol} fields "
            "and no line end, as when a chain is killed or is still being written; that line "
            f"is left out and the {len(good_rows)} complete rows before it are kept",
            line=cut[0]))
    elif chain.cut_last_line and len(good_rows):
        problems.append(LoadProblem(
            path, "the last line has no line end; it has every field, but its last value may "
            "be cut short (a chain killed or still being written?)",
            line=regions[-1].first_line + regions[-1].n_lines - 1, kind="note"))
    k = len(good_rows)
    if k and not np.array_equal(good_rows, np.arange(k)):
        arr = store.arr[chain.slot]
        for a in range(0, k, 256):  # sources lie at or after their targets
            b = min(a + 256, k)
            arr[a:b] = arr[good_rows[a:b]]
    chain.n_rows = k
    expected = _kept_and_warmup_expected(h, _is_fixed_param(h)) if h.method == "sample" else None
    if expected is not None:
        kept, warm = expected
        if chain.n_rows_seen != kept + warm:
            what = f"{kept} draws" if not warm else f"{warm} warmup rows and {kept} draws"
            line = h.lines.get(h.find_key("num_samples", "sample") or "")
            problems.append(LoadProblem(
                path, f"the header promises {what} (num_samples = "
                f"{h.find('num_samples', 'sample')}) but the file has {chain.n_rows_seen} "
                "data rows; the file looks cut short or edited", line=line))
        # Warmup rows are the first ``warm`` rows of the file, whichever were unusable.
        seen = np.flatnonzero(~blank)
        chain.n_warmup = int(used[seen[:warm]].sum())
    elif h.method == "variational" and k > 0:
        # The first row of a variational output is the mean of the approximation,
        # not a draw (CmdStan guide, "Variational inference" output; from memory).
        chain.start = 1


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


def _majority(items: list, checks: tuple, n_total: int, problems: list[LoadProblem],
              header_of) -> list:  # noqa: ANN001 - a key function
    """Keep the items that agree with the majority on every check; report the others."""
    kept = list(items)
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
            h = header_of(c)
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
            problems.append(LoadProblem(
                h.path, f"chain file {h.path.name} does not match the other chains of the run: "
                f"{diff}; this chain is left out and the {len(agree)} agreeing chain"
                f"{'s are' if len(agree) != 1 else ' is'} kept (of {n_total} files given)",
                line=line, kind="inconsistent-chains"))
        kept = agree
    return kept


def _left_out(h: CmdStanHeader, reason: str, n_total: int) -> LoadProblem:
    return LoadProblem(h.path, f"chain file {h.path.name}: {reason}; it is left out "
                       f"(of {n_total} files given)", kind="inconsistent-chains")


def _check_heads(heads: list[_Head], n_total: int, problems: list[LoadProblem]) -> list[_Head]:
    """Before any row is read: a file given twice, and chains whose columns, model
    or method differ from the majority's, are left out."""
    seen: dict[Path, _Head] = {}
    unique = []
    for head in heads:
        real = head.header.path.resolve()
        twin = seen.get(real)
        if twin is not None:
            problems.append(_left_out(
                head.header, f"the same file is given twice (as {twin.header.path} too)",
                n_total))
            continue
        seen[real] = head
        unique.append(head)
    if len(unique) < 2:
        return unique
    checks = (
        ("columns", lambda c: c.header.columns),
        ("model", lambda c: c.header.model),
        ("method", lambda c: c.header.method),
    )
    return _majority(unique, checks, n_total, problems, lambda c: c.header)


def _fingerprint(chain: _Chain, arr: np.ndarray) -> bytes:
    """A digest of a chain's first, middle and last rows (cheap; equal draws give
    equal digests, and a match is confirmed on all rows)."""
    rows = arr[chain.slot, : chain.n_rows]
    picks = sorted({0, chain.n_rows // 2, chain.n_rows - 1})
    digest = hashlib.blake2b(digest_size=16)
    digest.update(str(chain.n_rows).encode())
    for i in picks:
        digest.update(np.ascontiguousarray(rows[i]).data)
    return digest.digest()


def _check_chains(chains: list[_Chain], n_total: int, arr: np.ndarray,
                  problems: list[LoadProblem]) -> list[_Chain]:
    """After the rows are read: chains with another number of draws or warmup rows,
    and chains whose draws equal another's, are left out."""
    if len(chains) < 2:
        return chains
    checks = (("draws", lambda c: c.n_kept), ("warmup", lambda c: c.n_warmup))
    kept = _majority(chains, checks, n_total, problems, lambda c: c.header)
    out: list[_Chain] = []
    seen: dict[bytes, list[_Chain]] = {}
    for c in kept:
        if not _is_fixed_param(c.header) and c.n_rows:
            # Identical HMC chains mean a copied file or a repeated seed and chain id;
            # kept, they would make the chains look perfectly mixed.
            key = _fingerprint(c, arr)
            twin = next((t for t in seen.get(key, []) if np.array_equal(
                arr[t.slot, : t.n_rows], arr[c.slot, : c.n_rows])), None)
            if twin is not None:
                problems.append(_left_out(
                    c.header, f"its draws are identical to those of {twin.header.path.name} "
                    "(a copied file, or the same seed and chain id)", n_total))
                continue
            seen.setdefault(key, []).append(c)
        out.append(c)
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
            problems.append(LoadProblem(
                h.path, f"this chain read data file {other} but {chains[0].header.path.name} "
                f"read {first}; if the contents differ, the chains sample different posteriors",
                line=h.lines.get("data.file") or h.lines.get("data"), kind="note"))


def _note_settings(chains: list[_Chain], problems: list[LoadProblem]) -> None:
    """Header settings in which a chain differs from the other chains of the run.

    Tuning settings (adapt delta, max depth, metric, ...) should be the same in
    every chain. Seeds differ whenever chains were run as separate processes,
    which is common and harmless; a chain is noted when the other chains share
    one seed (one run of the sampler) and it has another (it comes from another
    run).
    """
    if len(chains) < 2:
        return
    for within, leaf, label in _COMPARED:
        values = [c.header.find(leaf, within) for c in chains]
        present = [v for v in values if v is not None]
        if len(present) < 2:
            continue
        ref = Counter(present).most_common(1)[0][0]
        ref_chain = next(c for c, v in zip(chains, values, strict=True) if v == ref)
        for c, value in zip(chains, values, strict=True):
            if value is None or _same_setting(value, ref):
                continue
            problems.append(LoadProblem(
                c.header.path, f"this chain ran with {label} = {value} but "
                f"{ref_chain.header.path.name} with {label} = {ref}: the chains of one run "
                "were run with different settings",
                line=c.header.lines.get(c.header.find_key(leaf, within) or ""), kind="note"))
    seeds = [c.header.find("seed", "random") for c in chains]
    counts = Counter(s for s in seeds if s is not None)
    if not counts:
        return
    shared, k = counts.most_common(1)[0]
    if k < 2:
        return
    for c, seed in zip(chains, seeds, strict=True):
        if seed is not None and seed != shared:
            problems.append(LoadProblem(
                c.header.path, f"this chain was started with seed {seed} while {k} other chains "
                f"share seed {shared} (one run of the sampler): it comes from another run, which "
                "is fine only if that run used the same program, data and settings", kind="note",
                line=c.header.lines.get(c.header.find_key("seed", "random") or "")))


def _same_setting(a: str, b: str) -> bool:
    if a == b:
        return True
    fa, fb = _as_float(a), _as_float(b)
    if fa is not None and fb is not None:
        return fa == fb
    ba, bb = _as_bool(a), _as_bool(b)
    return ba is not None and ba == bb


def _note_unfinished(chains: list[_Chain], problems: list[LoadProblem]) -> None:
    """Chains still being written, or whose run was killed: the file changed while
    it was read, or the timing footer is missing while other chains have one."""
    footers = [bool(c.elapsed) for c in chains]
    for c, has_footer in zip(chains, footers, strict=True):
        path = c.header.path
        if c.grew:
            problems.append(LoadProblem(
                path, f"{c.header.path.name}: {c.grew}; the chain is still being written: "
                f"{c.n_rows} rows were read so far; audit again when the run has ended"))
        elif not has_footer and any(footers) and c.header.method == "sample":
            problems.append(LoadProblem(
                path, f"the file ends without the timing footer ('Elapsed Time') that the "
                "other chains have: the chain was still being written or its run was killed "
                f"({c.n_rows} complete rows were read)"))


# --------------------------------------------------------------------------- datasets


def _integral(values: np.ndarray) -> np.ndarray:
    """Cast to int64 when every value is a finite whole number."""
    if values.size and np.all(np.isfinite(values)) and np.all(values == np.round(values)):
        return values.astype(np.int64)
    return values


def _stats_dataset(columns: Sequence[tuple[int, str]], values: np.ndarray,
                   max_depth: int | None) -> xr.Dataset:
    """sample_stats from the ``*__`` columns, with standard names."""
    data = {}
    for j, col in columns:
        name = CMDSTAN.get(col, col[:-2] if col.endswith("__") else col)
        v = values[..., j]
        if name in ("tree_depth", "n_steps"):
            v = _integral(v)
        data[name] = xr.Variable(("chain", "draw"), v)
    ds = xr.Dataset(data)
    return normalize_sample_stats(ds, max_depth=max_depth)


def _group_datasets(values: np.ndarray, columns: Sequence[str], max_depth: int | None,
                    layout: stan_names.Layout) -> tuple[xr.Dataset, xr.Dataset | None]:
    """posterior and sample_stats of ``values`` (chain, draw, column); variables are
    views of ``values`` where the layout allows."""
    n_chains, n_draws = values.shape[:2]
    variables: dict[str, xr.Variable] = {}
    coords: dict[str, object] = {"chain": np.arange(n_chains), "draw": np.arange(n_draws)}
    for name, spec in layout.items():
        arr = stan_names.extract(values, spec)
        dims = ("chain", "draw") if isinstance(spec, int) else ("chain", "draw", *spec.dims(name))
        variables[name] = xr.Variable(dims, arr)
        for dim, coord in stan_names.coords_for(name, spec).items():
            coords.setdefault(dim, coord)
    posterior = xr.Dataset(variables, coords=coords)
    stat_cols = [(j, c) for j, c in enumerate(columns) if c.endswith("__")]
    stats = None
    if stat_cols:
        stats = _stats_dataset(stat_cols, values, max_depth)
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
    metrics = {c.metric for c in chains if c.metric}
    timing = {
        phase: [c.elapsed.get(phase, math.nan) for c in chains]
        for phase in ("warm-up", "sampling")
    }
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
        adapted_step_size=[] if all(math.isnan(c.step_size) for c in chains)
        else [float(c.step_size) for c in chains],
        inverse_metric=metrics.pop() if len(metrics) == 1 else None,
        inverse_metric_diagonal=[
            [float(v) for v in c.inv_metric] if c.inv_metric is not None else []
            for c in chains] if any(c.inv_metric is not None for c in chains) else [],
        warmup_seconds=[] if all(math.isnan(v) for v in timing["warm-up"])
        else timing["warm-up"],
        sampling_seconds=[] if all(math.isnan(v) for v in timing["sampling"])
        else timing["sampling"],
    )


def _workers(total_bytes: int) -> int:
    """Parser threads: the usable CPUs, at most 4 (each holds a region in flight,
    about 15 times :data:`CHUNK` at its peak), and one for files of a few regions,
    where threads cost more than they save."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, 4, total_bytes // (8 * CHUNK)))


@dataclass
class Run:
    """A run whose rows were read and checked, before its groups are made.

    ``arr[:len(chains)]`` holds the kept chains in order; rows ``start`` to
    ``start + warm`` are warmup, the next ``kept`` rows draws.
    """

    arr: np.ndarray
    chains: list[_Chain]
    columns: tuple[str, ...]
    settings: SamplerSettings
    layout: stan_names.Layout
    warm: int
    start: int
    kept: int
    problems: list[LoadProblem]
    store: _Store

    @property
    def attrs(self) -> dict[str, str]:
        attrs = {"inference_library": "CmdStan", "source_format": "cmdstan-csv"}
        if self.settings.library_version:
            attrs["inference_library_version"] = self.settings.library_version
        return attrs

    def rows(self, warmup: bool) -> np.ndarray:
        """``(chain, draw, column)`` values of the warmup rows or of the draws."""
        n = len(self.chains)
        lo = self.start if warmup else self.start + self.warm
        hi = self.start + self.warm if warmup else lo + self.kept
        return self.arr[:n, lo:hi]


GroupMaker = Callable[[Run, bool], tuple[xr.Dataset, "xr.Dataset | None"]]


def _in_memory(run: Run, warmup: bool) -> tuple[xr.Dataset, xr.Dataset | None]:
    return _group_datasets(run.rows(warmup), run.columns, run.settings.max_depth, run.layout)


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
        ``warmup_sample_stats``. The adaptation block (step size, inverse
        metric) and the timing footer go into the settings; the step size and
        times are also kept in the posterior group's attrs (``adapted_step_size``,
        ``elapsed_warmup_seconds``, ``elapsed_sampling_seconds``). Chains that
        disagree with the majority are left out with an ``inconsistent-chains``
        problem.
    """
    run = read_run(paths, gate)
    if isinstance(run, Loaded):
        return run
    return run_groups(run, _in_memory)


def read_run(paths: Sequence[Path], gate: Boundary | None = None,
             scratch: Path | None = None) -> Run | Loaded:
    """Read and check the rows of a run (everything but making its groups).

    With ``scratch``, the rows go to a file-backed array in that folder (see
    :class:`_Store`). Returns a :class:`Loaded` without a tree when nothing can be read.
    """
    problems: list[LoadProblem] = []
    gate = gate or Boundary.unconfined()
    heads: list[_Head] = []
    for p in paths:
        head = _open_head(Path(p), problems, gate)
        if head is not None:
            heads.append(head)
    n_total = len(heads)
    heads = _check_heads(heads, n_total, problems)
    if not heads:
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"), problems=problems)
    columns = heads[0].header.columns
    ncol = len(columns)
    promised = [_promised_rows(hd.header) for hd in heads]
    # A file cannot hold more rows than its size allows (every field takes a
    # character and a separator), so a header promising a billion draws in a
    # small file costs nothing.
    fits = max(hd.size // (2 * ncol) + 1 for hd in heads)
    rows = min(max((p for p in promised if p is not None), default=1024), fits)
    store = _Store(len(heads), rows, ncol, scratch)
    chains = [_Chain(hd, slot) for slot, hd in enumerate(heads)]
    workers = _workers(sum(hd.size for hd in heads))
    read: list[_Chain] = []
    with ThreadPoolExecutor(workers) if workers > 1 else _NoPool() as pool:
        for c in chains:
            try:
                regions = _read_rows(c, gate, store, pool, workers, problems)
            except Refused as exc:
                problems.append(refused_problem(c.header.path, exc))
                continue
            except OSError as exc:
                problems.append(LoadProblem(c.header.path,
                                            f"cannot read the file: {exc.strerror or exc}"))
                continue
            _settle_rows(c, regions, store, problems)
            read.append(c)
    chains = read
    _note_unfinished(chains, problems)
    chains = _check_chains(chains, n_total, store.arr, problems)
    if not chains:
        return Loaded(tree=None, settings=SamplerSettings(library="CmdStan"), problems=problems)
    _note_data_files(chains, problems)
    _note_settings(chains, problems)
    settings = _settings(chains)
    h = chains[0].header
    if settings.algorithm == "fixed_param" and h.find("algorithm", "sample") == "hmc":
        problems.append(LoadProblem(
            h.path, "the header says algorithm = hmc but there are no HMC sampler columns "
            "(stepsize__, treedepth__): read as a fixed_param run, as CmdStan does for "
            "models without parameters",
            line=h.lines.get(h.find_key("algorithm", "sample") or ""), kind="note"))
    if all(c.n_rows == 0 for c in chains):
        for c in chains:
            if c.n_rows_seen == 0:
                problems.append(LoadProblem(c.header.path, "the file has no draws (no data rows)"))
        return Loaded(tree=None, settings=settings, problems=problems)
    arr = store.arr
    for k, c in enumerate(chains):  # chains left out free their slots; later ones move down
        if c.slot != k:
            arr[k] = arr[c.slot]
            c.slot = k
    if scratch is not None:
        store.release()
    first = chains[0]
    layout = stan_names.layout([(j, c) for j, c in enumerate(columns) if not c.endswith("__")],
                               h.path, h.column_line, problems)
    return Run(arr=arr, chains=chains, columns=columns, settings=settings, layout=layout,
               warm=first.n_warmup, start=first.start, kept=first.n_kept, problems=problems,
               store=store)


def run_groups(run: Run, make: GroupMaker) -> Loaded:
    """The tree of a read run, its groups made by ``make(run, warmup)``."""
    chains, attrs = run.chains, run.attrs
    posterior, stats = make(run, False)
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
    if run.warm:
        w_post, w_stats = make(run, True)
        w_post.attrs.update(attrs)
        groups["warmup_posterior"] = w_post
        if w_stats is not None:
            w_stats.attrs.update(attrs)
            groups["warmup_sample_stats"] = w_stats
    tree = xr.DataTree.from_dict(groups)
    tree.attrs.update(attrs)
    return Loaded(tree=tree, settings=run.settings, sources=[c.header.path for c in chains],
                  problems=run.problems)


class _NoPool:
    """Stands in for a thread pool on one CPU: regions are parsed in the caller."""

    def __enter__(self) -> None:
        return None

    def __exit__(self, *exc: object) -> None:
        return None
