#!/usr/bin/env bash
# Debian packages the real-parts tests need (as root): slurm-wlm + munge (a one-node SLURM cluster,
# tests/test_slurm_cluster.py) and chromium (the HTML report in a browser, tests/test_browser.py).
# Installs only what is missing; prints how long it took. Exit 1 if it could not install.
set -uo pipefail
need=()
command -v slurmctld >/dev/null && command -v slurmd >/dev/null && command -v sbatch >/dev/null || need+=(slurm-wlm)
command -v munged >/dev/null || need+=(munge)
command -v chromium >/dev/null || need+=(chromium)
if [ ${#need[@]} -eq 0 ]; then
  echo "ci: system packages present (slurm-wlm, munge, chromium)"
  exit 0
fi
[ "$(id -u)" -eq 0 ] || { echo "ci: not root, cannot install ${need[*]}" >&2; exit 1; }
start=$(date +%s)
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq >/dev/null && apt-get install -y -qq "${need[@]}" >/dev/null
rc=$?
echo "ci: apt-get install ${need[*]}: exit $rc in $(( $(date +%s) - start )) s"
exit $rc
