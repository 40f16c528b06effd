#!/usr/bin/env bash
# The engine against a vectorised NumPy version of the same model (scripts/numpy_model.py), as a user
# meets it: loancycle's served member-cycles (member_loans in summary.csv) over the wall time of
# `run --quiet` on all cores, start-up and writing included, against NumPy's simulation loop on one
# core. Both simulate benches/large.toml; their group repayment rates are printed so they can be
# checked to agree within standard errors (same law, different generators).
# Installs the pinned numpy and scipy into a private virtual environment; the tests never need Python.
set -euo pipefail
cd "$(dirname "$0")/.."
replications="${1:-4}"
venv="${TMPDIR:-/tmp}/loancycle-numpy-bench"
python3 -m venv "$venv"
"$venv/bin/pip" install --quiet "numpy==2.3.5" "scipy==1.17.1"
OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 taskset -c 0 \
  "$venv/bin/python" scripts/numpy_model.py "$replications" | tee "${TMPDIR:-/tmp}/numpy-bench.txt"
numpy_rate="$(grep '^numpy rate' "${TMPDIR:-/tmp}/numpy-bench.txt" | awk '{print $3}')"
cargo build --release --quiet
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
start="$(date +%s.%N)"
target/release/loancycle run benches/large.toml --out "$out/run" --quiet
end="$(date +%s.%N)"
python3 - "$out/run/summary.csv" "$start" "$end" "$numpy_rate" <<'PY'
import csv, sys
row = next(csv.DictReader(open(sys.argv[1])))
seconds = float(sys.argv[3]) - float(sys.argv[2])
loans = int(row["member_loans"])
rate = loans / seconds / 1e6
print(f"loancycle: {loans} served member-cycles in {seconds:.2f} s wall (run --quiet, all cores)")
print(f"loancycle rate: {rate:.2f} million member-cycles per second")
print(f"loancycle group repayment: {float(row['group_repayment_rate']):.5f} (se {float(row['group_repayment_se']):.5f})")
print(f"ratio loancycle / numpy: {rate / float(sys.argv[4]):.1f}")
PY
