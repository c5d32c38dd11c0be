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
pip_quiet() {
    # pip's own errors stay visible; only this machine's index-location notices are dropped.
    set +e
    .venv/bin/python -m pip -q --disable-pip-version-check "$@" 2>&1 | grep -v '^WARNING: Location'
    local status=${PIPESTATUS[0]}
    set -e
    return "$status"
}
pip_quiet install --upgrade pip || echo "note: pip could not be upgraded; going on with the one in .venv" >&2
# hatchling is the build backend; installed here so the wheel test can build without isolation.
pip_quiet install hatchling -e ".[${EXTRAS:-report,zarr}]" || {
    echo "installation into .venv failed (see pip's messages above)" >&2
    exit 1
}
