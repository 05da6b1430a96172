"""Plug-ins by config: the examples/ solver package, broken plug-ins, user-defined problems.

Command-line behaviour is tested by subprocess (`lapbench run`, `lapbench conform`) with the
plug-in's own config folder (--config-dir) and results_dir=<tmp>; the conformance command is
also driven in-process for the broken plug-ins, so that the catalogue is built once.
"""
import json
import math
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from lapbench.config import ConfigError
from lapbench.numerics import fd_laplacian  # fourth-order central differences (common practice)
from tests.conftest import LAPBENCH, ROOT

EXAMPLE = ROOT / "examples" / "sor_solver"
EXAMPLE_CONF = EXAMPLE / "conf"
USER_PROBLEMS = ROOT / "examples" / "user_problems" / "conf"

BROKEN = '''
"""Deliberately broken plug-ins (test fixtures)."""
import dataclasses

import numpy as np

from lapbench.solvers.base import Solution, Solver, Tags


@dataclasses.dataclass
class P:
    n: int = 8


class _Base(Solver):
    family = "fd"
    description = "broken on purpose"
    Params = P
    tags = Tags()


class WrongReturn(_Base):
    name = "wrong_return"

    def _solve(self, problem, budget, ctx):
        with ctx.phase("solve"):
            return [0.0] * self.params.n


class Raises(_Base):
    name = "raises"

    def _solve(self, problem, budget, ctx):
        raise RuntimeError("boom in the plug-in")


class Garbage(_Base):
    name = "garbage"

    def _solve(self, problem, budget, ctx):
        with ctx.phase("solve"):
            pass
        return Solution(evaluate=lambda pts: np.full(len(pts), np.nan))


class NoSolve(_Base):
    name = "no_solve"


class NotASolver:
    name = "not_a_solver"

    def solve(self, problem, budget=None, ctx=None):
        return None


def harmonic_u(points, omega=1.0):
    """exp(omega x) cos(omega y): harmonic (closed form)."""
    return np.exp(omega * points[:, 0]) * np.cos(omega * points[:, 1])


def two_columns(points):
    return np.ones((len(points), 2))
'''

BROKEN_CONFIGS = {
    "wrong_return": "_target_: broken_plugins.WrongReturn\nname: wrong_return\n",
    "raises": "_target_: broken_plugins.Raises\nname: raises\n",
    "garbage": "_target_: broken_plugins.Garbage\nname: garbage\n",
    "no_solve": "_target_: broken_plugins.NoSolve\nname: no_solve\n",
    "not_a_solver": "_target_: broken_plugins.NotASolver\nname: not_a_solver\n",
    "ghost": "_target_: nosuch_plugin_pkg.solver.Ghost\nname: ghost\n",
    "bad_type": "_target_: broken_plugins.Raises\nname: raises\nn: eight\n",
}


@pytest.fixture(scope="module")
def broken(tmp_path_factory):
    """A folder with the broken plug-in module and a config folder naming its classes."""
    root = tmp_path_factory.mktemp("broken")
    (root / "broken_plugins.py").write_text(BROKEN)
    conf = root / "conf" / "solver"
    conf.mkdir(parents=True)
    for name, text in BROKEN_CONFIGS.items():
        (conf / f"{name}.yaml").write_text(text)
    return root


def _env(*paths):
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "OMP_NUM_THREADS": "1"}
    env["PYTHONPATH"] = os.pathsep.join([str(p) for p in paths] + [env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    return env


def lapbench(args, cwd, env, check=None, timeout=600):
    p = subprocess.run([LAPBENCH, *args], cwd=cwd, capture_output=True, text=True, env=env, timeout=timeout)
    if check is not None:
        assert p.returncode == check, f"exit {p.returncode}\nstdout:{p.stdout}\nstderr:{p.stderr}"
    return p


def records(d):
    return [json.loads(p.read_text()) for p in sorted((Path(d) / "runs").glob("*.json"))]


def conform_inprocess(argv, capsys):
    """`lapbench conform ...` in this process: (exit code, stdout, stderr)."""
    from lapbench.cli import main

    with pytest.raises(SystemExit) as exc:
        main(["conform", *argv])
    out = capsys.readouterr()
    return exc.value.code, out.out, out.err


# -- the example plug-in ----------------------------------------------------------------------------
def test_example_plugin_runs_beside_builtins_and_in_the_report(tmp_path):
    env = _env(EXAMPLE)
    lapbench(["run", "--multirun", "--config-dir", str(EXAMPLE_CONF), "problem=sine", "solver=sor,fd5",
              "solver.n=16,32", f"results_dir={tmp_path}"], tmp_path, env, check=0)
    recs = records(tmp_path)
    assert len(recs) == 4 and all(r["status"] == "ok" for r in recs), [r["reason"] for r in recs]
    sor = {r["solver"]["resolution"]["n"]: r for r in recs if r["solver"]["name"] == "sor"}
    fd5 = {r["solver"]["resolution"]["n"]: r for r in recs if r["solver"]["name"] == "fd5"}
    assert set(sor) == set(fd5) == {16, 32}
    # provenance: import path and module file; not installed here, so no distribution
    plug = sor[16]["solver"]["plugin"]
    assert plug["target"] == "sor_solver.SOR" and plug["module"] == "sor_solver.solver"
    assert Path(plug["file"]) == (EXAMPLE / "sor_solver" / "solver.py").resolve()
    assert plug["distribution"] is None and plug["version"] is None
    assert "plugin" not in fd5[16]["solver"]
    # The 5-point scheme is second order (LeVeque, Finite Difference Methods, SIAM 2007, ch. 3):
    # the observed rate between n = 16 and 32 on sin(pi x) sin(pi y) lies within 0.1 of 2.
    rate = math.log2(sor[16]["metrics"]["rel_l2"] / sor[32]["metrics"]["rel_l2"])
    assert abs(rate - 2) < 0.1, rate
    # SOR solves the very 5-point system fd5 factorises, to a residual of 1e-10 (sor.yaml): the
    # errors agree far below the discretisation error.
    for n in (16, 32):
        assert sor[n]["metrics"]["rel_l2"] == pytest.approx(fd5[n]["metrics"]["rel_l2"], rel=1e-6)
        assert sor[n]["cost"]["iterations"] > 0 and sor[n]["info"]["stopped"] == "tol"
    p = lapbench(["report", f"results_dir={tmp_path}", f"report.results=[{tmp_path}]"], tmp_path, env, check=0)
    # the all-runs table comes first; the summary printed after it has rows of its own
    runs_table = p.stdout.split("# lapbench report: summary")[0]
    rows = [line for line in runs_table.splitlines() if line.startswith("| sine")]
    assert sorted(line.split("|")[2].strip() for line in rows) == ["fd5", "fd5", "sor", "sor"], p.stdout


def test_example_plugin_passes_the_conformance_command(tmp_path):
    from lapbench.conformance import CHECKS

    p = lapbench(["conform", "--config-dir", str(EXAMPLE_CONF), "solver=sor", "solver.n=16"], tmp_path,
                 _env(EXAMPLE), check=0)
    for check in CHECKS:
        line = next(line for line in p.stdout.splitlines() if line.startswith(check + " "))
        assert line.split()[1] in ("pass", "n/a"), p.stdout
    assert " 0 failed" in p.stdout


def test_optimal_omega_is_youngs_closed_form():
    sys.path.insert(0, str(EXAMPLE))
    try:
        from sor_solver import optimal_omega
    finally:
        sys.path.remove(str(EXAMPLE))
    # Young (Iterative Solution of Large Linear Systems, 1971): mu = cos(pi h) for the model
    # problem, so omega_opt = 2 / (1 + sin(pi/n)) (closed form).
    for n, hx, hy in ((8, 1 / 8, 1 / 8), (64, 2 / 64, 1 / 64), (100, 0.01, 0.03)):
        assert optimal_omega(n, hx, hy) == pytest.approx(2 / (1 + math.sin(math.pi / n)), rel=1e-12)


def test_provenance_names_the_installed_distribution(tmp_path):
    """A real (non-editable) install into a private folder, then the provenance of a solver from it."""
    src = tmp_path / "src"
    shutil.copytree(EXAMPLE, src, ignore=shutil.ignore_patterns("build", "*.egg-info", "__pycache__"))
    site = tmp_path / "site"
    pip = subprocess.run([sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--no-build-isolation",
                          "--no-index", "--target", str(site), str(src)], capture_output=True, text=True,
                         timeout=300)
    assert pip.returncode == 0, pip.stderr
    code = ("import json; from lapbench.run import make_solver; "
            "print(json.dumps(make_solver({'_target_': 'sor_solver.SOR', 'name': 'sor', 'n': 8}).provenance()))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=_env(site),
                         cwd=tmp_path, timeout=300)
    assert out.returncode == 0, out.stderr
    plug = json.loads(out.stdout)["plugin"]
    # name and version as declared in examples/sor_solver/pyproject.toml
    assert plug["distribution"] == "lapbench-sor-example" and plug["version"] == "0.1.0"
    assert Path(plug["file"]).is_relative_to(site)


# -- broken plug-ins ----------------------------------------------------------------------------------
@pytest.mark.parametrize("solver, check, reason", [
    ("wrong_return", "solution_shapes", "solver wrong_return returned list, expected Solution"),
    ("raises", "solution_shapes", "RuntimeError: boom in the plug-in"),
    ("garbage", "solution_shapes", "evaluate returned non-finite values"),
])
def test_conform_reports_failing_checks_with_reasons(broken, solver, check, reason, capsys, monkeypatch):
    monkeypatch.syspath_prepend(str(broken))
    code, out, _ = conform_inprocess(["--config-dir", str(broken / "conf"), f"solver={solver}"], capsys)
    assert code == 1, out
    line = next(line for line in out.splitlines() if line.startswith(check + " "))
    assert line.split()[1] == "FAIL" and reason in line, out
    assert "interface" in out and out.splitlines()[-1].endswith("failed") and " 0 failed" not in out


@pytest.mark.parametrize("solver, message", [
    ("no_solve", "`solver._target_` 'broken_plugins.NoSolve' does not implement the solver contract: "
                 "missing method `_solve(problem, budget, ctx)`"),
    ("not_a_solver", "does not subclass lapbench.solvers.base.Solver; missing attribute `family`"),
    ("ghost", "`solver._target_` cannot import 'nosuch_plugin_pkg.solver.Ghost': ModuleNotFoundError: "
              "No module named 'nosuch_plugin_pkg'"),
    ("bad_type", "`solver.n` must be an integer, got 'eight' (set in "),
])
def test_bad_plugins_exit_2_from_conform_and_run(broken, solver, message, tmp_path):
    env = _env(broken)
    for args in (["conform", "--config-dir", str(broken / "conf"), f"solver={solver}"],
                 ["run", "--config-dir", str(broken / "conf"), "problem=sine", f"solver={solver}",
                  f"results_dir={tmp_path}"]):
        p = lapbench(args, tmp_path, env, check=2)
        assert message in p.stderr, p.stderr
        assert len(p.stderr.strip().splitlines()) == 1, p.stderr
    if solver == "bad_type":
        assert str(broken / "conf" / "solver" / "bad_type.yaml") in p.stderr
    assert not (tmp_path / "runs").exists()


def test_failing_plugins_become_failed_records_and_the_sweep_goes_on(broken, tmp_path):
    p = lapbench(["run", "--multirun", "--config-dir", str(broken / "conf"), "problem=sine",
                  "solver=raises,wrong_return,garbage,fd5", f"results_dir={tmp_path}"],
                 tmp_path, _env(broken), check=0)
    recs = {r["solver"]["name"]: r for r in records(tmp_path)}
    assert set(recs) == {"raises", "wrong_return", "garbage", "fd5"}, p.stdout
    assert recs["fd5"]["status"] == "ok"
    assert recs["raises"]["status"] == "failed"
    assert recs["raises"]["reason"].startswith("RuntimeError: boom in the plug-in at broken_plugins.py:")
    assert recs["wrong_return"]["status"] == "failed"
    assert "solver wrong_return returned list, expected Solution" in recs["wrong_return"]["reason"]
    assert recs["garbage"]["status"] == "failed"
    assert recs["garbage"]["reason"].startswith("bad solution: Solution.evaluate returned ")
    assert recs["garbage"]["reason"].endswith(" non-finite value(s)")
    assert recs["raises"]["solver"]["plugin"]["target"] == "broken_plugins.Raises"


def test_plugin_may_not_take_a_builtin_name_or_disagree_with_its_config(broken, monkeypatch):
    from lapbench.run import make_solver

    monkeypatch.syspath_prepend(str(broken))
    with pytest.raises(ConfigError, match=r"^`solver.name` 'sor2' differs from the name 'raises'"):
        make_solver({"_target_": "broken_plugins.Raises", "name": "sor2"})
    with pytest.raises(ConfigError, match=r"^`solver._target_` 'broken_plugins.harmonic_u' is a function, not a class"):
        make_solver({"_target_": "broken_plugins.harmonic_u"})
    # a built-in through _target_ is itself, not a clash
    assert make_solver({"_target_": "lapbench.solvers.fd.FD5", "name": "fd5", "n": 8}).provenance()["plugin"]["distribution"] \
        == "lapbench"


# -- user problems ----------------------------------------------------------------------------------


def _load(path):
    from omegaconf import OmegaConf

    from lapbench.problems import make_problem

    return make_problem(OmegaConf.to_container(OmegaConf.load(path), resolve=True))


def test_polygon_user_problem_runs_end_to_end(tmp_path):
    p = lapbench(["run", "--multirun", "--config-dir", str(USER_PROBLEMS), "problem=gable", "solver=fem_p1",
                  "solver.level=2,3,4", f"results_dir={tmp_path}"], tmp_path, _env(), check=0)
    recs = {r["solver"]["resolution"]["level"]: r for r in records(tmp_path)}
    assert sorted(recs) == [2, 3, 4], p.stdout
    for rec in recs.values():
        assert rec["status"] == "ok", rec["reason"]
        assert rec["problem"]["label"] == "gable" and rec["problem"]["name"] == "custom"
        assert rec["problem"]["domain"] == {"kind": "polygon", "vertices": [[0.0, 0.0], [2.0, 0.0], [2.0, 1.0],
                                                                          [1.0, 1.6], [0.0, 1.0]]}
        assert rec["problem"]["source"].startswith("user-defined: u = exp(0.5*x)*sin(1.5*y) + 0.25*x*y")
    # The pentagon is convex and u smooth, so P1 elements converge at L2 order 2 under uniform
    # refinement (Strang & Fix, An Analysis of the Finite Element Method, 1973); +-0.15 allows
    # for the pre-asymptotic coarse levels (measured: 1.98 and 1.99).
    err = [recs[level]["metrics"]["rel_l2"] for level in (2, 3, 4)]
    rates = [math.log2(a / b) for a, b in zip(err, err[1:])]
    assert all(abs(r - 2) < 0.15 for r in rates), rates


def test_polygon_computed_reference_within_its_estimate():
    """The gable problem given by source and boundary only: the computed reference (P2 finite
    elements) against the manufactured exact solution that the same data come from."""
    from lapbench.problems import make_problem

    gable = _load(USER_PROBLEMS / "problem" / "gable.yaml")
    # -Laplace(exp(x/2) sin(3y/2) + xy/4) = 2 exp(x/2) sin(3y/2) (hand derivation, checked in
    # test_polygon_user_problem_exact_solution_satisfies_its_pde)
    prob = make_problem({"name": "custom", "domain": gable.domain.to_dict(),
                         "source": "2*exp(0.5*x)*sin(1.5*y)", "boundary": "exp(0.5*x)*sin(1.5*y) + 0.25*x*y"})
    assert prob.params["reference"] == "computed" and "computed reference" in prob.source
    pts = prob.domain.eval_set(0, prob.eval_level).all_points
    actual = float(np.max(np.abs(prob.exact(pts) - gable.exact(pts))))
    assert 0 < actual <= prob.params["reference_error"], (actual, prob.params["reference_error"])


def test_polygon_user_problem_exact_solution_satisfies_its_pde():
    prob = _load(USER_PROBLEMS / "problem" / "gable.yaml")
    assert prob.domain.kind == "polygon" and prob.kind == "poisson"
    pts = prob.domain.sample_interior(300, np.random.default_rng(0))
    pts = pts[prob.domain.distance(pts) > 0.01][:200]
    # fourth-order differences at h = 1e-3: truncation ~1e-12 u^(6) (common practice)
    assert np.max(np.abs(-fd_laplacian(prob.exact, pts, 1e-3) - prob.f(pts))) < 1e-6
    # hand derivation: -Laplace(exp(x/2) sin(3y/2) + xy/4) = (9/4 - 1/4) exp(x/2) sin(3y/2)
    x, y = pts[:, 0], pts[:, 1]
    assert np.allclose(prob.f(pts), 2.0 * np.exp(x / 2) * np.sin(1.5 * y), rtol=1e-12, atol=1e-12)
    bpts, _ = prob.domain.sample_boundary(100, np.random.default_rng(1))
    assert np.allclose(prob.public().g(bpts), prob.exact(bpts), rtol=0, atol=1e-14)


def _membrane_series(pts, terms=20001):
    """-Laplace(u) = 1 on the unit square, u = 0 on the edges, by separation of variables
    (common practice): u = x(1-x)/2 - sum_{m odd} 4/(pi^3 m^3) sin(m pi x) cosh(m pi (y-1/2))/cosh(m pi/2).
    The tail after `terms` is below 4/(pi^3) / (2 terms^2) ~ 2e-10."""
    x, y = pts[:, :1], pts[:, 1:]
    m = np.arange(1, terms + 1, 2)[None, :]
    a, t = m * np.pi, np.abs(y - 0.5)
    ratio = (np.exp(a * (t - 0.5)) + np.exp(-a * (t + 0.5))) / (1 + np.exp(-a))
    return x[:, 0] * (1 - x[:, 0]) / 2 - (4 / (np.pi ** 3 * m ** 3) * np.sin(a * x) * ratio).sum(axis=1)


@pytest.mark.parametrize("solver, resolution", [("fd5", 128), ("fd9", 64)])
def test_computed_reference_is_labelled_and_within_its_estimate(solver, resolution):
    from lapbench.problems import make_problem

    prob = make_problem({"name": "custom", "source": "1", "boundary": "0",
                         "reference": {"solver": solver, "resolution": resolution}})
    assert prob.params["reference"] == "computed"
    assert prob.source.startswith(f"computed reference (no exact solution): {solver} at n={resolution}")
    est = prob.params["reference_error"]
    pts = np.random.default_rng(0).uniform(0, 1, (200, 2))
    actual = float(np.max(np.abs(prob.exact(pts) - _membrane_series(pts))))
    assert 0 < actual <= est, (actual, est)


def test_computed_eigen_reference_against_closed_form():
    from lapbench.problems import make_problem

    prob = make_problem({"name": "custom", "kind": "eigen", "n_eigs": 4,
                         "reference": {"solver": "fd9", "resolution": 64}})
    exact = np.pi ** 2 * np.array([2, 5, 5, 8])  # pi^2 (m^2 + n^2) on the unit square (closed form)
    rel = np.abs(prob.eigenvalues - exact) / exact
    est = prob.params["reference_error"]
    assert prob.kind == "eigen" and "computed reference" in prob.source
    assert np.max(rel) <= est, (rel, est)


def test_stated_eigenvalues_keep_their_source():
    prob = _load(USER_PROBLEMS / "problem" / "square_tones.yaml")
    assert prob.kind == "eigen" and prob.n_eigs == 4
    assert prob.source == "stated eigenvalues: closed form pi^2 (m^2 + n^2) on the unit square"
    # the stated values are pi^2 (m^2 + n^2) (closed form)
    assert np.allclose(prob.eigenvalues, np.pi ** 2 * np.array([2, 5, 5, 8]), rtol=1e-15)


def test_callable_data(broken, monkeypatch):
    from lapbench.problems import make_problem

    monkeypatch.syspath_prepend(str(broken))
    prob = make_problem({"name": "custom", "kind": "laplace",
                         "exact": {"_target_": "broken_plugins.harmonic_u", "omega": 2.0}})
    pts = np.array([[0.25, 0.5], [0.9, 0.1]])
    assert prob.kind == "laplace" and prob.f is None
    assert np.allclose(prob.exact(pts), np.exp(2 * pts[:, 0]) * np.cos(2 * pts[:, 1]), rtol=1e-15)
    with pytest.raises(ConfigError, match=r"^`problem.exact._target_` 'broken_plugins.two_columns' returned "
                                          r"shape \(8, 2\)"):
        make_problem({"name": "custom", "kind": "laplace", "exact": {"_target_": "broken_plugins.two_columns"}})
    with pytest.raises(ConfigError, match=r"^`problem.source` is required when `problem.exact` is a callable"):
        make_problem({"name": "custom", "exact": {"_target_": "broken_plugins.harmonic_u"}})


@pytest.mark.parametrize("cfg, match", [
    ({"exact": "x**2*y", "source": "2*y"}, r"^`problem.source` disagrees with -Laplace\(problem.exact\)"),
    ({"exact": "x*y", "boundary": "x*y + 0.001"}, r"^`problem.boundary` disagrees with problem.exact"),
    ({"source": "1"}, r"^`problem.boundary` is required when there is no `problem.exact`"),
    ({"kind": "laplace", "source": "1", "boundary": "0"}, r"^`problem.kind` is 'laplace' but the source"),
    ({"eigenvalues": [1.0, 2.0]}, r"^`problem.eigenvalues_source` must say where"),
    ({"eigenvalues": [2.0, 1.0], "eigenvalues_source": "x"}, r"^`problem.eigenvalues` must be positive"),
    ({"kind": "eigen", "exact": "x"}, r"^`problem.exact` does not apply to kind 'eigen'"),
    ({"exact": "__import__('os')"}, r"^`problem.exact`: call of unknown function '__import__'"),
    ({"exact": "x", "kind": "heat"}, r"^`problem.kind` must be one of 'laplace', 'poisson', 'eigen'"),
    ({"exact": 3}, r"^`problem.exact` must be a string or a mapping"),
])
def test_bad_user_problems(cfg, match):
    from lapbench.problems import make_problem

    with pytest.raises(ConfigError, match=match):
        make_problem({"name": "custom", **cfg})


def test_bad_user_problem_field_names_the_file(tmp_path):
    conf = tmp_path / "conf" / "problem"
    conf.mkdir(parents=True)
    (conf / "wrong.yaml").write_text("name: custom\nexact: sin(x)\neval_level: many\n")
    p = lapbench(["run", "--config-dir", str(tmp_path / "conf"), "problem=wrong", "solver=fd5",
                  f"results_dir={tmp_path}"], tmp_path, _env(), check=2)
    assert p.stderr.strip() == (f"lapbench: error: `problem.eval_level` must be an integer, got 'many' "
                                f"(set in {conf / 'wrong.yaml'})")
