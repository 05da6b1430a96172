"""Successive over-relaxation for the 5-point Poisson system on a rectangle, as a lapbench plug-in.

The class below subclasses `lapbench.solvers.base.Solver`, the public contract of lapbench (see lapbench's
DEVELOPERS.md, "Plug-in solvers"): it sets `name`, `family`, `description`, `reference`, `Params`
and `tags`, and implements `_solve`. lapbench finds it through the `_target_` of this package's
own config file (conf/solver/sor.yaml), not through lapbench's registry.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.solvers.base import Diverged, Solution, Solver, Tags

__all__ = ["SOR", "SORParams", "optimal_omega"]

# Residual checks cost one sweep's worth of work; every few sweeps keeps them a small fraction.
CHECK_EVERY = 8


@dataclasses.dataclass
class SORParams:
    """Options of the SOR plug-in."""

    n: int = 32                  # intervals per side
    tol: float = 1e-10           # stop when ||r|| <= tol ||r_0|| (r_0: residual of the zero guess)
    max_iter: int = 100_000      # cap on sweeps
    omega: float | None = None   # relaxation factor; None: Young's optimum for the rectangle

    def __post_init__(self):
        positive("n", self.n, integer=True, maximum=1 << 14)
        if self.n < 2:
            raise ConfigError(f"`n` must be at least 2 (one interior node), got {self.n}")
        positive("tol", self.tol)
        positive("max_iter", self.max_iter, integer=True)
        if self.omega is not None and not (0.0 < self.omega < 2.0):
            raise ConfigError(f"`omega` must lie in (0, 2) for SOR to converge, got {self.omega!r}")


def optimal_omega(n: int, hx: float, hy: float) -> float:
    """Young's optimal relaxation factor for the 5-point Laplacian with n intervals per side.

    The Jacobi iteration matrix has spectral radius mu = (cos(pi/n)/hx^2 + cos(pi/n)/hy^2) /
    (1/hx^2 + 1/hy^2) = cos(pi/n); for a consistently ordered matrix (red-black ordering is one)
    omega_opt = 2 / (1 + sqrt(1 - mu^2)) (D. M. Young, Iterative Solution of Large Linear
    Systems, Academic Press 1971, ch. 6).
    """
    cx, cy = 1.0 / hx ** 2, 1.0 / hy ** 2
    mu = (cx * math.cos(math.pi / n) + cy * math.cos(math.pi / n)) / (cx + cy)
    return 2.0 / (1.0 + math.sqrt(1.0 - mu * mu))


class Bilinear:
    """Bilinear interpolation of nodal values on a uniform tensor grid (order 2, like the scheme)."""

    def __init__(self, x: np.ndarray, y: np.ndarray, U: np.ndarray):
        self.x, self.y, self.U = x, y, U

    def __call__(self, points: np.ndarray) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        n = len(self.x) - 1
        sx = (p[:, 0] - self.x[0]) / (self.x[-1] - self.x[0]) * n
        sy = (p[:, 1] - self.y[0]) / (self.y[-1] - self.y[0]) * n
        i = np.clip(np.floor(sx).astype(int), 0, n - 1)
        j = np.clip(np.floor(sy).astype(int), 0, n - 1)
        tx, ty = sx - i, sy - j
        U = self.U
        return ((1 - tx) * (1 - ty) * U[i, j] + tx * (1 - ty) * U[i + 1, j]
                + (1 - tx) * ty * U[i, j + 1] + tx * ty * U[i + 1, j + 1])


class SOR(Solver):
    """Red-black successive over-relaxation on the 5-point system, optimal omega.

    Solves -(D_xx + D_yy) U = f at the interior nodes of a uniform (n+1) x (n+1) grid with the
    Dirichlet data at the boundary nodes. Each sweep relaxes the red nodes (i + j even), then the
    black ones, so each half-sweep is one vectorised update. With Young's omega the error falls
    by about 1 - 2 pi / n per sweep, so the sweep count grows like n (D. M. Young, "Iterative
    methods for solving partial difference equations of elliptic type", Trans. Amer. Math. Soc.
    76 (1954) 92-111).
    """

    name = "sor"
    family = "fd"
    description = "red-black SOR on the 5-point system, Young's optimal omega (plug-in example)"
    reference = "Young, Trans. Amer. Math. Soc. 76 (1954) 92-111"
    Params = SORParams
    tags = Tags(kinds=frozenset({"laplace", "poisson"}), domains=frozenset({"rectangle"}))

    def memory_estimate_mb(self) -> float:
        return 4 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def _solve(self, problem, budget, ctx):
        p = self.params
        n = p.n
        with ctx.phase("setup"):
            d = problem.domain
            x = np.linspace(d.x0, d.x1, n + 1)
            y = np.linspace(d.y0, d.y1, n + 1)
            hx, hy = (d.x1 - d.x0) / n, (d.y1 - d.y0) / n
            X, Y = np.meshgrid(x, y, indexing="ij")
            pts = np.column_stack([X.ravel(), Y.ravel()])
            F = problem.f_or_zero(pts).reshape(n + 1, n + 1)
            U = np.zeros((n + 1, n + 1))
            edge = np.zeros((n + 1, n + 1), dtype=bool)
            edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = True
            if problem.g is not None:
                U[edge] = problem.g(pts[edge.ravel()])   # boundary data only on the boundary
            omega = p.omega if p.omega is not None else optimal_omega(n, hx, hy)
            cx, cy = 1.0 / hx ** 2, 1.0 / hy ** 2
            diag = 2 * cx + 2 * cy
            # The four sub-lattices of interior nodes by parity of (i, j): start indices.
            red = ((1, 1), (2, 2))
            black = ((1, 2), (2, 1))

        def residual_norm() -> float:
            r = (F[1:-1, 1:-1] + cx * (U[:-2, 1:-1] - 2 * U[1:-1, 1:-1] + U[2:, 1:-1])
                 + cy * (U[1:-1, :-2] - 2 * U[1:-1, 1:-1] + U[1:-1, 2:]))
            return float(np.sqrt(np.sum(r * r)))

        def relax(colour):
            for a, b in colour:
                gs = (cx * (U[a - 1:n - 1:2, b:n:2] + U[a + 1:n + 1:2, b:n:2])
                      + cy * (U[a:n:2, b - 1:n - 1:2] + U[a:n:2, b + 1:n + 1:2]) + F[a:n:2, b:n:2]) / diag
                U[a:n:2, b:n:2] += omega * (gs - U[a:n:2, b:n:2])

        def snapshot():
            return Bilinear(x, y, U.copy())

        stopped = "max_iter"
        sweeps = 0
        with ctx.phase("solve"):
            r0 = residual_norm()
            rel = 0.0 if r0 == 0 else 1.0
            if r0 == 0:
                stopped = "zero residual"
            while r0 > 0 and sweeps < p.max_iter:
                relax(red)
                relax(black)
                sweeps += 1
                if sweeps % CHECK_EVERY == 0 or sweeps == p.max_iter:
                    rel = residual_norm() / r0
                    if not math.isfinite(rel):
                        raise Diverged(f"SOR residual became {rel} after {sweeps} sweeps", sweeps)
                    # Harness-side errors for the history only every 8th check: they cost time
                    # (excluded from the method's time, but not from the case's wall clock).
                    ctx.checkpoint(sweeps, {"residual": rel},
                                   snapshot if sweeps % (8 * CHECK_EVERY) == 0 else None)
                    if rel <= p.tol:
                        stopped = "tol"
                        break
                    if ctx.elapsed() > budget.train_cap:
                        stopped = "time budget"
                        break
        return Solution(evaluate=Bilinear(x, y, U), nodes=pts[~edge.ravel()],
                        values=U[1:-1, 1:-1].ravel().copy(),
                        info={"dofs": (n - 1) ** 2, "iterations": sweeps, "h": max(hx, hy),
                              "omega": omega, "residual": rel, "stopped": stopped})
