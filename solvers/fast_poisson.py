"""Fast Poisson solvers: the 5-point and compact 9-point systems diagonalised by the DST-I."""
from __future__ import annotations

import numpy as np
import scipy.fft

import dataclasses

from bench.config import ConfigError, positive
from solvers.base import Tags
from solvers.fd import MAX_GRID_N, _SparseFD, grid_solution
from solvers.grid import TensorGrid, discrete_rhs

__all__ = ["FST5", "FST9", "dirichlet_eigenvalues"]


@dataclasses.dataclass
class FastParams:
    """Options of the sine-transform solvers."""

    n: int = 64   # intervals per side (n - 1 unknowns per direction; n a power of 2 is fastest)

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


class _FastPoisson(_SparseFD):
    family = "fd"
    Params = FastParams
    tags = Tags(kinds=frozenset({"laplace", "poisson"}), domains=frozenset({"rectangle"}))

    def memory_estimate_mb(self) -> float:
        # about 11 grid-sized float64 arrays at the peak (right-hand side, transforms, eigenvalue
        # grid, interpolation): measured 87/351 MiB at n = 1024/2048 (2 cores, Dec 2026)
        return 11 * 8 * (self.params.n + 1) ** 2 / 2 ** 20

    def _solve(self, problem, budget, ctx):
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


class FST5(_FastPoisson):
    """5-point system solved by the type-I discrete sine transform (fast Poisson solver).

    Same discrete solution as `fd5`, in O(N log N) (Buzbee, Golub & Nielson, SIAM J. Numer.
    Anal. 7, 1970; LeVeque 2007, sec. 3.3 for the eigenvalues).
    """

    name = "fst5"
    compact = False
    description = "5-point system diagonalised by the DST-I, O(N log N) (order 2)"
    reference = "Buzbee, Golub & Nielson, SIAM J. Numer. Anal. 7 (1970); LeVeque 2007, sec. 3.3"


class FST9(_FastPoisson):
    """Compact 9-point (Mehrstellen) system solved by the type-I discrete sine transform.

    The compact operator is diagonal in the same sine basis: eigenvalues
    a_j + b_k - (hx^2 + hy^2)/12 a_j b_k with a_j, b_k the 1-D eigenvalues.
    """

    name = "fst9"
    compact = True
    description = "compact 9-point system diagonalised by the DST-I, O(N log N) (order 4)"
    reference = "Collatz 1960; Buzbee, Golub & Nielson 1970; LeVeque 2007, sec. 3.5"
