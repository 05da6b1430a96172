#!/usr/bin/env bash
# Start a one-node SLURM cluster on loopback for the tests (tests/test_slurm_cluster.py), as root:
# munged with the package's key, then slurmctld and slurmd, this host both controller and node,
# with its own CPUs and memory. No cgroups (proctrack/linuxproc, task/none): works in a container.
#   .ci/slurm-up.sh [DIR]     # state, logs and slurm.conf under DIR (default /tmp/lapbench-slurm)
#   export SLURM_CONF=DIR/slurm.conf; sbatch ...; .ci/slurm-down.sh [DIR]
# Ports: LAPBENCH_SLURM_PORT (slurmctld, default 6817) and the next one (slurmd).
# Exit 0 once the node is idle; 1 (with the log's tail) if it does not come up in 60 s.
set -euo pipefail
dir="${1:-/tmp/lapbench-slurm}"
port="${LAPBENCH_SLURM_PORT:-6817}"
for b in munged slurmctld slurmd sinfo; do
  command -v "$b" >/dev/null || { echo "slurm-up: $b not found (apt-get install -y slurm-wlm munge)" >&2; exit 1; }
done
mkdir -p "$dir"/{state,spool,munge}
host="$(hostname -s)"
cpus="$(nproc)"
mem_mb="$(awk '/MemTotal/ {print int($2 / 1024 * 0.9)}' /proc/meminfo)"   # 10 % left for the OS

# munge: the package's key if there is one, else a fresh one; its own socket under DIR
key=/etc/munge/munge.key
if [ ! -s "$key" ]; then
  key="$dir/munge/munge.key"
  [ -s "$key" ] || { dd if=/dev/urandom of="$key" bs=1024 count=1 status=none; chmod 400 "$key"; }
fi
sock="$dir/munge/munge.socket"
if ! [ -S "$sock" ] || ! munge -n -S "$sock" >/dev/null 2>&1; then
  munged --force --key-file="$key" --socket="$sock" --pid-file="$dir/munge/munged.pid" \
    --log-file="$dir/munge/munged.log" --seed-file="$dir/munge/munged.seed"
fi

cat > "$dir/slurm.conf" <<CONF
# written by .ci/slurm-up.sh: one node on loopback, for tests
ClusterName=lapbench
SlurmctldHost=$host(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$sock
SlurmctldPort=$port
SlurmdPort=$((port + 1))
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/slurmctld.log
SlurmdLogFile=$dir/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MpiDefault=none
SwitchType=switch/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
SlurmctldTimeout=30
SlurmdTimeout=30
InactiveLimit=0
KillWait=5
MinJobAge=300
NodeName=$host NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$mem_mb State=UNKNOWN
PartitionName=debug Nodes=ALL Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$dir/slurm.conf"
slurmctld -L "$dir/slurmctld.log"
slurmd -L "$dir/slurmd.log"
for _ in $(seq 60); do
  state="$(sinfo -h -N -o %t 2>/dev/null || true)"
  case "$state" in idle*|mix*|alloc*) echo "slurm-up: node $host $state ($cpus CPUs, $mem_mb MB), SLURM_CONF=$SLURM_CONF"; exit 0;; esac
  sleep 1
done
echo "slurm-up: node did not come up (state '${state:-none}')" >&2
tail -n 20 "$dir/slurmctld.log" "$dir/slurmd.log" >&2 || true
exit 1
