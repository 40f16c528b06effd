#!/usr/bin/env bash
# Peak resident memory of `run --quiet` on a small scenario (benches/small.toml, or the scenario
# given as $1) at 1,000 and at 100,000 replications, beside the estimate `run` checks before it
# simulates (read back from a refused run with a tiny --max-memory). Peak memory is GNU time's
# "maximum resident set size" (getrusage's ru_maxrss).
set -euo pipefail
cd "$(dirname "$0")/.."
scenario="${1:-benches/small.toml}"
cargo build --release --quiet
bin=target/release/loancycle
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
for reps in 1000 100000; do
  estimate="$("$bin" run "$scenario" --out "$out/refused" --replications "$reps" --max-memory 0.000001 2>&1 \
    | sed -n 's/.*needs an estimated \([0-9.]*\) GiB.*/\1/p' || true)"
  start="$(date +%s.%N)"
  /usr/bin/time -f '%M' -o "$out/peak" "$bin" run "$scenario" --out "$out/run" --force --quiet --replications "$reps"
  end="$(date +%s.%N)"
  peak_kib="$(tail -n 1 "$out/peak")"
  awk -v r="$reps" -v p="$peak_kib" -v e="$estimate" -v s="$start" -v t="$end" \
    'BEGIN { printf "replications=%d: peak resident %.1f MiB, estimate %.1f MiB, %.1f s\n", r, p / 1024, e * 1024, t - s }'
done
