#!/usr/bin/env bash
# Submits a sharded loancycle run to Slurm: an array of N shard tasks, then the merge, which waits
# for every task to succeed (--dependency=afterok).
#
#   scripts/slurm/submit.sh SCENARIO N SHARD_DIR OUT [sbatch options...]
#
# LOANCYCLE, RUN_ARGS and MERGE_ARGS are passed on (see shard.sbatch and merge.sbatch). sbatch
# options after OUT (partition, account, time, --cpus-per-task) go to both jobs. Prints the two job
# ids.
set -euo pipefail
if [ $# -lt 4 ]; then
  echo "usage: $0 SCENARIO N SHARD_DIR OUT [sbatch options...]" >&2
  exit 2
fi
here="$(cd "$(dirname "$0")" && pwd)"
scenario="$(realpath "$1")"
shards="$2"
shard_dir="$(realpath -m "$3")"
out="$(realpath -m "$4")"
shift 4
mkdir -p "$shard_dir"
export SCENARIO="$scenario" SHARD_DIR="$shard_dir" OUT="$out"
array="$(sbatch --parsable --array="1-$shards" --export=ALL --output="$shard_dir/slurm-%A_%a.out" "$@" \
  "$here/shard.sbatch")"
array="${array%%;*}"
merge="$(sbatch --parsable --dependency="afterok:$array" --kill-on-invalid-dep=yes --export=ALL \
  --output="$shard_dir/slurm-merge-%j.out" "$@" "$here/merge.sbatch")"
echo "shards: job $array ($shards array tasks)"
echo "merge:  job ${merge%%;*} (after all shards succeed)"
