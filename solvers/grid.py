"""Shared tools of the grid methods: tensor grids, stencils, boundary folding, interpolants."""
from __future__ import annotations

import numpy as np
import scipy.sparse as sps

__all__ = ["TensorGrid", "second_difference", "apply_stencil", "discrete_rhs", "interior_matrix",
           "LocalLagrange"]


class TensorGrid:
    """Uniform grid with ``n`` intervals per side on a rectangle (boundary nodes included)."""

    def __init__(self, domain, n: int):
        self.domain = domain
        self.n = n
        self.x = np.linspace(domain.x0, domain.x1, n + 1)
        self.y = np.linspace(domain.y0, domain.y1, n + 1)
        self.hx = (domain.x1 - domain.x0) / n
        self.hy = (domain.y1 - domain.y0) / n

    @property
    def points(self) -> np.ndarray:
        X, Y = np.meshgrid(self.x, self.y, indexing="ij")
        return np.column_stack([X.ravel(), Y.ravel()])

    @property
    def interior_points(self) -> np.ndarray:
        X, Y = np.meshgrid(self.x[1:-1], self.y[1:-1], indexing="ij")
        return np.column_stack([X.ravel(), Y.ravel()])

    def boundary_mask(self) -> np.ndarray:
        m = np.zeros((self.n + 1, self.n + 1), dtype=bool)
        m[0, :] = m[-1, :] = m[:, 0] = m[:, -1] = True
        return m

    def boundary_grid(self, g) -> np.ndarray:
        """Full grid that holds the Dirichlet data on the boundary and zero inside (g is
        evaluated at the 4 n boundary nodes only)."""
        n = self.n
        U = np.zeros((n + 1, n + 1))
        x, y = self.x, self.y
        pts = np.concatenate([
            np.column_stack([np.full(n + 1, x[0]), y]), np.column_stack([np.full(n + 1, x[-1]), y]),
            np.column_stack([x[1:-1], np.full(n - 1, y[0])]), np.column_stack([x[1:-1], np.full(n - 1, y[-1])])])
        v = np.asarray(g(pts), dtype=float)
        U[0, :], U[-1, :] = v[: n + 1], v[n + 1: 2 * n + 2]
        U[1:-1, 0], U[1:-1, -1] = v[2 * n + 2: 3 * n + 1], v[3 * n + 1:]
        return U


def second_difference(m: int, h: float) -> sps.csr_matrix:
    """Dirichlet second-difference matrix tridiag(1, -2, 1) / h^2 of size m."""
    e = np.ones(m)
    return sps.diags([e[:-1], -2 * e, e[:-1]], [-1, 0, 1], format="csr") / h ** 2


def apply_stencil(U: np.ndarray, hx: float, hy: float, compact: bool) -> np.ndarray:
    """Interior values of -(dxx + dyy [+ (hx^2 + hy^2)/12 dxx dyy]) U for a full grid U."""
    dxx = (U[2:, :] - 2 * U[1:-1, :] + U[:-2, :]) / hx ** 2          # rows 1..n-1, all columns
    dyy = (U[:, 2:] - 2 * U[:, 1:-1] + U[:, :-2]) / hy ** 2          # all rows, columns 1..n-1
    out = -(dxx[:, 1:-1] + dyy[1:-1, :])
    if compact:
        dxxyy = (dxx[:, 2:] - 2 * dxx[:, 1:-1] + dxx[:, :-2]) / hy ** 2
        out -= (hx ** 2 + hy ** 2) / 12.0 * dxxyy
    return out


def discrete_rhs(grid: TensorGrid, problem, compact: bool) -> np.ndarray:
    """Right-hand side of the interior system, Dirichlet data folded in.

    5-point: f at interior nodes. Compact 9-point (Mehrstellen): f + (hx^2 dxx f + hy^2 dyy f)/12,
    the correction that makes the scheme fourth order (Collatz; LeVeque 2007, sec. 3.5).
    """
    m = grid.n - 1
    if problem.f is None:
        rhs = np.zeros((m, m))
    elif compact:
        # (hx^2 dxx f)/12 = (f_{i+1,j} - 2 f_ij + f_{i-1,j}) / 12: the h^2 cancels; in place:
        # rhs = (2/3) f_ij + (f_{i+1,j} + f_{i-1,j} + f_{i,j+1} + f_{i,j-1}) / 12
        F = problem.f_on_grid(grid.x, grid.y)
        rhs = F[2:, 1:-1] + F[:-2, 1:-1]
        rhs += F[1:-1, 2:]
        rhs += F[1:-1, :-2]
        rhs *= 1.0 / 12.0
        rhs += (2.0 / 3.0) * F[1:-1, 1:-1]
    else:
        rhs = problem.f_on_grid(grid.x[1:-1], grid.y[1:-1])
        if not rhs.flags.writeable:
            rhs = rhs.copy()
    Ub = grid.boundary_grid(problem.g) if problem.g is not None else np.zeros((grid.n + 1,) * 2)
    _fold_boundary(rhs, Ub, grid.hx, grid.hy, compact)
    return rhs, Ub


def _fold_boundary(rhs: np.ndarray, Ub: np.ndarray, hx: float, hy: float, compact: bool) -> None:
    """rhs -= stencil(Ub) where Ub is zero inside: only the interior nodes next to the boundary
    see it, so the stencil is applied on the four 3-node-wide edge strips, not the whole grid."""
    m = rhs.shape[0]
    if m <= 2:
        rhs -= apply_stencil(Ub, hx, hy, compact)
        return
    top = apply_stencil(Ub[:3, :], hx, hy, compact)[0]
    bottom = apply_stencil(Ub[-3:, :], hx, hy, compact)[0]
    left = apply_stencil(Ub[:, :3], hx, hy, compact)[:, 0]
    right = apply_stencil(Ub[:, -3:], hx, hy, compact)[:, 0]
    rhs[0, :] -= top
    rhs[-1, :] -= bottom
    rhs[1:-1, 0] -= left[1:-1]
    rhs[1:-1, -1] -= right[1:-1]


def interior_matrix(grid: TensorGrid, compact: bool) -> sps.csr_matrix:
    """Sparse matrix of -(dxx + dyy [+ c dxx dyy]) on the interior nodes (x index major)."""
    m = grid.n - 1
    Dx = second_difference(m, grid.hx)
    Dy = second_difference(m, grid.hy)
    I = sps.identity(m, format="csr")
    A = -(sps.kron(Dx, I) + sps.kron(I, Dy))
    if compact:
        A = A - (grid.hx ** 2 + grid.hy ** 2) / 12.0 * sps.kron(Dx, Dy)
    return A.tocsr()


class LocalLagrange:
    """Tensor-product local Lagrange interpolation of degree `degree` on a uniform grid.

    Degree 1 is bilinear (error O(h^2)); degree 3 uses a 4 x 4 stencil (error O(h^4)), so the
    interpolant never lowers the order of a second- or fourth-order scheme.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, U: np.ndarray, degree: int = 3):
        self.x, self.y, self.U, self.k = x, y, U, degree

    @staticmethod
    def _weights(t: np.ndarray, k: int) -> np.ndarray:
        # t: local coordinate in units of h relative to the stencil's first node
        nodes = np.arange(k + 1)
        W = np.ones((len(t), k + 1))
        for j in nodes:
            for m in nodes:
                if m != j:
                    W[:, j] *= (t - m) / (j - m)
        return W

    def _stencil(self, coord, grid):
        n = len(grid) - 1
        h = (grid[-1] - grid[0]) / n
        s = (coord - grid[0]) / h
        first = np.floor(s).astype(int) - (self.k - 1) // 2
        first = np.clip(first, 0, n - self.k)
        return first, self._weights(s - first, self.k)

    def __call__(self, points: np.ndarray) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        ix, wx = self._stencil(p[:, 0], self.x)
        iy, wy = self._stencil(p[:, 1], self.y)
        out = np.zeros(len(p))
        for a in range(self.k + 1):
            for b in range(self.k + 1):
                out += wx[:, a] * wy[:, b] * self.U[ix + a, iy + b]
        return out
