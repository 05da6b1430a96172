"""Solve to a tolerance: the cheapest resolution of a classical method that reaches a given error.

Every classical solver has one declared resolution knob (`KNOBS`, or a plug-in class's
``resolution_knob`` attribute): the grid's ``n`` for finite differences and sine transforms, the
polynomial degree ``n`` for Chebyshev collocation, the mesh ``level`` for finite elements, the
refinement ``refine`` for pixel grids. The search, for one case and one tolerance:

1. *Growing.* A geometric knob starts at `Knob.start` and doubles; a linear knob (mesh levels,
   each one halving h) steps by one. Each probe is an ordinary case (`lapbench.run.prepare` +
   `lapbench.run.execute`): isolated, timed like any other, recorded in the results folder, and
   skipped with its record when it exists (so an interrupted search resumes where it stopped).
2. *Bisection.* Once a probe reaches the tolerance, a geometric knob is bisected on the integers
   between the last probe that did not reach it and the first that did, so the result is the
   smallest knob value reaching the tolerance, assuming the error falls monotonically with the
   knob inside that bracket (the search states this assumption; it does not verify it).
3. *Stops without reaching it.* An error floor (once refining has lowered the error, two probes
   in a row that lower the best error by less than `FLOOR_GAIN`: round-off, a reference's own
   accuracy or a method's limit; an unresolved plateau at coarse resolutions is not one), a limit
   (the case timed out, ran out of memory, or the solver's memory estimate refused it up front),
   any other failure of a probe, the knob's upper bound, or an unsupported pairing.

The error is the record's metric `metric`: ``rel_l2`` by default, ``eig_rel_max`` (worst relative
eigenvalue error) for eigen problems. Results are plain data (`ToleranceResult`, `Probe`); the
search prints nothing itself (progress goes through the `on_probe` callback).
"""
from __future__ import annotations

import copy
import dataclasses
import math
from pathlib import Path
from typing import Callable

from lapbench.config import ConfigError

__all__ = ["Knob", "KNOBS", "Probe", "ToleranceResult", "knob_for", "solve_to_tolerance", "metric_for",
           "SOLUTION_METRICS", "EIGEN_METRICS", "FLOOR_GAIN", "AUTO"]

AUTO = "auto"   # the value of a knob in a suite or override that asks for solve-to-tolerance

SOLUTION_METRICS = ("rel_l2", "abs_l2", "max_abs", "rel_max", "nodal_max")
EIGEN_METRICS = ("eig_rel_max", "eig_rel_1", "mode_angle_max")

# A probe "improves" when it lowers the best error so far to below FLOOR_GAIN times it. Doubling n
# of a second-order method divides the error by about 4 and one mesh level by about 4 (P1) or 8
# (P2) [common practice]; two probes in a row that gain less than 30 % mean a floor.
FLOOR_GAIN = 0.7
FLOOR_PATIENCE = 2

LIMIT_STATUSES = ("timeout", "out_of_memory")


@dataclasses.dataclass(frozen=True)
class Knob:
    """A solver's resolution knob: config key, range, and how the search walks it.

    ``scale`` is ``geometric`` (doubling, then bisection on the integers) or ``linear`` (steps of
    one: mesh levels, where one step already halves h). ``ties`` sets other config keys to a
    multiple of the knob (the disk solver's angular points ``m = 2 n``).
    """

    key: str
    lo: int
    hi: int
    start: int
    scale: str = "geometric"
    ties: tuple = ()
    clears: tuple = ()     # config keys that would override the knob (FEM's target mesh size `h`)

    def __post_init__(self):
        if self.scale not in ("geometric", "linear"):
            raise ConfigError(f"`scale` of a resolution knob must be geometric or linear, got {self.scale!r}")
        if not (self.lo <= self.start <= self.hi):
            raise ConfigError(f"resolution knob `{self.key}`: start {self.start} outside [{self.lo}, {self.hi}]")

    def settings(self, value: int) -> dict:
        """The solver config entries for knob value `value` (the knob and its ties)."""
        return {self.key: int(value), **{k: int(f * value) for k, f in self.ties}, **{k: None for k in self.clears}}


# The declared knob of every built-in classical solver (read from each solver's Params: ranges stay
# inside the Params' own limits; upper bounds are where memory or time would refuse anyway).
KNOBS: dict[str, Knob] = {
    "fd5": Knob("n", 4, 8192, 8),
    "fd9": Knob("n", 4, 8192, 8),
    "fst5": Knob("n", 4, 16384, 8),
    "fst9": Knob("n", 4, 16384, 8),
    "cheb": Knob("n", 4, 512, 8),
    "disk_cheb": Knob("n", 4, 512, 8, ties=(("m", 2),)),   # angular points grow with the radial ones
    "fem_p1": Knob("level", 0, 12, 2, scale="linear", clears=("h",)),
    "fem_p2": Knob("level", 0, 11, 1, scale="linear", clears=("h",)),
    "pixel5": Knob("refine", 1, 64, 1),
}


def knob_for(solver_cfg: dict) -> Knob:
    """The resolution knob of a solver config: a plug-in class's ``resolution_knob``, else `KNOBS`."""
    from lapbench.run import make_solver

    solver = make_solver({k: v for k, v in solver_cfg.items() if not _is_auto(v)})   # `auto`: the default stands in
    knob = getattr(type(solver), "resolution_knob", None) or KNOBS.get(solver.name)
    if knob is None:
        raise ConfigError(f"`solver` {solver.name} has no declared resolution knob, so it cannot be solved to a "
                          f"tolerance; solvers with one: {', '.join(sorted(KNOBS))} (plug-ins: a class "
                          f"attribute `resolution_knob = lapbench.tolerance.Knob(...)`)")
    return knob


def _is_auto(v) -> bool:
    return isinstance(v, str) and v.strip().lower() == AUTO


def metric_for(kind: str, metric: str | None) -> str:
    """The metric a tolerance refers to, checked against the problem kind (ConfigError otherwise)."""
    names = EIGEN_METRICS if kind == "eigen" else SOLUTION_METRICS
    if metric is None:
        return names[0]
    if metric not in names:
        raise ConfigError(f"`metric` for {'eigen' if kind == 'eigen' else kind} problems must be one of "
                          f"{', '.join(names)}; got {metric!r}")
    return metric


@dataclasses.dataclass
class Probe:
    """One probe of the search: knob value, how the case ended, its error and method time."""

    value: int
    status: str
    error: float = math.nan
    time_s: float = math.nan
    path: str = ""
    skipped: bool = False      # the record existed (resumed search)
    reason: str = ""

    @property
    def ok(self) -> bool:
        return self.status == "ok" and math.isfinite(self.error)


@dataclasses.dataclass
class ToleranceResult:
    """Outcome of one search. ``status``: ``reached``, ``floor``, ``limit``, ``range``, ``failed``
    or ``unsupported``; ``value`` the smallest knob value reaching the tolerance (None if none),
    ``record`` its record, ``probes`` every probe in the order run."""

    solver: str
    knob: Knob
    tolerance: float
    metric: str
    status: str
    value: int | None = None
    record: dict | None = None
    probes: list = dataclasses.field(default_factory=list)
    reason: str = ""

    @property
    def reached(self) -> bool:
        return self.status == "reached"

    @property
    def time_s(self) -> float:
        return float(((self.record or {}).get("timings") or {}).get("total", math.nan)) if self.record else math.nan

    @property
    def error(self) -> float:
        return float(((self.record or {}).get("metrics") or {}).get(self.metric, math.nan)) if self.record else math.nan

    def resolution(self) -> str:
        if self.value is None:
            return ""
        return ", ".join(f"{k}={v}" for k, v in self.knob.settings(self.value).items() if v is not None)

    def best_probe(self) -> Probe | None:
        ok = [p for p in self.probes if p.ok]
        return min(ok, key=lambda p: p.error) if ok else None


def _with_knob(case, knob: Knob, value: int):
    c = copy.copy(case)
    c.solver = {**case.solver, **knob.settings(value)}
    return c


def solve_to_tolerance(case, tolerance: float, metric: str | None = None, results_dir: str | Path = "results",
                       knob: Knob | None = None, force: bool = False,
                       on_probe: Callable[[Probe, dict | None], None] | None = None) -> ToleranceResult:
    """The smallest resolution of `case`'s solver whose record's `metric` is at most `tolerance`.

    Parameters
    ----------
    case : lapbench.run.Case
        The case to search; its solver config's knob value is replaced by each probe's (an
        ``auto`` value is fine).
    tolerance : float
        The error to reach (positive).
    metric : str or None
        Record metric (`SOLUTION_METRICS`, `EIGEN_METRICS`); None: ``rel_l2``, or ``eig_rel_max``
        for eigen problems.
    results_dir : path
        Where probes' records go (and are found again when resuming).
    knob : Knob or None
        Overrides the solver's declared knob (`knob_for`).
    force : bool
        Rerun probes whose record exists.
    on_probe : callable or None
        ``on_probe(probe, record)`` after every probe (progress lines; nothing is printed here).

    Returns
    -------
    ToleranceResult
    """
    from lapbench.run import execute, prepare

    if not (isinstance(tolerance, (int, float)) and math.isfinite(tolerance) and tolerance > 0):
        raise ConfigError(f"`tolerance` must be a positive number, got {tolerance!r}")
    knob = knob or knob_for(case.solver)
    first = prepare(_with_knob(case, knob, knob.start), results_dir)
    metric = metric_for(first.problem.kind, metric)
    result = ToleranceResult(first.solver.name, knob, float(tolerance), metric, "failed")
    seen: dict[int, tuple[Probe, dict | None]] = {}

    def probe(value: int) -> Probe:
        if value in seen:
            return seen[value][0]
        try:
            prep = first if value == knob.start else prepare(_with_knob(case, knob, value), results_dir)
        except ConfigError as exc:      # the solver's memory estimate refuses this resolution up front
            p = Probe(value, "refused", reason=str(exc))
            seen[value] = (p, None)
            result.probes.append(p)
            if on_probe:
                on_probe(p, None)
            return p
        rec, skipped = execute(prep, force=force)
        err = (rec.get("metrics") or {}).get(metric)
        p = Probe(value, rec.get("status", "failed"),
                  float(err) if isinstance(err, (int, float)) else math.nan,
                  float((rec.get("timings") or {}).get("total") or math.nan), str(prep.path), skipped,
                  str(rec.get("reason") or ""))
        if p.status == "ok" and not math.isfinite(p.error):
            p.reason = p.reason or f"the record has no finite `{metric}`"
        seen[value] = (p, rec)
        result.probes.append(p)
        if on_probe:
            on_probe(p, rec)
        return p

    def stop(status: str, reason: str) -> ToleranceResult:
        result.status, result.reason = status, reason
        return result

    # 1. grow until the tolerance is reached, a floor shows, a limit refuses, or the range ends
    value, below, best, stale, converging = knob.start, None, math.inf, 0, False
    while True:
        p = probe(value)
        if p.status == "refused" or p.status in LIMIT_STATUSES:
            return stop("limit", f"{knob.key}={value}: {p.status}: {p.reason}".strip())
        if p.status == "unsupported":
            return stop("unsupported", p.reason)
        if not p.ok:
            return stop("failed", f"{knob.key}={value}: {p.status}: {p.reason}".strip())
        if p.error <= tolerance:
            break
        below = value
        if p.error < FLOOR_GAIN * best:
            stale, converging = 0, converging or math.isfinite(best)
        elif converging:          # a coarse, unresolved plateau before any gain is not a floor
            stale += 1
        best = min(best, p.error)
        if stale >= FLOOR_PATIENCE:
            return stop("floor", f"the error stopped improving at {best:.3g} ({knob.key} up to {value})")
        if value >= knob.hi:
            return stop("range", f"{knob.key} reached its upper bound {knob.hi} at error {best:.3g}")
        value = min(knob.hi, value * 2 if knob.scale == "geometric" else value + 1)
    # 2. bisection between the last value that missed and the first that reached it
    hit = value
    lo = below if below is not None else knob.lo - 1
    if knob.scale == "geometric":
        while hit - lo > 1:
            mid = (lo + hit) // 2
            if mid < knob.lo:
                break
            q = probe(mid)
            if q.ok and q.error <= tolerance:
                hit = mid
            else:
                lo = mid
    elif below is None and hit > knob.lo:   # linear knob reached at its start: try the coarser ones
        while hit > knob.lo:
            q = probe(hit - 1)
            if not (q.ok and q.error <= tolerance):
                break
            hit -= 1
    result.status, result.value, result.record = "reached", hit, seen[hit][1]
    return result
