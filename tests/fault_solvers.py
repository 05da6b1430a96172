"""Test-only solvers that misbehave on purpose (fault injection), loaded through `_target_`.

Each one breaks a case in one of the ways a real method can: an exception, a hang, a dead
process (abort, segmentation fault), a memory blow-up, a loss that turns NaN. The harness must turn
every one into a record with its status and reason while the rest of the sweep goes on. They are
plug-ins (``_target_: tests.fault_solvers.<Class>``), never registered in `solvers.SOLVERS`, so
that no user sees them; subprocess tests put the repository root on PYTHONPATH.
"""
from __future__ import annotations

import ctypes
import dataclasses
import os
import time

import numpy as np

from lapbench.solvers.base import Diverged, Solver
from lapbench.solvers.fd import FD5, FDParams


@dataclasses.dataclass
class FaultParams:
    n: int = 8              # unused size knob, so that records carry a resolution
    mb: int = 100_000       # FaultMemory: MiB to allocate in total (far above any test limit)
    chunk_mb: int = 16      # FaultMemory: MiB per step (touched, so that they are resident)
    pause: float = 0.005    # FaultMemory: seconds between steps (lets the polling limit act first)
    growth: float = 1e60    # FaultNaN: gradient step size (anything above 1 diverges)


class _Fault(Solver):
    family = "test"
    description = "fault injection (tests only)"
    reference = "none: a test double"
    Params = FaultParams


class FaultRaise(_Fault):
    name = "fault_raise"

    def _solve(self, problem, budget, ctx):
        with ctx.phase("setup"):
            raise RuntimeError("injected failure in setup")


class FaultHang(_Fault):
    """Never returns (sleeps far past any time limit); only the harness's timeout ends it."""

    name = "fault_hang"

    def _solve(self, problem, budget, ctx):
        with ctx.phase("solve"):
            time.sleep(3600)


class FaultAbort(_Fault):
    """Kills its own process with SIGABRT, as a failed assertion in C code does."""

    name = "fault_abort"

    def _solve(self, problem, budget, ctx):
        os.abort()


class FaultSegv(_Fault):
    """Reads address 0: a segmentation fault, as a bug in a compiled extension causes."""

    name = "fault_segv"

    def _solve(self, problem, budget, ctx):
        ctypes.string_at(0)


class FaultMemory(_Fault):
    """Allocates and touches memory chunk by chunk until something stops it."""

    name = "fault_memory"

    def _solve(self, problem, budget, ctx):
        hoard = []
        with ctx.phase("solve"):
            for _ in range(self.params.mb // self.params.chunk_mb):
                hoard.append(np.ones(self.params.chunk_mb * 2 ** 17))  # 2**17 doubles = 1 MiB
                time.sleep(self.params.pause)
        raise RuntimeError(f"allocated {self.params.mb} MiB without being stopped")


class FaultNaN(_Fault):
    """Gradient descent on mean(w^2) with a step far too large: the loss overflows to inf.

    Checks the loss each step and raises `Diverged` with the step, as a PINN's training loop does.
    """

    name = "fault_nan"

    def _solve(self, problem, budget, ctx):
        w = np.ones(4)
        lr = self.params.growth  # |1 - 2 lr| > 1: each step multiplies w by about -2 lr
        with ctx.phase("solve"), np.errstate(over="ignore", invalid="ignore"):
            for step in range(1, 1000):
                w = w - lr * 2 * w
                loss = float(np.mean(w * w))  # |w| = (2 lr - 1)^step: w^2 overflows at step 3
                ctx.checkpoint(step, {"loss": loss})
                if not np.isfinite(loss):
                    raise Diverged(f"loss became {loss} at step {step}", step=step)
        raise RuntimeError("the iteration never diverged")


@dataclasses.dataclass
class SlowParams(FDParams):
    delay: float = 0.3      # seconds slept before the real solve


class SlowFD5(FD5):
    """The 5-point solver after a pause: cases that take long enough to be killed mid-sweep."""

    name = "slow_fd5"
    Params = SlowParams

    def _solve(self, problem, budget, ctx):
        time.sleep(self.params.delay)
        return super()._solve(problem, budget, ctx)


FAULTS = {cls.name: cls for cls in (FaultRaise, FaultHang, FaultAbort, FaultSegv, FaultMemory, FaultNaN)}


@dataclasses.dataclass
class CostParams:
    n: int = 1              # CostSolver: milliseconds of busy work per solve (the known cost)
    cold_ms: float = 0.0    # CostSolver: extra milliseconds of the first solve in a process
    alloc_mb: int = 0       # CostSolver: MiB allocated and touched during the solve


_COLD = {"done": False}


class CostSolver(Solver):
    """A deterministic test double with a known cost: `n` ms of busy-waiting per solve, an extra
    `cold_ms` on the first solve of its process (a cold start, which the warm-up must absorb),
    and `alloc_mb` MiB touched (a known memory peak). Its answer is the zero function."""

    name = "cost"
    family = "test"
    description = "known cost (tests only)"
    reference = "none: a test double"
    Params = CostParams

    def _solve(self, problem, budget, ctx):
        from lapbench.solvers.base import Solution

        with ctx.phase("solve"):
            wait = self.params.n / 1e3
            if not _COLD["done"]:
                wait += self.params.cold_ms / 1e3
                _COLD["done"] = True
            t0 = time.perf_counter()
            while time.perf_counter() - t0 < wait:
                pass
            if self.params.alloc_mb:
                block = np.ones(self.params.alloc_mb * 2 ** 20 // 8)   # np.ones touches every page
                assert block[-1] == 1.0
                del block
        return Solution(evaluate=lambda p: np.zeros(len(p)), info={"dofs": 1})
