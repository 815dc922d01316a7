#!/usr/bin/env bash
# Set up simloop on a Debian machine, then run the demo or the test suite.
#
#   bash bootstrap.sh demo [ARGS...]   install, then: simloop demo --out demo-output ARGS...
#   bash bootstrap.sh test [ARGS...]   install, then: python -m pytest ARGS...
#
# Steps, each skipped when already done (a second run takes about a second):
#   1. Python >= 3.11: python3, or the interpreter named by $PYTHON.
#   2. The Debian packages listed in packaging/debian-packages.txt (the Dockerfile reads the same
#      file). As root the missing ones are installed with apt-get; otherwise the exact command to
#      run is printed and the script exits 1.
#   3. A virtual environment in .venv (re-created if broken; Debian's python3.X-venv is installed
#      or asked for when the interpreter cannot make one).
#   4. pip install -e ".[test]" into .venv, again only when pyproject.toml changed since the last
#      successful install (stamp: .venv/.simloop-setup-stamp).
# The script works from any directory: it runs in its own folder, the repository root, so
# relative paths in ARGS are taken from there.
# Exit codes: 2 usage error; 1 set-up failed; otherwise the exit code of the demo or of pytest.
set -euo pipefail

say() { printf 'simloop-setup: %s\n' "$*" >&2; }
die() { printf 'simloop-setup: error: %s\n' "$*" >&2; exit 1; }
usage() {
    printf 'usage: bash bootstrap.sh {demo|test} [ARGS...]  (demo: run simloop on the built-in demo; test: run the test suite)\n' >&2
    exit 2
}

MODE="${1:-}"
case "$MODE" in
    demo | test) shift ;;
    *) usage ;;
esac

cd -- "$(dirname -- "${BASH_SOURCE[0]}")"
ROOT="$(pwd -P)"
VENV=.venv
STAMP="$VENV/.simloop-setup-stamp"
PACKAGE_LIST=packaging/debian-packages.txt
TEST_PACKAGE_LIST=packaging/debian-test-packages.txt
APT_UPDATED=0

# Install Debian packages as root, or print the command for a non-root user and stop.
apt_install() {
    if [ "$(id -u)" != 0 ]; then
        say "missing Debian packages: $*. Install them (needs root), then run this script again:"
        printf '  sudo apt-get install -y %s\n' "$*" >&2
        exit 1
    fi
    if [ "$APT_UPDATED" = 0 ]; then
        say "apt-get update"
        DEBIAN_FRONTEND=noninteractive apt-get update
        APT_UPDATED=1
    fi
    say "apt-get install $*"
    DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends "$@"
}

is_installed() {
    [ "$(dpkg-query -W -f='${Status}' "$1" 2>/dev/null || true)" = "install ok installed" ]
}

# 1. Python ---------------------------------------------------------------------------------
PY="${PYTHON:-python3}"
command -v "$PY" >/dev/null 2>&1 ||
    die "Python interpreter '$PY' not found: install Python 3.11 or newer, or set PYTHON=/path/to/python3.11"
PYVER="$("$PY" -c 'import sys; print("%d.%d" % sys.version_info[:2])' 2>/dev/null)" ||
    die "'$PY' did not run: set PYTHON to a working Python 3.11 or newer"
case "$PYVER" in
    3.[0-9] | 3.10 | [0-2].*) die "Python 3.11 or newer needed, '$PY' is $PYVER: install it, or set PYTHON=/path/to/python3.11" ;;
    [0-9]*.[0-9]*) ;;
    *) die "could not read the version of '$PY' (got '$PYVER'): set PYTHON to a Python 3.11 or newer" ;;
esac

# 2. Debian packages ------------------------------------------------------------------------
PACKAGES=()
read_list() {  # append the package names of list file $1 ('#' comments) to PACKAGES
    [ -r "$1" ] || die "$ROOT/$1 is missing: restore it from the repository"
    while IFS= read -r line || [ -n "$line" ]; do
        line="${line%%#*}"
        read -r -a words <<<"$line" || true
        PACKAGES+=("${words[@]}")
    done <"$1"
}
read_list "$PACKAGE_LIST"
# The test suite also renders HTML reports in a headless browser: test mode only.
if [ "$MODE" = test ]; then read_list "$TEST_PACKAGE_LIST"; fi

if command -v dpkg-query >/dev/null 2>&1; then
    MISSING=()
    for pkg in "${PACKAGES[@]}"; do
        is_installed "$pkg" || MISSING+=("$pkg")
    done
    if [ "${#MISSING[@]}" -gt 0 ]; then
        apt_install "${MISSING[@]}"
        for pkg in "${MISSING[@]}"; do
            is_installed "$pkg" || die "Debian package $pkg is still not installed after apt-get install: install it by hand"
        done
    fi
else
    say "no dpkg-query (not Debian?): make sure these are installed: ${PACKAGES[*]}"
fi

# 3. Virtual environment --------------------------------------------------------------------
venv_ok() {
    [ -f "$VENV/pyvenv.cfg" ] && [ -x "$VENV/bin/python" ] &&
        "$VENV/bin/python" -c 'import sys, pip; sys.exit(sys.version_info < (3, 11))' >/dev/null 2>&1
}

if ! venv_ok; then
    if [ -e "$VENV" ]; then say "$VENV is unusable; re-creating it"; fi
    # Debian's Python makes virtual environments only with python3.X-venv (it holds ensurepip).
    if ! "$PY" -c 'import ensurepip, venv' >/dev/null 2>&1; then
        apt_install "python$PYVER-venv"
        "$PY" -c 'import ensurepip, venv' >/dev/null 2>&1 ||
            die "'$PY' still cannot create virtual environments (no ensurepip): use a Python with the venv module, e.g. PYTHON=/usr/bin/python3"
    fi
    say "creating $VENV with $PY (Python $PYVER)"
    rm -rf -- "$VENV"
    if ! "$PY" -m venv "$VENV"; then
        rm -rf -- "$VENV"
        die "'$PY -m venv $VENV' failed (see above): on Debian install python$PYVER-venv, or set PYTHON to another Python 3.11+"
    fi
    "$VENV/bin/python" -m pip install --quiet --upgrade pip
fi

# 4. simloop itself -------------------------------------------------------------------------
WANT="$(sha256sum "$ROOT/pyproject.toml")"
if [ "$(cat "$STAMP" 2>/dev/null || true)" != "$WANT" ]; then
    say "pip install -e \".[test]\" (first run: a few minutes)"
    rm -f -- "$STAMP"
    "$VENV/bin/python" -m pip install --quiet -e ".[test]"
    printf '%s\n' "$WANT" >"$STAMP"
else
    say "$VENV is up to date with pyproject.toml"
fi

# 5. Run ------------------------------------------------------------------------------------
export NGSPICE_LIBRARY_PATH="${NGSPICE_LIBRARY_PATH:-libngspice.so.0}"
case "$MODE" in
    demo)
        say "running: simloop demo --out demo-output $*"
        exec "$VENV/bin/simloop" demo --out demo-output "$@"
        ;;
    test)
        say "running: python -m pytest $*"
        exec "$VENV/bin/python" -m pytest "$@"
        ;;
esac
