#!/usr/bin/env bash
# Slurm test: brings up a one-node Slurm cluster from Debian packages
# (slurm-wlm, munge), submits cluster/slurm/lapse-array.sbatch as a job array
# over partitioned demo inputs (one array task per file, threads from the
# allocation), waits, and compares with the single-process CLI run on the
# same partitions, byte for byte after sorting by obs_id.
#
# Needs root (installs packages, starts munged/slurmctld/slurmd); stops the
# daemons it started. Run by tests/run-all when it runs as root (as CI does)
# unless LAPSE_SLURM_TEST=0; see README "Running at scale". Alone:
#   tests/scale/slurm/test.sh        (after tests/scale/run built lapse and the venv)
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")/../../.." && pwd)"
cd "$here"
cache="${LAPSE_CACHE:-$HOME/.cache/lapse}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$cache/target}"
lapse="$CARGO_TARGET_DIR/release/lapse"
py="$cache/venv-scale/bin/python"
[ -x "$lapse" ] && [ -x "$py" ] || { echo "slurm test: run tests/scale/run first (needs $lapse and $py)" >&2; exit 2; }
[ "$(id -u)" = 0 ] || { echo "slurm test: needs root (system daemons)" >&2; exit 2; }

t0=$(date +%s)
if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge >/dev/null
fi
t_install=$(( $(date +%s) - t0 ))

work="$(mktemp -d /tmp/lapse-slurm.XXXXXX)"
chmod 755 "$work"
started_munge=0
cleanup() {
  set +e
  [ -f "$work/slurmd.pid" ] && kill "$(cat "$work/slurmd.pid")" 2>/dev/null
  [ -f "$work/slurmctld.pid" ] && kill "$(cat "$work/slurmctld.pid")" 2>/dev/null
  [ "$started_munge" = 1 ] && [ -f /run/munge/lapse-test-munged.pid ] && kill "$(cat /run/munge/lapse-test-munged.pid)" 2>/dev/null
  sleep 1
  rm -rf "$work"
}
trap cleanup EXIT

# munge: authentication between the Slurm daemons and commands.
mkdir -p /run/munge /var/log/munge /var/lib/munge /etc/munge
[ -s /etc/munge/munge.key ] || { dd if=/dev/urandom bs=1 count=1024 of=/etc/munge/munge.key 2>/dev/null; }
chown -R munge:munge /etc/munge /run/munge /var/log/munge /var/lib/munge 2>/dev/null || true
chmod 400 /etc/munge/munge.key
if ! munge -n >/dev/null 2>&1; then
  runuser -u munge -- /usr/sbin/munged --pid-file=/run/munge/lapse-test-munged.pid 2>/dev/null || /usr/sbin/munged --force --pid-file=/run/munge/lapse-test-munged.pid
  started_munge=1
  for _ in $(seq 50); do munge -n >/dev/null 2>&1 && break; sleep 0.1; done
fi

node="$(hostname -s)"
cpus="$(nproc)"
mem_mb=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 - 512 ))
cat > "$work/slurm.conf" <<CONF
ClusterName=lapsetest
SlurmctldHost=$node
SlurmUser=root
SlurmdUser=root
SlurmctldPort=26817
SlurmdPort=26818
AuthType=auth/munge
StateSaveLocation=$work/state
SlurmdSpoolDir=$work/spool
SlurmctldPidFile=$work/slurmctld.pid
SlurmdPidFile=$work/slurmd.pid
SlurmctldLogFile=$work/slurmctld.log
SlurmdLogFile=$work/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
ReturnToService=2
MpiDefault=none
SchedulerType=sched/backfill
NodeName=$node CPUs=$cpus RealMemory=$mem_mb State=UNKNOWN
PartitionName=lapse Nodes=ALL Default=YES MaxTime=INFINITE State=UP
CONF
mkdir -p "$work/state" "$work/spool"
export SLURM_CONF="$work/slurm.conf"
t1=$(date +%s)
slurmctld -f "$SLURM_CONF"
slurmd -f "$SLURM_CONF"
for _ in $(seq 100); do
  sinfo -h -o '%T' 2>/dev/null | grep -qE '^idle' && break
  sleep 0.2
done
sinfo -h -o '%T' | grep -qE '^idle' || { echo "slurm did not come up:"; tail -20 "$work/slurmctld.log" "$work/slurmd.log"; exit 1; }
echo "slurm: installed in ${t_install} s, one node ($node, $cpus CPUs) up in $(( $(date +%s) - t1 )) s"

status=0
for spec in "pipelines/pulsar_demo.toml 4 1" "pipelines/tracking_demo.toml 3 2"; do
  set -- $spec
  pipeline="$here/$1" parts="$2" seed="$3"
  name="$(basename "$1" .toml)"
  d="$work/$name"
  mkdir -p "$d"
  (cd tests/scale && "$py" partitions.py split "$pipeline" "$parts" "$seed" "$d/in") > "$d/files.txt"
  # Single-process CLI run on the same partitions.
  "$lapse" run "$pipeline" --input "$d/in" --output "$d/cli" --no-plots --quiet
  # The job array: one task per file, threads from the allocation.
  t2=$(date +%s)
  if ! (cd "$d" && LAPSE_BIN="$lapse" sbatch --parsable --wait --array=0-$((parts - 1)) --cpus-per-task=1 \
     "$here/cluster/slurm/lapse-array.sbatch" "$pipeline" "$d/files.txt" "$d/slurm" > "$d/job.txt"); then
    echo "  $name: the array job failed; task logs:" >&2
    for log in "$d"/lapse-*.log; do echo "--- $log" >&2; cat "$log" >&2; done
    status=1
    continue
  fi
  job="$(cat "$d/job.txt")"
  echo "  $name: array job $job, $parts tasks, done in $(( $(date +%s) - t2 )) s"
  if ! (cd tests/scale && "$py" partitions.py compare "$d/slurm" "$d/cli" | sed "s/^/  $name: /"); then
    status=1
  fi
done
if [ "$status" = 0 ]; then echo "slurm: OK"; else echo "slurm: FAILED" >&2; fi
exit "$status"
