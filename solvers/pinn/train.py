"""Training: Adam with an exponential learning-rate schedule, then L-BFGS with a strong-Wolfe search.

Budgets: steps per phase, the wall-clock cap ``budget.train_cap`` for the whole training (checked
before every Adam step and inside every L-BFGS function evaluation), and an early stop when the
loss has not improved by a relative ``plateau_tol`` for ``patience`` steps. NaN or Inf in the
loss raises `solvers.base.Diverged` with the step. Checkpoints are spaced geometrically in
training time; the harness evaluates the error there (its time is excluded).
"""
from __future__ import annotations

import dataclasses
import math
import sys
import time

import numpy as np
import torch

from solvers.base import Diverged
from solvers.pinn.losses import Batch, Boundary, Loss
from solvers.pinn.sampling import boundary_points, interior_points, point_data

__all__ = ["Collocation", "Plateau", "Schedule", "TrainResult", "train", "CHECKPOINT_FIRST", "CHECKPOINT_GROWTH"]

# History checkpoints at training times CHECKPOINT_FIRST * CHECKPOINT_GROWTH^k seconds: about ten
# per decade of time, enough to read time-to-tolerance off the curve to ~25 % while a 5-minute
# run costs only ~40 harness evaluations.
CHECKPOINT_FIRST = 0.05
CHECKPOINT_GROWTH = 1.25
# L-BFGS iterations per optimizer.step() call: each call re-evaluates the loss once at its start,
# so chunks keep that overhead near 5 % while checkpoints and plateau checks stay frequent.
LBFGS_CHUNK = 20
# A loss this many times its first value (ten orders of magnitude) counts as diverged.
DIVERGENCE_FACTOR = 1e10


@dataclasses.dataclass
class Schedule:
    """The optimisation budget and its stopping rules (copied from the solver's Params)."""

    adam_steps: int = 2000
    lr: float = 1e-3
    lr_decay: float = 0.1          # lr at the last Adam step = lr * lr_decay (exponential)
    lbfgs_steps: int = 1000
    lbfgs_history: int = 50
    patience: int = 1000
    plateau_tol: float = 1e-4
    resample_every: int = 0
    rar_every: int = 0
    rar_candidates: int = 10000
    rar_add: int = 100


@dataclasses.dataclass
class TrainResult:
    steps: int = 0
    adam_steps: int = 0
    lbfgs_iterations: int = 0
    lbfgs_evaluations: int = 0
    stopped: str = "completed"     # completed | time_cap | plateau | converged
    final_loss: float = float("nan")
    n_interior: int = 0


class Collocation:
    """The current interior (and, for soft boundaries, boundary) points with their fixed data."""

    def __init__(self, problem, n_interior: int, n_boundary: int, sampling: str, hard: bool,
                 dtype: torch.dtype, rng: np.random.Generator):
        self.problem, self.n_interior, self.n_boundary = problem, n_interior, n_boundary
        self.sampling, self.hard, self.dtype, self.rng = sampling, hard, dtype, rng
        self.added = None
        self.resample()

    def resample(self) -> None:
        """Fresh interior (and boundary) points; points added by refinement are kept."""
        x = interior_points(self.problem.domain, self.n_interior, self.sampling, self.rng)
        self.base = point_data(self.problem, x, self.hard)
        self._rebuild()
        self.boundary = None
        if not self.hard and self.problem.g is not None:
            xb = boundary_points(self.problem.domain, self.n_boundary, self.rng)
            self.boundary = Boundary(torch.as_tensor(xb, dtype=self.dtype),
                                     torch.as_tensor(self.problem.g(xb), dtype=self.dtype))
        elif not self.hard:  # no data: homogeneous boundary condition
            xb = boundary_points(self.problem.domain, self.n_boundary, self.rng)
            self.boundary = Boundary(torch.as_tensor(xb, dtype=self.dtype),
                                     torch.zeros(len(xb), dtype=self.dtype))

    def _rebuild(self) -> None:
        data = self.base if self.added is None else self.base.concat(self.added)
        self.batch = Batch(data, self.dtype)

    def refine(self, net, loss: Loss, n_candidates: int, n_add: int) -> None:
        """Residual-based adaptive refinement: add the `n_add` candidates of largest |residual|.

        Lu, Meng, Mao & Karniadakis, "DeepXDE: a deep learning library for solving differential
        equations", SIAM Review 63 (2021), section on RAR: uniform random candidates, the points
        with the largest PDE residual join the training set.
        """
        x = interior_points(self.problem.domain, n_candidates, "uniform", self.rng)
        cand = point_data(self.problem, x, self.hard)
        r = loss.residual(net, Batch(cand, self.dtype)).abs().numpy()
        top = np.argsort(-r, kind="stable")[:n_add]
        pick = type(cand)(**{k: (None if v is None else v[top]) for k, v in vars(cand).items()})
        self.added = pick if self.added is None else self.added.concat(pick)
        self._rebuild()


class _OutOfTime(Exception):
    """Raised inside the L-BFGS closure when the wall-clock cap is spent."""


class _Checkpoints:
    """Geometrically spaced checkpoints in training time, plus forced ones at the phase ends."""

    def __init__(self, ctx, evaluate, t_start: float):
        self.ctx, self.evaluate, self.t_start = ctx, evaluate, t_start
        self.next = CHECKPOINT_FIRST
        self.last_step = None

    def due(self) -> bool:
        return self.ctx.elapsed() - self.t_start >= self.next

    def record(self, step: int, losses: dict, phase: str) -> None:
        if step == self.last_step:
            return
        clean = {k: float(v) for k, v in losses.items() if v is not None}
        self.ctx.checkpoint(step, clean, evaluate=self.evaluate, phase=phase)
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


def _values(parts: dict) -> dict:
    return {k: (None if v is None else v.item()) for k, v in parts.items()}


class _Guard:
    """Divergence: a NaN/Inf loss, or a loss grown by DIVERGENCE_FACTOR over the first one.

    The second rule catches saturating activations (tanh) under an absurd learning rate: the
    weights explode, the loss stays finite but astronomically large, and the run is useless.
    """

    def __init__(self):
        self.first = None

    def __call__(self, value: float, step: int, phase: str) -> None:
        if not math.isfinite(value):
            raise Diverged(f"loss became {value} at step {step} ({phase})", step)
        if self.first is None:
            self.first = value
        elif abs(value) > DIVERGENCE_FACTOR * max(abs(self.first), 1.0):
            raise Diverged(f"loss grew from {self.first:.3e} to {value:.3e} at step {step} ({phase})", step)


def train(net, loss: Loss, colloc: Collocation, sched: Schedule, budget, ctx, evaluate) -> TrainResult:
    """Run Adam then L-BFGS on `net`; returns counters and the reason training stopped."""
    cap = budget.train_cap
    res = TrainResult()
    t_start = ctx.elapsed()
    marks = _Checkpoints(ctx, evaluate, t_start)
    bar = None
    if ctx.progress:
        from tqdm import tqdm

        bar = tqdm(total=sched.adam_steps + sched.lbfgs_steps, file=sys.stderr, desc=ctx.label or "pinn",
                   unit="step", dynamic_ncols=True, leave=False)
    last_post = 0.0

    def show(step, value):
        nonlocal last_post
        if bar is None:
            return
        bar.update(step - bar.n)
        now = time.perf_counter()
        if now - last_post > 0.5:
            bar.set_postfix(loss=f"{value:.3e}", elapsed=f"{ctx.elapsed():.1f}s")
            last_post = now

    parts: dict = {}
    step = 0
    check = _Guard()
    try:
        # ---- phase 1: Adam -------------------------------------------------------------------
        if sched.adam_steps > 0:
            opt = torch.optim.Adam(net.parameters(), lr=sched.lr)
            plateau = Plateau(sched.patience, sched.plateau_tol)
            for k in range(sched.adam_steps):
                if ctx.elapsed() - t_start >= cap:
                    res.stopped = "time_cap"
                    break
                for group in opt.param_groups:
                    group["lr"] = sched.lr * sched.lr_decay ** (k / sched.adam_steps)
                opt.zero_grad(set_to_none=True)
                total, parts = loss(net, colloc.batch, colloc.boundary)
                value = total.item()
                check(value, step, "adam")
                parts = {"loss": value, **_values(parts)}
                if step == 0:
                    marks.record(0, parts, "adam")
                total.backward()
                opt.step()
                step += 1
                res.adam_steps += 1
                res.final_loss = value
                show(step, value)
                if marks.due():
                    marks.record(step, parts, "adam")
                if plateau.update(step, value):
                    res.stopped = "plateau"
                    break
                if sched.resample_every and step % sched.resample_every == 0 and k + 1 < sched.adam_steps:
                    colloc.resample()
                if sched.rar_every and step % sched.rar_every == 0 and k + 1 < sched.adam_steps:
                    colloc.refine(net, loss, sched.rar_candidates, sched.rar_add)
        # ---- phase 2: L-BFGS -----------------------------------------------------------------
        if sched.lbfgs_steps > 0 and res.stopped != "time_cap":
            res.stopped = "completed"
            step = _lbfgs(net, loss, colloc, sched, ctx, cap, t_start, res, marks, show, step, check)
    finally:
        if bar is not None:
            bar.close()
    res.steps = step
    res.n_interior = len(colloc.batch)
    # final checkpoint with the loss of the returned network
    with torch.enable_grad():
        total, p = loss(net, colloc.batch, colloc.boundary)
    final = {"loss": total.item(), **_values(p)}
    check(final["loss"], step, "final")
    res.final_loss = final["loss"]
    marks.record(step, final, "final")
    return res


def _lbfgs(net, loss, colloc, sched, ctx, cap, t_start, res, marks, show, step, check) -> int:
    from torch.nn.utils import parameters_to_vector, vector_to_parameters

    params = list(net.parameters())
    fine = next(iter(params)).dtype == torch.float64
    opt = torch.optim.LBFGS(params, lr=1.0, max_iter=LBFGS_CHUNK, max_eval=LBFGS_CHUNK * 5 // 4 + 25,
                            history_size=sched.lbfgs_history, line_search_fn="strong_wolfe",
                            tolerance_grad=1e-12 if fine else 1e-9,
                            tolerance_change=1e-15 if fine else 1e-10)
    best = {"value": math.inf, "vec": None, "parts": {}}
    last = {}

    def closure():
        opt.zero_grad(set_to_none=False)
        total, parts = loss(net, colloc.batch, colloc.boundary)
        value = total.item()
        check(value, step + done_total, "lbfgs")
        total.backward()
        res.lbfgs_evaluations += 1
        last.update(loss=value, **_values(parts))
        if value < best["value"]:
            best.update(value=value, vec=parameters_to_vector(params).detach().clone(), parts=dict(last))
        if ctx.elapsed() - t_start >= cap:
            raise _OutOfTime
        return total

    plateau = Plateau(sched.patience, sched.plateau_tol)
    done_total = 0
    while done_total < sched.lbfgs_steps:
        chunk = min(LBFGS_CHUNK, sched.lbfgs_steps - done_total)
        for group in opt.param_groups:
            group["max_iter"] = chunk
        state = opt.state[params[0]]
        n0 = state.get("n_iter", 0)
        try:
            opt.step(closure)
        except _OutOfTime:
            done = opt.state[params[0]].get("n_iter", 0) - n0
            done_total += done
            with torch.no_grad():
                vector_to_parameters(best["vec"], params)   # the lowest loss evaluated
            res.stopped = "time_cap"
            res.final_loss = best["value"]
            break
        done = state.get("n_iter", 0) - n0
        done_total += done
        res.final_loss = last["loss"]
        show(step + done_total, last["loss"])
        if marks.due():
            marks.record(step + done_total, dict(last), "lbfgs")
        if plateau.update(done_total, last["loss"]):
            res.stopped = "plateau"
            break
        if done < chunk:   # L-BFGS met its own tolerance (gradient or change in loss)
            res.stopped = "converged"
            break
    res.lbfgs_iterations = done_total
    return step + done_total
