"""The project boundary: which paths the audit may open, and how it opens them.

Reviewers and CI audit projects they did not write, so every path that comes from
the project (configuration values, globs, ``#include`` lines, discovery) passes
through one :class:`Boundary` before anything is read:

- it must resolve, after following links, to a place under the project root (or
  under a folder the user widened the boundary to on the command line);
- it must be a regular file (or a folder where one is expected, such as a Zarr
  store); FIFOs, sockets and device files are never opened, because opening a
  FIFO blocks and reading ``/dev/zero`` never ends;
- its size must be within a limit set relative to the memory available, checked
  before reading;
- link loops and over-long names are refused, never followed.

Files are opened non-blocking and checked again on the open descriptor (type,
size, and on Linux the real path of the descriptor), so a file swapped for a
FIFO or a link after the first check is still refused. Refusals are
:class:`Refused` exceptions carrying a problem kind (``outside-project``,
``special-file``, ``too-large``, ``unreadable``) that the ``inputs.*`` rules
turn into findings. This module imports nothing else of ours.
"""

from __future__ import annotations

import errno
import os
import re
import resource
import stat
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO

#: Default largest input file, as a share of the memory available when the audit starts.
DEFAULT_MAX_SHARE = 0.25
#: Floor of the size limit whatever the memory reading says (a reading can be wrong).
MIN_LIMIT = 64 * 1024 * 1024
#: Longest path we try to open; longer names are refused with a clear message
#: (POSIX systems refuse names over PATH_MAX = 4096 bytes anyway).
MAX_PATH_CHARS = 4096
#: Folders never walked: our own output, version control, environments.
SKIP_DIRS = frozenset(
    {"audit-report", ".git", ".hg", ".svn", ".venv", "venv", "node_modules", "__pycache__"}
)


class Refused(Exception):
    """A path the boundary will not open.

    Parameters
    ----------
    kind
        ``outside-project``, ``special-file``, ``too-large`` or ``unreadable``.
    path
        The path as it was written or found (not resolved), for the message.
    reason
        What is wrong, in plain words, without the path.
    """

    def __init__(self, kind: str, path: str | Path, reason: str) -> None:
        super().__init__(f"{display(path)}: {reason}")
        self.kind = kind
        self.path = str(path)
        self.reason = reason


def display(path: str | Path) -> str:
    """``path`` (or any text) as printable text: undecodable bytes become ``\\xNN``.

    File names may hold bytes that are not UTF-8 (Python keeps them as lone
    surrogates); they cannot be written to a UTF-8 report as they are.
    """
    text = os.fspath(path)
    try:
        text.encode("utf-8")
        return text
    except UnicodeEncodeError:
        pass
    try:
        return text.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    except UnicodeEncodeError:  # surrogates that did not come from a file name
        return text.encode("utf-8", "backslashreplace").decode("utf-8")


def available_memory() -> int | None:
    """Bytes of memory this process can still use, or ``None`` when nothing says.

    The smallest of: the system's available memory (``MemAvailable``), the room
    left under a cgroup v2/v1 memory limit, and the room left under the
    address-space limit (``ulimit -v``). Linux only; ``None`` elsewhere.
    """
    candidates: list[int] = []
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    candidates.append(int(line.split()[1]) * 1024)
                    break
    except (OSError, ValueError, IndexError):
        pass
    for limit_file, usage_file in (
        ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),
        ("/sys/fs/cgroup/memory/memory.limit_in_bytes",
         "/sys/fs/cgroup/memory/memory.usage_in_bytes"),
    ):
        try:
            limit_text = Path(limit_file).read_text().strip()
            if limit_text != "max" and int(limit_text) < 1 << 60:
                used = int(Path(usage_file).read_text().strip())
                candidates.append(max(int(limit_text) - used, 0))
        except (OSError, ValueError):
            continue
    try:
        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY:
            used = 0
            with open("/proc/self/status", encoding="ascii") as fh:
                for line in fh:
                    if line.startswith("VmSize:"):
                        used = int(line.split()[1]) * 1024
                        break
            candidates.append(max(soft - used, 0))
    except (OSError, ValueError, IndexError):
        pass
    return min(candidates) if candidates else None


def default_max_bytes(share: float = DEFAULT_MAX_SHARE) -> int | None:
    """The size limit for one input file: ``share`` of the available memory.

    ``None`` (no limit) when the available memory cannot be read.
    """
    avail = available_memory()
    if avail is None:
        return None
    return max(int(avail * share), MIN_LIMIT)


def _mb(n: int) -> str:
    return f"{n / 1e6:,.0f} MB" if n >= 10e6 else f"{n / 1e6:.1f} MB"


def _kind_of(mode: int) -> str:
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISDIR(mode):
        return "a folder"
    return "not a regular file"


def _os_reason(exc: OSError) -> tuple[str, str]:
    """(problem kind, reason) for an error raised while resolving or opening."""
    if exc.errno == errno.ELOOP:
        return "special-file", "a link loop (links that point at each other); not followed"
    if exc.errno == errno.ENAMETOOLONG:
        return "unreadable", "the path is too long to open"
    if exc.errno == errno.ENOENT:
        return "unreadable", "cannot read the file: no such file or folder"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return "unreadable", "permission denied"
    return "unreadable", f"cannot be opened ({exc.strerror or exc})"


@dataclass
class WalkResult:
    """What :meth:`Boundary.walk` found.

    ``files`` are regular files and ``.zarr`` folders under the root, as paths
    under the root (links that stay inside keep their own name); ``refused`` the
    paths not followed or not to be opened, with the reason.
    """

    files: list[Path] = field(default_factory=list)
    refused: list[Refused] = field(default_factory=list)


@dataclass
class Boundary:
    """The folders the audit may read from, and the size limit of one file.

    Parameters
    ----------
    root
        The project root. ``None`` makes an unconfined boundary (for library use
        on one's own files): the type and size checks still apply.
    extra
        Folders the user allowed on the command line for a trusted project.
    max_bytes
        Largest file read, in bytes; ``None`` for no limit.
    """

    root: Path | None
    extra: tuple[Path, ...] = ()
    max_bytes: int | None = None
    _walked: WalkResult | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        if self.root is not None:
            self.root = Path(os.path.realpath(self.root))
        self.extra = tuple(Path(os.path.realpath(p)) for p in self.extra)

    @classmethod
    def unconfined(cls, max_bytes: int | None = None) -> Boundary:
        """A boundary without a root: type and size checks only."""
        return cls(root=None, max_bytes=max_bytes)

    # ------------------------------------------------------------------ paths
    @property
    def roots(self) -> tuple[Path, ...]:
        """The root and every widened folder."""
        return ((self.root,) if self.root is not None else ()) + self.extra

    def contains(self, resolved: Path) -> bool:
        """Whether a resolved path lies under the root or a widened folder."""
        if self.root is None:
            return True
        return any(resolved == r or resolved.is_relative_to(r) for r in self.roots)

    def resolve(self, path: str | Path) -> Path:
        """The real path of ``path``, refused when it leaves the boundary.

        Raises
        ------
        Refused
            ``outside-project`` when the path (after links) is outside every root,
            ``special-file`` for a link loop, ``unreadable`` for names too long
            or paths that do not exist.
        """
        text = os.fspath(path)
        if len(text) > MAX_PATH_CHARS or any(len(p) > 255 for p in Path(text).parts):
            raise Refused("unreadable", _short(text), "the path is too long to open")
        if "\x00" in text:
            raise Refused("unreadable", text, "the path contains a NUL character")
        try:
            real = Path(os.path.realpath(text, strict=True))
        except OSError as exc:
            kind, reason = _os_reason(exc)
            raise Refused(kind, text, reason) from None
        except (ValueError, RuntimeError) as exc:
            raise Refused("unreadable", text, f"cannot be resolved ({exc})") from None
        if not self.contains(real):
            # The resolved target is not named: it is a place on the auditing
            # machine, and reports are often published.
            raise Refused("outside-project", text, "leads outside the project; it was not read")
        return real

    def admit(self, path: str | Path, *, folder: bool = False, size: bool = True) -> Path:
        """Check ``path`` before it is read; return its real path.

        ``folder=True`` accepts a folder (a Zarr store) instead of a regular file;
        ``size=False`` skips the size limit.

        Raises
        ------
        Refused
            Outside the boundary, not a regular file (or folder), or too large.
        """
        real = self.resolve(path)
        try:
            st = os.stat(real)
        except OSError as exc:
            kind, reason = _os_reason(exc)
            raise Refused(kind, path, reason) from None
        if folder and stat.S_ISDIR(st.st_mode):
            return real
        if not stat.S_ISREG(st.st_mode):
            raise Refused("special-file", path, f"is {_kind_of(st.st_mode)}; it was not opened")
        if size:
            self._check_size(path, st)
        return real

    def _check_size(self, path: str | Path, st: os.stat_result) -> None:
        if self.max_bytes is None or st.st_size <= self.max_bytes:
            return
        on_disk = getattr(st, "st_blocks", None)
        sparse = ""
        if on_disk is not None and on_disk * 512 < st.st_size // 2:
            sparse = f", of which only {_mb(on_disk * 512)} are on disk (a sparse file)"
        raise Refused(
            "too-large", path,
            f"is {_mb(st.st_size)}{sparse}, more than the limit of {_mb(self.max_bytes)} "
            "for one input file (a share of the memory available); it was not read",
        )

    # ------------------------------------------------------------------ reading
    def open(self, path: str | Path, *, check_size: bool = True) -> BinaryIO:
        """Open a regular file inside the boundary for binary reading.

        The file is opened non-blocking (so a FIFO put in its place cannot block)
        and checked again on the descriptor. ``check_size=False`` is for callers
        that read only a bounded head of the file.

        Raises
        ------
        Refused
            See :meth:`admit`.
        """
        real = self.admit(path, size=check_size)
        flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
        try:
            fd = os.open(real, flags | getattr(os, "O_CLOEXEC", 0))
        except OSError as exc:
            kind, reason = _os_reason(exc)
            raise Refused(kind, path, reason) from None
        try:
            st = os.fstat(fd)
            if not stat.S_ISREG(st.st_mode):
                raise Refused("special-file", path,
                              f"is {_kind_of(st.st_mode)}; it was not read")
            if check_size:
                self._check_size(path, st)
            opened = _descriptor_path(fd)
            if opened is not None and not self.contains(opened):
                raise Refused("outside-project", path,
                              "was swapped for a link leading outside the project; not read")
            if hasattr(os, "set_blocking"):
                os.set_blocking(fd, True)
            return os.fdopen(fd, "rb")
        except BaseException:
            os.close(fd)
            raise

    def read_bytes(self, path: str | Path, limit: int | None = None) -> bytes:
        """The bytes of a file (at most ``limit`` bytes when given)."""
        with self.open(path) as fh:
            return fh.read() if limit is None else fh.read(limit)

    def read_text(self, path: str | Path, errors: str = "strict") -> str:
        """A file decoded as UTF-8 (a leading byte-order mark is dropped).

        Raises
        ------
        Refused
            See :meth:`admit`.
        UnicodeDecodeError
            When ``errors="strict"`` and the file is not UTF-8.
        """
        return self.read_bytes(path).decode("utf-8-sig", errors)

    def admit_tree(self, folder: str | Path) -> Path:
        """Check a folder that is read as a whole (a Zarr store) before opening it.

        Every entry must be a regular file or folder inside the boundary, and
        their total size within the limit.

        Raises
        ------
        Refused
            For the first entry that breaks a rule.
        """
        real = self.admit(folder, folder=True)
        if not real.is_dir():
            return real
        total = 0
        for dirpath, dirnames, filenames in os.walk(real, followlinks=False):
            for name in [*dirnames, *filenames]:
                entry = Path(dirpath) / name
                shown = Path(folder) / entry.relative_to(real)
                if entry.is_symlink():
                    try:
                        self.resolve(entry)  # refuses links that lead out or loop
                    except Refused as exc:
                        inner = entry.relative_to(real).as_posix()
                        raise Refused(exc.kind, folder,
                                      f"holds {display(inner)}, which {exc.reason}") from None
                    target = Path(os.path.realpath(entry))
                    if target.is_dir():
                        raise Refused("special-file", shown,
                                      "is a link to a folder inside a store; not followed")
                st = os.stat(entry) if name in filenames else None
                if st is not None:
                    if not stat.S_ISREG(st.st_mode):
                        raise Refused("special-file", shown,
                                      f"is {_kind_of(st.st_mode)}; the store was not opened")
                    total += st.st_size
        if self.max_bytes is not None and total > self.max_bytes:
            raise Refused(
                "too-large", folder,
                f"holds {_mb(total)}, more than the limit of {_mb(self.max_bytes)} "
                "for one input; it was not read",
            )
        return real

    # ------------------------------------------------------------------ finding files
    def walk(self, skip: Iterable[str] = SKIP_DIRS) -> WalkResult:
        """Every file under the root that discovery may look at (computed once).

        Hidden entries and ``skip`` folders are passed over. Links that stay
        inside are followed once (a folder reached twice is not walked again);
        links that lead out, link loops, FIFOs, sockets and devices are refused.
        ``.zarr`` folders are listed as one entry.
        """
        if self._walked is not None:
            return self._walked
        out = WalkResult()
        if self.root is None:
            self._walked = out
            return out
        seen_dirs: set[Path] = set()
        seen_files: set[Path] = set()
        self._walk_dir(self.root, self.root, (self.root,), frozenset(skip), seen_dirs,
                       seen_files, out)
        self._walked = out
        return out

    def _walk_dir(self, shown: Path, real: Path, ancestors: tuple[Path, ...],
                  skip: frozenset[str], seen_dirs: set[Path], seen_files: set[Path],
                  out: WalkResult) -> None:
        seen_dirs.add(real)
        try:
            entries = sorted(os.scandir(real), key=lambda e: e.name)
        except OSError as exc:
            out.refused.append(Refused("unreadable", shown, _os_reason(exc)[1]))
            return
        for entry in entries:
            name = entry.name
            if name.startswith(".") or name in skip:
                continue
            path = shown / name
            try:
                is_link = entry.is_symlink()
                if is_link:
                    target = self.resolve(entry.path)
                else:
                    target = Path(entry.path)
                st = os.stat(target)
            except Refused as refusal:
                out.refused.append(Refused(refusal.kind, path, refusal.reason))
                continue
            except OSError as exc:
                kind, reason = _os_reason(exc)
                out.refused.append(Refused(kind, path, reason))
                continue
            if stat.S_ISDIR(st.st_mode):
                if name.lower().endswith(".zarr"):
                    out.files.append(path)
                    continue
                if target in ancestors:
                    out.refused.append(Refused(
                        "special-file", path,
                        "is a link back to a folder that contains it (a link loop); "
                        "not followed"))
                    continue
                if target in seen_dirs:
                    continue  # the same folder reached through a second name
                self._walk_dir(path, target, (*ancestors, target), skip, seen_dirs,
                               seen_files, out)
            elif stat.S_ISREG(st.st_mode):
                if target in seen_files:
                    continue
                seen_files.add(target)
                out.files.append(path)
            else:
                out.refused.append(Refused(
                    "special-file", path, f"is {_kind_of(st.st_mode)}; it was not opened"))

    def locate(self, written: str, base: Path) -> Path:
        """The path a configuration value ``written`` names, relative to ``base``.

        Only the text is checked here (links are resolved when the file is
        admitted): a path that lies outside the project as written, absolute or
        climbing out with ``..``, is refused before anything is listed or opened.

        Raises
        ------
        Refused
            ``outside-project`` (or ``unreadable`` for an over-long name).
        """
        if len(written) > MAX_PATH_CHARS:
            raise Refused("unreadable", _short(written), "the path is too long to open")
        joined = Path(os.path.normpath(os.path.join(os.path.realpath(base), written)))
        if not self.contains(joined):
            how = "is an absolute path outside the project" if os.path.isabs(written) else (
                "climbs out of the project with '..'")
            raise Refused("outside-project", written,
                          f"{how}; paths in the configuration must stay inside the project "
                          "(it was not read)")
        return joined

    def glob(self, pattern: str, base: Path) -> list[Path]:
        """Files matching the glob ``pattern`` (``*``, ``?``, ``[..]``, ``**``) from ``base``.

        Matching runs over :meth:`walk`'s listing, so a glob never lists a folder
        outside the project or follows a link out; a pattern that lies outside as
        written is refused (see :meth:`locate`). A pattern without wildcards is
        returned as the one path it names.

        Raises
        ------
        Refused
            ``outside-project`` for patterns outside the project.
        """
        joined = self.locate(pattern, base)
        if not _has_magic(pattern):
            return [joined]
        inside = next((r for r in self.roots if joined.is_relative_to(r)), None)
        if inside is None or inside != self.root:
            # A folder the user widened the boundary to: plain glob, then admit each.
            return sorted(Path(m) for m in _plain_glob(str(joined)))
        regex = _glob_regex(joined.relative_to(inside).as_posix())
        return [p for p in self.walk().files
                if regex.fullmatch(p.relative_to(inside).as_posix())]


def _plain_glob(pattern: str) -> list[str]:
    import glob as _glob

    return _glob.glob(pattern)


def _has_magic(pattern: str) -> bool:
    return any(ch in pattern for ch in "*?[")


def _glob_regex(pattern: str) -> re.Pattern[str]:
    """A regex for a ``/``-separated glob: ``*``, ``?`` and ``[...]`` stay within one
    name; ``**`` as a whole part spans any number of folders."""
    out: list[str] = []
    parts = pattern.split("/")
    for i, part in enumerate(parts):
        last = i == len(parts) - 1
        if part == "**":
            out.append(".*" if last else "(?:[^/]+/)*")
            continue
        j = 0
        while j < len(part):
            ch = part[j]
            if ch == "*":
                out.append("[^/]*")
            elif ch == "?":
                out.append("[^/]")
            elif ch == "[" and "]" in part[j + 2:]:
                end = part.index("]", j + 2)
                body = part[j + 1:end]
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append("[" + body.replace("\\", "\\\\") + "]")
                j = end
            else:
                out.append(re.escape(ch))
            j += 1
        if not last:
            out.append("/")
    return re.compile("".join(out))


def _descriptor_path(fd: int) -> Path | None:
    """The real path behind an open descriptor (Linux ``/proc``), else ``None``."""
    try:
        return Path(os.readlink(f"/proc/self/fd/{fd}"))
    except OSError:
        return None


def _short(text: str) -> str:
    return text if len(text) <= 120 else text[:80] + f"... ({len(text)} characters)"
