#!/usr/bin/env bash
# Stop the cluster .ci/slurm-up.sh started in DIR (default /tmp/lapbench-slurm): slurmd,
# slurmctld and munged by their pid files; the folder stays (logs).
set -u
dir="${1:-/tmp/lapbench-slurm}"
for pidfile in "$dir/slurmd.pid" "$dir/slurmctld.pid" "$dir/munge/munged.pid"; do
  [ -s "$pidfile" ] || continue
  pid="$(cat "$pidfile")"
  kill "$pid" 2>/dev/null || continue
  for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
  kill -9 "$pid" 2>/dev/null || true
  rm -f "$pidfile"
done
exit 0
