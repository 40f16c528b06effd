#!/usr/bin/env bash
# Throughput benchmark: served member-cycles per second on benches/large.toml (or the scenario given
# as $1), on one thread and on all cores. Member-cycles = served members x counted cycles x
# replications x arms; the binary measures the simulation's wall time and prints the rate.
set -euo pipefail
cd "$(dirname "$0")/.."
scenario="${1:-benches/large.toml}"
cargo build --release --quiet
bin=target/release/loancycle
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
cores="$(nproc)"
for threads in 1 "$cores"; do
  line="$("$bin" run "$scenario" --out "$out" --force --threads "$threads" 2>&1 >/dev/null | grep '^simulated')"
  echo "threads=$threads: $line"
done
