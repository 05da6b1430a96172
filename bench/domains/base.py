"""The Domain contract: geometry that problems live on and that solvers and the harness query.

Every domain provides membership, boundary sampling with outward normals, area, a signed
distance (positive inside), a normalised distance-like function ``phi`` for hard boundary
conditions (zero on the boundary, maximum 1 inside), its dimension, and the seeded
evaluation/quadrature set that the harness uses for errors.
"""
from __future__ import annotations

import abc
import dataclasses

import numpy as np

__all__ = ["Domain", "EvalSet", "gauss_legendre_panels"]


@dataclasses.dataclass(frozen=True)
class EvalSet:
    """The shared point set on which the harness measures errors.

    ``points``/``weights`` are a quadrature rule for L2 norms over the domain; ``extra`` are
    seeded random interior points that join the quadrature points for the max-abs error.
    """

    points: np.ndarray
    weights: np.ndarray
    extra: np.ndarray

    @property
    def all_points(self) -> np.ndarray:
        return np.vstack([self.points, self.extra])


def gauss_legendre_panels(a: float, b: float, panels: int, order: int):
    """Composite Gauss-Legendre nodes and weights on [a, b] (`panels` equal panels)."""
    xi, wi = np.polynomial.legendre.leggauss(order)
    edges = np.linspace(a, b, panels + 1)
    half = 0.5 * np.diff(edges)
    mid = 0.5 * (edges[:-1] + edges[1:])
    x = (mid[:, None] + half[:, None] * xi[None, :]).ravel()
    w = (half[:, None] * wi[None, :]).ravel()
    return x, w


class Domain(abc.ABC):
    """Base class: subclasses set `kind` and implement the abstract geometric queries."""

    kind: str = ""
    dim: int = 2

    # geometry --------------------------------------------------------------------------------
    @property
    @abc.abstractmethod
    def bbox(self) -> tuple[float, float, float, float]:
        """(x0, x1, y0, y1) of the bounding box."""

    @property
    @abc.abstractmethod
    def area(self) -> float:
        """Area of the domain."""

    def contains(self, points: np.ndarray, tol: float = 0.0) -> np.ndarray:
        """True for points inside or within `tol` of the closed domain."""
        return self.distance(points) >= -tol

    @abc.abstractmethod
    def distance(self, points: np.ndarray) -> np.ndarray:
        """Signed distance to the boundary, positive inside."""

    def phi(self, points: np.ndarray) -> np.ndarray:
        """Smooth-ish distance function for hard boundary conditions: 0 on the boundary, max 1."""
        d = self.distance(points)
        return d / self.inradius

    @property
    @abc.abstractmethod
    def inradius(self) -> float:
        """Largest distance from the boundary inside (normalises `phi`)."""

    @property
    def scale(self) -> float:
        x0, x1, y0, y1 = self.bbox
        return max(x1 - x0, y1 - y0)

    def on_boundary(self, points: np.ndarray, tol: float | None = None) -> np.ndarray:
        tol = 1e-9 * self.scale if tol is None else tol
        return np.abs(self.distance(points)) <= tol

    def sample_interior(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """`n` uniform random interior points (rejection from the bounding box)."""
        x0, x1, y0, y1 = self.bbox
        out = np.empty((0, 2))
        while len(out) < n:
            m = max(2 * (n - len(out)), 64)
            cand = np.column_stack([rng.uniform(x0, x1, m), rng.uniform(y0, y1, m)])
            out = np.vstack([out, cand[self.distance(cand) > 0]])
        return out[:n]

    @abc.abstractmethod
    def sample_boundary(self, n: int, rng: np.random.Generator | None = None):
        """`n` boundary points and outward unit normals; uniform in arc length.

        With ``rng=None`` the points are equispaced in arc length (deterministic).
        """

    @abc.abstractmethod
    def quadrature(self, level: int = 48) -> tuple[np.ndarray, np.ndarray]:
        """Quadrature points and weights for integrals over the domain."""

    def eval_set(self, seed: int = 0, level: int = 48, n_extra: int = 2000) -> EvalSet:
        """The seeded evaluation set: quadrature rule plus random points for max errors."""
        pts, w = self.quadrature(level)
        extra = self.sample_interior(n_extra, np.random.default_rng(seed))
        return EvalSet(pts, w, extra)

    @abc.abstractmethod
    def extend_boundary_data(self, g, points: np.ndarray) -> np.ndarray:
        """A smooth extension into the domain of boundary data `g`, querying `g` on the boundary only."""

    @abc.abstractmethod
    def to_dict(self) -> dict:
        """The domain's config mapping (kind and geometry), for records."""
