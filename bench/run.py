"""Run one case in isolation: fork from the preloaded harness, pin threads, time, measure, record.

Each case runs in a forked child (the parent has already imported numpy/scipy and, for learned
methods, torch, so the child starts in milliseconds). The parent enforces the wall-clock limit and
the memory limit, turns every way a case can end (normal return, exception, NaN, timeout, signal,
memory) into a status, and writes exactly one record atomically.
"""
from __future__ import annotations

import dataclasses
import os
import sys
import time
import traceback
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError, build_params, positive
from lapbench.isolate import cpu_times, rss_mb, run_isolated
from lapbench.records import (SCHEMA_VERSION, config_hash, environment, problem_config_hash, problem_id, read_record,
                           resolution_label,
                           record_path, write_record)

__all__ = ["Case", "Prepared", "BudgetConfig", "prepare", "execute", "run_case", "make_solver",
           "problem_key", "effective_threads", "launcher_share"]

KILL_GRACE = 2.0          # seconds the harness adds to a case's time limit for evaluation


@dataclasses.dataclass
class BudgetConfig:
    """Per-case resources (conf/config.yaml, `budget`)."""

    time_limit: float = 600.0
    train_time: float | None = None
    memory_limit_mb: float = 8192.0

    def __post_init__(self):
        positive("time_limit", self.time_limit)
        if self.train_time is not None:
            positive("train_time", self.train_time)
        positive("memory_limit_mb", self.memory_limit_mb)


@dataclasses.dataclass
class TimingConfig:
    """How deterministic methods are timed (conf/config.yaml, `timing`).

    A warm-up run, then repeats until at least `repeats` runs and `min_time` seconds of measured
    time, stopping early once `max_time` seconds are measured or have passed on the wall clock since
    the first run (slow cases, and solvers with unmeasured work between phases, stay affordable) or
    `max_repeats` runs are done. A first run that alone takes `min_time` counts as a repeat
    instead of a warm-up: cold-start effects are negligible at that scale. Methods whose run
    records a training history, and non-deterministic ones, run once (the history is the
    measurement). The record keeps every repeat; `timings.total` is the median run's.
    """

    warmup: int = 1
    repeats: int = 5
    min_time: float = 0.2
    max_time: float = 3.0
    max_repeats: int = 1000

    def __post_init__(self):
        if not isinstance(self.warmup, int) or self.warmup < 0:
            raise ConfigError(f"`timing.warmup` must be a non-negative integer, got {self.warmup!r}")
        positive("timing.repeats", self.repeats, integer=True, maximum=100000)
        positive("timing.max_repeats", self.max_repeats, integer=True, maximum=100000)
        if self.min_time < 0:
            raise ConfigError(f"`timing.min_time` must be non-negative, got {self.min_time!r}")
        positive("timing.max_time", self.max_time)


@dataclasses.dataclass
class Case:
    """One case: what to run (configs as plain mappings) and how."""

    problem: dict
    solver: dict
    problem_label: str | None = None
    seed: int = 0
    threads: int = 1
    budget: dict = dataclasses.field(default_factory=dict)
    suite: str | None = None
    save_field: bool = False
    timing: dict = dataclasses.field(default_factory=dict)   # TimingConfig fields; not part of identity

    def identity(self) -> dict:
        """What makes two cases the same measurement (hashed into the record's file name)."""
        return {"problem": self.problem, "problem_label": self.problem_label, "solver": self.solver,
                "seed": self.seed, "threads": self.threads, "budget": self.budget}


@dataclasses.dataclass
class Prepared:
    case: Case
    problem: object
    solver: object
    budget: object
    chash: str
    path: Path
    unsupported: str | None = None
    timing: TimingConfig = dataclasses.field(default_factory=TimingConfig)
    tolerance: dict | None = None   # solve-to-tolerance cases of a suite: {"tolerance", "metric"} (lapbench.tolerance)


def make_solver(cfg: dict):
    """Instantiate a solver from its config: registry name, or an importable `_target_` class."""
    from lapbench.solvers import get_solver

    cfg = dict(cfg)
    if cfg.get("_target_"):
        from lapbench.plugins import make_plugin_solver  # contract check, provenance

        return make_plugin_solver(cfg)
    cls = get_solver(cfg.get("name"))
    return cls(params={k: v for k, v in cfg.items() if k not in ("name", "_target_")})


def problem_key(prep: "Prepared") -> str:
    """The record's problem id: label, every knob and the domain (lapbench.records.problem_id)."""
    from lapbench.problems import PROBLEMS

    label = prep.case.problem_label or prep.problem.name
    schema = PROBLEMS.get(prep.case.problem.get("name"), (None,))[0]
    defaults = ({f.name: f.default for f in dataclasses.fields(schema) if f.default is not dataclasses.MISSING}
                if dataclasses.is_dataclass(schema) else {})
    return problem_id(label, prep.problem.params, prep.problem.domain.to_dict(), prep.case.problem, defaults)


def prepare(case: Case, results_dir: str | Path = "results") -> Prepared:
    """Validate everything up front (ConfigError on bad input) and locate the record file."""
    from lapbench.problems import make_problem
    from lapbench.solvers.base import Budget

    b = build_params(BudgetConfig, case.budget, prefix="budget")
    budget = Budget(time_limit=b.time_limit, train_time=b.train_time, memory_limit_mb=b.memory_limit_mb)
    positive("threads", case.threads, integer=True, maximum=4096)
    problem = make_problem(case.problem)
    solver = make_solver(case.solver)
    est = getattr(solver, "memory_estimate_mb", lambda: 0.0)()
    if est and est > budget.memory_limit_mb:
        raise ConfigError(
            f"`solver` {solver.name} with {solver.resolution()} needs about {_fmt_mb(est)} of memory, "
            f"above `budget.memory_limit_mb` = {budget.memory_limit_mb:g} MiB; lower the resolution "
            f"or raise the limit")
    timing = build_params(TimingConfig, case.timing or {}, prefix="timing")
    ok, reason = solver.supports(problem)
    chash = config_hash(case.identity())
    label = case.problem_label or problem.name
    path = record_path(results_dir, label, solver.name, chash)
    return Prepared(case, problem, solver, budget, chash, path, None if ok else (reason or "unsupported"), timing)


def _fmt_mb(mb: float) -> str:
    for unit, scale in (("TiB", 2 ** 20), ("GiB", 2 ** 10)):
        if mb >= scale:
            return f"{mb / scale:.1f} {unit}"
    return f"{mb:.0f} MiB"


# -- thread pinning and machine load -------------------------------------------------------------
def effective_threads(requested: int, share: int | None = None) -> tuple[int, int]:
    """(threads to use, cores this case may use): parallel workers split the cores.

    The cores start from the CPUs this process may run on (its affinity mask, where a SLURM or
    cgroup allocation shows) and ``SLURM_CPUS_PER_TASK`` when set. `share` is this worker's part
    under a parallel launcher (`launcher_share`); the environment variable ``LAPBENCH_CORES`` caps
    it by hand. A case runs ``min(requested, cores)`` threads, so workers side by side never ask
    for more threads than there are cores (oversubscription made torch up to 27x slower here).
    """
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    for cap in (os.environ.get("SLURM_CPUS_PER_TASK"), share, os.environ.get("LAPBENCH_CORES")):
        try:
            if cap is not None and int(cap) > 0:
                cores = min(cores, int(cap))
        except ValueError:
            pass
    return max(1, min(requested, cores)), max(1, cores)


def launcher_share(launcher: dict | None, cores: int | None = None) -> int | None:
    """Cores one worker of a Hydra launcher may use (None: the launcher runs one case at a time).

    joblib runs ``n_jobs`` workers side by side on one machine (-1: one per core, -2: all but one,
    as joblib counts), so each gets ``cores // n_jobs``; submitit grants ``cpus_per_task`` per job.
    """
    if not launcher:
        return None
    target = str(launcher.get("_target_", ""))
    if cores is None:
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    if "joblib" in target:
        n = launcher.get("n_jobs")
        n = -1 if n is None else int(n)
        n_eff = n if n > 0 else max(1, cores + 1 + n)
        return max(1, cores // n_eff)
    if "submitit" in target and launcher.get("cpus_per_task"):
        return max(1, int(launcher["cpus_per_task"]))
    return None


def _trim_heap() -> None:
    """glibc's malloc_trim(0): return free heap memory to the system (no-op elsewhere)."""
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):
        pass


_POOLS: dict = {}


def _thread_pools():
    """threadpoolctl's controller of the BLAS/OpenMP pools loaded now, built once in the harness
    parent (after the solver's preload) and inherited by every forked case: inspecting the
    loaded libraries anew cost ~12 ms per case in the child."""
    import sys as _sys

    key = len(_sys.modules)       # a newly imported library (torch after a preload) may bring a pool
    if _POOLS.get("key") != key:
        from threadpoolctl import ThreadpoolController

        _POOLS.update(key=key, controller=ThreadpoolController())
    return _POOLS["controller"]


# -- the child ------------------------------------------------------------------------------------
def _in_child(prep: Prepared, threads: int) -> dict:
    """Run the solver and measure it; returns the child part of the record (never raises)."""
    import random

    from lapbench.metrics import BadSolution, error_field, measure, monitor_fn
    from lapbench.solvers.base import Diverged, RunContext, Solution, Unsupported

    out: dict = {"status": "ok", "reason": ""}
    random.seed(prep.case.seed)
    np.random.seed(prep.case.seed % 2 ** 32)
    if "torch" in sys.modules:
        import torch

        torch.set_num_threads(threads)
        torch.manual_seed(prep.case.seed)
        torch.set_default_dtype(torch.float32)
    problem = prep.problem
    eval_set = problem.eval_set(seed=prep.case.seed)
    monitor = monitor_fn(problem, eval_set)
    public = problem.public()
    progress = sys.stderr.isatty() and os.environ.get("LAPBENCH_CASE_PROGRESS", "1") != "0"
    ctx = RunContext(seed=prep.case.seed, monitor=monitor, progress=progress,
                     label=f"{prep.case.problem_label} {prep.solver.name}")
    import scipy.fft

    # the memory baseline is taken once the problem's own data (evaluation set, exact values)
    # exist: the record's peak_rss_delta_mb is the solver's own memory. Free heap pages inherited
    # from the harness are handed back first: a solver reusing them would add nothing to the
    # resident set (measured: a 200 MiB array showed as 125 MiB after a PINN test in the parent)
    _trim_heap()
    try:
        with open("/proc/self/clear_refs", "w") as fh:  # reset the peak-RSS counter
            fh.write("5")
    except OSError:
        pass
    rss0, _ = rss_mb(os.getpid())
    hwm = None
    solution = None
    runs: list[dict] = []
    try:
        with _thread_pools().limit(limits=threads), scipy.fft.set_workers(threads):
            result = prep.solver.solve(public, prep.budget, ctx)
            if not isinstance(result, Solution):  # plug-ins need not inherit Solver.solve's check
                raise BadSolution(f"solver {prep.solver.name} returned {type(result).__name__}, "
                                  f"expected lapbench.solvers.base.Solution")
            solution = result
            if prep.solver.tags.deterministic and not ctx.history:
                solution, runs = _repeat(prep, public, ctx, solution)
            _, hwm = rss_mb(os.getpid())
            t0 = time.perf_counter()
            out["metrics"] = measure(problem, solution, eval_set)
            out["t_evaluate"] = time.perf_counter() - t0
            if prep.case.save_field and problem.kind != "eigen":
                out["field"] = error_field(problem, solution)
    except Unsupported as exc:
        out.update(status="unsupported", reason=str(exc))
    except Diverged as exc:
        out.update(status="diverged", reason=str(exc), step=exc.step)
    except MemoryError:
        out.update(status="out_of_memory", reason=f"MemoryError inside the case (allocations are refused "
                   f"well above budget.memory_limit_mb = {prep.budget.memory_limit_mb:g} MiB)")
    except BadSolution as exc:
        out.update(status="failed", reason=f"bad solution: {exc}")
    except Exception as exc:  # noqa: BLE001  (a failing case is a record, not a crash)
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" at {Path(tb[-1].filename).name}:{tb[-1].lineno}" if tb else ""
        out.update(status="failed", reason=f"{type(exc).__name__}: {exc}{where}"[:2000])
    out["timings"] = dict(ctx.timings)
    if runs:
        out["timings"], out["timing"] = _timing_summary(runs)
    out["monitor_time"] = ctx.monitor_time
    out["history"] = ctx.history
    if solution is not None:
        out["info"] = _jsonable(solution.info)
        if solution.eigenvalues is not None:
            out["eigenvalues"] = [float(v) for v in np.asarray(solution.eigenvalues).ravel()]
    if hwm is None:
        _, hwm = rss_mb(os.getpid())
    out["peak_rss_mb"] = hwm
    out["peak_rss_delta_mb"] = max(0.0, hwm - rss0)
    return out


def _repeat(prep: Prepared, public, first_ctx, first):
    """Warm-up and repeats of a deterministic solve (TimingConfig); (last solution, runs' phases)."""
    from lapbench.solvers.base import RunContext

    cfg = prep.timing
    start = time.perf_counter()
    runs: list[dict] = []
    first_time = sum(first_ctx.timings.values())
    warm = cfg.warmup if first_time < cfg.min_time else 0
    if warm == 0:
        runs.append(dict(first_ctx.timings))
    warm = max(0, warm - 1)          # the first run was one warm-up
    solution = first
    # repeats never take more than half the case's time limit (the first run is not counted)
    allowance = 0.5 * prep.budget.time_limit
    while len(runs) < cfg.max_repeats:
        measured = sum(sum(r.values()) for r in runs)
        if warm == 0 and (measured >= cfg.max_time or time.perf_counter() - start >= cfg.max_time):
            break
        if warm == 0 and len(runs) >= cfg.repeats and measured >= cfg.min_time:
            break
        last = sum(runs[-1].values()) if runs else first_time
        if time.perf_counter() - start + last > allowance:
            break
        ctx = RunContext(seed=prep.case.seed)
        solution = prep.solver.solve(public, prep.budget, ctx)
        if warm > 0:
            warm -= 1
        else:
            runs.append(dict(ctx.timings))
    if not runs:                      # no time for a repeat after the warm-up: the first run stands
        runs.append(dict(first_ctx.timings))
    return solution, runs


def _timing_summary(runs: list[dict]) -> tuple[dict, dict]:
    """(phases of the median run (upper median), the repeats: every total, min, median, max)."""
    totals = [sum(r.values()) for r in runs]
    order = sorted(range(len(runs)), key=lambda i: totals[i])
    mid = order[len(order) // 2]
    return dict(runs[mid]), {"repeats": totals, "min": min(totals), "median": totals[mid], "max": max(totals),
                             "statistic": "median" if len(runs) > 1 else "single"}


def _jsonable(info: dict) -> dict:
    clean = {}
    for k, v in (info or {}).items():
        if isinstance(v, (np.integer,)):
            v = int(v)
        elif isinstance(v, (np.floating,)):
            v = float(v)
        elif isinstance(v, np.ndarray):
            v = v.tolist() if v.size <= 64 else f"array{v.shape}"
        if isinstance(v, (str, int, float, bool, type(None), list, dict)):
            clean[k] = v
    return clean


# -- the parent -----------------------------------------------------------------------------------
def _fork_and_wait(prep: Prepared, threads: int) -> dict:
    """The case in a forked child (lapbench.isolate), within its time and memory limits."""
    limit = prep.budget.time_limit
    out = run_isolated(lambda: _in_child(prep, threads), limit + KILL_GRACE, prep.budget.memory_limit_mb,
                       limit_text=f"the time limit of {limit:g} s")
    if out.status is not None:
        return {"status": out.status, "reason": out.reason, "wall": out.wall, "peak_rss_mb": out.peak_rss_mb}
    return {**out.result, "wall": out.wall}


def _ensure_reference(prep: Prepared) -> str | None:
    """Let the problem compute or load its reference (results_dir = the records' folder's parent)."""
    ensure = getattr(prep.problem, "ensure_reference", None)
    if ensure is None:
        return None
    try:
        ensure(prep.path.parent.parent)
    except Exception as exc:  # noqa: BLE001  (a failing reference is a record, not a crash)
        return f"computing the reference failed: {type(exc).__name__}: {exc}"[:2000]
    return None


def execute(prep: Prepared, force: bool = False, cores: int | None = None) -> tuple[dict, bool]:
    """Run a prepared case unless its record exists; returns (record, skipped).

    `cores` is this worker's share of the machine under a parallel launcher (`launcher_share`).
    """
    if not force and prep.path.exists():
        rec = read_record(prep.path)
        if rec is not None:
            return rec, True
    threads, cores = effective_threads(prep.case.threads, cores)
    from lapbench import calibration

    # computed references (eigen problems without closed form) are built here, in the parent and
    # before the clock starts, and cached under results_dir/cache: never on the solver's time
    ref_error = _ensure_reference(prep) if prep.unsupported is None else None
    # machine speed right before the case, same process and load: `lapbench check` divides by it
    cal = {}
    if prep.unsupported is None:
        cal_s, cal_age = calibration.calibration_seconds()
        cal = {"calibration_s": cal_s, "calibration_age_s": round(cal_age, 3), "calibration_kernel": calibration.KERNEL}
    started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    load0 = os.getloadavg()[0] if hasattr(os, "getloadavg") else None
    busy0, own0 = cpu_times()
    if prep.unsupported is not None:
        child = {"status": "unsupported", "reason": prep.unsupported, "wall": 0.0}
    elif ref_error is not None:
        child = {"status": "failed", "reason": ref_error, "wall": 0.0}
    else:
        type(prep.solver).preload()
        _thread_pools()
        child = _fork_and_wait(prep, threads)
    busy1, own1 = cpu_times()
    wall = child.get("wall", 0.0)
    foreign = max(0.0, (busy1 - busy0) - (own1 - own0))
    record = _build_record(prep, child, threads, cores, started, {
        "loadavg_1min_start": load0,
        "loadavg_1min_end": os.getloadavg()[0] if hasattr(os, "getloadavg") else None,
        "foreign_cpu_s": foreign,
        "foreign_load": foreign / wall if wall > 0.05 else None,
        **cal,
    })
    write_record(prep.path, record)
    return record, False


def _build_record(prep: Prepared, child: dict, threads: int, cores: int, started: str, load: dict) -> dict:
    case, solver, problem = prep.case, prep.solver, prep.problem
    info = child.get("info") or {}
    timings = dict(child.get("timings") or {})
    total = sum(v for v in timings.values())
    timings.update(total=total, evaluate=child.get("t_evaluate"), monitor=child.get("monitor_time", 0.0),
                   wall=child.get("wall"))
    resolution = solver.resolution()
    label = case.problem_label or problem.name
    rec = {
        "schema_version": SCHEMA_VERSION,
        "case_id": prep.chash[:16],
        "config_hash": prep.chash,
        "created": started,
        "suite": case.suite,
        "problem": {**problem.describe(), "label": label, "id": problem_key(prep),
                    "config": case.problem, "config_hash": problem_config_hash(case.problem)},
        "solver": {"name": solver.name, "family": solver.family, "config": case.solver,
                   "resolution": resolution,
                   "resolution_label": resolution_label(resolution),
                   "deterministic": solver.tags.deterministic,
                   **getattr(solver, "provenance", lambda: {})()},
        "seed": case.seed,
        "threads": threads,
        "threads_requested": case.threads,
        "cores_available": cores,
        "budget": dataclasses.asdict(prep.budget),
        "status": child.get("status", "failed"),
        "reason": child.get("reason", ""),
        "metrics": child.get("metrics") or {},
        "timings": timings,
        # deterministic methods: warm-up then repeats (TimingConfig); timings.total is the median run's
        "timing": child.get("timing") or {"repeats": [total] if "total" in timings else [], "statistic": "single"},
        "cost": {"dofs": info.get("dofs"), "params": info.get("params"), "iterations": info.get("iterations"),
                 "h": info.get("h"), "peak_rss_mb": child.get("peak_rss_mb"),
                 "peak_rss_delta_mb": child.get("peak_rss_delta_mb")},
        "info": info,
        "history": child.get("history") or [],
        "environment": {**environment(), **load},
    }
    if "step" in child:
        rec["step"] = child["step"]
    if "eigenvalues" in child:
        rec["eigenvalues"] = child["eigenvalues"]
    if "field" in child:
        rec["field"] = child["field"]
    return rec


def run_case(case: Case, results_dir: str | Path = "results", force: bool = False) -> tuple[dict, bool]:
    """prepare + execute: validate, then run isolated and write the record."""
    return execute(prepare(case, results_dir), force=force)
