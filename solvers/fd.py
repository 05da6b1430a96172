"""Finite differences on tensor grids: the 5-point scheme and the compact 9-point scheme.

Eigenproblems on rectangles (`grid_eigen`) use the same matrices, by the shared shift-invert
Lanczos of `lapbench.solvers.eigen`; fd5 on other domains goes to `lapbench.solvers.masked`. fd5 on d-boxes,
d <= 4 (`box_matrix`): the (2d + 1)-point operator as a sparse Kronecker sum, sparse direct or
AMG-CG.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sps

from lapbench.config import ConfigError, one_of, positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.eigen import eigen_solution, eigsh_lowest, field_modes
from lapbench.solvers.grid import (LocalLagrange, TensorGrid, box_axes, box_rhs, box_solution, default_n,
                          discrete_rhs, interior_matrix, refuse_memory, second_difference)
from lapbench.solvers.linalg import LINEAR_SOLVERS, solve_spd

__all__ = ["FD5", "FD9", "MAX_GRID_N", "grid_eigen", "box_matrix", "FD_BOX_DIMS"]

# Dimensions of the boxes fd5 takes: beyond 4 a sparse matrix of (n-1)^d rows is never the
# method of choice (the sine transforms solve the same system, `fst5`).
FD_BOX_DIMS = frozenset({1, 2, 3, 4})
# `n` left at its default (64) on a d-box: default_n(d, 64, FD_BOX_UNKNOWNS[linear_solver]):
# direct 64, 64, 32, 8 for d = 1..4 (SuperLU's fill in 4-D: 2 s at n = 12, 83 s at n = 16,
# measured on this machine), amg 64, 64, 64, 16 (1.2 s at n = 16 in 4-D)
FD_BOX_UNKNOWNS = {"direct": 1 << 15, "amg": 1 << 18}

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
    # AMG (linalg, masked), dense tiny eigenproblems (scipy.linalg in lapbench.solvers.eigen), Shortley-Weller
    # grids and their interpolant (masked, scipy.spatial)
    preload_modules = ("pyamg", "scipy.linalg", "scipy.spatial", "lapbench.solvers.masked")
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
        if problem.kind == "eigen":  # shift-invert Lanczos on the same matrix
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


def box_matrix(ns, hs) -> sps.csr_matrix:
    """-sum_i D_i on the interior of a d-box grid as a sparse Kronecker sum (C order: the last
    axis varies fastest, as numpy's ravel)."""
    blocks = [second_difference(int(n) - 1, h) for n, h in zip(ns, hs)]
    A = None
    for i, Di in enumerate(blocks):
        term = None
        for j, Dj in enumerate(blocks):
            factor = -Di if j == i else sps.identity(Dj.shape[0], format="csr")
            term = factor if term is None else sps.kron(term, factor, format="csr")
        A = term if A is None else A + term
    return A.tocsr()


def grid_solution(grid: TensorGrid, U: np.ndarray, degree: int, info: dict) -> Solution:
    """Solution on a tensor grid: local Lagrange interpolant, interior nodes as the nodal set."""
    return Solution(evaluate=LocalLagrange(grid.x, grid.y, U, degree), nodes=grid.interior_points,
                    values=U[1:-1, 1:-1].ravel(), info=info)


def grid_eigen(grid, compact: bool, k: int, info: dict) -> Solution:
    """5-point (order 2) or compact 9-point (order 4) eigenvalues on a rectangle's tensor grid.

    The compact scheme applies the Mehrstellen correction to both sides:
    -(Dxx + Dyy + (hx^2 + hy^2)/12 Dxx Dyy) u = lambda (I + (hx^2 Dxx + hy^2 Dyy)/12) u, the
    eigenvalue form of the corrected right-hand side (Collatz 1960; LeVeque 2007, sec. 3.5), which
    is fourth order for the eigenvalues of smooth eigenfunctions.
    """
    A = interior_matrix(grid, compact)
    B = None
    if compact:
        m = grid.n - 1
        I = sps.identity(m, format="csr")
        B = (sps.identity(m * m, format="csr") + (grid.hx ** 2 * sps.kron(second_difference(m, grid.hx), I)
                                                   + grid.hy ** 2 * sps.kron(I, second_difference(m, grid.hy))) / 12.0)
        B = B.tocsr()
    lam, V = eigsh_lowest(A, k, B)
    m = grid.n - 1
    h2 = grid.hx * grid.hy
    V = V / np.sqrt(h2 * np.sum(V * V, axis=0))      # discrete L2 normalisation
    fields = []
    for j in range(V.shape[1]):
        U = np.zeros((grid.n + 1, grid.n + 1))
        U[1:-1, 1:-1] = V[:, j].reshape(m, m)
        fields.append(LocalLagrange(grid.x, grid.y, U, 3 if compact else 1))
    return eigen_solution(lam, field_modes(fields), {**info, "dofs": int(m * m)}, nodes=grid.interior_points,
                          first_values=V[:, 0])


class FD5(_SparseFD):
    """Standard 5-point finite differences, sparse direct or AMG-preconditioned CG.

    Second order for smooth solutions (LeVeque, Finite Difference Methods for Ordinary and
    Partial Differential Equations, SIAM 2007, ch. 3).
    """

    name = "fd5"
    description = "5-point finite differences, sparse direct or AMG-CG solve (order 2)"
    reference = "LeVeque, Finite Difference Methods for ODEs and PDEs, SIAM 2007, ch. 3"
    # Non-rectangular domains: masked grid with Shortley-Weller arms (solvers/masked.py); d-boxes
    # (d <= 4): the Kronecker-sum matrix (`box_matrix`).
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}),
                domains=frozenset({"rectangle", "disk", "annulus", "polygon", "box"}), dims=FD_BOX_DIMS)

    def _supports(self, problem):
        if problem.domain.kind == "box" and problem.kind == "eigen":
            return False, "fd5 computes eigenvalues on rectangles and curved 2-D domains, not on boxes"
        return True, ""

    def box_n(self, dim: int) -> int:
        """Intervals per side on a d-box: `n` as given, or the dimension's default for the default 64."""
        n = self.params.n
        return default_n(dim, n, FD_BOX_UNKNOWNS[self.params.linear_solver]) if n == FDParams.n else n

    def memory_estimate_mb(self, problem=None) -> float:
        if problem is None or problem.domain.kind != "box":
            return super().memory_estimate_mb()
        dim = problem.domain.dim
        N = float(self.box_n(dim) - 1) ** dim
        if self.params.linear_solver == "amg":
            per = 8 * 68.0 * dim / 2
        else:
            # nested-dissection-like fill grows like N^((d-1)/d) per unknown in d >= 3
            per = 8 * (24 + 7 * np.log2(max(N, 2)) + (6 * N ** ((dim - 2) / dim) if dim > 2 else 0))
        return N * per / 2 ** 20

    def _solve(self, problem, budget, ctx):
        if problem.domain.kind == "box":
            return self._solve_box(problem, budget, ctx)
        if problem.domain.kind != "rectangle" and problem.kind == "eigen":
            from lapbench.solvers.masked import masked_eigen  # the same masked operator, eigenpairs

            with ctx.phase("solve"):
                return masked_eigen(problem, self.params.n, problem.n_eigs, {})
        if problem.domain.kind != "rectangle":
            from lapbench.solvers.masked import masked_fd5

            return masked_fd5(problem, self.params, ctx)
        return super()._solve(problem, budget, ctx)

    def _solve_box(self, problem, budget, ctx):
        dim = problem.domain.dim
        n = self.box_n(dim)
        refuse_memory(self.name, self.memory_estimate_mb(problem), budget)
        with ctx.phase("setup"):
            axes = box_axes(problem.domain.bounds, [n] * dim)
            hs = [a[1] - a[0] for a in axes]
            A = box_matrix([n] * dim, hs)
            rhs, U = box_rhs(axes, problem.f, problem.g, compact=False)
        with ctx.phase("solve"):
            u, info = solve_spd(A, rhs.ravel(), self.params.linear_solver, self.params.tol)
        U[(slice(1, -1),) * dim] = u.reshape(rhs.shape)
        return box_solution(axes, U, 1, {**info, "dofs": int(u.size), "n": n, "dim": dim, "h": max(hs)})


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
