"""Chebyshev collocation on tensor-product Chebyshev points, solved by matrix diagonalisation.

On a d-dimensional box (`cheb_box_solve`) the same diagonalisation by mode products: the
interior operator is the Kronecker sum of the 1-D ones, so the right-hand side is transformed
by P_i^-1 along every axis i, divided by the sums of 1-D eigenvalues and transformed back by
P_i (O(d n^(d+1)) work, (n+1)^d storage); `evaluate` contracts the nodal tensor with
barycentric rows axis by axis.

Eigenproblems (`cheb_eigen`) diagonalise the same 1-D second-derivative matrices and keep the
eigenvalues that pass the drift test of `lapbench.solvers.eigen`.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.eigen import DRIFT_TOL, drift_accept, eigen_solution
from lapbench.solvers.grid import MAX_GRID_DIM, box_boundary_values, box_nodes, default_n, refuse_memory

__all__ = ["Chebyshev", "cheb", "barycentric_matrix", "cheb_eigen", "cheb_box_solve", "TensorBarycentric"]

# `n` left at its default (32) on a d-box means default_n(d, 32, CHEB_DEFAULT_NODES): the nodal
# tensor of (n+1)^d values is contracted with every evaluation point (m (n+1)^d flops), so the
# default keeps (n-1)^d at most 2^17 (32 for d <= 3, 16 for d = 4, 8 for d = 5, 6, 4 for d = 7..10).
CHEB_DEFAULT_NODES = 1 << 17


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
    (Haidvogel & Zang, JCP 30, 1979); the drift test is Boyd's (`lapbench.solvers.eigen.drift_accept`).
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


# -- boxes in d dimensions -----------------------------------------------------------------------
def _mode_product(M: np.ndarray, A: np.ndarray, axis: int) -> np.ndarray:
    """M applied along `axis` of the tensor A (the n-mode product A x_axis M)."""
    return np.moveaxis(np.tensordot(M, A, axes=(1, axis)), 0, axis)


def cheb_axes(bounds, ns) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Ascending Chebyshev points per axis of the box `bounds` (d, 2), degree ns[i], and the
    second-derivative collocation matrices on them."""
    axes, D2s = [], []
    for (lo, hi), n in zip(np.asarray(bounds, dtype=float).reshape(-1, 2), ns):
        D, t = cheb(int(n))
        length = hi - lo
        axes.append(lo + 0.5 * length * (1 - t[::-1]))
        # reversing the nodes reverses rows and columns of D2; the map scales it by (2/length)^2
        D2s.append((D @ D)[::-1, ::-1] * (2.0 / length) ** 2)
    return axes, D2s


def cheb_box_solve(bounds, ns, f, g, ctx=None) -> tuple[list[np.ndarray], np.ndarray]:
    """Chebyshev collocation of -Laplace(u) = f, u = g on a d-box, degree ns[i] on axis i.

    Interior equations sum_i (D2_i x_i U) = -F with the boundary values moved right; with
    D2_i interior = P_i diag(lambda_i) P_i^-1 the solution is
    U = (R x_i P_i^-1 ... / sum_i lambda_i) x_i P_i ... (Haidvogel & Zang, J. Comput. Phys. 30,
    1979, in d dimensions by mode products). Returns the node axes and the full nodal tensor.
    """
    import contextlib

    from lapbench.fields import on_grid

    phase = ctx.phase if ctx is not None else (lambda name: contextlib.nullcontext())
    d = len(ns)
    inner = (slice(1, -1),) * d
    with phase("setup"):
        axes, D2s = cheb_axes(bounds, ns)
        F = (np.zeros(tuple(int(n) - 1 for n in ns)) if f is None
             else np.array(on_grid(f, *[a[1:-1] for a in axes]), dtype=float))
        U = box_boundary_values(axes, g)
        eig = []
        for D2 in D2s:
            lam, P = np.linalg.eig(D2[1:-1, 1:-1])
            P = P.real
            eig.append((lam.real, P, np.linalg.inv(P)))
    with phase("solve"):
        R = -F
        if g is not None:
            for i, D2 in enumerate(D2s):
                R -= _mode_product(D2, U, i)[inner]
        for i, (_, _, Pi) in enumerate(eig):
            R = _mode_product(Pi, R, i)
        S = np.zeros(R.shape)
        for i, (lam, _, _) in enumerate(eig):
            S += lam.reshape([-1 if j == i else 1 for j in range(d)])
        R /= S
        for i, (_, P, _) in enumerate(eig):
            R = _mode_product(P, R, i)
        U[inner] = R
    return axes, U


class TensorBarycentric:
    """Barycentric interpolation of a nodal tensor on Chebyshev axes at points (m, d): the
    tensor is contracted with the barycentric rows of the last axis by one matrix product,
    then axis by axis (m (n+1)^d flops; points in chunks)."""

    def __init__(self, axes: list[np.ndarray], U: np.ndarray):
        self.axes, self.U = axes, U

    def __call__(self, points: np.ndarray) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        d = len(self.axes)
        chunk = max(1, min(len(p), (1 << 24) // max(1, self.U.size // len(self.axes[-1]))))
        out = np.empty(len(p))
        last = self.U.reshape(-1, len(self.axes[-1]))
        for c0 in range(0, len(p), chunk):
            q = p[c0:c0 + chunk]
            T = last @ barycentric_matrix(self.axes[-1], q[:, -1]).T          # (..., c)
            for i in range(d - 2, -1, -1):
                L = barycentric_matrix(self.axes[i], q[:, i])                # (c, n_i + 1)
                T = np.einsum("ajc,cj->ac", T.reshape(-1, len(self.axes[i]), len(q)), L)
            out[c0:c0 + chunk] = T.reshape(len(q))
        return out


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
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=frozenset({"rectangle", "box"}),
                dims=frozenset(range(1, MAX_GRID_DIM + 1)))

    def box_n(self, dim: int) -> int:
        """Degree per axis on a d-box: `n` as given, or the dimension's default for the default 32."""
        n = self.params.n
        return default_n(dim, n, CHEB_DEFAULT_NODES) if n == ChebParams.n else n

    def memory_estimate_mb(self, problem=None) -> float:
        if problem is not None and problem.domain.kind != "rectangle":
            # the nodal tensor, the right-hand side and two mode-product temporaries
            return 5 * 8 * float(self.box_n(problem.domain.dim) + 1) ** problem.domain.dim / 2 ** 20
        return 10 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def _supports(self, problem):
        if problem.domain.kind != "rectangle" and problem.kind == "eigen":
            return False, "cheb computes eigenvalues on rectangles only"
        return True, ""

    def _solve(self, problem, budget, ctx):
        if problem.domain.kind != "rectangle":
            dim = problem.domain.dim
            n = self.box_n(dim)
            refuse_memory(self.name, self.memory_estimate_mb(problem), budget)
            axes, U = cheb_box_solve(problem.domain.bounds, [n] * dim, problem.f, problem.g, ctx)
            nodes, values = box_nodes(axes, U)
            return Solution(evaluate=TensorBarycentric(axes, U), nodes=nodes, values=values,
                            info={"dofs": int((n - 1) ** dim), "n": n, "dim": dim,
                                  "h": float(np.max(np.diff(problem.domain.bounds, axis=1)) / n)})
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
