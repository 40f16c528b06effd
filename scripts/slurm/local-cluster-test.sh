#!/usr/bin/env bash
# Proves the Slurm scripts on a real Slurm: installs Debian's slurm and munge when missing, starts a
# one-node cluster on this machine (munged, slurmctld and slurmd as foreground daemons, no cgroups,
# all state under a temporary directory), submits a small sharded run with submit.sh (a 4-task
# array, then the merge that depends on it), waits, and compares the merged files byte for byte
# with a local unsharded run. Stops only the daemons it started, by process id.
#
# Prints "SKIPPED: <reason>" and exits 0 only when Slurm cannot be installed (not root and no
# sudo, no package source). LOANCYCLE names the binary (default: target/release/loancycle, built
# if missing).
set -euo pipefail
cd "$(dirname "$0")/../.."
repo="$(pwd)"

if [ "$(id -u)" != 0 ]; then
  if command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
    exec sudo -n --preserve-env=LOANCYCLE,PATH "$0" "$@"
  fi
  echo "SKIPPED: starting Slurm needs root, and sudo is not available without a password"
  exit 0
fi

missing=()
for c in slurmctld slurmd sbatch squeue sinfo munged; do
  command -v "$c" >/dev/null 2>&1 || missing+=("$c")
done
if [ ${#missing[@]} -gt 0 ]; then
  if ! command -v apt-get >/dev/null 2>&1; then
    echo "SKIPPED: ${missing[*]} missing and no apt-get to install them"
    exit 0
  fi
  packages=(slurmctld slurmd slurm-client munge)
  if ! DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends "${packages[@]}" >/dev/null 2>&1; then
    apt-get update >/dev/null 2>&1 || true
    if ! log="$(DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends "${packages[@]}" 2>&1)"; then
      echo "SKIPPED: cannot install ${packages[*]}: $(printf '%s\n' "$log" | tail -n 1)"
      exit 0
    fi
  fi
fi

bin="${LOANCYCLE:-target/release/loancycle}"
if [ -z "${LOANCYCLE:-}" ] && [ ! -x "$bin" ]; then
  cargo build --release --locked --quiet
fi
bin="$(realpath "$bin")"

state="$(mktemp -d)"
chmod 755 "$state"
pids=()
cleanup() {
  local status=$?
  local pid _
  for pid in "${pids[@]}"; do
    kill "$pid" 2>/dev/null || true
  done
  # A daemon gets 5 s to stop on SIGTERM, then is killed.
  for _ in $(seq 50); do
    alive=
    for pid in "${pids[@]}"; do kill -0 "$pid" 2>/dev/null && alive=1; done
    [ -z "$alive" ] && break
    sleep 0.1
  done
  for pid in "${pids[@]}"; do
    kill -9 "$pid" 2>/dev/null || true
    wait "$pid" 2>/dev/null || true
  done
  if [ "$status" != 0 ]; then
    for log in "$state"/*.log "$state"/munge/*.log "$state"/shards/slurm-*.out; do
      [ -e "$log" ] && { echo "--- $log"; tail -n 20 "$log"; }
    done
  fi
  rm -rf "$state"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# munge: its own socket, run as the munge user. The package's key is used when present.
mkdir -p "$state/munge"
key=/etc/munge/munge.key
if [ ! -r "$key" ]; then
  key="$state/munge/munge.key"
  if command -v mungekey >/dev/null 2>&1; then
    mungekey --create --keyfile="$key"
  else
    dd if=/dev/urandom of="$key" bs=1 count=1024 status=none
  fi
fi
chown -R munge:munge "$state/munge"
chmod 755 "$state/munge"
[ "$key" = /etc/munge/munge.key ] || chmod 400 "$key"
setpriv --reuid munge --regid munge --init-groups /usr/sbin/munged --foreground \
  --socket="$state/munge/munge.sock" --key-file="$key" --pid-file="$state/munge/munged.pid" \
  --log-file="$state/munge/munged.log" --seed-file="$state/munge/munged.seed" >/dev/null 2>&1 &
pids+=($!)

# Two free ports, so a cluster another job started on this machine is left alone.
free_port() {
  local p
  for p in $(shuf -i 20000-60000 -n 50); do
    if ! (exec 3<>"/dev/tcp/127.0.0.1/$p") 2>/dev/null; then
      echo "$p"
      return
    fi
  done
  echo "no free port found" >&2
  return 1
}
ctld_port="$(free_port)"
slurmd_port="$(free_port)"
while [ "$slurmd_port" = "$ctld_port" ]; do slurmd_port="$(free_port)"; done

node="$(hostname -s)"
mkdir -p "$state/ctld" "$state/spool"
export SLURM_CONF="$state/slurm.conf"
cat >"$SLURM_CONF" <<CONF
ClusterName=loancycle-test
SlurmctldHost=$node(127.0.0.1)
SlurmUser=root
AuthType=auth/munge
AuthInfo=socket=$state/munge/munge.sock
CredType=cred/munge
StateSaveLocation=$state/ctld
SlurmdSpoolDir=$state/spool
SlurmctldPidFile=$state/slurmctld.pid
SlurmdPidFile=$state/slurmd.pid
SlurmctldLogFile=$state/slurmctld.log
SlurmdLogFile=$state/slurmd.log
SlurmctldPort=$ctld_port
SlurmdPort=$slurmd_port
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
MpiDefault=none
ReturnToService=2
NodeName=$node NodeAddr=127.0.0.1 CPUs=$(nproc) State=UNKNOWN
PartitionName=local Nodes=$node Default=YES MaxTime=INFINITE State=UP
CONF

for _ in $(seq 50); do [ -S "$state/munge/munge.sock" ] && break; sleep 0.1; done
slurmctld -D -f "$SLURM_CONF" >/dev/null 2>&1 &
pids+=($!)
slurmd -D -f "$SLURM_CONF" >/dev/null 2>&1 &
pids+=($!)
ready=
for _ in $(seq 150); do
  if timeout 2 sinfo -h -o %T 2>/dev/null | grep -q '^idle'; then ready=1; break; fi
  for pid in "${pids[@]}"; do
    kill -0 "$pid" 2>/dev/null || { echo "a daemon stopped while the cluster was starting" >&2; exit 1; }
  done
  sleep 0.1
done
[ -n "$ready" ] || { echo "the one-node cluster did not become idle in 15 s" >&2; exit 1; }

# The run: the tiny test scenario at 8 replications, in 4 shards.
scenario="$repo/tests/data/cli/tiny.toml"
export LOANCYCLE="$bin" RUN_ARGS="--replications 8"
submitted="$(scripts/slurm/submit.sh "$scenario" 4 "$state/shards" "$state/merged")"
echo "$submitted"
merge_job="$(printf '%s\n' "$submitted" | awk '/^merge:/ {print $3}')"
array_job="$(printf '%s\n' "$submitted" | awk '/^shards:/ {print $3}')"
done_=
for _ in $(seq 900); do
  states="$(timeout 2 squeue -h -j "$array_job,$merge_job" -o %T 2>/dev/null || true)"
  if printf '%s\n' "$states" | grep -Eq 'FAILED|CANCELLED|TIMEOUT|NODE_FAIL|OUT_OF_MEMORY'; then
    echo "a job failed: $states" >&2
    exit 1
  fi
  if [ -e "$state/merged/summary.json" ] && ! printf '%s\n' "$states" | grep -Eq 'PENDING|RUNNING|COMPLETING|CONFIGURING'; then
    done_=1
    break
  fi
  sleep 0.1
done
[ -n "$done_" ] || { echo "the jobs did not finish in 90 s: $states" >&2; exit 1; }

"$bin" run "$scenario" --replications 8 --out "$state/local" --quiet
status=0
for f in "$state"/local/*; do
  name="$(basename "$f")"
  if cmp -s "$f" "$state/merged/$name"; then
    echo "identical: $name"
  else
    echo "DIFFERS: $name" >&2
    status=1
  fi
done
[ "$(ls "$state/local" | wc -l)" = "$(ls "$state/merged" | wc -l)" ] || { echo "different sets of files" >&2; status=1; }
[ "$status" = 0 ] && echo "slurm: 4 array tasks and the merge reproduce the local run byte for byte"
exit "$status"
