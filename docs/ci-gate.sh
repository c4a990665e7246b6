#!/bin/sh
# Plain shell entry point for any CI system: install stridewise in a fresh venv, then gate the
# change. Exit status: 0 pass, 1 regression, 2 unusable input.
#
#   docs/ci-gate.sh SUITE BASE_REV      side by side (recommended): the kernels of BASE_REV (e.g.
#                                       the merge base, origin/main) against this checkout's, in
#                                       one run, alternating round by round
#   docs/ci-gate.sh --stored SUITE BASELINE
#                                       against a stored baseline file or directory of them; a
#                                       drift of the machine between runs looks like a change
#
# SUITE is a suite file or a built-in name ('smoke'). Settings from the environment:
#   GATE_THRESHOLD  slowdown that counts, as a fraction (default 0.05 side by side, 0.10 stored)
#   GATE_NORMALISE  --stored only: set to 1 to gate relative to the same run's triad bandwidth
#   GATE_ROUNDS     side by side only: paired rounds per group (default 40)
#   GATE_WORK       directory for the venv, the run directory and gate.md (default: ci-gate)
#   GATE_PYTHON     a Python that already has stridewise installed (default: make a fresh venv);
#                   run with -P, so the installed package is used, never the current directory
set -eu
mode=versus
if [ "${1:-}" = "--stored" ]; then
    mode=stored
    shift
fi
if [ "$#" -ne 2 ]; then
    echo "usage: $0 SUITE BASE_REV  |  $0 --stored SUITE BASELINE" >&2
    exit 2
fi
suite=$1
against=$2
work=${GATE_WORK:-ci-gate}
here=$(cd "$(dirname "$0")/.." && pwd)
mkdir -p "$work"
python=${GATE_PYTHON:-}
if [ -z "$python" ]; then
    python3 -m venv "$work/venv"
    "$work/venv/bin/python" -m pip install --quiet "$here"
    python="$work/venv/bin/python"
fi
rm -rf "$work/run"
status=0
if [ "$mode" = versus ]; then
    "$python" -P -m harness versus "$against" --suite "$suite" --repo "$here" --out "$work/run" --quiet \
        --threshold "${GATE_THRESHOLD:-0.05}" --rounds "${GATE_ROUNDS:-40}" > "$work/gate.md" || status=$?
else
    "$python" -P -m harness sweep "$suite" --quiet --out "$work/run"
    set -- "$against" "$work/run" --threshold "${GATE_THRESHOLD:-0.10}" --out "$work/gate.md"
    if [ "${GATE_NORMALISE:-0}" = 1 ]; then
        set -- "$@" --normalise
    fi
    "$python" -P -m harness gate "$@" || status=$?
fi
cat "$work/gate.md" 2>/dev/null || true
exit "$status"
