"""Resume and concurrency: a sweep killed at any moment and rerun ends with exactly the full set of
valid records; concurrent writers to one results folder lose nothing and never expose a
half-written record."""
import json
import multiprocessing as mp
import os
import random
import signal
import subprocess
import time
from pathlib import Path

import psutil

from lapbench.records import read_record
from lapbench.run import Case, run_case
from tests.conftest import LAPBENCH, ROOT

N_CASES = 8
SUITE = ("name: resume\ncases:\n  - problem: [sine, harmonic]\n    solver: [slow_fd5]\n"
         "    solver.n: [8, 10, 12, 14]\n")


def make_conf(tmp_path, delay):
    conf = tmp_path / "conf"
    (conf / "solver").mkdir(parents=True)
    (conf / "suite").mkdir()
    (conf / "solver" / "slow_fd5.yaml").write_text(
        f"_target_: tests.fault_solvers.SlowFD5\nname: slow_fd5\nn: 8\ndelay: {delay}\n")
    (conf / "suite" / "resume.yaml").write_text(SUITE)
    return conf


def sweep_cmd(conf, results, *extra):
    return [LAPBENCH, "run", "--config-dir", str(conf), "suite=resume", f"results_dir={results}",
            f"hydra.sweep.dir={results}/sweep", *extra]


def env():
    return {**os.environ, "PYTHONUNBUFFERED": "1",
            "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")])}


def record_files(results):
    return sorted(p for p in (Path(results) / "runs").glob("*.json") if not p.name.startswith(".tmp-"))


def wait_for_records(results, n, proc, timeout=120):
    t0 = time.monotonic()
    while len(record_files(results)) < n:
        assert proc.poll() is None, "the sweep ended before it could be killed"
        assert time.monotonic() - t0 < timeout, "no records appeared"
        time.sleep(0.05)


def kill_and_reap(proc, victim_pid):
    """SIGKILL one process of the sweep; every case process below it must die too (no orphans)."""
    below = psutil.Process(victim_pid).children(recursive=True)
    os.kill(victim_pid, signal.SIGKILL)
    gone, alive = psutil.wait_procs(below, timeout=15)
    assert not alive, f"orphaned processes after kill -9: {alive}"
    proc.wait(timeout=60)


def check_resumed(tmp_path, conf, results, survivors):
    """Rerun the sweep: only the missing cases run; the survivors are kept byte for byte."""
    p = subprocess.run(sweep_cmd(conf, results), capture_output=True, text=True, env=env(), timeout=240)
    assert p.returncode == 0, p.stderr[-3000:]
    files = record_files(results)
    recs = [read_record(f) for f in files]
    assert len(files) == N_CASES and all(r is not None for r in recs)
    assert len({(r["problem"]["label"], r["solver"]["resolution"]["n"]) for r in recs}) == N_CASES
    assert all(r["status"] == "ok" for r in recs)
    assert {f.name: f.read_bytes() for f in files if f.name in survivors} == survivors
    assert p.stdout.count("(record exists, skipped)") == len(survivors)


def test_kill_driver_mid_sweep_then_resume(tmp_path):
    conf = make_conf(tmp_path, delay=0.4)
    results = tmp_path / "results"
    proc = subprocess.Popen(sweep_cmd(conf, results), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            env=env())
    wait_for_records(results, 3, proc)
    kill_and_reap(proc, proc.pid)
    done = record_files(results)
    assert 3 <= len(done) < N_CASES
    assert all(read_record(f) is not None for f in done)  # none half-written
    check_resumed(tmp_path, conf, results, {f.name: f.read_bytes() for f in done})


def test_kill_a_joblib_worker_mid_sweep_then_resume(tmp_path):
    conf = make_conf(tmp_path, delay=0.4)
    results = tmp_path / "results"
    proc = subprocess.Popen(sweep_cmd(conf, results, "hydra/launcher=parallel", "hydra.launcher.n_jobs=2"),
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env())
    wait_for_records(results, 2, proc)
    workers = [c for c in psutil.Process(proc.pid).children(recursive=True)
               if "LokyProcess" in " ".join(c.cmdline())]
    assert workers, "no joblib worker found"
    kill_and_reap(proc, workers[0].pid)
    assert proc.returncode != 0  # joblib gives up the sweep when a worker dies; the rerun finishes it
    done = record_files(results)
    assert 2 <= len(done) < N_CASES and all(read_record(f) is not None for f in done)
    check_resumed(tmp_path, conf, results, {f.name: f.read_bytes() for f in done})


# -- concurrent writers -----------------------------------------------------------------------------
SHARED = [Case(problem={"name": "sine"}, solver={"name": "fd5", "n": n}) for n in range(4, 9)]


def _writer(results, k):
    """Run every shared case (forced: each is rewritten by every writer) plus one of its own."""
    cases = SHARED[:]
    random.Random(k).shuffle(cases)
    for case in cases + [Case(problem={"name": "harmonic"}, solver={"name": "fd5", "n": 6}, seed=k)]:
        rec, _ = run_case(case, results, force=True)
        if rec["status"] != "ok":
            os._exit(3)
    os._exit(0)


def _reader(results, stop, bad):
    """Read every record file over and over while the writers run: none may be half-written."""
    while not stop.is_set():
        for f in Path(results, "runs").glob("*.json") if Path(results, "runs").is_dir() else []:
            if f.name.startswith(".tmp-"):
                continue
            try:
                json.loads(f.read_text())
            except FileNotFoundError:
                continue
            except ValueError:
                bad.value += 1


def test_eight_concurrent_writers_lose_nothing(tmp_path):
    # measure the per-process constants once here (machine speed, package versions, git revision):
    # the forked writers inherit them instead of each measuring them again
    run_case(Case(problem={"name": "sine"}, solver={"name": "fd5", "n": 4}), tmp_path / "warm")
    ctx = mp.get_context("fork")
    stop, bad = ctx.Event(), ctx.Value("i", 0)
    reader = ctx.Process(target=_reader, args=(tmp_path, stop, bad))
    reader.start()
    writers = [ctx.Process(target=_writer, args=(tmp_path, k)) for k in range(8)]
    for w in writers:
        w.start()
    for w in writers:
        w.join(timeout=300)
    stop.set()
    reader.join(timeout=30)
    assert [w.exitcode for w in writers] == [0] * 8
    assert bad.value == 0, "a reader saw a half-written record"
    files = record_files(tmp_path)
    recs = [read_record(f) for f in files]
    # 5 shared cases (written 8 times each) + 8 writers' own cases, each exactly once
    assert len(files) == len(SHARED) + 8 and all(r is not None for r in recs)
    assert sorted(r["seed"] for r in recs if r["problem"]["label"] == "harmonic") == list(range(8))
    assert not list((tmp_path / "runs").glob(".tmp-*")), "temporary files left behind"


def test_stale_temporaries_are_removed_by_the_next_write(tmp_path):
    """A writer killed between mkstemp and os.replace leaves a .tmp-*.json; the next record
    written into that folder removes it once it is older than STALE_TEMPORARY_S, while a fresh
    one (a live writer's) and other files are left alone."""
    from lapbench.records import STALE_TEMPORARY_S, write_atomic

    stale, live, other = (tmp_path / n for n in (".tmp-killed.json", ".tmp-live.json", "keep.json"))
    for p in (stale, live, other):
        p.write_text("{")
    old = time.time() - STALE_TEMPORARY_S - 60
    os.utime(stale, (old, old))
    os.utime(other, (old, old))
    write_atomic(tmp_path / "new.json", "{}")
    assert not stale.exists()
    assert live.exists() and other.exists() and (tmp_path / "new.json").read_text() == "{}"
