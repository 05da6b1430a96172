"""Chebyshev collocation on tensor-product Chebyshev points, solved by matrix diagonalisation."""
from __future__ import annotations

import dataclasses

import numpy as np

from bench.config import ConfigError, positive
from solvers.base import Solution, Solver, Tags

__all__ = ["Chebyshev", "cheb", "barycentric_matrix"]


def cheb(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Chebyshev differentiation matrix and points x_j = cos(j pi / n), j = 0..n.

    Trefethen, Spectral Methods in MATLAB, SIAM 2000, program cheb.m (negative-sum trick for the
    diagonal).
    """
    if n == 0:
        return np.zeros((1, 1)), np.ones(1)
    x = np.cos(np.pi * np.arange(n + 1) / n)
    c = np.ones(n + 1)
    c[0] = c[-1] = 2.0
    c *= (-1.0) ** np.arange(n + 1)
    dX = x[:, None] - x[None, :]
    D = np.outer(c, 1.0 / c) / (dX + np.eye(n + 1))
    D -= np.diag(D.sum(axis=1))
    return D, x


def barycentric_matrix(nodes: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Rows of barycentric interpolation weights from Chebyshev `nodes` to points `t`.

    Second (true) barycentric formula with weights (-1)^j, halved at the ends (Berrut &
    Trefethen, SIAM Review 46, 2004). Points that coincide with a node get the unit row.
    """
    n = len(nodes) - 1
    w = (-1.0) ** np.arange(n + 1)
    w[0] *= 0.5
    w[-1] *= 0.5
    diff = t[:, None] - nodes[None, :]
    exact = diff == 0
    diff[exact] = 1.0
    L = w / diff
    L /= L.sum(axis=1, keepdims=True)
    hit = exact.any(axis=1)
    if hit.any():
        L[hit] = exact[hit].astype(float)
    return L


@dataclasses.dataclass
class ChebParams:
    n: int = 32   # polynomial degree per direction (n + 1 points)

    def __post_init__(self):
        positive("n", self.n, integer=True, maximum=4096)
        if self.n < 2:
            raise ConfigError(f"`n` must be at least 2, got {self.n}")


class Chebyshev(Solver):
    """Chebyshev collocation on [x0, x1] x [y0, y1] solved by matrix diagonalisation.

    With D2 the interior block of the second-derivative collocation matrix, D2 = P L P^-1, the
    system D2x U + U D2y^T = R becomes a pointwise division in the eigenbasis: O(n^3) work
    instead of the O(n^6) dense solve (Haidvogel & Zang, J. Comput. Phys. 30, 1979; Trefethen,
    Spectral Methods in MATLAB, 2000, ch. 7). Spectral accuracy for analytic data; barycentric
    interpolation for `evaluate`.
    """

    name = "cheb"
    family = "spectral"
    preload_modules = ("scipy.linalg", "solvers.eigen")
    description = "Chebyshev collocation, matrix diagonalisation, barycentric interpolant"
    reference = "Trefethen, Spectral Methods in MATLAB, SIAM 2000; Haidvogel & Zang, JCP 30 (1979)"
    Params = ChebParams
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=frozenset({"rectangle"}))

    def memory_estimate_mb(self) -> float:
        return 10 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def _solve(self, problem, budget, ctx):
        n = self.params.n
        d = problem.domain
        if problem.kind == "eigen":  # Kronecker-sum spectrum with the drift filter (solvers/eigen.py)
            from solvers.eigen import cheb_eigen

            with ctx.phase("solve"):
                return cheb_eigen(d, n, problem.n_eigs, {"h": float(max(d.lengths) / n)})
        with ctx.phase("setup"):
            D, t = cheb(n)
            D2 = D @ D
            a, b = d.lengths
            x = d.x0 + 0.5 * a * (1 - t[::-1])     # ascending nodes in x
            y = d.y0 + 0.5 * b * (1 - t[::-1])
            # reversing the nodes reverses rows and columns of D2; the map scales it by (2/a)^2
            D2x = D2[::-1, ::-1] * (2.0 / a) ** 2
            D2y = D2[::-1, ::-1] * (2.0 / b) ** 2
            X, Y = np.meshgrid(x, y, indexing="ij")
            pts = np.column_stack([X.ravel(), Y.ravel()])
            F = problem.f_or_zero(pts).reshape(n + 1, n + 1)
            Ub = np.zeros((n + 1, n + 1))
            edge = np.zeros((n + 1, n + 1), dtype=bool)
            edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = True
            if problem.g is not None:
                Ub[edge] = problem.g(pts[edge.ravel()])
            lx, Px = np.linalg.eig(D2x[1:-1, 1:-1])
            ly, Py = np.linalg.eig(D2y[1:-1, 1:-1])
            lx, Px, ly, Py = lx.real, Px.real, ly.real, Py.real
            Pxi = np.linalg.inv(Px)
            Pyi = np.linalg.inv(Py)
        with ctx.phase("solve"):
            # interior equations: (D2x U + U D2y^T)_ii = -F_ii, boundary part moved right
            R = -F[1:-1, 1:-1] - (D2x @ Ub + Ub @ D2y.T)[1:-1, 1:-1]
            W = Pxi @ R @ Pyi.T
            W /= lx[:, None] + ly[None, :]
            U = Ub.copy()
            U[1:-1, 1:-1] = Px @ W @ Py.T
        interior = ~edge.ravel()

        def evaluate(points):
            p = np.asarray(points, dtype=float)
            Lx = barycentric_matrix(x, p[:, 0])
            Ly = barycentric_matrix(y, p[:, 1])
            return np.einsum("pi,ij,pj->p", Lx, U, Ly, optimize=True)

        return Solution(evaluate=evaluate, nodes=pts[interior], values=U.ravel()[interior],
                        info={"dofs": (n - 1) ** 2, "h": float(max(a, b) / n)})
