"""Collocation points and the fixed data attached to them (source, boundary extension, distance).

Everything here is numpy in float64 and uses only the public Domain queries (``bbox``,
``distance``, ``phi``, ``sample_interior``, ``sample_boundary``, ``extend_boundary_data``), so any
domain kind that provides them gets every PINN variant, hard boundaries included.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.solvers.pinn.options import SAMPLINGS

__all__ = ["SAMPLINGS", "interior_points", "boundary_points", "fd_derivatives", "PointData",
           "point_data", "FD_STEP"]


# Finite-difference step for derivatives of phi and of the boundary extension, relative to the
# domain size. Second differences in float64 lose about eps/h^2 ~ 1e-8 to rounding at 1e-4 and
# carry a truncation error h^2/12 |u''''| ~ 1e-9 |u''''|: both far below PINN errors.
FD_STEP = 1e-4


# Sobol points are drawn in the bounding box and rejected outside the domain; below this
# accepted fraction (a d-ball in its cube: 0.52 in 3-D, 2.5e-3 in 10-D) the rejection would cost
# more than the points are worth and the domain's own uniform sampler is used instead.
SOBOL_MIN_ACCEPT = 0.05


def interior_points(domain, n: int, method: str, rng: np.random.Generator) -> np.ndarray:
    """`n` interior points: ``uniform`` random or scrambled ``sobol`` (rejection from the box).

    Sobol points: scipy.stats.qmc.Sobol with Owen scrambling seeded from `rng`, in as many
    coordinates as the domain has; a power-of-two block is drawn from the bounding box and the
    first `n` points inside the domain are kept. When the domain fills less than
    SOBOL_MIN_ACCEPT of its box (high-dimensional balls) the points are uniform random instead.
    """
    if method == "uniform":
        return np.asarray(domain.sample_interior(n, rng), dtype=float)
    if method == "sobol":
        from scipy.stats import qmc

        b = np.asarray(domain.bbox, dtype=float).reshape(-1, 2)     # (d, 2) coordinate ranges
        d = len(b)
        volume = float(getattr(domain, "volume", domain.area))
        if volume / float(np.prod(b[:, 1] - b[:, 0])) < SOBOL_MIN_ACCEPT:
            return np.asarray(domain.sample_interior(n, rng), dtype=float)
        try:
            sob = qmc.Sobol(d=d, scramble=True, rng=rng)
        except TypeError:  # scipy < 1.15 names the argument `seed`
            sob = qmc.Sobol(d=d, scramble=True, seed=rng)
        out = np.empty((0, d))
        while len(out) < n:
            # powers of two keep the balance properties of the sequence
            m = int(np.ceil(np.log2(max(2 * (n - len(out)), 2))))
            p = b[:, 0] + (b[:, 1] - b[:, 0]) * sob.random(2 ** m)
            out = np.vstack([out, p[domain.distance(p) > 0]])
        return out[:n]
    raise ValueError(f"unknown sampling {method!r}; valid: {', '.join(SAMPLINGS)}")


def boundary_points(domain, n: int, rng: np.random.Generator) -> np.ndarray:
    """`n` random boundary points, uniform in arc length (surface measure in d dimensions)."""
    pts, _ = domain.sample_boundary(n, rng)
    return np.asarray(pts, dtype=float)


def fd_derivatives(fn, x: np.ndarray, domain, step: float = FD_STEP):
    """Value, gradient (n, d) and Laplacian (n,) of ``fn`` at `x` by finite differences.

    Central differences where both neighbours lie in the closed domain; otherwise one-sided
    second-order formulas pointing inwards (``fn`` is only ever evaluated inside the domain,
    which the boundary extension requires). Formulas: first derivative
    ``(-3 f0 + 4 f1 - f2) / 2h``, second ``(2 f0 - 5 f1 + 4 f2 - f3) / h^2`` [common practice].
    """
    x = np.asarray(x, dtype=float)
    n, d = x.shape
    h = step * domain.scale
    stencil = [x]
    offsets = {}
    for i in range(d):
        e = np.zeros(d)
        e[i] = h
        for k in (1, 2, 3):
            offsets[(i, k)] = len(stencil)
            stencil.append(x + k * e)
            offsets[(i, -k)] = len(stencil)
            stencil.append(x - k * e)
    allp = np.vstack(stencil)
    ok = (domain.distance(allp) >= 0).reshape(len(stencil), n)
    # which points need each stencil: evaluate only those (the extension may be costly)
    vals = np.full((len(stencil), n), np.nan)
    vals[0] = fn(x)
    grad = np.empty((n, d))
    lap = np.zeros(n)
    for i in range(d):
        central = ok[offsets[(i, 1)]] & ok[offsets[(i, -1)]]
        fwd = ~central & ok[offsets[(i, 1)]] & ok[offsets[(i, 2)]] & ok[offsets[(i, 3)]]
        bwd = ~central & ~fwd & ok[offsets[(i, -1)]] & ok[offsets[(i, -2)]] & ok[offsets[(i, -3)]]
        if not np.all(central | fwd | bwd):
            bad = x[~(central | fwd | bwd)][0]
            raise ValueError(f"finite-difference stencil of width {3 * h:.3g} does not fit inside the "
                             f"domain at {bad.tolist()}")
        need = {1: central | fwd, -1: central | bwd, 2: fwd, 3: fwd, -2: bwd, -3: bwd}
        for k, mask in need.items():
            j = offsets[(i, k)]
            if mask.any():
                vals[j, mask] = fn(stencil[j][mask])
        f0 = vals[0]
        fp1, fm1 = vals[offsets[(i, 1)]], vals[offsets[(i, -1)]]
        fp2, fm2 = vals[offsets[(i, 2)]], vals[offsets[(i, -2)]]
        fp3, fm3 = vals[offsets[(i, 3)]], vals[offsets[(i, -3)]]
        g = np.where(central, (fp1 - fm1) / (2 * h),
                     np.where(fwd, (-3 * f0 + 4 * fp1 - fp2) / (2 * h), (3 * f0 - 4 * fm1 + fm2) / (2 * h)))
        s = np.where(central, (fp1 - 2 * f0 + fm1) / h ** 2,
                     np.where(fwd, (2 * f0 - 5 * fp1 + 4 * fp2 - fp3) / h ** 2,
                              (2 * f0 - 5 * fm1 + 4 * fm2 - fm3) / h ** 2))
        grad[:, i] = g
        lap += s
    return vals[0], grad, lap


@dataclasses.dataclass
class PointData:
    """Interior collocation points with the fixed functions the losses need there (float64).

    ``g``, ``grad_g``, ``lap_g``: the boundary extension and its derivatives; ``phi``,
    ``grad_phi``, ``lap_phi``: the distance function and its derivatives (hard boundary only,
    otherwise None).
    """

    x: np.ndarray
    f: np.ndarray
    g: np.ndarray | None = None
    grad_g: np.ndarray | None = None
    lap_g: np.ndarray | None = None
    phi: np.ndarray | None = None
    grad_phi: np.ndarray | None = None
    lap_phi: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.x)

    def concat(self, other: "PointData") -> "PointData":
        """Both point sets in one (RAR appends its points to the collocation set)."""
        def cat(a, b):
            return None if a is None else np.concatenate([a, b])

        return PointData(**{f.name: cat(getattr(self, f.name), getattr(other, f.name))
                            for f in dataclasses.fields(self)})


def point_data(problem, x: np.ndarray, hard: bool) -> PointData:
    """Source term at `x` and, for hard boundaries, ``g_ext``, ``phi`` and their derivatives.

    ``g_ext = domain.extend_boundary_data(g, .)`` queries g on the boundary only; its gradient
    and Laplacian come from `fd_derivatives` (the extension is a numpy function of the domain,
    fixed during training, so this is done once per point set).
    """
    d = problem.domain
    data = PointData(x=x, f=problem.f_or_zero(x))
    if not hard:
        return data
    if problem.g is None:
        zero = np.zeros(len(x))
        data.g, data.grad_g, data.lap_g = zero, np.zeros_like(x), zero
    else:
        data.g, data.grad_g, data.lap_g = fd_derivatives(
            lambda p: np.asarray(d.extend_boundary_data(problem.g, p), dtype=float), x, d)
    data.phi, data.grad_phi, data.lap_phi = fd_derivatives(
        lambda p: np.asarray(d.phi(p), dtype=float), x, d)
    return data
