"""Sweeps through Hydra's launchers (conf/hydra/launcher/): joblib on all cores, submitit for SLURM.

Each sweep runs `lapbench` in a subprocess and must leave exactly one valid record per case,
cores split between the workers, and exit code 0 even when cases fail (failures are records).
"""
import os
import re
import subprocess
from pathlib import Path

import pytest

from lapbench.records import read_record
from tests.conftest import LAPBENCH, ROOT
from tests.fault_solvers import FAULTS

CORES = len(os.sched_getaffinity(0))


def lapbench(args, tmp_path, timeout=240):
    """Run lapbench with the repository root importable (for tests.fault_solvers plug-ins)."""
    env = {**os.environ, "PYTHONUNBUFFERED": "1",
           "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")])}
    env.pop("LAPBENCH_CORES", None)
    return subprocess.run([LAPBENCH, *args, f"results_dir={tmp_path}", f"hydra.sweep.dir={tmp_path}/sweep"],
                          cwd=tmp_path, capture_output=True, text=True, env=env, timeout=timeout)


def valid_records(results):
    files = sorted((Path(results) / "runs").glob("*.json"))
    recs = [read_record(f) for f in files]
    assert all(r is not None for r in recs), files
    return recs


def identity(rec):
    return (rec["problem"]["label"], rec["solver"]["name"], rec["solver"]["resolution"].get("n"))


def write_conf(tmp_path, solvers=(), suite=None):
    """A --config-dir with fault-solver configs and an optional suite file."""
    conf = tmp_path / "conf"
    (conf / "solver").mkdir(parents=True)
    for name, cls in solvers:
        (conf / "solver" / f"{name}.yaml").write_text(
            f"_target_: tests.fault_solvers.{cls.__name__}\nname: {name}\nn: 8\n")
    if suite:
        (conf / "suite").mkdir()
        (conf / "suite" / "mini.yaml").write_text(suite)
    return conf


def test_joblib_two_workers_run_a_suite_with_faults_one_record_per_case(tmp_path):
    """A suite (hydra.compose inside loky workers) mixing healthy and broken solvers."""
    names = list(FAULTS) + ["fd5", "fst9"]
    conf = write_conf(tmp_path, solvers=list(FAULTS.items()),
                      suite=f"name: mini\ncases:\n  - problem: [sine]\n    solver: [{', '.join(names)}]\n"
                            "    solver.n: [8]\n")
    p = lapbench(["run", "--config-dir", str(conf), "suite=mini", "budget.time_limit=1",
                  "budget.memory_limit_mb=150", "hydra/launcher=parallel", "hydra.launcher.n_jobs=2"], tmp_path)
    assert p.returncode == 0, p.stderr[-3000:]  # failed cases are records, not a failed sweep
    assert "[HYDRA]" not in p.stderr + p.stdout   # Hydra's own lines only when asked (hydra/hydra_logging=default)
    recs = valid_records(tmp_path)
    assert sorted(identity(r) for r in recs) == sorted(("sine", n, 8) for n in names)
    assert {r["solver"]["name"]: r["status"] for r in recs} == {
        "fault_raise": "failed", "fault_hang": "timeout", "fault_abort": "crashed", "fault_segv": "crashed",
        "fault_memory": "out_of_memory", "fault_nan": "diverged", "fd5": "ok", "fst9": "ok"}
    assert {r["suite"] for r in recs} == {"mini"}
    # two workers split the machine: each case had cores // 2 cores and used one thread
    assert {(r["threads"], r["cores_available"]) for r in recs} == {(1, max(1, CORES // 2))}
    assert len(re.findall(r"^\[\d+/8\] sine", p.stdout, flags=re.M)) == len(names)  # one progress line each


def test_submitit_local_runs_a_suite_one_record_per_case(tmp_path):
    """hydra.compose inside submitit's worker processes (one fresh interpreter per case), with
    the suite found on an extra config search path."""
    conf = write_conf(tmp_path, suite="name: mini\ncases:\n  - problem: [sine, harmonic]\n    solver: [fd5]\n"
                                      "    solver.n: [8]\n  - problem: [sine]\n    solver: [fst9]\n")
    p = lapbench(["run", "--config-dir", str(conf), "suite=mini", "hydra/launcher=slurm_local"], tmp_path)
    assert p.returncode == 0, p.stderr[-3000:]
    recs = valid_records(tmp_path)
    # fst9 at its config file's default n = 64 (conf/solver/fst9.yaml)
    assert sorted(identity(r) for r in recs) == [("harmonic", "fd5", 8), ("sine", "fd5", 8), ("sine", "fst9", 64)]
    assert [(r["status"], r["suite"]) for r in recs] == [("ok", "mini")] * 3, [r["reason"] for r in recs]
    # slurm_local grants cpus_per_task = threads = 1 core per case
    assert {(r["threads"], r["cores_available"]) for r in recs} == {(1, 1)}
    assert list((tmp_path / "sweep" / ".submitit").iterdir())  # submitit's job folders


def test_slurm_preset_becomes_a_batch_script(tmp_path, monkeypatch):
    """The slurm preset's resources reach sbatch (script built by submitit, nothing submitted)."""
    submitit = pytest.importorskip("submitit")
    from hydra import compose, initialize_config_dir
    from hydra_plugins.hydra_submitit_launcher.config import BaseQueueConf
    from omegaconf import OmegaConf

    from lapbench.cli import conf_dir

    fake = tmp_path / "bin"
    fake.mkdir()
    (fake / "srun").write_text("#!/bin/sh\nexit 1\n")  # submitit refuses to build without srun on PATH
    (fake / "srun").chmod(0o755)
    monkeypatch.setenv("PATH", f"{fake}{os.pathsep}{os.environ['PATH']}")
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        cfg = compose("config", overrides=["hydra/launcher=slurm", "hydra.launcher.partition=cpu", "threads=2"],
                      return_hydra_config=True)
        params = OmegaConf.to_container(cfg.hydra.launcher, resolve=True)
    assert params.pop("_target_").endswith("SlurmLauncher")
    params.pop("submitit_folder")
    # the same split of parameters as hydra_submitit_launcher's launch()
    ex = submitit.AutoExecutor(cluster="slurm", folder=tmp_path / "sub",
                               slurm_max_num_timeout=params.pop("max_num_timeout"))
    base = set(OmegaConf.structured(BaseQueueConf).keys())
    ex.update_parameters(**{k if k in base else f"slurm_{k}": v for k, v in params.items()})
    script = ex._executor._make_submission_file_text("python -u -m job", "uid")
    for line in ("--cpus-per-task=2", "--mem=10GB", "--time=20", "--partition=cpu", "--job-name=lapbench"):
        assert f"#SBATCH {line}\n" in script, script
