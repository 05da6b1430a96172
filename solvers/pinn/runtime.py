"""Process set-up for the torch-using solvers of the family (torch is imported only when called)."""
from __future__ import annotations

__all__ = ["preload_torch", "retain_freed_memory"]

_warm = False


def preload_torch() -> None:
    """Import torch (about 3 s) and warm the optimisers up in the harness parent.

    The first ``Adam.step()`` of a process lazily imports torch's compiler machinery (about
    4 s on the 2-core development machine); paid here once, it is not charged to every
    forked case's training time.
    """
    global _warm
    import torch

    import scipy.stats.qmc  # noqa: F401  (Sobol points; a slow first import)

    import lapbench.solvers.pinn.train  # noqa: F401

    if _warm:
        return
    import warnings

    w = torch.nn.Parameter(torch.zeros(2))
    opt = torch.optim.Adam([w], lr=1e-3)
    (w * w).sum().backward()
    with warnings.catch_warnings():   # torch's own lazy imports warn about its internals
        warnings.simplefilter("ignore", DeprecationWarning)
        opt.step()
    _warm = True


def retain_freed_memory() -> bool:
    """Let glibc keep freed blocks below 256 MiB in the heap instead of returning them.

    A training step allocates and frees tensors of 0.5-4 MB each (above glibc's default mmap
    threshold), so by default many steps map fresh pages that the kernel zero-fills on first
    touch. Measured on the development machine, 4 x 50 network: 400-1 300 minor page faults per
    step on 2 500 points by default, a handful with this setting; 600 Adam steps of `pinn_hard`
    on 2 000 points took 9.2-9.8 s against 10.2-10.5 s (two runs each, alternating; timings on
    this machine vary by 10-20 % between runs). It is a process-wide setting, made in the forked
    case process; freed blocks are reused rather than returned, so the peak does not grow.
    Returns False where mallopt is unavailable (not glibc).
    """
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False
    m_trim_threshold, m_mmap_threshold = -1, -3          # <malloc.h>
    return bool(mallopt(m_mmap_threshold, 256 << 20)) and bool(mallopt(m_trim_threshold, 1 << 30))
