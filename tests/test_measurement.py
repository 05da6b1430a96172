"""Measurements a referee can trust: problem identity, repeated timing, the solver's own memory,
the one-line output of a sweep.

The test double `tests.fault_solvers.CostSolver` has a known cost (busy-waiting a given number
of milliseconds, a known cold start, a known allocation), so the harness's timing and memory
figures can be checked against numbers fixed by construction.
"""
import re
import statistics

import pytest

from lapbench.records import load_records, problem_id, to_frame
from lapbench.run import Case, run_case
from tests.conftest import ROOT  # noqa: F401  (puts the repository root on sys.path for tests.*)

COST = "tests.fault_solvers.CostSolver"


def cost_case(tmp_path, **params):
    return Case(problem={"name": "sine"}, solver={"_target_": COST, **params}, problem_label="sine",
                budget={"time_limit": 60.0})


def test_two_domains_are_two_problems(tmp_path):
    """The same expression on a disk and on the unit square: two ids, two problems in the frame."""
    ids = set()
    for domain in ({"kind": "rectangle"}, {"kind": "disk", "cx": 0.5, "cy": 0.5, "radius": 0.5}):
        case = Case(problem={"name": "expr", "u": "x*y", "domain": domain}, solver={"name": "fem_p1", "level": 2},
                    problem_label="expr")
        rec, _ = run_case(case, tmp_path)
        assert rec["status"] == "ok", rec["reason"]
        ids.add(rec["problem"]["id"])
    assert ids == {"expr(u=x*y)", "expr(u=x*y)[disk cx=0.5 cy=0.5 radius=0.5]"}
    frame = to_frame(load_records(tmp_path))
    assert sorted(frame["problem_id"]) == sorted(ids)


def test_problem_id_shows_every_knob_and_hashes_lists():
    """Lists (polygon vertices) become a short stable hash; two polygons never share an id."""
    a = problem_id("eigen_polygon", {"k": 4}, {"kind": "polygon", "vertices": [[0, 0], [1, 0], [0, 1]]})
    b = problem_id("eigen_polygon", {"k": 4}, {"kind": "polygon", "vertices": [[0, 0], [2, 0], [0, 1]]})
    assert a != b and a.startswith("eigen_polygon(k=4)[polygon 3 vertices ~")
    assert a == problem_id("eigen_polygon", {"k": 4}, {"kind": "polygon", "vertices": [[0, 0], [1, 0], [0, 1]]})
    # a config knob the builder's params do not show, left at its default: not in the id
    assert problem_id("plate", {"terms": 5}, None, {"name": "plate", "tol": 1e-14}, {"tol": 1e-14}) == "plate(terms=5)"
    assert problem_id("plate", {"terms": 5}, None, {"name": "plate", "tol": 1e-9}, {"tol": 1e-14}) == \
        "plate(terms=5,tol=1e-09)"


def test_repeated_timing_is_recorded_and_monotone(tmp_path):
    """Known costs 2, 4, 8, 16 ms (busy-waiting, by construction of CostSolver) with a 60 ms cold
    start: the warm-up absorbs the cold start, every repeat is kept, the median tracks the cost."""
    medians = []
    for ms in (2, 4, 8, 16):
        rec, _ = run_case(cost_case(tmp_path, n=ms, cold_ms=60.0), tmp_path)
        assert rec["status"] == "ok", rec["reason"]
        t = rec["timing"]
        assert t["statistic"] == "median"
        # at least `timing.repeats` = 5 runs and 0.2 s measured (conf/config.yaml defaults)
        assert len(t["repeats"]) >= 5 and sum(t["repeats"]) >= 0.2
        assert t["min"] == min(t["repeats"]) and t["max"] == max(t["repeats"])
        assert rec["timings"]["total"] == pytest.approx(statistics.median_high(t["repeats"]))
        assert max(t["repeats"]) < ms / 1e3 + 0.050, "the cold start (60 ms) leaked into a timed repeat"
        assert ms / 1e3 <= t["min"] < ms / 1e3 + 0.010     # busy-waiting: never shorter than the cost
        medians.append(rec["timings"]["total"])
    assert medians == sorted(medians)


def test_slow_first_run_counts_and_max_time_caps_repeats(tmp_path):
    """A 250 ms solve (above timing.min_time = 0.2 s) needs no warm-up: repeats stop at
    timing.max_time = 0.6 s measured, i.e. after 3 runs (0.75 s)."""
    case = cost_case(tmp_path, n=250)
    case.timing = {"max_time": 0.6}
    rec, _ = run_case(case, tmp_path)
    assert len(rec["timing"]["repeats"]) == 3


def test_unmeasured_work_between_phases_counts_against_max_time(tmp_path):
    """A fast solve (~1 ms measured) behind a 0.3 s pause outside its phases (SlowFD5): the
    repeats stop on the wall clock at timing.max_time = 1 s after at most 1 / 0.3 + 1 runs,
    instead of collecting 0.2 s of measured time (~200 runs, a minute of pauses)."""
    case = Case(problem={"name": "sine"}, problem_label="sine",
                solver={"_target_": "tests.fault_solvers.SlowFD5", "name": "slow_fd5", "n": 8, "delay": 0.3},
                budget={"time_limit": 60.0})
    case.timing = {"max_time": 1.0}
    rec, _ = run_case(case, tmp_path)
    assert rec["status"] == "ok", rec["reason"]
    assert 1 <= len(rec["timing"]["repeats"]) <= 4, rec["timing"]["repeats"]


def test_learned_methods_run_once(tmp_path):
    """A run that records a training history is its own measurement: one run, no repeats."""
    case = Case(problem={"name": "sine"}, problem_label="sine",
                solver={"name": "pinn_soft", "width": 8, "depth": 1, "adam_steps": 5, "lbfgs_steps": 0,
                        "n_interior": 64, "n_boundary": 16})
    rec, _ = run_case(case, tmp_path)
    assert rec["status"] == "ok", rec["reason"]
    assert rec["timing"]["statistic"] == "single" and len(rec["timing"]["repeats"]) == 1


def test_memory_is_the_solvers_own(tmp_path):
    """A solver that touches a 200 MiB array shows about 200 MiB; on `plate`, whose exact solution
    costs tens of MiB of temporaries to evaluate, a solver that allocates nothing shows little."""
    rec, _ = run_case(cost_case(tmp_path, n=1, alloc_mb=200), tmp_path)
    assert 190 <= rec["cost"]["peak_rss_delta_mb"] <= 230      # 200 MiB by construction, + interpreter noise
    idle = Case(problem={"name": "plate"}, solver={"_target_": COST, "n": 1}, problem_label="plate")
    rec, _ = run_case(idle, tmp_path)
    assert rec["cost"]["peak_rss_delta_mb"] < 20


def test_memory_counts_heap_reused_from_the_harness(tmp_path):
    """The harness process holds 400 MiB of freed heap (large allocations kept in the heap, as the
    PINN runtime arranges): a case touching 200 MiB still shows about 200 MiB, not the part that
    missed the inherited free pages. Run in a fresh interpreter so this test's heap stays its own."""
    import json
    import os
    import subprocess
    import sys

    from tests.conftest import ROOT as root

    code = f"""
import ctypes, json, numpy as np
from lapbench.run import Case, run_case
libc = ctypes.CDLL("libc.so.6")
libc.mallopt(-3, 1 << 30); libc.mallopt(-1, 1 << 30)   # M_MMAP_THRESHOLD, M_TRIM_THRESHOLD: 1 GiB
block = np.ones(400 * 2 ** 17); del block              # 400 MiB freed into the heap
case = Case(problem={{"name": "sine"}}, solver={{"_target_": "{COST}", "n": 1, "alloc_mb": 200}}, problem_label="sine")
print(json.dumps(run_case(case, {str(tmp_path)!r})[0]["cost"]))
"""
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=root,
                       env={**os.environ, "PYTHONPATH": str(root)}, timeout=120)
    assert p.returncode == 0, p.stderr
    cost = json.loads(p.stdout.strip().splitlines()[-1])
    assert 190 <= cost["peak_rss_delta_mb"] <= 230      # 200 MiB by construction


def test_sweep_prints_one_line_per_case_and_nothing_from_hydra(tmp_path):
    """The exact output of a small sequential sweep: one line per case, numbered from 1."""
    from tests.test_cli import run

    p = run(["run", "--multirun", "problem=sine", "solver=fd5,fst5", "solver.n=8", f"results_dir={tmp_path}",
             "timing.repeats=1", "timing.min_time=0"], tmp_path)
    assert p.returncode == 0, p.stderr
    lines = p.stdout.splitlines()
    pattern = r"\[{i}/2\] sine\(k=1,l=1\) {s} n=8 seed=0: ok rel_l2=1\.517e-02 time=[0-9.]+(us|ms)"
    assert len(lines) == 2
    assert re.fullmatch(pattern.format(i=1, s="fd5"), lines[0]), lines[0]
    # fd5 and fst5 solve the same 5-point system: the same error (1.517e-02 at n = 8, sin(pi x) sin(pi y))
    assert re.fullmatch(pattern.format(i=2, s="fst5"), lines[1]), lines[1]
    assert "HYDRA" not in p.stdout + p.stderr and "#0" not in p.stdout + p.stderr
