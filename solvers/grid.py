"""Shared tools of the grid methods: tensor grids, stencils, boundary folding, interpolants."""
from __future__ import annotations

import numpy as np
import scipy.sparse as sps

__all__ = ["TensorGrid", "second_difference", "apply_stencil", "discrete_rhs", "interior_matrix",
           "LocalLagrange", "MAX_GRID_DIM", "box_axes", "box_boundary_values", "box_operator",
           "box_fold_boundary", "box_rhs", "TensorLagrange", "default_n", "box_solution", "box_nodes",
           "refuse_memory", "MAX_REPORTED_NODES"]


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


# -- boxes in d dimensions -----------------------------------------------------------------------
# Dimensions the d-dimensional grid methods accept (the Box domain's own limit is checked there).
MAX_GRID_DIM = 32
# A grid method's `n` left at its 2-D default on a d-box means `default_n(d)`: the finest power
# of 2 with at most DEFAULT_UNKNOWNS interior unknowns (from 64: 64 for d <= 3, 32 for d = 4,
# 16 for d = 5, 8 for d = 6, 7, 4 for d = 8..13), so that a default case takes about a second.
DEFAULT_UNKNOWNS = 1 << 21


def default_n(dim: int, cap: int = 64, unknowns: int = DEFAULT_UNKNOWNS) -> int:
    """Intervals per side on a d-box when `n` is left at its default `cap`: halved from `cap` while
    the interior has more than `unknowns` unknowns."""
    n = cap
    while n > 2 and (n - 1) ** dim > unknowns:
        n //= 2
    return n



def box_axes(bounds: np.ndarray, ns) -> list[np.ndarray]:
    """Uniform node coordinates per axis of the box `bounds` (d, 2), ``ns[i]`` intervals on axis i."""
    b = np.asarray(bounds, dtype=float).reshape(-1, 2)
    return [np.linspace(lo, hi, int(n) + 1) for (lo, hi), n in zip(b, ns)]


def box_boundary_values(axes: list[np.ndarray], g) -> np.ndarray:
    """Full tensor grid on `axes` holding the Dirichlet data g on the boundary, zero inside.

    g is evaluated at boundary nodes only, each exactly once: the face normal to axis i takes
    the interior nodes of the axes before i and all nodes of the axes after it.
    """
    from lapbench.fields import on_grid

    shape = tuple(len(a) for a in axes)
    U = np.zeros(shape)
    if g is None:
        return U
    d = len(axes)
    for i in range(d):
        for side in (0, -1):
            face = [a[1:-1] if j < i else (a[side:][:1] if j == i else a) for j, a in enumerate(axes)]
            if any(len(a) == 0 for a in face):
                continue
            idx = tuple(slice(1, -1) if j < i else (side if j == i else slice(None)) for j in range(d))
            U[idx] = on_grid(g, *face).reshape([len(a) for j, a in enumerate(face) if j != i])
    return U


def _along(A: np.ndarray, axis: int, centre: float, side: float) -> np.ndarray:
    """centre * A[1:-1] + side * (A[2:] + A[:-2]) along `axis` (the axis shrinks by two)."""
    def cut(a, b):
        s = [slice(None)] * A.ndim
        s[axis] = slice(a, b)
        return A[tuple(s)]

    out = cut(2, None) + cut(None, -2)
    out *= side
    if centre:
        out += centre * cut(1, -1)
    return out


def box_operator(U: np.ndarray, hs, compact: bool) -> np.ndarray:
    """Interior values of the d-dimensional grid operator A applied to a full grid U.

    5-point type (2d + 1 points): A = -sum_i D_i with D_i the second difference on axis i.
    Compact (3^d points): A = -sum_i D_i prod_{j != i} P_j with P_j = 1 + h_j^2 D_j / 12, the
    fourth-order Pade (Numerov) approximation P_i^-1 D_i of d^2/dx_i^2 in every direction
    (Collatz 1960; Lele, J. Comput. Phys. 103, 1992) cleared of its denominators by prod_j P_j;
    in 2-D it is the Mehrstellen 9-point operator of `apply_stencil`.
    """
    d = U.ndim
    # the 1-D factors of a term act on different axes and commute: the shortest axis goes first
    # (on a 3-node face slab the result is one layer thick after the first factor)
    order = sorted(range(d), key=lambda j: U.shape[j])
    total = None
    for i in range(d):
        T = U
        for j in order:
            if j == i:
                T = _along(T, j, -2.0 / hs[j] ** 2, 1.0 / hs[j] ** 2)
            elif compact:
                T = _along(T, j, 10.0 / 12.0, 1.0 / 12.0)
            else:
                T = T[tuple(slice(1, -1) if k == j else slice(None) for k in range(d))]
        total = T if total is None else total + T
    return -total


def box_fold_boundary(rhs: np.ndarray, Ub: np.ndarray, hs, compact: bool) -> None:
    """rhs -= A(Ub) where Ub is zero inside: only the interior nodes next to a face see it, so A
    is applied on the 3-node-wide slab along each face, which gives the exact value of A(Ub) on
    the interior layer next to that face. Each such node is updated once: the layer of face k
    leaves out the nodes already on the layers of the faces j < k."""
    d = Ub.ndim
    for k in range(d):
        for side in (0, -1):
            if side == -1 and rhs.shape[k] == 1:
                break                      # one interior layer: both faces' slabs are the same
            slab = tuple((slice(0, 3) if side == 0 else slice(-3, None)) if j == k else slice(None)
                         for j in range(d))
            val = box_operator(Ub[slab], hs, compact)
            keep = tuple(0 if j == k else (slice(1, -1) if j < k else slice(None)) for j in range(d))
            layer = tuple(side if j == k else (slice(1, -1) if j < k else slice(None)) for j in range(d))
            rhs[layer] -= val[keep]


def box_rhs(axes: list[np.ndarray], f, g, compact: bool) -> tuple[np.ndarray, np.ndarray]:
    """Right-hand side on the interior nodes of a d-box grid, Dirichlet data folded in, and the
    full grid of boundary values.

    5-point type: f at the interior nodes. Compact: (1 + sum_j h_j^2 D_j / 12) f, the correction
    that makes the compact operator fourth order (in 2-D the Mehrstellen right-hand side of
    `discrete_rhs`); it uses f on the boundary nodes too.
    """
    from lapbench.fields import on_grid

    hs = [a[1] - a[0] for a in axes]
    d = len(axes)
    inner = tuple(len(a) - 2 for a in axes)
    if f is None:
        rhs = np.zeros(inner)
    elif compact:
        F = on_grid(f, *axes)
        core = F[(slice(1, -1),) * d]
        rhs = (1.0 - d / 6.0) * core
        for j in range(d):
            rest = tuple(slice(1, -1) for _ in range(d))
            plus = rest[:j] + (slice(2, None),) + rest[j + 1:]
            minus = rest[:j] + (slice(None, -2),) + rest[j + 1:]
            rhs += (F[plus] + F[minus]) / 12.0
    else:
        rhs = on_grid(f, *[a[1:-1] for a in axes])
        rhs = np.array(rhs, dtype=float) if not rhs.flags.writeable else rhs
    Ub = box_boundary_values(axes, g)
    box_fold_boundary(rhs, Ub, hs, compact)
    return rhs, Ub


class TensorLagrange:
    """Local Lagrange interpolation of degree k on a d-dimensional tensor grid (uniform axes).

    Degree 1 is multilinear (2^d values per point, error O(h^2)); degree 3 uses 4^d values
    (error O(h^4)); an axis with fewer than k intervals uses its own number of intervals. Points
    are handled in chunks so that the gathered stencils stay below a few tens of MiB.
    """

    def __init__(self, axes: list[np.ndarray], U: np.ndarray, degree: int = 1):
        self.axes = [np.asarray(a, dtype=float) for a in axes]
        self.U = U
        self.ks = [min(int(degree), len(a) - 1) for a in self.axes]

    def _axis(self, coord, a, k):
        n = len(a) - 1
        h = (a[-1] - a[0]) / n
        s = (coord - a[0]) / h
        first = np.clip(np.floor(s).astype(np.int64) - (k - 1) // 2, 0, n - k)
        t = s - first
        W = np.ones((len(t), k + 1))
        for j in range(k + 1):
            for m in range(k + 1):
                if m != j:
                    W[:, j] *= (t - m) / (j - m)
        return first, W

    def _multilinear(self, p: np.ndarray) -> np.ndarray:
        """Degree 1: one gather of the 2^d cell corners (constant offsets from the cell's first
        node) and d rounds of linear interpolation, axis by axis."""
        d = len(self.axes)
        strides = np.cumprod([1] + [len(a) for a in self.axes[::-1]][:-1])[::-1]
        offsets = np.zeros(1, dtype=np.int64)
        for i in range(d):
            offsets = (offsets[:, None] + np.array([0, strides[i]])[None, :]).ravel()
        flatU = self.U.ravel()
        chunk = max(1, (1 << 21) // len(offsets))
        out = np.empty(len(p))
        for c0 in range(0, len(p), chunk):
            q = p[c0:c0 + chunk]
            base = np.zeros(len(q), dtype=np.int64)
            ts = []
            for i, a in enumerate(self.axes):
                n = len(a) - 1
                s = (q[:, i] - a[0]) * (n / (a[-1] - a[0]))
                first = np.clip(np.floor(s).astype(np.int64), 0, n - 1)
                base += first * strides[i]
                ts.append(s - first)
            G = flatU[offsets[:, None] + base[None, :]]
            for i in range(d - 1, -1, -1):       # the last axis varies fastest in `offsets`
                G = G.reshape(-1, 2, len(q))
                G = G[:, 0] + ts[i] * (G[:, 1] - G[:, 0])
            out[c0:c0 + chunk] = G.reshape(len(q))
        return out

    def __call__(self, points: np.ndarray) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        if all(k == 1 for k in self.ks):
            return self._multilinear(p)
        size = int(np.prod([k + 1 for k in self.ks]))
        chunk = max(1, (1 << 21) // size)
        flatU = self.U.ravel()
        out = np.empty(len(p))
        for c0 in range(0, len(p), chunk):
            q = p[c0:c0 + chunk]
            flat = np.zeros((len(q), 1), dtype=np.int64)
            W = np.ones((len(q), 1))
            for i, (a, k) in enumerate(zip(self.axes, self.ks)):
                first, w = self._axis(q[:, i], a, k)
                idx = first[:, None] + np.arange(k + 1)[None, :]
                flat = (flat[:, :, None] * len(a) + idx[:, None, :]).reshape(len(q), -1)
                W = (W[:, :, None] * w[:, None, :]).reshape(len(q), -1)
            out[c0:c0 + chunk] = np.einsum("pk,pk->p", flatU[flat], W)
        return out


# At most this many of a d-box grid's interior nodes are handed to the harness as
# `Solution.nodes` (evenly strided): the nodal error of a 255^3 grid would otherwise cost the
# exact solution at 16 M points and 400 MB of coordinates.
MAX_REPORTED_NODES = 1 << 16


def box_nodes(axes: list[np.ndarray], U: np.ndarray) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Up to MAX_REPORTED_NODES interior nodes of a d-box tensor grid (evenly strided in the
    flat order) and their values in U: the nodal set a Solution reports."""
    inner = U[(slice(1, -1),) * U.ndim]
    total = inner.size
    if not total:
        return None, None
    pick = np.unique(np.linspace(0, total - 1, min(total, MAX_REPORTED_NODES)).astype(np.int64))
    idx = np.unravel_index(pick, inner.shape)
    return np.column_stack([a[1:-1][i] for a, i in zip(axes, idx)]), inner[idx]


def box_solution(axes: list[np.ndarray], U: np.ndarray, degree: int, info: dict):
    """Solution on a uniform d-box grid: `TensorLagrange` interpolant of degree `degree` and the
    nodal set of `box_nodes`."""
    from lapbench.solvers.base import Solution

    nodes, values = box_nodes(axes, U)
    return Solution(evaluate=TensorLagrange(axes, U, degree), nodes=nodes, values=values,
                    info={**info, "nodes_reported": 0 if nodes is None else int(len(nodes))})


def refuse_memory(name: str, need_mb: float, budget) -> None:
    """Stop before allocating when a d-box case cannot fit `budget.memory_limit_mb` (the harness's
    up-front check knows only the 2-D size)."""
    limit = getattr(budget, "memory_limit_mb", None)
    if limit is not None and need_mb > limit:
        raise MemoryError(f"{name} needs about {need_mb:.0f} MiB for this grid, above "
                          f"`budget.memory_limit_mb` = {limit:g} MiB; lower `solver.n`")
