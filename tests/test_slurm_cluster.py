"""A real SLURM cluster: a suite through `hydra/launcher=slurm`, one job cancelled mid-run, a rerun.

The module starts a one-node cluster on loopback with .ci/slurm-up.sh (munged, slurmctld, slurmd
from Debian's slurm-wlm and munge; as root) and stops it at the end with .ci/slurm-down.sh. It
skips, saying why, only where the packages are missing or the cluster cannot start; .ci/run
installs them. The cluster keeps no accounting database, so .ci/slurm-bin/sacct answers
submitit's status queries from slurmctld's memory of recent jobs (`scontrol show job`).

The sweep: fd5 on two problems, a solver that raises (status `failed`), and a healthy solver that
sleeps before solving (`tests.fault_solvers.SlowFD5`), which is cancelled with `scancel` while it
runs. The first sweep then leaves every record but that one; the rerun resumes: finished records
are kept as they were (not rerun), the cancelled case runs again, and exactly one record per case
exists with the expected statuses.
"""
from __future__ import annotations

import os
import shutil
import socket
import subprocess
import time
from pathlib import Path

import pytest

from lapbench.records import read_record
from tests.conftest import LAPBENCH, ROOT

CI = ROOT / ".ci"
BINARIES = ("munged", "slurmctld", "slurmd", "sbatch", "squeue", "scancel", "scontrol")


def _free_port_pair() -> int:
    """A port p with p and p + 1 free on loopback (slurmctld and slurmd)."""
    for _ in range(50):
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            p = s.getsockname()[1]
        try:
            with socket.socket() as a, socket.socket() as b:
                a.bind(("127.0.0.1", p))
                b.bind(("127.0.0.1", p + 1))
            return p
        except OSError:
            continue
    raise RuntimeError("no two consecutive free ports on loopback")


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    missing = [b for b in BINARIES if shutil.which(b) is None]
    if missing:
        reason = f"SLURM not installed ({', '.join(missing)} missing): apt-get install -y slurm-wlm munge"
        print(reason)
        pytest.skip(reason)
    if os.geteuid() != 0:
        pytest.skip("the test cluster runs its daemons as root (SlurmUser=root); not root here")
    d = tmp_path_factory.mktemp("slurm")
    env = {**os.environ, "LAPBENCH_SLURM_PORT": str(_free_port_pair())}
    up = subprocess.run(["bash", str(CI / "slurm-up.sh"), str(d)], capture_output=True, text=True, env=env,
                        timeout=120)
    if up.returncode != 0:
        subprocess.run(["bash", str(CI / "slurm-down.sh"), str(d)], timeout=60)
        reason = f"the one-node SLURM cluster did not start: {(up.stderr or up.stdout)[-1500:]}"
        print(reason)
        pytest.skip(reason)
    env = {**os.environ, "SLURM_CONF": str(d / "slurm.conf"),
           "PATH": os.pathsep.join([str(CI / "slurm-bin"), os.environ["PATH"]])}
    try:
        yield env
    finally:
        subprocess.run(["scancel", "--user=root"], env=env, capture_output=True, timeout=60)
        subprocess.run(["bash", str(CI / "slurm-down.sh"), str(d)], timeout=60)


SUITE = """name: mini
cases:
  - problem: [sine]
    solver: [slow_fd5]
  - problem: [sine, harmonic]
    solver: [fd5]
    solver.n: [8]
  - problem: [sine]
    solver: [fault_raise]
"""


def _sweep(env, tmp_path):
    conf = tmp_path / "conf"
    (conf / "solver").mkdir(parents=True, exist_ok=True)
    (conf / "suite").mkdir(exist_ok=True)
    # long enough to be caught running (a job starts the interpreter first), short enough to rerun
    (conf / "solver" / "slow_fd5.yaml").write_text(
        "_target_: tests.fault_solvers.SlowFD5\nname: slow_fd5\nn: 8\ndelay: 8\n")
    (conf / "solver" / "fault_raise.yaml").write_text(
        "_target_: tests.fault_solvers.FaultRaise\nname: fault_raise\nn: 8\n")
    (conf / "suite" / "mini.yaml").write_text(SUITE)
    env = {**env, "PYTHONUNBUFFERED": "1",
           "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")])}
    env.pop("LAPBENCH_CORES", None)
    args = [LAPBENCH, "run", "--config-dir", str(conf), "suite=mini", "hydra/launcher=slurm",
            "hydra.launcher.mem_gb=1", "hydra.launcher.timeout_min=5", "timing.repeats=1", "timing.min_time=0",
            f"results_dir={tmp_path / 'res'}", f"hydra.sweep.dir={tmp_path / 'sweep'}"]
    return subprocess.Popen(args, cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                            text=True)


def _records(tmp_path):
    files = sorted((tmp_path / "res" / "runs").glob("*.json"))
    recs = {f: read_record(f) for f in files}
    assert all(r is not None for r in recs.values()), files
    return {(r["problem"]["label"], r["solver"]["name"]): (f, r) for f, r in recs.items()}


def _running_task_0(env, deadline):
    """The SLURM id (<array>_0) of the sweep's first case once it has run for 2 s."""
    while time.monotonic() < deadline:
        q = subprocess.run(["squeue", "-h", "-t", "R", "-o", "%i %M"], env=env, capture_output=True, text=True)
        for line in q.stdout.split("\n"):
            parts = line.split()
            if len(parts) == 2 and parts[0].endswith("_0") and parts[1] not in ("0:00", "0:01"):
                return parts[0]
        time.sleep(0.2)
    return None


@pytest.mark.slow   # about 60 s, most of it waiting: job start-up, the slow case twice, submitit's polling
def test_slurm_sweep_cancelled_job_then_resumed_rerun(cluster, tmp_path):
    sweep = _sweep(cluster, tmp_path)
    try:
        job = _running_task_0(cluster, time.monotonic() + 120)
        assert job is not None, "the slow case never ran on the cluster"
        subprocess.run(["scancel", job], env=cluster, check=True, timeout=30)
        out, _ = sweep.communicate(timeout=180)
    finally:
        if sweep.poll() is None:
            sweep.kill()
    # the sweep reports the cancelled job (submitit: no result, state CANCELLED) and fails
    assert sweep.returncode != 0 and "CANCELLED" in out, out[-3000:]
    first = _records(tmp_path)
    assert sorted(first) == [("harmonic", "fd5"), ("sine", "fault_raise"), ("sine", "fd5")], out[-3000:]

    kept = {k: f.stat().st_mtime_ns for k, (f, _) in first.items()}
    rerun = _sweep(cluster, tmp_path)
    try:
        out, _ = rerun.communicate(timeout=240)
    finally:
        if rerun.poll() is None:
            rerun.kill()
    assert rerun.returncode == 0, out[-3000:]
    final = _records(tmp_path)
    assert {k: r["status"] for k, (_, r) in final.items()} == {
        ("sine", "slow_fd5"): "ok", ("sine", "fd5"): "ok", ("harmonic", "fd5"): "ok", ("sine", "fault_raise"): "failed"}
    assert len(list((tmp_path / "res" / "runs").glob("*.json"))) == 4   # one file per case, no leftovers
    # resumed: the records of the first sweep were skipped, not rewritten
    assert {k: final[k][0].stat().st_mtime_ns for k in kept} == kept
    # the rerun case ran under SLURM with the preset's one core per case (cpus_per_task = threads)
    slow = final[("sine", "slow_fd5")][1]
    assert (slow["threads"], slow["cores_available"], slow["suite"]) == (1, 1, "mini")
