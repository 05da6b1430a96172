"""Chebyshev collocation on tensor-product Chebyshev points, solved by matrix diagonalisation.

Eigenproblems (`cheb_eigen`) diagonalise the same 1-D second-derivative matrices and keep the
eigenvalues that pass the drift test of `solvers.eigen`.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from bench.config import ConfigError, positive
from solvers.base import Solution, Solver, Tags
from solvers.eigen import DRIFT_TOL, drift_accept, eigen_solution

__all__ = ["Chebyshev", "cheb", "barycentric_matrix", "cheb_eigen"]


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


# -- eigenproblems on rectangles ----------------------------------------------------------------
def _cheb_dirichlet_1d(n: int, length: float):
    """Eigen-decomposition of -d^2/dx^2 (interior Chebyshev collocation, Dirichlet) on [0, length].

    Returns ascending eigenvalues mu, eigenvectors P (interior values) and the nodes (row order).
    """
    D, t = cheb(n)
    D2 = (D @ D)[::-1, ::-1] * (2.0 / length) ** 2
    mu, P = np.linalg.eig(-D2[1:-1, 1:-1])
    # spurious eigenvalues of the collocation matrix may come out complex; they sort last and
    # never pass the drift test below
    bad = np.abs(mu.imag) > 1e-8 * np.abs(mu)
    mu = np.where(bad, np.inf, mu.real)
    order = np.argsort(mu)
    x = 0.5 * length * (1 - t[::-1])
    return mu[order], P[:, order].real, x


def cheb_eigen(domain, n: int, k: int, info: dict) -> Solution:
    """Chebyshev collocation eigenpairs on a rectangle (degree n per direction, plus a drift check).

    The 2-D operator is the Kronecker sum of the 1-D ones, so its eigenpairs are
    (mu_x,i + mu_y,j, P_x[:, i] (x) P_y[:, j]). 1-D eigenvalues are computed at degree n_f = n + n/2
    (reported) and n (check); those failing the drift test are dropped, and only 2-D eigenvalues
    below the smallest sum involving a dropped one are reported (so none is skipped). The
    Kronecker-sum spectrum is the eigenvalue form of the matrix diagonalisation of `Chebyshev`
    (Haidvogel & Zang, JCP 30, 1979); the drift test is Boyd's (`solvers.eigen.drift_accept`).
    """
    a, b = domain.lengths
    nf = n + max(2, n // 2)
    mux_c, _, _ = _cheb_dirichlet_1d(n, a)
    muy_c, _, _ = _cheb_dirichlet_1d(n, b)
    mux, Px, x = _cheb_dirichlet_1d(nf, a)
    muy, Py, y = _cheb_dirichlet_1d(nf, b)
    ax = drift_accept(mux_c, mux, DRIFT_TOL)
    ay = drift_accept(muy_c, muy, DRIFT_TOL)
    cut = np.inf
    if ax < len(mux):
        cut = min(cut, mux[ax] + muy[0])
    if ay < len(muy):
        cut = min(cut, mux[0] + muy[ay])
    S = mux[:ax, None] + muy[None, :ay]
    flat = np.argsort(S, axis=None, kind="stable")
    vals = S.ravel()[flat]
    keep = vals < cut
    flat, vals = flat[keep][:k], vals[keep][:k]
    if len(vals) < k:
        raise RuntimeError(f"Chebyshev degree n={n} resolves only {len(vals)} of the k={k} wanted "
                           f"eigenvalues (drift tolerance {DRIFT_TOL:g}); raise `solver.n`")
    I, J = np.unravel_index(flat, S.shape)
    # full grids of the 1-D vectors with the zero boundary values, normalised in discrete L2
    def pad(P):
        return np.vstack([np.zeros((1, P.shape[1])), P, np.zeros((1, P.shape[1]))])

    Fx, Fy = pad(Px[:, I]), pad(Py[:, J])
    wx = _cc_weights(x)
    wy = _cc_weights(y)
    Fx /= np.sqrt(wx @ (Fx * Fx))
    Fy /= np.sqrt(wy @ (Fy * Fy))
    # sign: largest value of each 2-D mode positive
    sx = np.sign(Fx[np.argmax(np.abs(Fx), axis=0), np.arange(len(I))])
    sy = np.sign(Fy[np.argmax(np.abs(Fy), axis=0), np.arange(len(J))])
    Fx *= sx
    Fy *= sy

    def modes(points):
        p = np.asarray(points, dtype=float)
        Lx = barycentric_matrix(x, p[:, 0])
        Ly = barycentric_matrix(y, p[:, 1])
        return (Lx @ Fx) * (Ly @ Fy)

    X, Y = np.meshgrid(x[1:-1], y[1:-1], indexing="ij")
    nodes = np.column_stack([X.ravel(), Y.ravel()])
    first = np.outer(Fx[1:-1, 0], Fy[1:-1, 0]).ravel() if len(vals) else None
    return eigen_solution(vals, modes, {**info, "dofs": int((nf - 1) ** 2), "n_check": n, "n_used": nf,
                                        "drift_tol": DRIFT_TOL, "accepted_1d": [ax, ay]},
                          nodes=nodes if len(vals) else None, first_values=first)


def _cc_weights(x: np.ndarray) -> np.ndarray:
    """Clenshaw-Curtis quadrature weights on the mapped Chebyshev points x (Trefethen 2000, clencurt.m)."""
    n = len(x) - 1
    theta = np.pi * np.arange(n + 1) / n
    w = np.zeros(n + 1)
    v = np.ones(n - 1)
    if n % 2 == 0:
        w[0] = w[n] = 1.0 / (n * n - 1)
        for j in range(1, n // 2):
            v -= 2 * np.cos(2 * j * theta[1:-1]) / (4 * j * j - 1)
        v -= np.cos(n * theta[1:-1]) / (n * n - 1)
    else:
        w[0] = w[n] = 1.0 / (n * n)
        for j in range(1, (n - 1) // 2 + 1):
            v -= 2 * np.cos(2 * j * theta[1:-1]) / (4 * j * j - 1)
    w[1:-1] = 2 * v / n
    return w * 0.5 * abs(x[-1] - x[0])


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
    preload_modules = ("scipy.linalg",)
    description = "Chebyshev collocation, matrix diagonalisation, barycentric interpolant"
    reference = "Trefethen, Spectral Methods in MATLAB, SIAM 2000; Haidvogel & Zang, JCP 30 (1979)"
    Params = ChebParams
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=frozenset({"rectangle"}))

    def memory_estimate_mb(self) -> float:
        return 10 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def _solve(self, problem, budget, ctx):
        n = self.params.n
        d = problem.domain
        if problem.kind == "eigen":  # Kronecker-sum spectrum with the drift filter
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
