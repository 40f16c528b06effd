#!/usr/bin/env bash
# Regenerates the scipy reference values copied into the analytic tests. Installs the pinned scipy
# into a private virtual environment first; the test suite itself never needs Python.
set -euo pipefail
cd "$(dirname "$0")/.."
venv="${TMPDIR:-/tmp}/loancycle-scipy-reference"
python3 -m venv "$venv"
"$venv/bin/pip" install --quiet "scipy==1.17.1" numpy
"$venv/bin/python" scripts/scipy_reference.py
