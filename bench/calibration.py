"""Calibration kernel: a fixed CPU workload timed beside the cases, so that times can be
normalised by the speed of the machine that produced them.

A record's normalised time is ``timings.total / environment.calibration_s``. Both are measured
in the same process on the same machine within minutes of each other, so a uniformly faster or
slower machine changes both by the same factor and the ratio stays put; `lapbench check`
compares these ratios, never raw seconds.

The kernel mixes the three kinds of work the solvers do: dense BLAS (a matrix product, like
Chebyshev collocation and network layers), a real 2-D FFT (the sine-transform solvers) and a
sparse direct factorisation of a 2-D Laplacian (the finite-difference solvers).
"""
from __future__ import annotations

import time

__all__ = ["KERNEL", "calibration_seconds", "measure"]

# Identifies the workload; normalised times are comparable only between equal kernel names.
# Change the name whenever the workload below changes.
KERNEL = "mm384+rfft2-1024+splu2d-96/v1"
REPEATS = 3          # the minimum of a few repeats discards interruptions by other processes
MAX_AGE = 120.0      # seconds a cached measurement is reused before it is taken again

_CACHE: dict = {"t": None, "at": None, "inputs": None}


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
    """Seconds of one kernel run on one thread: the minimum over `repeats` runs."""
    import scipy.fft
    from threadpoolctl import threadpool_limits

    inputs = _inputs()
    # One thread always: the ratio should track the speed of a core, whatever the case's threads.
    with threadpool_limits(limits=1), scipy.fft.set_workers(1):
        _once(inputs)  # warm-up: first-touch page faults and lazy library initialisation
        return min(_once(inputs) for _ in range(repeats))


def calibration_seconds() -> float:
    """The kernel's time in this process, measured at most every MAX_AGE seconds."""
    now = time.monotonic()
    if _CACHE["t"] is None or now - _CACHE["at"] > MAX_AGE:
        _CACHE["t"] = measure()
        _CACHE["at"] = time.monotonic()
    return _CACHE["t"]
