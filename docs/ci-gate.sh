#!/bin/sh
# Plain shell entry point for any CI system: install stridewise in a fresh venv, sweep a suite,
# gate the run against a stored baseline. Exit status: 0 pass, 1 regression, 2 unusable input.
#
#   docs/ci-gate.sh SUITE BASELINE
#
# SUITE     a suite file (or the built-in name 'smoke')
# BASELINE  a baseline file, or a directory of <machine-id>.json baselines
# Settings from the environment:
#   GATE_THRESHOLD  slowdown that counts, as a fraction (default 0.10)
#   GATE_NORMALISE  set to 1 on a runner shared with other jobs: gate relative to the same run's
#                   triad bandwidth (default: off)
#   GATE_WORK       directory for the venv, the run directory and gate.md (default: ci-gate)
#   GATE_PYTHON     a Python that already has stridewise installed (default: make a fresh venv);
#                   run with -P, so the installed package is used, never the current directory
set -eu
if [ "$#" -ne 2 ]; then
    echo "usage: $0 SUITE BASELINE" >&2
    exit 2
fi
suite=$1
baseline=$2
work=${GATE_WORK:-ci-gate}
threshold=${GATE_THRESHOLD:-0.10}
here=$(cd "$(dirname "$0")/.." && pwd)
mkdir -p "$work"
python=${GATE_PYTHON:-}
if [ -z "$python" ]; then
    python3 -m venv "$work/venv"
    "$work/venv/bin/python" -m pip install --quiet "$here"
    python="$work/venv/bin/python"
fi
rm -rf "$work/run"
"$python" -P -m harness sweep "$suite" --quiet --out "$work/run"
set -- "$baseline" "$work/run" --threshold "$threshold" --out "$work/gate.md"
if [ "${GATE_NORMALISE:-0}" = 1 ]; then
    set -- "$@" --normalise
fi
status=0
"$python" -P -m harness gate "$@" || status=$?
cat "$work/gate.md"
exit "$status"
