"""The solver contract: every method family implements `_solve`; `Solver.solve` owns the rest.

Rules for an implementer (the harness relies on each of them):

1. Subclass `Solver`, set the class attributes `name` (registry key = conf/solver/<name>.yaml),
   `family` (``fd``, ``spectral``, ``fem``, ``pinn`` or your own), `Params` (a dataclass
   of the solver's options, validated once at the config boundary) and `tags`
   (capabilities: problem kinds, domain kinds, determinism).
2. Implement ``_solve(problem, budget, ctx) -> Solution``. Use ``ctx.phase("setup")`` and
   ``ctx.phase("solve")`` to time the phases; do not time yourself.
3. Never look for the exact solution: ``problem`` is a public view without it, and boundary
   data may only be evaluated on the boundary.
4. Return a `Solution` whose ``evaluate(points)`` interpolant does not lower the method's order
   of accuracy, with ``nodes``/``values`` at the solver's own nodes when it has nodes.
5. Raise `Unsupported` (or return False from `supports`) for pairings you cannot run; any other
   exception becomes a ``failed`` record, never a crash of the sweep.
"""
from __future__ import annotations

import dataclasses
import time
from contextlib import contextmanager
from typing import Any, Callable, ClassVar

import numpy as np

__all__ = ["Solver", "Solution", "Unsupported", "Diverged", "RunContext", "Budget", "Tags"]


class Unsupported(Exception):
    """The solver cannot run this problem (the record gets status `unsupported`)."""


class Diverged(Exception):
    """Training or iteration diverged (NaN/Inf); carries the step where it happened."""

    def __init__(self, message: str, step: int | None = None):
        super().__init__(message)
        self.step = step


@dataclasses.dataclass(frozen=True)
class Budget:
    """Resources granted to one case.

    Attributes
    ----------
    time_limit : float
        Wall-clock seconds for the whole case; the harness kills the case after it.
    train_time : float or None
        Wall-clock cap for iterative/learned methods' own loop (PINN training); they must stop
        by themselves when it is spent. None means: a fraction of `time_limit`.
    memory_limit_mb : float
        Resident memory cap in MiB; the harness kills the case above it.
    """

    time_limit: float = 600.0
    train_time: float | None = None
    memory_limit_mb: float = 8192.0

    @property
    def train_cap(self) -> float:
        # Leave room for evaluation and record writing inside the hard limit.
        return self.train_time if self.train_time is not None else 0.8 * self.time_limit


@dataclasses.dataclass(frozen=True)
class Tags:
    """Capability tags: which problems a solver can run and which conformance checks apply."""

    kinds: frozenset = frozenset({"laplace", "poisson"})
    domains: frozenset = frozenset({"rectangle"})
    deterministic: bool = True
    dims: frozenset = frozenset({2})


class RunContext:
    """Timing and monitoring services the harness lends to a solver during one case.

    ``phase(name)`` accumulates wall time per phase. ``checkpoint(...)`` lets iterative methods
    record their training history; the harness-side error evaluation it triggers is excluded
    from the method's time (``monitor_time`` records it separately).
    """

    def __init__(self, seed: int = 0, monitor: Callable[[Callable], dict] | None = None,
                 progress: bool = False, label: str = ""):
        self.seed = int(seed)
        self.timings: dict[str, float] = {}
        self.history: list[dict] = []
        self.monitor_time = 0.0
        self._monitor = monitor
        self.progress = progress
        self.label = label
        self._phase_start: tuple[float, float] | None = None

    @contextmanager
    def phase(self, name: str):
        self._phase_start = (time.perf_counter(), self.monitor_time)
        try:
            yield
        finally:
            self.timings[name] = self.timings.get(name, 0.0) + self._running()
            self._phase_start = None

    def _running(self) -> float:
        """Method time of the running phase so far (monitoring excluded)."""
        if self._phase_start is None:
            return 0.0
        t0, monitor0 = self._phase_start
        return time.perf_counter() - t0 - (self.monitor_time - monitor0)

    def elapsed(self) -> float:
        """Method time spent so far: finished phases plus the running one, monitoring excluded."""
        return sum(self.timings.values()) + self._running()

    def checkpoint(self, step: int, losses: dict[str, float], evaluate: Callable | None = None,
                   **extra) -> dict:
        """Record one history point; the harness computes errors of `evaluate` if given."""
        entry = {"step": int(step), "time": self.elapsed(), **{k: float(v) for k, v in losses.items()}}
        entry.update(extra)
        if evaluate is not None and self._monitor is not None:
            t0 = time.perf_counter()
            entry.update(self._monitor(evaluate))
            self.monitor_time += time.perf_counter() - t0
        self.history.append(entry)
        return entry


@dataclasses.dataclass
class Solution:
    """What every solver returns.

    Attributes
    ----------
    evaluate : callable
        ``evaluate(points) -> values`` for points of shape ``(m, 2)``; the method's own interpolant.
    nodes, values : ndarray or None
        The solver's own nodes ``(n, 2)`` and its nodal values ``(n,)`` (None for mesh-free methods).
    eigenvalues : ndarray or None
        For eigen problems: the computed eigenvalues, ascending.
    modes : callable or None
        For eigen problems: ``modes(points) -> (m, k)`` values of the k computed modes.
    info : dict
        Cost figures: ``dofs`` or ``params``, ``iterations``, ``h``, anything method specific
        (JSON-serialisable scalars, strings or small lists).
    """

    evaluate: Callable[[np.ndarray], np.ndarray]
    nodes: np.ndarray | None = None
    values: np.ndarray | None = None
    eigenvalues: np.ndarray | None = None
    modes: Callable[[np.ndarray], np.ndarray] | None = None
    info: dict = dataclasses.field(default_factory=dict)


class Solver:
    """Base class of all solvers (see the module docstring for the rules)."""

    name: ClassVar[str] = ""
    family: ClassVar[str] = ""
    description: ClassVar[str] = ""
    reference: ClassVar[str] = ""
    tags: ClassVar[Tags] = Tags()

    @dataclasses.dataclass
    class Params:
        pass

    def __init__(self, params: Any = None, **kwargs):
        from lapbench.config import build_params

        if params is None or isinstance(params, dict):
            params = build_params(self.Params, {**(params or {}), **kwargs}, prefix="solver")
        self.params = params

    # -- capabilities --------------------------------------------------------------------------
    def supports(self, problem) -> tuple[bool, str]:
        """Whether this solver can run `problem`, and why not."""
        if problem.kind not in self.tags.kinds:
            return False, (f"solver {self.name} handles problem kinds {sorted(self.tags.kinds)}, "
                           f"not {problem.kind!r}")
        if problem.domain.kind not in self.tags.domains:
            return False, (f"solver {self.name} handles domains {sorted(self.tags.domains)}, "
                           f"not {problem.domain.kind!r}")
        dim = getattr(problem.domain, "dim", 2)
        if dim not in self.tags.dims:
            return False, (f"solver {self.name} handles dimensions {sorted(self.tags.dims)}, "
                           f"not {dim}")
        return self._supports(problem)

    def _supports(self, problem) -> tuple[bool, str]:
        return True, ""

    # modules a case may import lazily inside its timed phases; `preload` imports them in the
    # harness parent, so that every forked case finds them loaded (not only the ones after it)
    preload_modules: ClassVar[tuple[str, ...]] = ()

    @classmethod
    def preload(cls) -> None:
        """Import heavy modules in the harness parent so that isolated cases do not pay for them."""
        import importlib

        for module in cls.preload_modules:
            importlib.import_module(module)

    def resolution(self) -> dict:
        """The resolution knobs of this run, copied into records (e.g. ``{"n": 64}``)."""
        return {k: getattr(self.params, k) for k in ("n", "p", "level") if hasattr(self.params, k)}

    # -- the public entry point ----------------------------------------------------------------
    def solve(self, problem, budget: Budget | None = None, ctx: RunContext | None = None) -> Solution:
        """Validate the pairing, run `_solve`, check the result's shape."""
        budget = budget or Budget()
        ctx = ctx or RunContext()
        ok, reason = self.supports(problem)
        if not ok:
            raise Unsupported(reason)
        sol = self._solve(problem, budget, ctx)
        if not isinstance(sol, Solution):
            raise TypeError(f"solver {self.name} returned {type(sol).__name__}, expected Solution")
        if not callable(sol.evaluate):
            raise TypeError(f"solver {self.name}: Solution.evaluate is not callable")
        sol.info.setdefault("timings", dict(ctx.timings))
        return sol

    def _solve(self, problem, budget: Budget, ctx: RunContext) -> Solution:  # pragma: no cover
        # Deliberate: the one private hook every family overrides (rule 2 of the module
        # docstring); plug-ins without it are refused at load time by lapbench.plugins.
        raise NotImplementedError(f"{type(self).__name__} must implement _solve")
