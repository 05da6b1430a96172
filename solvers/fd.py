"""Finite differences on tensor grids: the 5-point scheme and the compact 9-point scheme."""
from __future__ import annotations

import dataclasses

import numpy as np

from bench.config import ConfigError, one_of, positive
from solvers.base import Solution, Solver, Tags
from solvers.grid import LocalLagrange, TensorGrid, discrete_rhs, interior_matrix
from solvers.linalg import LINEAR_SOLVERS, solve_spd

__all__ = ["FD5", "FD9", "MAX_GRID_N"]

# A grid finer than this needs > ~0.5 TB for a sparse factorisation; refused up front.
MAX_GRID_N = 1 << 15


@dataclasses.dataclass
class FDParams:
    """Options of the sparse finite-difference solvers."""

    n: int = 64                      # intervals per side
    linear_solver: str = "direct"    # direct | amg
    tol: float = 1e-10               # relative residual for amg

    def __post_init__(self):
        positive("n", self.n, integer=True, maximum=MAX_GRID_N)
        if self.n < 2:
            raise ConfigError(f"`n` must be at least 2 (one interior node), got {self.n}")
        one_of("linear_solver", self.linear_solver, LINEAR_SOLVERS)
        positive("tol", self.tol)


class _SparseFD(Solver):
    family = "fd"
    # AMG (linalg, masked), eigensolvers (eigen), Shortley-Weller grids and their interpolant
    preload_modules = ("pyamg", "scipy.linalg", "scipy.spatial", "solvers.eigen", "solvers.masked")
    compact = False
    Params = FDParams
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=frozenset({"rectangle"}))

    def memory_estimate_mb(self) -> float:
        """Rough peak memory of a case: a sparse factorisation of the 2-D Laplacian has O(N log N)
        fill, the AMG hierarchy O(N).

        Bytes per unknown fitted to the peak resident memory measured on whole cases (sine, 2 cores,
        Dec 2026): direct 66/303/1332 MiB at n = 256/512/1024, 9-point 421 MiB at n = 512 (more
        fill: x1.4), amg 147/557 MiB at n = 512/1024.
        """
        N = (self.params.n - 1) ** 2
        if self.params.linear_solver == "amg":
            per = 8 * 68.0
        else:
            per = 8 * (24 + 7 * np.log2(max(N, 2))) * (1.4 if self.compact else 1.0)
        return N * per / 2 ** 20

    def _solve(self, problem, budget, ctx):
        if problem.kind == "eigen":  # shift-invert Lanczos on the same matrix (solvers/eigen.py)
            from solvers.eigen import grid_eigen

            with ctx.phase("solve"):
                return grid_eigen(TensorGrid(problem.domain, self.params.n), self.compact,
                                  problem.n_eigs, {"h": max(problem.domain.lengths) / self.params.n})
        with ctx.phase("setup"):
            grid = TensorGrid(problem.domain, self.params.n)
            A = interior_matrix(grid, self.compact)
            rhs, Ub = discrete_rhs(grid, problem, self.compact)
        with ctx.phase("solve"):
            u, info = solve_spd(A, rhs.ravel(), self.params.linear_solver, self.params.tol)
        U = Ub.copy()
        U[1:-1, 1:-1] = u.reshape(grid.n - 1, grid.n - 1)
        return grid_solution(grid, U, degree=3 if self.compact else 1,
                             info={**info, "dofs": int(u.size), "h": max(grid.hx, grid.hy)})


def grid_solution(grid: TensorGrid, U: np.ndarray, degree: int, info: dict) -> Solution:
    """Solution on a tensor grid: local Lagrange interpolant, interior nodes as the nodal set."""
    return Solution(evaluate=LocalLagrange(grid.x, grid.y, U, degree), nodes=grid.interior_points,
                    values=U[1:-1, 1:-1].ravel(), info=info)


class FD5(_SparseFD):
    """Standard 5-point finite differences, sparse direct or AMG-preconditioned CG.

    Second order for smooth solutions (LeVeque, Finite Difference Methods for Ordinary and
    Partial Differential Equations, SIAM 2007, ch. 3).
    """

    name = "fd5"
    description = "5-point finite differences, sparse direct or AMG-CG solve (order 2)"
    reference = "LeVeque, Finite Difference Methods for ODEs and PDEs, SIAM 2007, ch. 3"
    # Non-rectangular domains: masked grid with Shortley-Weller arms (solvers/masked.py).
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}),
                domains=frozenset({"rectangle", "disk", "annulus", "polygon"}))

    def _solve(self, problem, budget, ctx):
        if problem.domain.kind != "rectangle" and problem.kind == "eigen":
            from solvers.eigen import masked_eigen  # the same masked operator, eigenpairs

            with ctx.phase("solve"):
                return masked_eigen(problem, self.params.n, problem.n_eigs, {})
        if problem.domain.kind != "rectangle":
            from solvers.masked import masked_fd5

            return masked_fd5(problem, self.params, ctx)
        return super()._solve(problem, budget, ctx)


class FD9(_SparseFD):
    """Compact 9-point (Mehrstellen) scheme with the corrected right-hand side.

    -(dxx + dyy + (hx^2+hy^2)/12 dxx dyy) u = f + (hx^2 dxx f + hy^2 dyy f)/12, fourth order
    for smooth solutions (Collatz, The Numerical Treatment of Differential Equations, 1960;
    LeVeque 2007, sec. 3.5).
    """

    name = "fd9"
    compact = True
    description = "compact 9-point (Mehrstellen) scheme with corrected RHS (order 4)"
    reference = "Collatz 1960; LeVeque, Finite Difference Methods, SIAM 2007, sec. 3.5"
