#!/usr/bin/env bash
# Throughput benchmark on benches/large.toml (or the scenario given as $1), on one thread and on all
# cores:
#   (a) bare draws: the random numbers the model needs (keyed ChaCha streams, uniform and normal
#       draws, no model logic; `loancycle bench-draws`), in slot-cycles per second;
#   (b) the engine: served member-cycles per second of the simulation (served members x counted
#       cycles x replications x arms over the simulation's wall time, as `run` prints it);
# then the ratio (b)/(a) and the scaling from 1 thread to all cores of both, and the rate a user
# meets: member_loans (summary.csv) over the wall time of the whole `run --quiet` on all cores,
# start-up and writing included.
set -euo pipefail
cd "$(dirname "$0")/.."
scenario="${1:-benches/large.toml}"
cargo build --release --quiet
bin=target/release/loancycle
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
cores="$(nproc)"
rate() { sed -n 's/.*(\([0-9.]*\) million per second.*/\1/p'; }
count() { sed -n 's/^[a-z ]*\([0-9][0-9]*\) .*/\1/p'; }
declare -A draws engine slots served
for threads in 1 "$cores"; do
  line="$("$bin" bench-draws "$scenario" --threads "$threads")"
  echo "threads=$threads: bare draws: $line"
  draws[$threads]="$(printf '%s\n' "$line" | rate)"
  slots[$threads]="$(printf '%s\n' "$line" | count)"
  line="$("$bin" run "$scenario" --out "$out" --force --threads "$threads" 2>&1 >/dev/null | grep '^simulated')"
  echo "threads=$threads: engine:     $line"
  engine[$threads]="$(printf '%s\n' "$line" | rate)"
  served[$threads]="$(printf '%s\n' "$line" | count)"
done
# The bare draws count every slot-cycle (a draw is made for each slot, served or not); the engine
# counts served member-cycles. The first ratio sets them side by side as printed; the second puts
# both on the same work, the scenario's slot-cycles, which makes it the bare draws' time over the
# engine's time for the same replications.
for threads in 1 "$cores"; do
  awk -v t="$threads" -v a="${draws[$threads]}" -v b="${engine[$threads]}" \
    -v slots="${slots[$threads]}" -v served="${served[$threads]}" \
    'BEGIN { printf "threads=%s: engine / bare draws = %.2f (served member-cycles against slot-cycles); %.2f on the same slot-cycles (time of the bare draws / time of the engine)\n", t, b / a, b * slots / served / a }'
done
awk -v c="$cores" -v a1="${draws[1]}" -v ac="${draws[$cores]}" -v b1="${engine[1]}" -v bc="${engine[$cores]}" \
  'BEGIN { printf "scaling 1 -> %s threads: bare draws %.2fx, engine %.2fx\n", c, ac / a1, bc / b1 }'
start="$(date +%s.%N)"
"$bin" run "$scenario" --out "$out" --force --quiet
end="$(date +%s.%N)"
loans="$(awk -F, 'NR == 1 { for (i = 1; i <= NF; i++) if ($i == "member_loans") c = i; next } { s += $c } END { printf "%d", s }' "$out/summary.csv")"
awk -v n="$loans" -v s="$start" -v e="$end" -v c="$cores" \
  'BEGIN { printf "user-facing: %d member loans in %.2f s of run --quiet on %s threads: %.1f million per second\n", n, e - s, c, n / (e - s) / 1e6 }'
