"""The solver conformance suite: one set of `check_<property>` functions every solver must pass.

Used by tests/test_conformance.py (parametrised over every registered solver) and by the
command line for plug-in solvers. Capability tags decide which checks apply; a check that does
not apply reports ``n/a`` with the reason. Each check raises `CheckFailure` with a one-line
reason on failure.
"""
from __future__ import annotations

import dataclasses
import random
from pathlib import Path
from typing import Callable

import numpy as np

from lapbench.config import ConfigError

__all__ = ["CheckFailure", "NotApplicable", "CHECKS", "run_checks", "candidate_problems",
           "seed_everything"]

CHECK_BUDGET_SECONDS = 120.0   # per solve inside a check: generous, the checks use tiny params


class CheckFailure(AssertionError):
    """The solver violates the contract (message: one line, the reason)."""


class NotApplicable(Exception):
    """The check does not apply to this solver (message: why)."""


def seed_everything(seed: int) -> None:
    """Seed the global generators the way the harness does before a case."""
    import sys

    random.seed(seed)
    np.random.seed(seed)
    if "torch" in sys.modules:
        import torch

        torch.manual_seed(seed)
        torch.set_default_dtype(torch.float32)


def _conf_problem_dir() -> Path:
    from lapbench.config import conf_dir

    return conf_dir() / "problem"


# Preferred smooth problems, tried first so that checks run on easy, fast cases.
PREFERRED = ("sine", "harmonic", "eigen_square", "disk_harmonic", "annulus_poisson", "corner")

_BUILT: dict = {}


def candidate_problems():
    """Catalogue problems in their default configuration (conf/problem/*.yaml), built lazily
    (preferred ones first) and cached: building all of them costs seconds of sympy work."""
    from omegaconf import OmegaConf

    from lapbench.problems import make_problem

    paths = sorted(_conf_problem_dir().glob("*.yaml"),
                   key=lambda p: (p.stem not in PREFERRED,
                                  PREFERRED.index(p.stem) if p.stem in PREFERRED else 0, p.stem))
    for path in paths:
        if path.stem not in _BUILT:
            try:
                cfg = OmegaConf.to_container(OmegaConf.load(path), resolve=True)
                _BUILT[path.stem] = make_problem(cfg)
            except Exception:  # noqa: BLE001  (a broken preset is the problem tests' business)
                _BUILT[path.stem] = None
        if _BUILT[path.stem] is not None:
            yield path.stem, _BUILT[path.stem]


def _problems():
    return candidate_problems()


def supported_problem(solver):
    """A smooth problem the solver supports (preferred ones first), or NotApplicable."""
    for label, prob in _problems():
        ok, _ = solver.supports(prob.public())
        if ok:
            return label, prob
    raise NotApplicable("no catalogue problem is supported by this solver")


def _solve(solver, problem, seed=0):
    from lapbench.solvers.base import Budget, RunContext

    seed_everything(seed)
    ctx = RunContext(seed=seed)
    budget = Budget(time_limit=CHECK_BUDGET_SECONDS, train_time=CHECK_BUDGET_SECONDS / 4)
    return solver.solve(problem.public(), budget, ctx), ctx


def _probe_points(problem, m=50, seed=1):
    return problem.domain.sample_interior(m, np.random.default_rng(seed))


# -- the checks -----------------------------------------------------------------------------------
def check_interface(make: Callable):
    """Class attributes and methods of the contract are present and well-formed."""
    from lapbench.solvers.base import Solver, Tags

    s = make()
    for attr in ("name", "family", "description"):
        if not isinstance(getattr(s, attr, None), str) or not getattr(s, attr):
            raise CheckFailure(f"attribute `{attr}` must be a non-empty string")
    if not dataclasses.is_dataclass(getattr(type(s), "Params", None)):
        raise CheckFailure("`Params` must be a dataclass of the solver's options")
    if not isinstance(getattr(s, "tags", None), Tags):
        raise CheckFailure("`tags` must be a lapbench.solvers.base.Tags")
    for meth in ("supports", "solve", "resolution"):
        if not callable(getattr(s, meth, None)):
            raise CheckFailure(f"method `{meth}` is missing")
    if not isinstance(s, Solver):
        raise CheckFailure("must subclass lapbench.solvers.base.Solver (the base class owns timing and status)")
    res = s.resolution()
    if not isinstance(res, dict):
        raise CheckFailure(f"resolution() must return a dict, got {type(res).__name__}")


def check_solution_shapes(make: Callable):
    """solve() returns a Solution whose evaluate maps (m, 2) points to m finite float values."""
    from lapbench.solvers.base import Solution

    s = make()
    label, prob = supported_problem(s)
    sol, ctx = _solve(s, prob)
    if not isinstance(sol, Solution):
        raise CheckFailure(f"solve() returned {type(sol).__name__}, expected Solution")
    pts = _probe_points(prob)
    v = np.asarray(sol.evaluate(pts))
    if v.shape != (len(pts),):
        raise CheckFailure(f"evaluate on {len(pts)} points returned shape {v.shape} ({label})")
    if not np.issubdtype(v.dtype, np.floating):
        raise CheckFailure(f"evaluate returned dtype {v.dtype}, expected floating ({label})")
    if not np.all(np.isfinite(v)):
        raise CheckFailure(f"evaluate returned non-finite values ({label})")
    one = np.asarray(sol.evaluate(pts[:1]))
    if one.shape != (1,):
        raise CheckFailure(f"evaluate on a single point returned shape {one.shape}")
    if sol.nodes is not None:
        nodes = np.asarray(sol.nodes)
        vals = np.asarray(sol.values)
        if nodes.ndim != 2 or nodes.shape[1] != 2 or vals.shape != (len(nodes),):
            raise CheckFailure(f"nodes {nodes.shape} and values {vals.shape} do not match")
    if prob.kind == "eigen":
        ev = np.asarray(sol.eigenvalues)
        if ev.ndim != 1 or len(ev) < 1 or not np.all(np.isfinite(ev)) or np.any(np.diff(ev) < -1e-12 * abs(ev).max()):
            raise CheckFailure("eigen problems need finite ascending Solution.eigenvalues")
        if sol.modes is None or np.asarray(sol.modes(pts)).shape != (len(pts), len(ev)):
            raise CheckFailure("eigen problems need Solution.modes(points) of shape (m, k)")
    if not ctx.timings:
        raise CheckFailure("no phase was timed: wrap the work in ctx.phase('setup'/'solve')")


def check_dtype_float64(make: Callable):
    """evaluate returns float64 whatever the method's internal precision (the harness compares in float64)."""
    s = make()
    _, prob = supported_problem(s)
    sol, _ = _solve(s, prob)
    v = np.asarray(sol.evaluate(_probe_points(prob)))
    if v.dtype != np.float64:
        raise CheckFailure(f"evaluate returned {v.dtype}; convert to float64")


def check_determinism(make: Callable):
    """The same seed gives the same answer (deterministic tag), to rounding."""
    s = make()
    if not s.tags.deterministic:
        raise NotApplicable("solver is tagged non-deterministic")
    _, prob = supported_problem(s)
    pts = _probe_points(prob)
    a = np.asarray(_solve(make(), prob, seed=3)[0].evaluate(pts))
    b = np.asarray(_solve(make(), prob, seed=3)[0].evaluate(pts))
    scale = max(1.0, float(np.max(np.abs(a))))
    if not np.allclose(a, b, rtol=0, atol=1e-10 * scale):
        raise CheckFailure(f"two runs with seed 3 differ by {np.max(np.abs(a - b)):.3e}")


def check_unsupported(make: Callable):
    """A problem outside the solver's tags is refused by supports() and by solve() (Unsupported)."""
    from lapbench.solvers.base import Unsupported

    s = make()
    for label, prob in _problems():
        if prob.kind not in s.tags.kinds or prob.domain.kind not in s.tags.domains:
            ok, reason = s.supports(prob.public())
            if ok:
                raise CheckFailure(f"supports() accepted {label} ({prob.kind} on {prob.domain.kind}) "
                                   f"outside its tags")
            if not reason:
                raise CheckFailure("supports() must give a reason when it refuses")
            try:
                _solve(s, prob)
            except Unsupported:
                return
            raise CheckFailure(f"solve() on unsupported {label} did not raise Unsupported")
    raise NotApplicable("every catalogue problem is within the solver's tags")


def check_never_sees_exact(make: Callable):
    """The solver runs on the public view (no exact solution; boundary data only on the boundary)."""
    from lapbench.problems import BoundaryDataError

    s = make()
    _, prob = supported_problem(s)
    pub = prob.public()
    if pub.exact is not None or pub.eigenvalues is not None:
        raise CheckFailure("public view leaks the exact solution (harness bug)")
    try:
        _solve(s, prob)
    except BoundaryDataError as exc:
        raise CheckFailure(f"evaluated boundary data off the boundary: {exc}") from None


def check_evaluate_consistent(make: Callable):
    """evaluate is a function: same points, same values; a subset gives the same values."""
    s = make()
    _, prob = supported_problem(s)
    sol, _ = _solve(s, prob)
    pts = _probe_points(prob)
    a = np.asarray(sol.evaluate(pts))
    b = np.asarray(sol.evaluate(pts[::-1]))[::-1]
    if not np.allclose(a, b, rtol=1e-12, atol=1e-12 * max(1.0, float(np.abs(a).max()))):
        raise CheckFailure("evaluate depends on the order of the points")


def check_accuracy_sanity(make: Callable):
    """On a smooth problem the answer is at least roughly right (relative L2 below 0.5)."""
    from lapbench.metrics import solution_errors

    s = make()
    label, prob = supported_problem(s)
    if prob.kind == "eigen":
        sol, _ = _solve(s, prob)
        ref = np.asarray(prob.eigenvalues)[: len(sol.eigenvalues)]
        rel = np.abs(np.asarray(sol.eigenvalues)[: len(ref)] - ref) / ref
        if rel[0] > 0.5:
            raise CheckFailure(f"lambda_1 off by {rel[0]:.2e} relative on {label}")
        return
    sol, _ = _solve(s, prob)
    err = solution_errors(prob, sol, prob.eval_set(0))["rel_l2"]
    if not err < 0.5:
        raise CheckFailure(f"relative L2 error {err:.3e} on {label} (smooth problem)")


CHECKS: dict[str, Callable] = {
    "interface": check_interface,
    "solution_shapes": check_solution_shapes,
    "dtype_float64": check_dtype_float64,
    "determinism": check_determinism,
    "unsupported": check_unsupported,
    "never_sees_exact": check_never_sees_exact,
    "evaluate_consistent": check_evaluate_consistent,
    "accuracy_sanity": check_accuracy_sanity,
}


def run_checks(make: Callable, checks=None) -> list[tuple[str, str, str]]:
    """Run checks on a solver factory; returns (check, 'pass' | 'FAIL' | 'n/a', reason) rows."""
    rows = []
    for name in checks or CHECKS:
        try:
            CHECKS[name](make)
            rows.append((name, "pass", ""))
        except NotApplicable as exc:
            rows.append((name, "n/a", str(exc)))
        except CheckFailure as exc:
            rows.append((name, "FAIL", str(exc)))
        except Exception as exc:  # noqa: BLE001  (a crash inside a check is a failure with its reason)
            rows.append((name, "FAIL", f"{type(exc).__name__}: {exc}"[:300]))
    return rows


# ------------------------------------------------------------------------------------------------
# `lapbench conform`: the conformance suite against a user's solver config
# ------------------------------------------------------------------------------------------------
CONFORM_USAGE = """usage: lapbench conform [--config-dir DIR] solver=<name> [solver.<option>=<value> ...]

Runs the solver conformance checks (bench/conformance.py, the same checks every built-in
solver passes in tests/test_conformance.py) against the solver that `solver=<name>` selects,
typically a plug-in whose conf/solver/<name>.yaml lives in DIR. Each check runs in its own
process; small options (e.g. solver.n=16) keep it quick.

exit codes: 0 every applicable check passes, 1 some check fails, 2 bad config or plug-in
"""
# A check solves at most a few times, each with the suite's per-solve budget.
CHECK_TIMEOUT = 600.0


def _run_check_isolated(name: str, make, timeout: float) -> tuple[str, str, str]:
    """One conformance check in a forked child (lapbench.isolate): a crash or a hang fails the check,
    not the command."""
    from lapbench.isolate import run_isolated

    def check():
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=1):   # shared machines: one thread, like a default case
            return tuple(str(v) for v in run_checks(make, [name])[0])

    out = run_isolated(check, timeout, limit_text=f"{timeout:g} s")
    if out.status == "timeout":
        return name, "FAIL", f"did not finish within {timeout:g} s (killed)"
    if out.status is not None:
        return name, "FAIL", out.reason.replace("case process", "the check's process")
    return out.result


def format_conformance(rows) -> str:
    """The pass/fail table: one line per check with its reason."""
    w = max([len(r[0]) for r in rows] + [5])
    lines = [f"{'check':<{w}}  result  reason", f"{'-' * w}  ------  ------"]
    lines += [f"{c:<{w}}  {res:<6}  {why}".rstrip() for c, res, why in rows]
    return "\n".join(lines)


def conform(argv: list[str]) -> int:
    """`lapbench conform`: run the conformance checks against one solver config; exit 0, 1 or 2."""
    import sys

    from omegaconf import OmegaConf

    from lapbench.compose import Args, Session, annotate_config_error, locate_config_file
    from lapbench.run import make_solver

    args = Args(argv)
    if args.help:
        print(CONFORM_USAGE)
        return 0
    if args.multirun:
        raise ConfigError("`--multirun` does not apply to conform: check one solver config at a time")
    if not any(o.split("=", 1)[0] == "solver" for o in args.overrides):
        raise ConfigError("`solver` is required: lapbench conform [--config-dir DIR] solver=<name>")
    cfg = None
    with Session(args) as session:
        try:
            cfg = session.compose(args.searchpath_overrides() + args.overrides)
            scfg = OmegaConf.to_container(cfg.solver, resolve=True)
            solver = make_solver(scfg)
        except ConfigError as exc:
            raise annotate_config_error(exc, cfg, args.overrides) from None
    where = locate_config_file(cfg, "solver")
    origin = scfg.get("_target_") or f"built-in {type(solver).__module__}.{type(solver).__name__}"
    print(f"conformance of solver {solver.name!r} ({origin}{f', {where}' if where else ''}), "
          f"options {solver.resolution() or scfg}")
    type(solver).preload()
    _problems()  # build the catalogue once, before the checks fork

    def make():
        return make_solver(scfg)

    rows = []
    for name in CHECKS:
        rows.append(_run_check_isolated(name, make, CHECK_TIMEOUT))
        if sys.stderr.isatty():  # progress for people; quiet in logs and tests
            print(f"  {name}: {rows[-1][1]}", file=sys.stderr, flush=True)
    print(format_conformance(rows))
    failed = [r for r in rows if r[1] == "FAIL"]
    n_na = sum(r[1] == "n/a" for r in rows)
    print(f"{len(rows)} checks: {len(rows) - len(failed) - n_na} passed, {n_na} not applicable, "
          f"{len(failed)} failed")
    return 1 if failed else 0
