"""Solve-to-tolerance (bench/tolerance.py) on a synthetic solver with a known error law.

`LawSolver` returns (1 + eps(n)) u on the sine problem (k = l = 1), where it computes u from the
public source term alone: f = 2 pi^2 u [closed form, separation of variables]. Its relative L2
error is then exactly eps(n) = C n^-p (floored at `floor`) whatever the quadrature [closed form:
the error is proportional to u], so the smallest n reaching a tolerance is known in advance.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from lapbench.config import ConfigError
from lapbench.run import Case
from lapbench.tolerance import KNOBS, Knob, knob_for, metric_for, solve_to_tolerance
from lapbench.solvers.base import Solution, Solver, Tags

FAST = {"repeats": 1, "min_time": 0.0}     # status-only: one timed run per probe


@dataclasses.dataclass
class LawParams:
    n: int = 8
    C: float = 3.0
    p: float = 2.0
    floor: float = 0.0
    mb_per_n: float = 0.0     # memory estimate in MiB per unit of n (0: no estimate)
    plateau_below: int = 0    # error exactly 1 (unresolved) for n below this


class LawSolver(Solver):
    """Test double: relative L2 error exactly max(C n^-p, floor) on sine(k=1, l=1)."""

    name = "law"
    family = "test"
    description = "known error law (tests only)"
    reference = "none: a test double"
    Params = LawParams
    tags = Tags(kinds=frozenset({"poisson"}), domains=frozenset({"rectangle"}))
    resolution_knob = Knob("n", 2, 4096, 8)

    def memory_estimate_mb(self) -> float:
        return self.params.mb_per_n * self.params.n

    def _solve(self, problem, budget, ctx):
        q = self.params
        eps = 1.0 if q.n < q.plateau_below else max(q.C * q.n ** -q.p, q.floor)
        with ctx.phase("solve"):
            f = problem.f
        return Solution(evaluate=lambda pts: (1.0 + eps) * f(pts) / (2.0 * np.pi ** 2), info={"dofs": q.n})


def _case(**params):
    return Case(problem={"name": "sine"}, solver={"_target_": "tests.test_tolerance.LawSolver", **params},
                problem_label="sine", timing=FAST, budget={"memory_limit_mb": 100.0})


def _smallest(C, p, tol):
    """Smallest integer n with C n^-p <= tol [closed form]."""
    n = math.ceil((C / tol) ** (1.0 / p))
    return n if C * n ** -p <= tol else n + 1


def test_smallest_resolution_on_a_known_error_law(tmp_path):
    # C = 3, p = 2, tol = 1e-4: n >= sqrt(3e4) = 173.2, so n = 174 [closed form]; 173 misses
    # (3 / 173^2 = 1.0024e-4), far from rounding either way
    r = solve_to_tolerance(_case(), 1e-4, results_dir=tmp_path)
    assert r.status == "reached" and r.value == _smallest(3.0, 2.0, 1e-4) == 174
    assert r.error == pytest.approx(3.0 / 174 ** 2, rel=1e-9)
    values = [q.value for q in r.probes]
    assert values[:6] == [8, 16, 32, 64, 128, 256]          # doubling, then bisection in (128, 256]
    assert 173 in values and len(values) == len(set(values))
    assert len(list((tmp_path / "runs").glob("*.json"))) == len(values)   # each probe is a record
    # resuming finds every probe's record and runs nothing new
    again = solve_to_tolerance(_case(), 1e-4, results_dir=tmp_path)
    assert again.value == 174 and all(q.skipped for q in again.probes)


def test_linear_knob_steps_by_one(tmp_path):
    # C = 3, p = 2, tol = 0.1: n >= sqrt(30) = 5.48, so n = 6 [closed form]
    r = solve_to_tolerance(_case(), 0.1, results_dir=tmp_path, knob=Knob("n", 1, 20, 1, scale="linear"))
    assert r.status == "reached" and r.value == 6
    assert [q.value for q in r.probes] == [1, 2, 3, 4, 5, 6]


def test_reached_at_the_start_bisects_down(tmp_path):
    # tol = 0.5: n >= sqrt(6) = 2.45, so n = 3 [closed form], below the start value 8
    r = solve_to_tolerance(_case(), 0.5, results_dir=tmp_path)
    assert r.status == "reached" and r.value == 3


def test_error_floor_stops_the_search(tmp_path):
    r = solve_to_tolerance(_case(floor=1e-3), 1e-5, results_dir=tmp_path)
    assert r.status == "floor" and r.value is None and "stopped improving" in r.reason
    # 8 -> 3/64 = 0.047, 16 -> 0.0117, 32 -> 2.9e-3, 64 -> floor 1e-3 (gain 0.34), 128 and 256 gain nothing
    assert [q.value for q in r.probes] == [8, 16, 32, 64, 128, 256]
    assert r.best_probe().error == pytest.approx(1e-3, rel=1e-9)


def test_memory_limit_refuses_and_stops(tmp_path):
    # 1 MiB per unit of n against the case budget of 100 MiB: n = 128 is refused before it runs
    r = solve_to_tolerance(_case(mb_per_n=1.0), 1e-6, results_dir=tmp_path)
    assert r.status == "limit" and "memory" in r.reason
    assert [q.value for q in r.probes][-1] == 128 and r.probes[-1].status == "refused"


def test_knobs_and_metrics_are_checked():
    with pytest.raises(ConfigError, match="`metric` for eigen problems must be one of eig_rel_max"):
        metric_for("eigen", "rel_l2")
    assert metric_for("eigen", None) == "eig_rel_max" and metric_for("poisson", None) == "rel_l2"
    with pytest.raises(ConfigError, match="no declared resolution knob"):
        knob_for({"name": "pinn_hard"})
    assert knob_for({"name": "fem_p2", "level": "auto"}).key == "level"
    with pytest.raises(ConfigError, match="`tolerance` must be a positive number"):
        solve_to_tolerance(_case(), -1.0)
    # every declared knob names a field of its solver's Params, and its range fits the Params' checks
    from lapbench.solvers import SOLVERS

    for name, k in KNOBS.items():
        fields = {f.name for f in dataclasses.fields(SOLVERS[name].Params)}
        assert k.key in fields and all(t in fields for t, _ in k.ties), name
        SOLVERS[name](params={**k.settings(k.lo)})
        SOLVERS[name](params={**k.settings(k.hi)})


def test_eigen_problem_to_tolerance(tmp_path):
    # the unit square (eigen_rect, k = 4) with the spectral method: its eigenvalue error (eig_rel_max, against the
    # closed-form pi^2 (i^2 + j^2) of the unit square [common practice]) reaches 1e-8 at some
    # degree; the degree one below must miss it
    case = Case(problem={"name": "eigen_rect", "k": 4}, solver={"name": "cheb"}, problem_label="eigen_square",
                timing=FAST)
    r = solve_to_tolerance(case, 1e-8, results_dir=tmp_path)
    assert r.status == "reached" and r.metric == "eig_rel_max" and r.error <= 1e-8
    below = [q for q in r.probes if q.value == r.value - 1]
    assert below and not (below[0].ok and below[0].error <= 1e-8)


# -- tolerance suites (`tolerances:` and `solver.<knob>: auto` in conf/suite/*.yaml) ---------------
def test_suite_tolerances_expand_to_one_search_per_tolerance():
    from lapbench.suites import expand_suite, split_tolerance

    cases = expand_suite({"name": "t", "cases": [{"problem": "sine", "solver": ["fd5", "cheb"], "solver.n": "auto",
                                                  "tolerances": [1e-3, 1e-6]}]})
    assert len(cases) == 4
    rest, spec = split_tolerance(cases[0])
    assert rest == ["problem=sine", "solver=fd5"] and spec == {"tolerance": 1e-3, "metric": None, "auto": ["n"]}
    assert split_tolerance(["problem=sine"]) == (["problem=sine"], None)


@pytest.mark.parametrize("grid, message", [
    ({"problem": "sine", "solver": "fd5", "solver.n": "auto"}, "`suite.cases[0].solver.n: auto` needs `tolerances"),
    ({"problem": "sine", "solver": "fd5", "tolerances": [1e-3, -1]}, "`suite.cases[0].tolerances[1]` must be a positive"),
    ({"problem": "sine", "solver": "fd5", "tolerances": []}, "must list at least one error"),
])
def test_suite_tolerances_bad_input(grid, message):
    from lapbench.suites import expand_suite

    with pytest.raises(ConfigError, match=message.replace("[", r"\[").replace("]", r"\]")):
        expand_suite({"name": "t", "cases": [grid]})


def _suite_dir(tmp_path, body: str):
    d = tmp_path / "conf" / "suite"
    d.mkdir(parents=True)
    (d / "tol.yaml").write_text("name: tol\ncases:\n" + body)
    return tmp_path / "conf"


def _lapbench(args, cwd):
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    return subprocess.run([sys.executable, "-c", "from lapbench.cli import main; main()"] + args, capture_output=True,
                          text=True, cwd=cwd, env={**os.environ, "PYTHONPATH": str(root)}, timeout=300)


def test_cli_tolerance_suite_runs_searches_and_records_probes(tmp_path):
    conf = _suite_dir(tmp_path, "  - {problem: sine, solver: [fst5, fem_p2], tolerances: [1.0e-3]}\n")
    p = _lapbench(["run", "--config-dir", str(conf), "suite=tol", f"results_dir={tmp_path}/res",
                   "timing.repeats=1", "timing.min_time=0"], tmp_path)
    assert p.returncode == 0, p.stderr
    # fst5 on sin(pi x) sin(pi y): 32 reaches 1e-3 and 31 does not (both measured by the probes)
    assert "[1/2] sine fst5 to rel_l2 <= 0.001: reached at n=32" in p.stdout, p.stdout
    assert "[2/2] sine fem_p2 to rel_l2 <= 0.001: reached at level=" in p.stdout
    assert len(list((tmp_path / "res" / "runs").glob("*.json"))) >= 7


def test_cli_tolerance_suite_wrong_knob_is_one_line(tmp_path):
    conf = _suite_dir(tmp_path, "  - {problem: sine, solver: fem_p1, solver.n: auto, tolerances: [1.0e-3]}\n")
    p = _lapbench(["run", "--config-dir", str(conf), "suite=tol", f"results_dir={tmp_path}/res"], tmp_path)
    assert p.returncode == 2 and len(p.stderr.strip().splitlines()) == 1, p.stderr
    assert "the resolution knob of solver fem_p1 is `level`" in p.stderr
    assert not (tmp_path / "res").exists()


def test_coarse_plateau_before_any_gain_is_not_a_floor(tmp_path):
    # error 1 (unresolved) for n < 64, then 3 n^-2: probes 8, 16, 32 show no gain, which must not
    # read as a floor; the answer stays n = 174 (3 / 174^2 <= 1e-4 < 3 / 173^2) [closed form]
    r = solve_to_tolerance(_case(plateau_below=64), 1e-4, results_dir=tmp_path)
    assert r.status == "reached" and r.value == 174
    assert [q.error for q in r.probes[:3]] == pytest.approx([1.0, 1.0, 1.0], rel=1e-12)
