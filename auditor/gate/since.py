"""Which files changed since a git revision, found without running anything of the
project's.

``--since REF`` audits only the analyses whose inputs changed. Asking git for a
diff of the working tree can run commands the audited repository configures (clean
filters, external diff drivers, an fsmonitor hook), so the working tree is never
diffed by git: git only lists the files of ``REF`` with their blob ids
(``git ls-tree``, which runs no filters), and the working tree's files are hashed
here the way git hashes a blob (SHA-1 of ``"blob <size>\\0"`` and the bytes).
"""

from __future__ import annotations

import hashlib
import os
import subprocess
from pathlib import Path

#: Configuration that keeps git from starting helpers while it lists a tree.
_SAFE = ("-c", "core.fsmonitor=false", "-c", "core.untrackedCache=false",
         "-c", "protocol.allow=never")


class SinceError(Exception):
    """``--since`` cannot be used (not a git repository, unknown revision, no git)."""


def _git(root: Path, *args: str) -> bytes:
    env = {k: v for k, v in os.environ.items() if not k.startswith("GIT_")}
    env.update({"GIT_PAGER": "cat", "GIT_TERMINAL_PROMPT": "0", "GIT_CONFIG_NOSYSTEM": "1"})
    try:
        proc = subprocess.run(["git", *_SAFE, "-C", str(root), *args], capture_output=True,
                              env=env, check=False, timeout=60)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise SinceError(f"git could not be run ({exc})") from None
    if proc.returncode != 0:
        message = proc.stderr.decode("utf-8", "replace").strip().splitlines()
        raise SinceError(message[-1] if message else f"git {args[0]} failed")
    return proc.stdout


def blob_id(data: bytes) -> str:
    """The id git gives a file's content (SHA-1 of the blob header and bytes)."""
    return hashlib.sha1(b"blob %d\x00" % len(data) + data, usedforsecurity=False).hexdigest()


def files_at(root: Path, ref: str) -> tuple[Path, dict[Path, str]]:
    """(repository top folder, {absolute path: blob id}) of the files of ``ref``."""
    top = Path(_git(root, "rev-parse", "--show-toplevel").decode().strip())
    listing = _git(top, "ls-tree", "-r", "-z", "--full-tree", ref)
    out: dict[Path, str] = {}
    for entry in listing.split(b"\x00"):
        if not entry:
            continue
        meta, _, name = entry.partition(b"\t")
        parts = meta.split()
        if len(parts) == 3 and parts[1] == b"blob":
            out[top / os.fsdecode(name)] = parts[2].decode()
    return top, out


def changed(paths: set[Path], at_ref: dict[Path, str], read: object) -> set[Path]:
    """Those of ``paths`` whose content differs from ``ref`` (or that ``ref`` lacks).

    ``read`` reads a file's bytes (the project boundary's ``read_bytes``); a folder
    (a Zarr store) counts as changed when any file inside it did.
    """
    out = set()
    for path in paths:
        real = Path(os.path.abspath(path))
        if real.is_dir():
            inside = [p for p in real.rglob("*") if p.is_file()]
            if any(_differs(p, at_ref, read) for p in inside) or not inside:
                out.add(path)
        elif _differs(real, at_ref, read):
            out.add(path)
    return out


def _differs(path: Path, at_ref: dict[Path, str], read: object) -> bool:
    old = at_ref.get(path)
    if old is None:
        return True
    try:
        return blob_id(read(path)) != old  # type: ignore[operator]
    except Exception:  # noqa: BLE001 - unreadable now: treat as changed, the audit says why
        return True
