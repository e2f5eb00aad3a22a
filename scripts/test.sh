#!/usr/bin/env bash
# Run the whole test suite from a clean checkout: makes its own virtual
# environment, installs picker (non-editable) with its test needs, installs
# ngspice and chromium (Debian packages) when missing, checks ruff, ruff format and mypy,
# then runs pytest.
set -euo pipefail
cd "$(dirname "$0")/.."
VENV="${PICKER_VENV:-.venv-test}"
if ! command -v ngspice >/dev/null 2>&1; then
  if command -v apt-get >/dev/null 2>&1; then
    echo "test.sh: installing ngspice (Debian package) for the circuit cross-checks"
    SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
    $SUDO apt-get update -qq >/dev/null
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq ngspice >/dev/null
  else
    echo "test.sh: ngspice is missing and apt-get is not available; install ngspice first" >&2
    exit 1
  fi
fi
if ! command -v chromium >/dev/null 2>&1; then
  if command -v apt-get >/dev/null 2>&1; then
    echo "test.sh: installing chromium (Debian package) to render the HTML reports"
    SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
    $SUDO apt-get update -qq >/dev/null
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium >/dev/null
  else
    echo "test.sh: chromium is missing and apt-get is not available; install chromium first" >&2
    exit 1
  fi
fi
python3 -m venv "$VENV"
"$VENV/bin/python" -m pip install -q --upgrade pip
"$VENV/bin/python" -m pip install -q ".[test]"
# Lint, format and types first: a style or type fault fails CI as surely as a test.
"$VENV/bin/ruff" check picker tests scripts
"$VENV/bin/ruff" format --check picker tests scripts
"$VENV/bin/mypy"
# Run from a scratch folder so the tests import the installed package, not the source tree.
# The tests run on two processes, or one on a one-core machine (pytest-xdist;
# PICKER_TEST_WORKERS overrides: a container may report the host's cores, not its
# own, and each process holds a few hundred MB), a whole test file to each process
# at a time so a file's shared fixtures are computed once.
ROOT="$(pwd)"
CORES="$(nproc 2>/dev/null || echo 1)"
WORKERS="${PICKER_TEST_WORKERS:-$(( CORES < 2 ? CORES : 2 ))}"
cd "$(mktemp -d)"
"$ROOT/$VENV/bin/python" -m pytest "$ROOT/tests" -c "$ROOT/pyproject.toml" --rootdir "$ROOT" \
  -n "$WORKERS" --dist loadfile "$@"
