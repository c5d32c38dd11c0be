# Sourced by .ci/demo and .ci/test: make .venv (Python >= 3.12) and install the project into it.
# Safe to run again: an existing .venv is reused and only what is missing is installed.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."

pick_python() {
    # .python-version says 3.12; pyenv honours it through `python`. Elsewhere try the
    # versioned names, then any python3 that is new enough.
    for cand in python python3.12 python3.13 python3; do
        if command -v "$cand" >/dev/null 2>&1 &&
           "$cand" -c 'import sys; sys.exit(sys.version_info < (3, 12))' 2>/dev/null; then
            echo "$cand"
            return 0
        fi
    done
    echo "bayes-auditor needs Python 3.12 or newer; none was found on PATH" >&2
    return 1
}

if [ ! -x .venv/bin/python ] || ! .venv/bin/python -c 'import sys; sys.exit(sys.version_info < (3, 12))'; then
    rm -rf .venv
    "$(pick_python)" -m venv .venv
fi
.venv/bin/python -m pip install -q --disable-pip-version-check --upgrade pip 2>&1 | grep -v '^WARNING: Location' || true
# hatchling is the build backend; installed here so the wheel test can build without isolation.
.venv/bin/python -m pip install -q --disable-pip-version-check hatchling -e ".[${EXTRAS:-report,zarr}]" \
    2>&1 | grep -v '^WARNING: Location' || true
.venv/bin/python -c 'import auditor, arviz_stats, xarray' || {
    echo "installation into .venv failed" >&2
    exit 1
}
