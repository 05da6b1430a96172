"""The 5-point scheme on a masked Cartesian grid for non-rectangular domains (Shortley-Weller).

The bounding box carries a uniform square grid (``n`` intervals along its longer side, origin at
its lower-left corner). Grid nodes inside the domain are unknowns; nodes on the boundary carry
the Dirichlet data. Where an arm of the 5-point star leaves the domain it is shortened to the
boundary crossing (found by bisection on the domain's signed distance) and the data are taken
there: the Shortley-Weller scheme (Shortley & Weller, J. Appl. Phys. 9, 1938), second-order
convergent although its truncation error next to the boundary is only first order (Bramble &
Hubbard, "On the formulation of finite difference analogues of the Dirichlet problem for
Poisson's equation", Numer. Math. 4, 1962). For polygons whose vertices lie on grid lines with
axis-parallel edges no arm is shortened and the scheme is the plain 5-point stencil.

The matrix is not symmetric next to curved or off-grid boundaries, so ``amg`` uses
smoothed-aggregation AMG of the symmetric part as a preconditioner of GMRES instead of CG.
Eigenproblems (`masked_eigen`) use the same matrix with zero boundary values.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from lapbench.solvers.base import Solution
from lapbench.solvers.eigen import eigen_solution, eigsh_lowest, field_modes, shift_invert, sign_fix

__all__ = ["masked_fd5", "masked_eigen", "MaskedGrid", "MaskedInterpolant", "solve_general"]

BISECTION_STEPS = 55        # 2^-55 h: crossings lie on the boundary to rounding error
_DIRS = ((1, 0), (-1, 0), (0, 1), (0, -1))


class MaskedGrid:
    """Uniform grid over a domain's bounding box with node classes inside / boundary / outside."""

    def __init__(self, domain, n: int):
        x0, x1, y0, y1 = domain.bbox
        self.domain = domain
        self.h = max(x1 - x0, y1 - y0) / n
        # a whisker of slack so that a box side that is a multiple of h keeps its last node
        self.nx = int(np.floor((x1 - x0) / self.h + 1e-9))
        self.ny = int(np.floor((y1 - y0) / self.h + 1e-9))
        self.x = x0 + self.h * np.arange(self.nx + 1)
        self.y = y0 + self.h * np.arange(self.ny + 1)
        X, Y = np.meshgrid(self.x, self.y, indexing="ij")
        self.points = np.column_stack([X.ravel(), Y.ravel()])
        self.tol = 1e-10 * domain.scale
        d = domain.distance(self.points).reshape(self.nx + 1, self.ny + 1)
        self.inside = d > self.tol            # unknowns
        self.onb = np.abs(d) <= self.tol      # boundary nodes (data)
        self.index = -np.ones(self.inside.shape, dtype=np.int64)
        self.index[self.inside] = np.arange(int(self.inside.sum()))

    def crossing(self, P: np.ndarray, e: np.ndarray) -> np.ndarray:
        """Distance s in (0, h) from inside points P along unit direction e to the boundary."""
        lo = np.zeros(len(P))
        hi = np.full(len(P), self.h)
        for _ in range(BISECTION_STEPS):
            mid = 0.5 * (lo + hi)
            inside = self.domain.distance(P + mid[:, None] * e) > 0
            lo = np.where(inside, mid, lo)
            hi = np.where(inside, hi, mid)
        return 0.5 * (lo + hi)


def solve_general(A, b, method: str, tol: float, maxiter: int = 500):
    """Solve A x = b for the (possibly non-symmetric) Shortley-Weller matrix.

    ``direct``: SuperLU with the minimum-degree ordering on A^T + A; ``amg``: restarted GMRES
    preconditioned by smoothed-aggregation AMG (pyamg; Vanek, Mandel & Brezina, Computing 56,
    1996) of the symmetric part (A + A^T)/2.
    """
    if method == "direct":
        lu = spla.splu(A.tocsc(), permc_spec="MMD_AT_PLUS_A")
        return lu.solve(b), {"linear_solver": "direct", "iterations": 0}
    import pyamg

    A = A.tocsr()
    # The asymmetry is confined to rows next to the boundary: AMG built for the symmetric part
    # is a good preconditioner of restarted GMRES on A (cheaper set-up than a non-symmetric AMG).
    ml = pyamg.smoothed_aggregation_solver((0.5 * (A + A.T)).tocsr(), symmetry="symmetric",
                                           max_coarse=500)
    bnorm = float(np.linalg.norm(b))
    if bnorm == 0:
        return np.zeros_like(b), {"linear_solver": "amg", "iterations": 0, "relative_residual": 0.0}
    count = [0]

    def tick(_):
        count[0] += 1

    x, _ = spla.gmres(A, b, M=ml.aspreconditioner(cycle="V"), rtol=tol, atol=0.0, restart=50,
                      maxiter=maxiter, callback=tick, callback_type="pr_norm")
    rel = float(np.linalg.norm(b - A @ x) / bnorm)
    if not np.isfinite(rel) or rel > max(tol * 10, 1e-6):
        raise RuntimeError(f"AMG-GMRES did not converge: relative residual {rel:.2e} after "
                           f"{count[0]} iterations")
    return x, {"linear_solver": "amg", "iterations": count[0], "levels": len(ml.levels),
               "relative_residual": rel}


def _shortley_weller(grid: MaskedGrid):
    """The Shortley-Weller 5-point matrix on the unknowns of `grid`, with zero boundary values.

    Returns (A, P, arm, weights): the (N, N) CSR matrix, the unknowns' points (N, 2), the arm
    length per direction of `_DIRS` (h, or the distance to the boundary crossing where the arm is
    cut) and, in assembly order, (direction, weight, known) of every arm: where `known` (the arm
    ends at a boundary node or crossing, not at an unknown) the weight times the boundary value
    there belongs on the right-hand side.
    """
    h = grid.h
    I, J = np.nonzero(grid.inside)
    row = grid.index[I, J]
    N = len(row)
    P = grid.points.reshape(grid.nx + 1, grid.ny + 1, 2)[I, J]
    arm, col = {}, {}
    for (di, dj) in _DIRS:
        i2, j2 = I + di, J + dj
        valid = (i2 >= 0) & (i2 <= grid.nx) & (j2 >= 0) & (j2 <= grid.ny)
        i2c, j2c = np.clip(i2, 0, grid.nx), np.clip(j2, 0, grid.ny)
        unknown = valid & grid.inside[i2c, j2c]
        cut = ~(unknown | (valid & grid.onb[i2c, j2c]))
        s = np.full(N, h)
        if cut.any():
            s[cut] = grid.crossing(P[cut], np.array([di, dj], dtype=float))
        arm[(di, dj)] = s
        col[(di, dj)] = np.where(unknown, grid.index[i2c, j2c], -1)
    diag = np.zeros(N)
    rows, cols, data, weights = [row], [row], [], []
    for axis in (((1, 0), (-1, 0)), ((0, 1), (0, -1))):
        hp, hm = arm[axis[0]], arm[axis[1]]
        for d, hd, ho in ((axis[0], hp, hm), (axis[1], hm, hp)):
            c = 2.0 / (hd * (hd + ho))     # Shortley-Weller weight of this arm
            diag += c
            unk = col[d] >= 0
            rows.append(row[unk])
            cols.append(col[d][unk])
            data.append(-c[unk])
            weights.append((d, c, ~unk))
    A = sps.csr_matrix((np.concatenate([diag] + data), (np.concatenate(rows), np.concatenate(cols))),
                       shape=(N, N))
    return A, P, arm, weights


def masked_fd5(problem, params, ctx) -> Solution:
    """Shortley-Weller 5-point solve of ``-Laplace(u) = f, u = g`` on ``problem.domain``."""
    with ctx.phase("setup"):
        grid = MaskedGrid(problem.domain, params.n)
        h = grid.h
        N = int(grid.inside.sum())
        if N == 0:
            raise ValueError(f"grid with n={params.n} has no node inside the domain; raise `solver.n`")
        A, P, arm, weights = _shortley_weller(grid)
        rhs = problem.f_or_zero(P).astype(float)
        for d, c, known in weights:
            if known.any():
                ends = P[known] + arm[d][known, None] * np.array(d, dtype=float)
                g = problem.g(ends) if problem.g is not None else 0.0
                rhs[known] += c[known] * g
    with ctx.phase("solve"):
        u, info = solve_general(A, rhs, params.linear_solver, params.tol)
    interp = MaskedInterpolant(grid, u, problem)
    return Solution(evaluate=interp, nodes=P, values=u,
                    info={**info, "dofs": int(N), "h": float(h), "scheme": "shortley-weller"})


def masked_eigen(problem, n: int, k: int, info: dict) -> Solution:
    """Shortley-Weller 5-point eigenpairs on a masked grid over a non-rectangular domain.

    The operator is the one `masked_fd5` uses for Poisson problems (arms shortened to the
    boundary crossing; Shortley & Weller, J. Appl. Phys. 9, 1938) with zero boundary values. It is
    symmetric when no arm is cut (polygons with grid-aligned edges, such as the L-shape at even n)
    and then solved by the symmetric Lanczos path; otherwise ARPACK's non-symmetric Arnoldi in
    shift-invert mode (Lehoucq, Sorensen & Yang 1998) gives the eigenvalues nearest 0, whose
    imaginary parts are rounding (the scheme is similar to a symmetric one only approximately).
    """
    grid = MaskedGrid(problem.domain, n)
    h = grid.h
    N = int(grid.inside.sum())
    if N <= k + 1:
        raise ValueError(f"grid with n={n} has only {N} nodes inside the domain; raise `solver.n`")
    A, P, _, _ = _shortley_weller(grid)
    asym = abs(A - A.T).max()
    if asym <= 1e-12 * abs(A).max():
        lam, V = eigsh_lowest(A, k)
        method = "symmetric Lanczos"
    else:
        OPinv, v0 = shift_invert(A)
        lam, V = spla.eigs(A, k=k, sigma=0.0, which="LM", OPinv=OPinv, v0=v0)
        order = np.argsort(lam.real)
        lam, V = lam.real[order], sign_fix(V.real[:, order])
        method = "shift-invert Arnoldi (non-symmetric Shortley-Weller matrix)"
    V = V / np.sqrt(h * h * np.sum(V * V, axis=0))
    fields = [MaskedInterpolant(grid, V[:, j], problem) for j in range(V.shape[1])]
    return eigen_solution(lam, field_modes(fields), {**info, "dofs": int(N), "h": float(h),
                                                     "scheme": "shortley-weller", "eigen_method": method},
                          nodes=P, first_values=V[:, 0])


class MaskedInterpolant:
    """Second-order interpolant of a masked-grid solution.

    Bilinear in grid cells whose four corners carry values (unknowns or boundary nodes). In cells
    cut by the boundary: a local quadratic least-squares fit to the 6 nearest grid values and
    the 4 nearest boundary data (sampled on the boundary at spacing h/2; g is queried on the
    boundary only). A quadratic fit through points within O(h) has O(h^3) error, so next to
    the boundary the interpolant adds less than the scheme's own O(h^2) error.
    """

    def __init__(self, grid: MaskedGrid, u: np.ndarray, problem):
        from scipy.spatial import cKDTree

        self.grid = grid
        U = np.full(grid.inside.shape, np.nan)
        U[grid.inside] = u
        if grid.onb.any():
            U[grid.onb] = problem.g(grid.points[grid.onb.ravel()]) if problem.g is not None else 0.0
        self.U = U
        d = problem.domain
        perim_pts, _ = d.sample_boundary(max(64, int(2 * _perimeter(d) / grid.h)), None)
        gb = problem.g(perim_pts) if problem.g is not None else np.zeros(len(perim_pts))
        known = ~np.isnan(U)
        self.node_pts, self.node_val = grid.points[known.ravel()], U[known]
        self.bnd_pts, self.bnd_val = perim_pts, gb
        self.node_tree, self.bnd_tree = cKDTree(self.node_pts), cKDTree(perim_pts)

    def __call__(self, points):
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        g = self.grid
        sx = (p[:, 0] - g.x[0]) / g.h
        sy = (p[:, 1] - g.y[0]) / g.h
        i = np.clip(np.floor(sx).astype(int), 0, g.nx - 1)
        j = np.clip(np.floor(sy).astype(int), 0, g.ny - 1)
        tx, ty = sx - i, sy - j
        c00, c10 = self.U[i, j], self.U[i + 1, j]
        c01, c11 = self.U[i, j + 1], self.U[i + 1, j + 1]
        out = ((1 - tx) * (1 - ty) * c00 + tx * (1 - ty) * c10 + (1 - tx) * ty * c01 + tx * ty * c11)
        cut = np.isnan(out)
        if cut.any():
            out[cut] = self._local_fit(p[cut])
        return out

    def _local_fit(self, q):
        """Quadratic least squares through the 6 nearest grid values and 4 nearest boundary data."""
        _, ni = self.node_tree.query(q, k=min(6, len(self.node_pts)))
        _, nb = self.bnd_tree.query(q, k=4)
        ni = ni.reshape(len(q), -1)
        P = (np.concatenate([self.node_pts[ni], self.bnd_pts[nb]], axis=1) - q[:, None, :]) / self.grid.h
        V = np.concatenate([self.node_val[ni], self.bnd_val[nb]], axis=1)
        X, Y = P[..., 0], P[..., 1]
        M = np.stack([np.ones_like(X), X, Y, X * X, X * Y, Y * Y], axis=2)      # (m, k, 6)
        MtM = np.einsum("mki,mkj->mij", M, M)
        Mtv = np.einsum("mki,mk->mi", M, V)
        coef = np.linalg.solve(MtM + 1e-10 * np.eye(6)[None], Mtv[..., None])[..., 0]
        return coef[:, 0]


def _perimeter(domain) -> float:
    x0, x1, y0, y1 = domain.bbox
    if domain.kind == "disk":
        return 2 * np.pi * domain.radius
    if domain.kind == "annulus":
        return 2 * np.pi * (domain.r_in + domain.r_out)
    if domain.kind == "polygon":
        A, B = domain.edges
        return float(np.linalg.norm(B - A, axis=1).sum())
    return 2 * ((x1 - x0) + (y1 - y0))
