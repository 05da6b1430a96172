"""Fast Poisson solvers: the 5-point and compact 9-point systems diagonalised by the DST-I.

On a rectangle the 2-D schemes below; on a d-dimensional box (`box_solve`) their d-dimensional
forms, with any number of intervals per axis (anisotropic grids, as the sparse-grid combination
technique needs): the (2d + 1)-point operator -sum_i D_i (order 2) and the compact 3^d-point
operator -sum_i D_i prod_{j != i} (1 + h_j^2 D_j / 12) (order 4; `lapbench.solvers.grid.box_operator`),
both diagonal in the tensor-product sine basis, so one dstn, one division and one idstn solve
them.
"""
from __future__ import annotations

import numpy as np
import scipy.fft

import dataclasses

from lapbench.config import ConfigError, positive
from lapbench.solvers.base import Tags
from lapbench.solvers.fd import MAX_GRID_N, _SparseFD, grid_solution
from lapbench.solvers.grid import (MAX_GRID_DIM, TensorGrid, box_axes, box_rhs, box_solution, default_n,
                          discrete_rhs, refuse_memory)

__all__ = ["FST5", "FST9", "dirichlet_eigenvalues", "box_eigenvalues", "box_solve",
           "divide_by_eigenvalues"]

@dataclasses.dataclass
class FastParams:
    """Options of the sine-transform solvers."""

    n: int = 64   # intervals per side (n - 1 unknowns per direction; n a power of 2 is fastest);
                  # on a d-box with d >= 4 the default 64 means default_n(d)

    def __post_init__(self):
        positive("n", self.n, integer=True, maximum=MAX_GRID_N)
        if self.n < 2:
            raise ConfigError(f"`n` must be at least 2 (one interior node), got {self.n}")


def dirichlet_eigenvalues(m: int, h: float) -> np.ndarray:
    """Eigenvalues of -tridiag(1, -2, 1)/h^2 (size m): (4/h^2) sin^2(j pi / (2 (m+1))), j = 1..m."""
    j = np.arange(1, m + 1)
    return 4.0 / h ** 2 * np.sin(j * np.pi / (2 * (m + 1))) ** 2


def _eigen_grid(grid: TensorGrid, compact: bool) -> np.ndarray:
    """Eigenvalues of the interior operator in the sine basis, shape (n-1, n-1)."""
    a = dirichlet_eigenvalues(grid.n - 1, grid.hx)[:, None]
    b = dirichlet_eigenvalues(grid.n - 1, grid.hy)[None, :]
    lam = a + b
    if compact:
        lam = lam - (grid.hx ** 2 + grid.hy ** 2) / 12.0 * (a * b)
    return lam


def box_eigenvalues(ns, hs, compact: bool) -> np.ndarray:
    """Eigenvalues of the d-box operator in the tensor sine basis, shape (n_0 - 1, ..., n_{d-1} - 1).

    With a_i the 1-D eigenvalues on axis i and p_i = 1 - h_i^2 a_i / 12 those of
    P_i = 1 + h_i^2 D_i / 12: 5-point type sum_i a_i; compact sum_i a_i prod_{j != i} p_j
    = prod_j p_j sum_i a_i / p_i (p_i lies in [2/3, 1], so the compact operator is positive
    definite in every dimension; in 2-D it is a + b - (hx^2 + hy^2)/12 a b of `_eigen_grid`).
    """
    d = len(ns)
    a = [dirichlet_eigenvalues(int(n) - 1, h) for n, h in zip(ns, hs)]

    def along(i, v):
        return v.reshape([-1 if j == i else 1 for j in range(d)])

    def outer_sum(vs):
        # broadcast sums grow axis by axis: only the last one has the full size
        out = along(0, vs[0])
        for i in range(1, d):
            out = out + along(i, vs[i])
        return out

    if not compact:
        return outer_sum(a)
    p = [1.0 - h ** 2 * v / 12.0 for v, h in zip(a, hs)]
    lam = outer_sum([v / q for v, q in zip(a, p)])
    prod = along(0, p[0])
    for i in range(1, d):
        prod = prod * along(i, p[i])
    lam *= prod
    return lam


def divide_by_eigenvalues(what: np.ndarray, ns, hs, compact: bool) -> np.ndarray:
    """what /= box_eigenvalues(ns, hs, compact), in place and slice by slice along the first axis:
    the eigenvalues of the other axes are formed once (1/(n_0 - 1) of the grid), so no grid-sized
    eigenvalue array is ever allocated. With lam = prod_j p_j sum_i a_i / p_i, slice i of the
    compact operator is a_0[i] P + p_0[i] Q, P = prod_{j>0} p_j, Q = P sum_{j>0} a_j / p_j."""
    d = len(ns)
    a = [dirichlet_eigenvalues(int(n) - 1, h) for n, h in zip(ns, hs)]
    if d == 1:
        what /= box_eigenvalues(ns, hs, compact)
        return what
    rest_ns, rest_hs = list(ns[1:]), list(hs[1:])
    if not compact:
        rest = box_eigenvalues(rest_ns, rest_hs, False)
        for i, ai in enumerate(a[0]):
            np.divide(what[i], rest + ai, out=what[i])
        return what
    p = [1.0 - h ** 2 * v / 12.0 for v, h in zip(a, hs)]
    P = np.ones([len(v) for v in a[1:]])
    for j in range(1, d):
        P = P * p[j].reshape([-1 if k == j - 1 else 1 for k in range(d - 1)])
    Q = box_eigenvalues(rest_ns, rest_hs, True)          # = P sum_{j>0} a_j / p_j
    for i in range(len(a[0])):
        np.divide(what[i], a[0][i] * P + p[0][i] * Q, out=what[i])
    return what


def box_solve(bounds, ns, f, g, compact: bool, ctx=None) -> tuple[list[np.ndarray], np.ndarray]:
    """Solve -Laplace(u) = f, u = g on the box `bounds` (d, 2) with ``ns[i]`` intervals on axis i.

    f, g are callables of points (m, d) (a `lapbench.fields.Field` is evaluated on the grid by
    broadcasting; g only at boundary nodes); either may be None (zero). Returns the node axes
    and the full grid of nodal values (boundary included). `ctx` (a RunContext) times the
    setup and solve phases when given.
    """
    import contextlib

    phase = ctx.phase if ctx is not None else (lambda name: contextlib.nullcontext())
    with phase("setup"):
        axes = box_axes(bounds, ns)
        hs = [a[1] - a[0] for a in axes]
        rhs, U = box_rhs(axes, f, g, compact)
    with phase("solve"):
        # one forward and one inverse DST-I over all axes and one pointwise division
        what = scipy.fft.dstn(rhs, type=1, overwrite_x=True)
        divide_by_eigenvalues(what, ns, hs, compact)
        u = scipy.fft.idstn(what, type=1, overwrite_x=True)
    U[(slice(1, -1),) * len(ns)] = u
    return axes, U


def box_memory_mb(n: int, dim: int, compact: bool) -> float:
    """Peak memory of a d-box fast solve: about 4 grid-sized float64 arrays (right-hand side,
    transform, full grid, the harness's copy; +1 for the compact scheme's full f) [estimated
    from the arrays the code holds at once]."""
    return (5 if compact else 4) * 8 * float(n + 1) ** dim / 2 ** 20


class _FastPoisson(_SparseFD):
    family = "fd"
    Params = FastParams
    tags = Tags(kinds=frozenset({"laplace", "poisson"}), domains=frozenset({"rectangle", "box"}),
                dims=frozenset(range(1, MAX_GRID_DIM + 1)))

    def memory_estimate_mb(self, problem=None) -> float:
        dim = getattr(getattr(problem, "domain", None), "dim", 2)
        if problem is not None and problem.domain.kind != "rectangle":
            return box_memory_mb(self.box_n(dim), dim, self.compact)
        # about 11 grid-sized float64 arrays at the peak (right-hand side, transforms, eigenvalue
        # grid, interpolation): measured 87/351 MiB at n = 1024/2048 (2 cores, Dec 2026)
        return 11 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def box_n(self, dim: int) -> int:
        """Intervals per side on a d-box: `n` as given, or `default_n(d)` for the default 64."""
        n = self.params.n
        return default_n(dim, n) if n == FastParams.n else n

    def _solve(self, problem, budget, ctx):
        if problem.domain.kind != "rectangle":
            return self._solve_box(problem, budget, ctx)
        with ctx.phase("setup"):
            grid = TensorGrid(problem.domain, self.params.n)
            rhs, Ub = discrete_rhs(grid, problem, self.compact)
            lam = _eigen_grid(grid, self.compact)
        with ctx.phase("solve"):
            # Two DST-I transforms (the type-I DST is its own inverse up to scaling) and one
            # pointwise division: O(N log N), no matrix is ever formed.
            what = scipy.fft.dstn(rhs, type=1, overwrite_x=True)
            what /= lam
            u = scipy.fft.idstn(what, type=1, overwrite_x=True)
        U = Ub
        U[1:-1, 1:-1] = u
        return grid_solution(grid, U, degree=3 if self.compact else 1,
                             info={"dofs": int(u.size), "h": max(grid.hx, grid.hy),
                                   "linear_solver": "dst-i"})

    def _solve_box(self, problem, budget, ctx):
        dim = problem.domain.dim
        n = self.box_n(dim)
        refuse_memory(self.name, self.memory_estimate_mb(problem), budget)
        axes, U = box_solve(problem.domain.bounds, [n] * dim, problem.f, problem.g, self.compact, ctx)
        # cubic interpolation keeps fourth order, while its 4^d stencil stays affordable
        degree = 3 if self.compact and dim <= 6 else 1
        return box_solution(axes, U, degree, {"dofs": int((n - 1) ** dim), "n": n, "dim": dim,
                                              "h": float(np.max(np.diff(problem.domain.bounds, axis=1)) / n),
                                              "interpolation_degree": degree, "linear_solver": "dst-i"})


class FST5(_FastPoisson):
    """5-point system solved by the type-I discrete sine transform (fast Poisson solver).

    Same discrete solution as `fd5`, in O(N log N) (Buzbee, Golub & Nielson, SIAM J. Numer.
    Anal. 7, 1970; LeVeque 2007, sec. 3.3 for the eigenvalues). On a d-box: the (2d + 1)-point
    operator, tensor-product DST-I over all d axes.
    """

    name = "fst5"
    compact = False
    description = "5-point system diagonalised by the DST-I, O(N log N) (order 2)"
    reference = "Buzbee, Golub & Nielson, SIAM J. Numer. Anal. 7 (1970); LeVeque 2007, sec. 3.3"


class FST9(_FastPoisson):
    """Compact 9-point (Mehrstellen) system solved by the type-I discrete sine transform.

    The compact operator is diagonal in the same sine basis: eigenvalues
    a_j + b_k - (hx^2 + hy^2)/12 a_j b_k with a_j, b_k the 1-D eigenvalues. On a d-box: the
    compact 3^d-point operator -sum_i D_i prod_{j != i} P_j, P_j = 1 + h_j^2 D_j / 12 (the
    fourth-order Pade approximation P_i^-1 D_i of each second derivative, cleared of
    denominators; Collatz 1960, Lele 1992), right-hand side (1 + sum_j h_j^2 D_j / 12) f;
    fourth order, positive definite in every dimension (`box_eigenvalues`).
    """

    name = "fst9"
    compact = True
    description = "compact 9-point system diagonalised by the DST-I, O(N log N) (order 4)"
    reference = "Collatz 1960; Buzbee, Golub & Nielson 1970; LeVeque 2007, sec. 3.5"
