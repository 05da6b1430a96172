"""Fault isolation: every way a case can break becomes a record with its status and reason.

The misbehaving solvers live in tests/fault_solvers.py and are loaded as plug-ins
(``_target_``), so the registry stays clean. Each case runs in the harness's forked child; after
each fault a healthy case must still run normally in the same harness process.
"""
import json
import os
import signal
import subprocess
import sys
import time

import psutil
import pytest

from lapbench.records import read_record
from lapbench.run import Case, run_case
from tests.conftest import ROOT

FAST = {"time_limit": 1.0, "memory_limit_mb": 150.0}


def fault_case(name, **params):
    return Case(problem={"name": "sine"}, solver={"_target_": f"tests.fault_solvers.{name}", **params},
                budget=dict(FAST))


HEALTHY = Case(problem={"name": "sine"}, solver={"name": "fd5", "n": 8}, budget=dict(FAST))

# (solver class, expected status, texts the reason must contain: what happened and where)
FAULTS = [
    ("FaultRaise", "failed", ("RuntimeError: injected failure in setup", "at fault_solvers.py:")),
    ("FaultHang", "timeout", ("exceeded the time limit of 1 s",)),
    ("FaultAbort", "crashed", ("killed by signal SIGABRT", "fault_solvers.py:")),
    ("FaultSegv", "crashed", ("killed by signal SIGSEGV", "string_at", "fault_solvers.py:")),
    ("FaultMemory", "out_of_memory", ("budget.memory_limit_mb = 150 MiB",)),
    ("FaultNaN", "diverged", ("loss became inf at step 3",)),
]


@pytest.mark.parametrize("name,status,reason", FAULTS, ids=[f[0] for f in FAULTS])
def test_fault_becomes_a_record_and_the_harness_goes_on(tmp_path, name, status, reason):
    rec, skipped = run_case(fault_case(name), tmp_path)
    assert not skipped
    assert rec["status"] == status, rec["reason"]
    for text in reason:
        assert text in rec["reason"], rec["reason"]
    files = sorted((tmp_path / "runs").glob("*.json"))
    assert len(files) == 1 and read_record(files[0]) == json.loads(files[0].read_text())
    assert json.loads(files[0].read_text())["status"] == status
    # the harness process is intact: the next case of the sweep runs and succeeds
    ok, _ = run_case(HEALTHY, tmp_path)
    assert ok["status"] == "ok" and ok["metrics"]["rel_l2"] < 0.1
    assert len(list((tmp_path / "runs").glob("*.json"))) == 2


def test_diverged_record_carries_the_step_and_the_history(tmp_path):
    rec, _ = run_case(fault_case("FaultNaN"), tmp_path)
    # |w_k| = (2 lr - 1)^k with lr = 1e60, so w_k^2 first exceeds the float64 maximum
    # (1.8e308) at k = 3 (closed form)
    assert rec["status"] == "diverged" and rec["step"] == 3
    assert [h["step"] for h in rec["history"]] == [1, 2, 3]
    assert rec["history"][-1]["loss"] == float("inf")


def test_memory_limit_is_configurable(tmp_path):
    """The same allocation pattern is stopped at whichever limit the budget sets."""
    small = fault_case("FaultMemory")
    small.budget["memory_limit_mb"] = 60.0
    rec, _ = run_case(small, tmp_path)
    assert rec["status"] == "out_of_memory" and "60 MiB" in rec["reason"]
    # a budget above what the solver takes lets it finish (mb=48 MiB < limit 150 MiB)
    rec, _ = run_case(fault_case("FaultMemory", mb=48), tmp_path)
    assert rec["status"] == "failed" and "without being stopped" in rec["reason"]


def test_one_huge_allocation_is_refused_not_swapped(tmp_path):
    """A single allocation far above the limit fails inside the case (address-space backstop)."""
    rec, _ = run_case(fault_case("FaultMemory", mb=64 * 1024, chunk_mb=64 * 1024), tmp_path)
    assert rec["status"] == "out_of_memory", rec["reason"]


def test_an_interrupted_harness_takes_its_case_down(tmp_path):
    """Ctrl-C (SIGINT to the harness only) ends the running case at once: no orphan keeps running."""
    script = ("from lapbench.run import Case, run_case\n"
              "run_case(Case(problem={'name': 'sine'}, solver={'_target_': 'tests.fault_solvers.FaultHang'},"
              f" budget={{'time_limit': 120}}), {str(tmp_path)!r})\n")
    proc = subprocess.Popen([sys.executable, "-c", script], cwd=ROOT, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "PYTHONPATH": str(ROOT)}, start_new_session=True)
    t0 = time.monotonic()
    while not psutil.Process(proc.pid).children():
        assert proc.poll() is None and time.monotonic() - t0 < 60, proc.stderr.read() if proc.poll() else ""
        time.sleep(0.05)
    case_proc = psutil.Process(proc.pid).children()[0]
    os.kill(proc.pid, signal.SIGINT)  # the harness alone, not its process group
    _, alive = psutil.wait_procs([case_proc], timeout=10)
    assert not alive, "the case outlived its interrupted harness"
    assert proc.wait(timeout=30) != 0 and "KeyboardInterrupt" in proc.stderr.read()
    assert not (tmp_path / "runs").exists()  # an interrupted case leaves no record: a rerun redoes it
