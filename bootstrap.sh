#!/usr/bin/env bash
# ringkit set-up and entry point.
#
#   ./bootstrap.sh demo [DIR]   set up, then run the embedded default study into DIR
#                               (default: ringkit-demo-output)
#   ./bootstrap.sh test [ARGS]  set up (with test extras and browser), then run the full test suite
#   ./bootstrap.sh setup        set up only
#   ./bootstrap.sh lab [ARGS]   set up, then open JupyterLab on 127.0.0.1 in notebooks/ with the
#                               project's kernel ("Python (ringkit)"); ARGS go to jupyter lab
#   ./bootstrap.sh app [ARGS]   set up, then serve the device explorer as a Voila app on
#                               127.0.0.1 (notebooks/explorer_app.ipynb); ARGS go to voila
#
# Idempotent: a second run reuses the virtual environment (.venv) and the cached kwant wheel.
# Environment overrides: RINGKIT_PYTHON (interpreter, default python3.11 or python3),
# RINGKIT_WHEELHOUSE (kwant wheel cache), RINGKIT_VENV (default ./.venv).
set -euo pipefail

HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cd "$HERE"
MODE="${1:-setup}"
shift || true

VENV="${RINGKIT_VENV:-$HERE/.venv}"
STAMP="$VENV/.ringkit-setup-ok"
KWANT_VERSION="1.5.0"

say() { printf '[ringkit setup] %s\n' "$*" >&2; }
die() { printf '\n[ringkit setup] ERROR: %s\n\n' "$*" >&2; exit 1; }
is_root() { [ "$(id -u)" = "0" ]; }

apt_install() {
    # apt_install PKG... : install Debian packages when root, otherwise print the command and stop.
    local missing=()
    for p in "$@"; do
        dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
    done
    [ "${#missing[@]}" -eq 0 ] && return 0
    if ! command -v dpkg-query >/dev/null 2>&1; then
        die "this set-up expects Debian/Ubuntu (dpkg not found); install ${missing[*]} by hand"
    fi
    if is_root; then
        say "installing Debian packages: ${missing[*]}"
        if ! { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}" >/dev/null; }; then
            die "apt-get could not install ${missing[*]} (no network to the Debian mirror?). Fix with: apt-get update && apt-get install -y ${missing[*]}"
        fi
    else
        die "missing Debian packages: ${missing[*]}. Run: sudo apt-get update && sudo apt-get install -y ${missing[*]}"
    fi
}

# --- 1. interpreter ------------------------------------------------------------------------
PY="${RINGKIT_PYTHON:-}"
if [ -z "$PY" ]; then
    if command -v python3.11 >/dev/null 2>&1; then PY=python3.11; else PY=python3; fi
fi
command -v "$PY" >/dev/null 2>&1 || die "no Python interpreter '$PY' found. Install Python 3.11: apt-get install -y python3 python3-venv python3-dev"
"$PY" -c 'import sys; sys.exit(0 if sys.version_info >= (3, 11) else 1)' \
    || die "Python >= 3.11 needed, '$PY' is $("$PY" -V 2>&1). Set RINGKIT_PYTHON to a 3.11 interpreter."
"$PY" -c 'import venv, ensurepip' 2>/dev/null \
    || die "the Python venv module is missing. Run: apt-get install -y python3-venv"
PYTAG="$("$PY" -c 'import sys; print(f"cp{sys.version_info[0]}{sys.version_info[1]}")')"

# --- 2. MUMPS (kwant's fast sparse solver) ----------------------------------------------------
apt_install libmumps-seq-dev
MUMPS_VERSION="$(dpkg-query -W -f='${Version}' libmumps-seq-dev)"

# --- 3. kwant wheel cache, keyed by Python tag and MUMPS version -------------------------------
WHEELHOUSE="${RINGKIT_WHEELHOUSE:-${XDG_CACHE_HOME:-$HOME/.cache}/ringkit/wheels/${PYTAG}-mumps-${MUMPS_VERSION}}"
mkdir -p "$WHEELHOUSE"
kwant_wheel() { ls "$WHEELHOUSE"/kwant-"$KWANT_VERSION"-"$PYTAG"-*.whl 2>/dev/null | head -n 1; }

if [ -z "$(kwant_wheel)" ]; then
    command -v gcc >/dev/null 2>&1 || apt_install build-essential
    "$PY" -c 'import sysconfig, os, sys; sys.exit(0 if os.path.exists(os.path.join(sysconfig.get_paths()["include"], "Python.h")) else 1)' \
        || apt_install python3-dev
    say "building the kwant $KWANT_VERSION wheel once (about 3-4 minutes) into $WHEELHOUSE"
    BUILD_DIR="$(mktemp -d "${TMPDIR:-/tmp}/ringkit-kwant-build.XXXXXX")"
    trap 'rm -rf "$BUILD_DIR"' EXIT
    "$PY" -m venv "$BUILD_DIR/venv"
    BPY="$BUILD_DIR/venv/bin/python"
    "$BPY" -m pip install -q --upgrade pip \
        || die "pip could not reach the package index (https://pypi.org). Check the network or a proxy (PIP_INDEX_URL), then re-run ./bootstrap.sh"
    "$BPY" -m pip install -q "numpy>=2" scipy cython tinyarray packaging setuptools wheel \
        || die "could not install kwant's build prerequisites from the package index; check the network and re-run"
    # The sdist's shipped C files do not compile against numpy 2: regenerate them with Cython.
    if ! "$BPY" -m pip wheel -q --no-deps --no-build-isolation \
            --config-settings="--build-option=--cython" -w "$BUILD_DIR/wheels" "kwant==$KWANT_VERSION" \
            >"$BUILD_DIR/build.log" 2>&1; then
        tail -n 30 "$BUILD_DIR/build.log" >&2
        die "building kwant failed (log above). Needs gcc, python3-dev and libmumps-seq-dev: apt-get install -y build-essential python3-dev libmumps-seq-dev"
    fi
    # Move into the cache only once complete, so a broken build is never mistaken for a good one.
    mv "$BUILD_DIR"/wheels/kwant-*.whl "$WHEELHOUSE"/
    say "cached $(basename "$(kwant_wheel)")"
fi

# --- 4. project virtual environment ------------------------------------------------------------
EXTRAS="test"
REQ_HASH="$(cat pyproject.toml "$(kwant_wheel)" 2>/dev/null | sha256sum | cut -c1-16)-$EXTRAS"
if [ -d "$VENV" ] && { [ ! -f "$STAMP" ] || [ "$(cat "$STAMP")" != "$REQ_HASH" ]; }; then
    if [ -f "$STAMP" ]; then
        say "pyproject.toml changed: updating the environment"
    else
        say "found an incomplete environment at $VENV: rebuilding it"
        rm -rf "$VENV"
    fi
fi
if [ ! -f "$STAMP" ] || [ "$(cat "$STAMP")" != "$REQ_HASH" ]; then
    rm -f "$STAMP"
    [ -x "$VENV/bin/python" ] || "$PY" -m venv "$VENV"
    VPY="$VENV/bin/python"
    "$VPY" -m pip install -q --upgrade pip \
        || die "pip could not reach the package index (https://pypi.org). Check the network, then re-run ./bootstrap.sh"
    say "installing ringkit (editable) with its test extras"
    "$VPY" -m pip install -q --find-links "$WHEELHOUSE" --only-binary kwant \
        -e ".[$EXTRAS]" \
        || die "installing ringkit's dependencies failed (see pip's message above); check the network and re-run ./bootstrap.sh"
    echo "$REQ_HASH" >"$STAMP"
fi
VPY="$VENV/bin/python"

# --- 5. solver check ------------------------------------------------------------------------------
SOLVER="$("$VPY" -c 'import kwant.solvers.default as d; print(d.smatrix.__self__.__class__.__module__)' 2>/dev/null || echo broken)"
case "$SOLVER" in
    *mumps*) say "kwant $KWANT_VERSION ready, default solver: MUMPS" ;;
    broken) rm -f "$STAMP"; die "kwant does not import in $VENV; delete $WHEELHOUSE and re-run ./bootstrap.sh" ;;
    *) printf '\n!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!\n' >&2
       printf '!! WARNING: kwant fell back to the slow scipy solver (%s).\n' "$SOLVER" >&2
       printf '!! Install libmumps-seq-dev, delete %s and re-run ./bootstrap.sh\n' "$WHEELHOUSE" >&2
       printf '!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!!\n\n' >&2 ;;
esac

# --- 6. what to run -------------------------------------------------------------------------------
case "$MODE" in
    setup) say "done. Activate with: source $VENV/bin/activate" ;;
    demo)
        OUT="${1:-ringkit-demo-output}"
        exec "$VENV/bin/ringkit" demo --out "$OUT"
        ;;
    test)
        # Browser tests use Debian's chromium (never a downloaded browser).
        if ! command -v chromium >/dev/null 2>&1; then
            if is_root; then apt_install chromium; else
                say "chromium not installed: browser tests will be skipped (sudo apt-get install -y chromium)"
            fi
        fi
        unset MPLBACKEND
        exec "$VPY" -m pytest "$@"
        ;;
    lab)
        # The project's kernel: this venv's Python, registered inside the venv only.
        "$VPY" -m ipykernel install --sys-prefix --name ringkit --display-name "Python (ringkit)" \
            >/dev/null || die "could not register the ringkit Jupyter kernel"
        unset MPLBACKEND
        ROOT_ARGS=()
        if is_root; then ROOT_ARGS=(--allow-root); fi
        say "JupyterLab on 127.0.0.1 (Ctrl-C to stop)"
        exec "$VENV/bin/jupyter" lab --ServerApp.ip=127.0.0.1 \
            --ServerApp.root_dir="$HERE/notebooks" "${ROOT_ARGS[@]}" "$@"
        ;;
    app)
        unset MPLBACKEND
        ROOT_ARGS=()
        if is_root; then ROOT_ARGS=(--ServerApp.allow_root=True); fi
        say "device explorer (Voila) on 127.0.0.1 (Ctrl-C to stop)"
        # ringkit's template (share/jupyter/voila/templates/ringkit): no request leaves 127.0.0.1
        export JUPYTER_PATH="$HERE/share/jupyter${JUPYTER_PATH:+:$JUPYTER_PATH}"
        exec "$VENV/bin/voila" "$HERE/notebooks/explorer_app.ipynb" --Voila.ip=127.0.0.1 \
            --template=ringkit "${ROOT_ARGS[@]}" "$@"
        ;;
    *) die "unknown mode '$MODE' (use: setup, demo, test, lab, app)" ;;
esac
