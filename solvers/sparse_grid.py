"""Sparse grids by the combination technique over anisotropic fast Poisson solves.

The combination technique (Griebel, Schneider & Zenger, "A combination technique for the
solution of sparse grid problems", in Iterative Methods in Linear Algebra, 1992; Bungartz &
Griebel, "Sparse grids", Acta Numerica 13, 2004, sec. 4.4) solves the Poisson problem on the
anisotropic full grids with 2^{l_i} intervals on axis i, l_i >= 1, for every level vector l with
|l|_1 = L + (d - 1) - q, q = 0 .. d - 1, and adds their multilinear interpolants with the
coefficients (-1)^q binom(d - 1, q). Each component is the (2d + 1)-point system solved by the
tensor DST-I (`lapbench.solvers.fast_poisson.box_solve`), so a level-L solve costs O(2^L L^(d-1))
unknowns in all instead of the 2^(L d) of the full grid at the same finest spacing h = 2^-L. For
smooth solutions with bounded mixed derivatives the error is O(h^2 log(1/h)^(d-1))
(Bungartz & Griebel 2004, sec. 3 and 4.4; the error splitting of the 5-point solution that
makes the combination work: Bungartz, Griebel, Roeschke & Zenger, "Pointwise convergence of the
combination technique for the Laplace equation", East-West J. Numer. Math. 2, 1994).

`evaluate` is the combination of the component grids' multilinear interpolants (2^d values per
point and component grid), usable at any point of the box.
"""
from __future__ import annotations

import dataclasses
import itertools
from math import comb

import numpy as np

from lapbench.config import positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.fast_poisson import box_solve
from lapbench.solvers.grid import DEFAULT_UNKNOWNS, MAX_GRID_DIM, TensorLagrange, refuse_memory

__all__ = ["SparseGridCT", "combination_levels", "combination_solve", "combine", "grid_count", "default_level",
           "MAX_LEVEL", "MAX_GRIDS"]

MAX_LEVEL = 30
_DEFAULT_LEVEL = 10


def combination_levels(level: int, dim: int) -> list[tuple[tuple[int, ...], int]]:
    """(level vector, coefficient) of every component grid of the level-`level` combination.

    l_i >= 1 and |l|_1 = level + (dim - 1) - q with coefficient (-1)^q binom(dim - 1, q),
    q = 0 .. dim - 1 (Griebel, Schneider & Zenger 1992; Bungartz & Griebel 2004, sec. 4.4).
    The coefficients sum to 1 (every constant is reproduced).
    """
    out = []
    for q in range(min(dim, level)):
        total = level + dim - 1 - q
        c = (-1) ** q * comb(dim - 1, q)
        # compositions of `total` into `dim` parts >= 1: choose dim - 1 cut points
        for cuts in itertools.combinations(range(1, total), dim - 1):
            parts = np.diff((0,) + cuts + (total,))
            out.append((tuple(int(p) for p in parts), c))
    return out


# Component grids allowed in one combination (each is a solve and an interpolant); the count
# binom(level + dim - 2 - q, dim - 1) summed over q explodes with the dimension (level 10 in d = 32:
# 8.5e8), so it is checked by its closed form before any grid is listed.
MAX_GRIDS = 20000


def grid_count(level: int, dim: int) -> int:
    """Number of component grids of the level-`level` combination in `dim` dimensions."""
    return sum(comb(level + dim - 2 - q, dim - 1) for q in range(min(dim, level)))


def _unknowns(level: int, dim: int) -> tuple[int, int]:
    """(interior unknowns, stored nodes) summed over the component grids."""
    inner = stored = 0
    for l, _ in combination_levels(level, dim):
        n = 2 ** np.asarray(l, dtype=float)
        inner += int(np.prod(n - 1))
        stored += int(np.prod(n + 1))
    return inner, stored


# A default level also keeps the stored nodes (boundary included: 3 per axis at level 1) and
# the evaluation cost (2^d corner values per point and component grid; ~1 s per 5000 grid-corner
# sums at the harness's 34768 evaluation points, measured on this machine) bounded.
DEFAULT_STORED = 1 << 24
DEFAULT_CORNERS = 1 << 14


def default_level(dim: int, cap: int = _DEFAULT_LEVEL) -> int:
    """Level for a d-box when `level` is left at its default: from `cap` down while the component
    grids hold more than DEFAULT_UNKNOWNS unknowns or DEFAULT_STORED nodes in all, or their
    number times 2^d exceeds DEFAULT_CORNERS."""
    level = cap
    while level > 1:
        if grid_count(level, dim) > MAX_GRIDS:
            level -= 1
            continue
        inner, stored = _unknowns(level, dim)
        grids = len(combination_levels(level, dim))
        if inner <= DEFAULT_UNKNOWNS and stored <= DEFAULT_STORED and grids * 2 ** dim <= DEFAULT_CORNERS:
            break
        level -= 1
    return level


def combination_solve(bounds, level: int, f, g, ctx=None) -> list[tuple[float, TensorLagrange]]:
    """The component solves of the level-`level` combination on the box `bounds` (d, 2):
    [(coefficient, multilinear interpolant)], whose weighted sum is the sparse-grid solution."""
    dim = len(np.asarray(bounds).reshape(-1, 2))
    parts = []
    for l, c in combination_levels(level, dim):
        axes, U = box_solve(bounds, [2 ** li for li in l], f, g, compact=False, ctx=ctx)
        parts.append((float(c), TensorLagrange(axes, U, degree=1)))
    return parts


def combine(parts: list[tuple[float, TensorLagrange]]):
    """evaluate(points) = sum of coefficient * component interpolant."""
    def evaluate(points):
        p = np.asarray(points, dtype=float)
        out = np.zeros(len(p))
        for c, interp in parts:
            out += c * interp(p)
        return out

    return evaluate


@dataclasses.dataclass
class SparseGridParams:
    """Options of the combination-technique solver."""

    level: int = _DEFAULT_LEVEL   # finest spacing 2^-level per axis; the default 10 means
                                  # `default_level(d)` (about 2 M unknowns, 16 M nodes at most)

    def __post_init__(self):
        positive("level", self.level, integer=True, maximum=MAX_LEVEL)


class SparseGridCT(Solver):
    """Sparse-grid combination technique over anisotropic 5-point fast Poisson solves."""

    name = "sparse_grid"
    family = "sparse"
    description = "sparse grids: combination technique over anisotropic DST-I solves (order 2 log^(d-1))"
    reference = ("Griebel, Schneider & Zenger 1992 (combination technique); Bungartz & Griebel, "
                 "Acta Numerica 13 (2004)")
    Params = SparseGridParams
    tags = Tags(kinds=frozenset({"laplace", "poisson"}), domains=frozenset({"rectangle", "box"}),
                dims=frozenset(range(1, MAX_GRID_DIM + 1)))

    def box_level(self, dim: int) -> int:
        level = self.params.level
        return default_level(dim, level) if level == SparseGridParams.level else level

    def memory_estimate_mb(self, problem=None) -> float:
        dim = getattr(getattr(problem, "domain", None), "dim", 2)
        if grid_count(self.box_level(dim), dim) > MAX_GRIDS:
            return float("inf")
        inner, stored = _unknowns(self.box_level(dim), dim)
        # the stored component grids plus the largest solve's work arrays (at most 5 of its size)
        largest = max(int(np.prod(2.0 ** np.asarray(l) + 1)) for l, _ in combination_levels(self.box_level(dim), dim))
        return 8 * (stored + 5 * largest) / 2 ** 20

    def _solve(self, problem, budget, ctx):
        dim = problem.domain.dim
        level = self.box_level(dim)
        if grid_count(level, dim) > MAX_GRIDS:
            raise ValueError(f"sparse_grid level {level} in {dim} dimensions has {grid_count(level, dim)} "
                             f"component grids, above {MAX_GRIDS}; lower `solver.level`")
        refuse_memory(self.name, self.memory_estimate_mb(problem), budget)
        parts = combination_solve(problem.domain.bounds, level, problem.f, problem.g, ctx)
        inner, stored = _unknowns(level, dim)
        h = float(np.max(np.diff(problem.domain.bounds, axis=1))) / 2 ** level
        return Solution(evaluate=combine(parts), info={
            "dofs": inner, "level": level, "dim": dim, "grids": len(parts), "h": h,
            "stored_nodes": stored, "linear_solver": "dst-i"})
