"""Every file the audit opens, recorded: a hostile project makes it read nothing outside
the project and the Python installation, and write nothing outside ``--out`` (issue 8).

The audit runs in a child process under an audit hook (``sys.addaudithook``, PEP
578), which sees every ``open`` of Python code and of the libraries it calls
through Python, every folder listing and every process started. The hostile
project asks for outside files every way it can: ``#include`` of ``/etc/passwd``,
``/proc/self/environ`` and a secret file beside the project, a folder link and a
file link leading out, configuration paths that are absolute or climb out with
``..``, and globs over ``/``. The secret file's text must appear in no report.

What the child may read besides the project: the Python installation (its prefix
and the folders on ``sys.path``), the tool's own package, rules and templates, the
machine facts the size limit is computed from (``/proc/meminfo``,
``/proc/self/status``, the cgroup memory files), the time-zone database, and
matplotlib's font cache (``MPLCONFIGDIR``, warmed beforehand so that the audited
run only reads it), and ``/dev/null``, which the standard library's ``platform``
opens when h5py, at import, asks it for the processor name (through ``uname -p``,
the one process the run may start). With dask installed (the ``scale`` extra), psutil
reads ``/proc/stat`` and the child's own ``/proc/<pid>/stat`` and ``/proc/self/cgroup``
when xarray looks for dask. The PDF is laid out in a second child that reads its job from
stdin and writes the PDF to stdout; it is not part of this run.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
CASES = REPO / "rules" / "sampling"
SECRET = "OUTSIDE-SECRET-7d1f0c"

CHILD = r"""
import json, os, sys
events = []
WATCHED = {"os.listdir", "os.scandir", "os.mkdir", "os.rename", "os.replace", "os.remove",
           "os.rmdir", "os.symlink", "os.link", "os.truncate", "shutil.rmtree",
           "shutil.copyfile", "subprocess.Popen", "os.posix_spawn", "os.exec", "os.system"}

def hook(event, args):
    if event == "open":
        path, mode, flags = args
        if isinstance(path, int):
            return
        events.append(["open", os.fsdecode(path), str(mode), int(flags or 0)])
    elif event in WATCHED:
        first = args[0]
        if event == "subprocess.Popen":
            first = args[1] if isinstance(args[1], (str, bytes)) else " ".join(
                os.fsdecode(a) for a in args[1])
        events.append([event, os.fsdecode(first) if isinstance(first, (str, bytes))
                       else str(first)])

sys.addaudithook(hook)
from auditor.cli import main
code = main(sys.argv[1:])
sys.stdout.flush()
sys.stderr.write("\n@@EVENTS@@" + json.dumps({"pid": os.getpid(), "events": events}) + "\n")
sys.exit(code)
"""


def _hostile(base: Path) -> Path:
    outside = base / "outside"
    (outside / "fits").mkdir(parents=True)
    (outside / "secret.stan").write_text(f"// {SECRET}\nreal leaked;\n")
    (outside / "secret.json").write_text(json.dumps({SECRET: 1}))
    for src in (CASES / "rhat" / "cases" / "good").glob("fit-*.csv"):
        text = src.read_text().replace("case_model", SECRET)
        (outside / "fits" / src.name).write_text(text)

    root = base / "project"
    (root / "fits").mkdir(parents=True)
    (root / "models").mkdir()
    # Divergent transitions, so that figures are drawn (matplotlib runs too).
    for src in (CASES / "divergences" / "cases" / "bad").glob("fit-*.csv"):
        shutil.copy(src, root / "fits" / src.name)
    (root / "models" / "case.stan").write_text(
        '#include "/etc/passwd"\n#include "/proc/self/environ"\n'
        f'#include "{outside / "secret.stan"}"\n#include "../../outside/secret.stan"\n'
        "parameters {\n  real alpha;\n  vector[3] beta;\n}\n"
        "model {\n  alpha ~ normal(0, 1);\n  beta ~ normal(0, 1);\n}\n")
    from arviz_base.datasets import LOCAL_DATASETS

    eight = LOCAL_DATASETS["centered_eight"].filename
    shutil.copy(eight, root / "schools.nc")
    shutil.copy(eight, outside / "elsewhere.nc")
    (root / "elsewhere.nc").symlink_to(outside / "elsewhere.nc")
    (root / "linked-folder").symlink_to(outside / "fits")
    (root / "fits" / "leak-1.csv").symlink_to(outside / "fits" / "fit-1.csv")
    (root / "data.json").symlink_to(outside / "secret.json")
    (root / "bayes-auditor.toml").write_text(
        '[[analysis]]\nname = "declared"\ndraws = ["fits/fit-*.csv"]\n'
        'model = "models/case.stan"\ndata = "data.json"\n'
        '[[analysis]]\nname = "absolute"\n'
        f'draws = ["{outside}/fits/*.csv", "/**/passwd", "/etc/*"]\n'
        f'model = "{outside / "secret.stan"}"\ndata = "/proc/self/environ"\n'
        '[[analysis]]\nname = "climbing"\ndraws = ["../outside/fits/*.csv"]\n'
        'model = "../outside/secret.stan"\n')
    return root


def _allowed_reads(root: Path, mplconfig: Path, pid: int) -> list[str]:
    installation = {sys.prefix, sys.base_prefix, sys.exec_prefix,
                    *(p for p in sys.path if p and os.path.isdir(p))}
    tool = [REPO / "auditor", REPO / "rules", REPO / "templates"]
    facts = ["/proc/meminfo", "/proc/self/status", "/sys/fs/cgroup/", "/usr/share/zoneinfo/",
             os.devnull,
             # With dask installed (the scale extra), xarray looks for it when it makes a
             # variable, and dask's distributed imports psutil, which reads the machine's boot
             # time and CPU times, the child's own start time and its control group.
             "/proc/stat", f"/proc/{pid}/stat", "/proc/self/cgroup"]
    return [os.path.realpath(p) for p in (root, mplconfig, *installation, *tool)] + facts


def _is_write(event: list) -> bool:
    mode, flags = event[2], event[3]
    return any(c in mode for c in "wax+") or bool(flags & (os.O_WRONLY | os.O_RDWR | os.O_CREAT))


def _under(path: str, prefixes: list[str]) -> bool:
    real = os.path.realpath(path)
    return any(real == p.rstrip("/") or real.startswith(p.rstrip("/") + "/") or
               (p.endswith("/") and path.startswith(p)) or path == p for p in prefixes)


@pytest.fixture(scope="module", params=["declared", "discovered"])
def recorded(tmp_path_factory, request):
    base = tmp_path_factory.mktemp("access")
    root = _hostile(base)
    if request.param == "discovered":
        # No configuration: discovery walks the folders and meets the links.
        (root / "bayes-auditor.toml").unlink()
    out = base / "reports"
    mplconfig = base / "mplconfig"
    mplconfig.mkdir()
    env = {**os.environ, "PYTHONPATH": str(REPO), "MPLCONFIGDIR": str(mplconfig)}
    # Warm matplotlib's font cache so the audited run only reads it.
    subprocess.run([sys.executable, "-c", "import matplotlib.font_manager"], env=env,
                   check=True, capture_output=True)
    proc = subprocess.run(
        [sys.executable, "-P", "-c", CHILD, "audit", str(root), "--out", str(out),
         "--report", "json", "--report", "html", "--report", "md", "--report", "sarif"],
        cwd=base, env=env, capture_output=True, text=True, timeout=300)
    assert "@@EVENTS@@" in proc.stderr, proc.stderr[-2000:]
    child = json.loads(proc.stderr.split("@@EVENTS@@")[1])
    return {"root": root, "out": out, "base": base, "events": child["events"], "proc": proc,
            "allowed": _allowed_reads(root, mplconfig, child["pid"]), "mode": request.param}


def test_the_audit_ran_and_found_the_requests(recorded):
    proc = recorded["proc"]
    assert proc.returncode == 1, proc.stderr[-2000:]
    report = json.loads((recorded["out"] / "audit.json").read_text())
    rules = [f["rule"] for a in report["analyses"] for f in a["findings"]]
    rules += [f["rule"] for f in report["project_findings"]]
    # Declared: 4 includes, the data link, 7 configuration values (each glob counted).
    # Discovered: 4 includes and 4 links (a folder, a chain, a netCDF file,
    # and the data file link: 8.
    want = 12 if recorded["mode"] == "declared" else 8
    assert rules.count("inputs.outside-project") == want
    # The netCDF file inside was read (through an open Python file object).
    if recorded["mode"] == "discovered":
        assert any(e[0] == "open" and e[1].endswith("schools.nc") for e in recorded["events"])
    assert any(e[0] == "open" and e[1].endswith("audit.html") for e in recorded["events"])


def test_nothing_outside_the_project_or_the_installation_is_read(recorded):
    reads = [e for e in recorded["events"] if e[0] == "open" and not _is_write(e)]
    assert reads
    outside = sorted({e[1] for e in reads if not _under(e[1], recorded["allowed"])})
    assert outside == []
    listed = sorted({e[1] for e in recorded["events"] if e[0] in ("os.listdir", "os.scandir")
                     and not _under(e[1], recorded["allowed"])})
    # Only the folders on sys.path are listed by Python's import machinery (-P keeps
    # the working folder off it); nothing else outside is listed.
    assert listed == []
    for forbidden in ("/etc/passwd", "/proc/self/environ", str(recorded["base"] / "outside")):
        assert not [e for e in reads if os.path.realpath(e[1]).startswith(
            os.path.realpath(forbidden))], forbidden


def test_nothing_outside_out_is_written(recorded):
    out = os.path.realpath(recorded["out"])
    writes = [e for e in recorded["events"] if (e[0] == "open" and _is_write(e)) or
              e[0] in ("os.mkdir", "os.rename", "os.replace", "os.remove", "os.rmdir",
                       "os.symlink", "os.link", "os.truncate", "shutil.rmtree")]
    assert writes
    # matplotlib makes sure its (existing) config folder exists: a no-op, allowed.
    mplconfig = os.path.realpath(recorded["base"] / "mplconfig")
    # /dev/null is opened read-write by the platform module (see above): not a file.
    outside = [e for e in writes if not _under(e[1], [out, os.devnull]) and
               not (e[0] == "os.mkdir" and os.path.realpath(e[1]) == mplconfig)]
    assert outside == []
    started = [e[1] for e in recorded["events"] if e[0] in ("subprocess.Popen",
                                                            "os.posix_spawn", "os.exec",
                                                            "os.system")]
    # Only `uname -p`, from the standard library's platform module (h5py asks it).
    assert set(started) <= {"uname -p"}


def test_no_report_contains_outside_text(recorded):
    for path in recorded["out"].iterdir():
        text = path.read_text(errors="replace")
        assert SECRET not in text, path.name
        assert "root:x:0:0" not in text and "PATH=/" not in text, path.name
