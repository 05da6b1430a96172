"""Calibration kernel: a fixed CPU workload timed beside the cases, so that times can be
normalised by the speed of the machine that produced them.

A record's normalised time is ``timings.total / environment.calibration_s``. The kernel is timed
by the harness right before each case, on the same machine under the same load, so a uniformly
faster or slower (or busier) machine changes both by about the same factor and the ratio stays
put; `lapbench check` compares these ratios, never raw seconds. Timing once per process was
tried first: under a load that changed during a sweep, normalised times of a rerun drifted by
factors of 2 to 4, because the one calibration no longer described the machine the later cases
ran on. A calibration younger than `MAX_AGE` seconds is reused (its age is recorded): a sweep of
millisecond cases would otherwise spend most of its time calibrating (0.1-0.25 s a case), and
seconds apart the machine has not changed its speed.

The kernel mixes the three kinds of work the solvers do: dense BLAS (a matrix product, like
Chebyshev collocation and network layers), a real 2-D FFT (the sine-transform solvers) and a
sparse direct factorisation of a 2-D Laplacian (the finite-difference solvers).
"""
from __future__ import annotations

import time

__all__ = ["KERNEL", "calibration_seconds", "measure"]

# Identifies the workload; normalised times are comparable only between equal kernel names.
# Change the name whenever the workload below changes.
KERNEL = "mm384+rfft2-1024+splu2d-96/median3/v2"
REPEATS = 3          # the median of three: one interruption by another process does not count

MAX_AGE = 5.0        # seconds a calibration stays valid for the next cases

_CACHE: dict = {"inputs": None, "warm": False, "last": None}


def _inputs():
    """Fixed inputs (seeded), built once and excluded from the timing."""
    if _CACHE["inputs"] is None:
        import numpy as np
        import scipy.sparse as sp

        rng = np.random.default_rng(20261201)
        a = rng.standard_normal((384, 384))
        b = rng.standard_normal((384, 384))
        x = rng.standard_normal((1024, 1024))
        m = 96
        t = sp.diags([-1.0, 2.0, -1.0], [-1, 0, 1], shape=(m, m), dtype=float)
        eye = sp.eye(m, dtype=float)
        lap = (sp.kron(eye, t) + sp.kron(t, eye)).tocsc()
        rhs = rng.standard_normal(m * m)
        _CACHE["inputs"] = (a, b, x, lap, rhs)
    return _CACHE["inputs"]


def _once(inputs) -> float:
    import scipy.fft
    import scipy.sparse.linalg as spl

    a, b, x, lap, rhs = inputs
    t0 = time.perf_counter()
    c = a @ b
    f = scipy.fft.rfft2(x)
    u = spl.splu(lap, permc_spec="MMD_AT_PLUS_A").solve(rhs)
    dt = time.perf_counter() - t0
    if not (c[0, 0] == c[0, 0] and f[0, 0] == f[0, 0] and u[0] == u[0]):  # keep results alive
        raise FloatingPointError("calibration kernel produced NaN")
    return dt


def measure(repeats: int = REPEATS) -> float:
    """Seconds of one kernel run on one thread: the median over `repeats` runs (about 30 ms each
    on the 2-core development machine when it is quiet)."""
    import statistics

    import scipy.fft
    from threadpoolctl import threadpool_limits

    inputs = _inputs()
    # One thread always: the ratio should track the speed of a core, whatever the case's threads.
    with threadpool_limits(limits=1), scipy.fft.set_workers(1):
        if not _CACHE["warm"]:
            _once(inputs)  # first run in a process: page faults and lazy library initialisation
            _CACHE["warm"] = True
        return statistics.median(_once(inputs) for _ in range(repeats))


def calibration_seconds(max_age: float = MAX_AGE) -> tuple[float, float]:
    """(the kernel's time, its age in seconds): measured now in this process, or the last
    measurement when it is younger than `max_age` (the harness calls it right before each case)."""
    now = time.monotonic()
    last = _CACHE["last"]
    if last is not None and now - last[1] < max_age:
        return last[0], now - last[1]
    value = measure()
    _CACHE["last"] = (value, time.monotonic())
    return value, 0.0
