"""The family's one training driver: Adam with an exponential learning-rate schedule, then L-BFGS
with a strong-Wolfe line search, over any `Objective`.

An objective is the parameters and a callable ``objective(step) -> (total, logs)``: the loss
tensor to minimise and the named terms written to the history (tensors, floats or None). It may
define ``after_adam_step(step, more)`` (the PINN's point resampling and refinement) and
``before_lbfgs()`` (called once when L-BFGS starts: the PINN's coordinate sampling ends there,
since L-BFGS needs one deterministic objective for its line search and curvature pairs). The PINN
solvers (`lapbench.solvers.pinn.losses.PINNObjective`) and the neural eigen-solver (`lapbench.solvers.pinn.eigen`)
both train through `train`.

Budgets: steps per phase; the wall-clock cap `cap` (seconds from the call, checked before every
Adam step and inside every L-BFGS function evaluation; the lowest loss evaluated is restored when
it cuts L-BFGS); an early stop when the loss has not improved by a relative ``plateau_tol`` for
``patience`` steps. L-BFGS runs in chunks of LBFGS_CHUNK iterations, each allowed LBFGS_EVALS
function evaluations: a chunk cut by that allowance goes on; one that stops by L-BFGS's own
tolerances (or a failed line search) ends the phase, unless ``lbfgs_restarts`` allows a restart
from the best point with a fresh curvature history while the restarts still gain. NaN or Inf in
the loss, or a loss grown by DIVERGENCE_FACTOR, raises `lapbench.solvers.base.Diverged` with the step.
Checkpoints are spaced geometrically in training time; the harness evaluates `evaluate` there
(its time is excluded).
"""
from __future__ import annotations

import dataclasses
import math
import sys
import time
from typing import Callable

import torch

from lapbench.solvers.base import Diverged

__all__ = ["Objective", "Plateau", "Schedule", "TrainResult", "train", "CHECKPOINT_FIRST",
           "CHECKPOINT_GROWTH", "LBFGS_CHUNK", "LBFGS_EVALS"]

# History checkpoints at training times CHECKPOINT_FIRST * CHECKPOINT_GROWTH^k seconds: about ten
# per decade of time, enough to read time-to-tolerance off the curve to ~25 % while a 5-minute
# run costs only ~40 harness evaluations.
CHECKPOINT_FIRST = 0.05
CHECKPOINT_GROWTH = 1.25
# L-BFGS iterations per optimizer.step() call: each call re-evaluates the loss once at its start,
# so chunks keep that overhead near 5 % while checkpoints and plateau checks stay frequent.
LBFGS_CHUNK = 20
# Function evaluations per chunk (torch's max_eval): enough for a line search of a few
# evaluations per iteration. A chunk that spends them all is cut, not converged.
LBFGS_EVALS = LBFGS_CHUNK * 5 // 4 + 25
# A restart must lower the best loss by this much (relative) over the previous restart.
LBFGS_RESTART_GAIN = 1e-9
# A loss this many times its first value (ten orders of magnitude) counts as diverged.
DIVERGENCE_FACTOR = 1e10


@dataclasses.dataclass
class Schedule:
    """The optimisation budget and its stopping rules (same-named options of a solver's Params)."""

    adam_steps: int = 2000
    lr: float = 1e-3
    lr_decay: float = 0.1          # lr at the last Adam step = lr * lr_decay (exponential)
    lbfgs_steps: int = 1000
    lbfgs_history: int = 50
    patience: int = 1000
    plateau_tol: float = 1e-4
    lbfgs_restarts: int = 0        # fresh-history restarts after an early L-BFGS stop

    @classmethod
    def of(cls, params, **over) -> "Schedule":
        """The schedule from the same-named fields of `params`, then `over`."""
        names = {f.name for f in dataclasses.fields(cls)}
        return cls(**{**{n: getattr(params, n) for n in names if hasattr(params, n)}, **over})


@dataclasses.dataclass
class Objective:
    """A loss to minimise over `params`: ``fn(step) -> (total, logs)`` (module docstring)."""

    fn: Callable
    params: list

    def __call__(self, step: int):
        return self.fn(step)


@dataclasses.dataclass
class TrainResult:
    steps: int = 0                 # global step counter after training (Adam steps + L-BFGS iterations)
    adam_steps: int = 0
    lbfgs_iterations: int = 0
    lbfgs_evaluations: int = 0
    lbfgs_restarts: int = 0
    stopped: str = "completed"     # completed | time_cap | plateau | converged
    final_loss: float = float("nan")


class _OutOfTime(Exception):
    """Raised inside the L-BFGS closure when the wall-clock cap is spent."""


class _Checkpoints:
    """Geometrically spaced checkpoints in training time, plus forced ones at the phase ends."""

    def __init__(self, ctx, evaluate, t_start: float, tags: dict):
        self.ctx, self.evaluate, self.t_start, self.tags = ctx, evaluate, t_start, tags
        self.next = CHECKPOINT_FIRST
        self.last_step = None

    def due(self) -> bool:
        return self.ctx.elapsed() - self.t_start >= self.next

    def record(self, step: int, losses: dict, phase: str) -> None:
        if step == self.last_step:
            return
        clean = {k: float(v) for k, v in losses.items() if v is not None}
        self.ctx.checkpoint(step, clean, evaluate=self.evaluate, phase=phase, **self.tags)
        self.last_step = step
        tau = self.ctx.elapsed() - self.t_start
        while self.next <= tau:
            self.next *= CHECKPOINT_GROWTH


class Plateau:
    """No relative improvement by `tol` for `patience` steps (works for negative energies too)."""

    def __init__(self, patience: int, tol: float):
        self.patience, self.tol = patience, tol
        self.best = math.inf
        self.best_step = 0

    def update(self, step: int, value: float) -> bool:
        if not math.isfinite(self.best) or value < self.best - self.tol * abs(self.best):
            self.best, self.best_step = value, step
        return self.patience > 0 and step - self.best_step >= self.patience


class _Guard:
    """Divergence: a NaN/Inf loss, or a loss grown by DIVERGENCE_FACTOR over the first one.

    The second rule catches saturating activations (tanh) under an absurd learning rate: the
    weights explode, the loss stays finite but astronomically large, and the run is useless.
    """

    def __init__(self, where: str):
        self.first = None
        self.where = where

    def __call__(self, value: float, step: int, phase: str) -> None:
        at = f"step {step} ({self.where}{phase})"
        if not math.isfinite(value):
            raise Diverged(f"loss became {value} at {at}", step)
        if self.first is None:
            self.first = value
        elif abs(value) > DIVERGENCE_FACTOR * max(abs(self.first), 1.0):
            raise Diverged(f"loss grew from {self.first:.3e} to {value:.3e} at {at}", step)


def _logs(total: float, logs: dict) -> dict:
    """The history entry: the total and the objective's named terms as floats (None kept)."""
    return {"loss": total, **{k: (None if v is None else float(v.item() if torch.is_tensor(v) else v))
                              for k, v in logs.items()}}


class _Progress:
    """A tqdm bar on stderr when the harness asks for progress (ctx.progress), else nothing."""

    def __init__(self, ctx, total: int):
        self.bar, self.ctx, self.last_post = None, ctx, 0.0
        if ctx.progress:
            from tqdm import tqdm

            self.bar = tqdm(total=total, file=sys.stderr, desc=ctx.label or "pinn", unit="step",
                            dynamic_ncols=True, leave=False)

    def show(self, step: int, value: float) -> None:
        if self.bar is None:
            return
        self.bar.update(step - self.bar.n)
        now = time.perf_counter()
        if now - self.last_post > 0.5:
            self.bar.set_postfix(loss=f"{value:.3e}", elapsed=f"{self.ctx.elapsed():.1f}s")
            self.last_post = now

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


class _Run:
    """The state one `train` call shares between its phases."""

    def __init__(self, objective, sched, cap, ctx, evaluate, step, tags):
        self.objective, self.sched, self.cap, self.ctx = objective, sched, cap, ctx
        self.params = list(objective.params)
        self.t_start = ctx.elapsed()
        self.marks = _Checkpoints(ctx, evaluate, self.t_start, tags)
        self.guard = _Guard("".join(f"{k} {v}, " for k, v in tags.items()))
        self.progress = _Progress(ctx, sched.adam_steps + sched.lbfgs_steps)
        self.res = TrainResult()
        self.step = step

    def out_of_time(self) -> bool:
        return self.ctx.elapsed() - self.t_start >= self.cap


def train(objective, sched: Schedule, cap: float, ctx, evaluate=None, step: int = 0,
          **tags) -> TrainResult:
    """Adam then L-BFGS on ``objective.params`` within `cap` seconds.

    `step` is the global step the run starts at (the eigen-solver trains its modes one after the
    other); `tags` (e.g. ``mode=2``) go into every history entry and every divergence message.
    Returns the counters and the reason training stopped.
    """
    run = _Run(objective, sched, cap, ctx, evaluate, step, tags)
    res = run.res
    try:
        if sched.adam_steps > 0:
            _adam(run)
        if sched.lbfgs_steps > 0 and res.stopped != "time_cap":
            res.stopped = "completed"
            _lbfgs(run)
    finally:
        run.progress.close()
    res.steps = run.step
    # final checkpoint with the loss of the returned parameters
    with torch.enable_grad():
        total, logs = objective(run.step)
    final = _logs(total.item(), logs)
    run.guard(final["loss"], run.step, "final")
    res.final_loss = final["loss"]
    run.marks.record(run.step, final, "final")
    return res


def _adam(run: _Run) -> None:
    sched, res, objective, marks = run.sched, run.res, run.objective, run.marks
    opt = torch.optim.Adam(run.params, lr=sched.lr)
    plateau = Plateau(sched.patience, sched.plateau_tol)
    hook = getattr(objective, "after_adam_step", None)
    for k in range(sched.adam_steps):
        if run.out_of_time():
            res.stopped = "time_cap"
            break
        for group in opt.param_groups:
            group["lr"] = sched.lr * sched.lr_decay ** (k / sched.adam_steps)
        opt.zero_grad(set_to_none=True)
        total, logs = objective(run.step)
        value = total.item()
        run.guard(value, run.step, "adam")
        logs = _logs(value, logs)
        if k == 0:
            marks.record(run.step, logs, "adam")
        total.backward()
        opt.step()
        run.step += 1
        res.adam_steps += 1
        res.final_loss = value
        run.progress.show(run.step, value)
        if marks.due():
            marks.record(run.step, logs, "adam")
        if plateau.update(res.adam_steps, value):
            res.stopped = "plateau"
            break
        if hook is not None:
            hook(run.step, more=k + 1 < sched.adam_steps)


def _lbfgs(run: _Run) -> None:
    from torch.nn.utils import parameters_to_vector, vector_to_parameters

    sched, res, objective, params = run.sched, run.res, run.objective, run.params
    fine = params[0].dtype == torch.float64
    hook = getattr(objective, "before_lbfgs", None)
    if hook is not None:
        hook()

    def fresh():
        return torch.optim.LBFGS(params, lr=1.0, max_iter=LBFGS_CHUNK, max_eval=LBFGS_EVALS,
                                 history_size=sched.lbfgs_history, line_search_fn="strong_wolfe",
                                 tolerance_grad=1e-12 if fine else 1e-9,
                                 tolerance_change=1e-15 if fine else 1e-10)

    opt = fresh()
    best = {"value": math.inf, "vec": None}
    last: dict = {}
    done = 0                                   # L-BFGS iterations so far

    def closure():
        opt.zero_grad(set_to_none=False)
        total, logs = objective(run.step + done)
        value = total.item()
        run.guard(value, run.step + done, "lbfgs")
        total.backward()
        res.lbfgs_evaluations += 1
        last.clear()
        last.update(_logs(value, logs))
        if value < best["value"]:
            best.update(value=value, vec=parameters_to_vector(params).detach().clone())
        if run.out_of_time():
            raise _OutOfTime
        return total

    def restore_best():
        with torch.no_grad():
            vector_to_parameters(best["vec"], params)

    plateau = Plateau(sched.patience, sched.plateau_tol)
    restart_value = math.inf                   # best loss when L-BFGS last (re)started
    while done < sched.lbfgs_steps:
        chunk = min(LBFGS_CHUNK, sched.lbfgs_steps - done)
        for group in opt.param_groups:
            group["max_iter"] = chunk
        state = opt.state[params[0]]
        n0, e0 = state.get("n_iter", 0), state.get("func_evals", 0)
        try:
            opt.step(closure)
        except _OutOfTime:
            done += opt.state[params[0]].get("n_iter", 0) - n0
            restore_best()                     # the lowest loss evaluated
            res.stopped = "time_cap"
            res.final_loss = best["value"]
            break
        state = opt.state[params[0]]
        n, evals = state.get("n_iter", 0) - n0, state.get("func_evals", 0) - e0
        done += n
        res.final_loss = last["loss"]
        run.progress.show(run.step + done, last["loss"])
        if run.marks.due():
            run.marks.record(run.step + done, dict(last), "lbfgs")
        if plateau.update(done, last["loss"]):
            res.stopped = "plateau"
            break
        if n < chunk and evals < LBFGS_EVALS:
            # stopped by its own tolerances (gradient, change in loss) or a failed line search:
            # restart from the best point with a fresh curvature history, if allowed, while it gains
            gains = restart_value - best["value"] > LBFGS_RESTART_GAIN * abs(best["value"])
            if res.lbfgs_restarts >= sched.lbfgs_restarts or not gains:
                res.stopped = "converged"
                break
            res.lbfgs_restarts += 1
            restart_value = best["value"]
            restore_best()
            opt = fresh()
    res.lbfgs_iterations = done
    run.step += done
