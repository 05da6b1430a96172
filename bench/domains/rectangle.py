"""Axis-aligned rectangles: tensor quadrature, exact distance, Coons-patch boundary extension."""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError
from lapbench.domains.base import Domain, gauss_legendre_panels

__all__ = ["Rectangle"]


@dataclasses.dataclass(frozen=True)
class Rectangle(Domain):
    """Axis-aligned rectangle [x0, x1] x [y0, y1]."""

    x0: float = 0.0
    x1: float = 1.0
    y0: float = 0.0
    y1: float = 1.0
    kind = "rectangle"

    def __post_init__(self):
        if not (self.x1 > self.x0):
            raise ConfigError(f"`problem.domain.x1` must exceed `x0`, got x0={self.x0}, x1={self.x1}")
        if not (self.y1 > self.y0):
            raise ConfigError(f"`problem.domain.y1` must exceed `y0`, got y0={self.y0}, y1={self.y1}")

    @property
    def bbox(self):
        return (self.x0, self.x1, self.y0, self.y1)

    @property
    def lengths(self) -> tuple[float, float]:
        return (self.x1 - self.x0, self.y1 - self.y0)

    @property
    def area(self) -> float:
        a, b = self.lengths
        return a * b

    @property
    def inradius(self) -> float:
        return 0.5 * min(self.lengths)

    def distance(self, points):
        p = np.asarray(points, dtype=float)
        x, y = p[:, 0], p[:, 1]
        dx = np.minimum(x - self.x0, self.x1 - x)
        dy = np.minimum(y - self.y0, self.y1 - y)
        inside = np.minimum(dx, dy)
        # outside: Euclidean distance to the rectangle, negative
        ox = np.maximum(np.maximum(self.x0 - x, x - self.x1), 0.0)
        oy = np.maximum(np.maximum(self.y0 - y, y - self.y1), 0.0)
        outside = -np.hypot(ox, oy)
        return np.where((dx >= 0) & (dy >= 0), inside, outside)

    def phi(self, points):
        """Product form 16 (x-x0)(x1-x)(y-y0)(y1-y) / (a^2 b^2): zero on the edges, maximum 1."""
        p = np.asarray(points, dtype=float)
        a, b = self.lengths
        return (16.0 * (p[:, 0] - self.x0) * (self.x1 - p[:, 0])
                * (p[:, 1] - self.y0) * (self.y1 - p[:, 1]) / (a * a * b * b))

    def sample_interior(self, n, rng):
        return np.column_stack([rng.uniform(self.x0, self.x1, n), rng.uniform(self.y0, self.y1, n)])

    def sample_boundary(self, n, rng=None):
        a, b = self.lengths
        perim = 2 * (a + b)
        s = rng.uniform(0, perim, n) if rng is not None else (np.arange(n) + 0.5) * perim / n
        pts = np.empty((n, 2))
        nrm = np.empty((n, 2))
        e1, e2, e3 = a, a + b, 2 * a + b
        m = s < e1
        pts[m] = np.column_stack([self.x0 + s[m], np.full(m.sum(), self.y0)]); nrm[m] = (0, -1)
        m = (s >= e1) & (s < e2)
        pts[m] = np.column_stack([np.full(m.sum(), self.x1), self.y0 + s[m] - e1]); nrm[m] = (1, 0)
        m = (s >= e2) & (s < e3)
        pts[m] = np.column_stack([self.x1 - (s[m] - e2), np.full(m.sum(), self.y1)]); nrm[m] = (0, 1)
        m = s >= e3
        pts[m] = np.column_stack([np.full(m.sum(), self.x0), self.y1 - (s[m] - e3)]); nrm[m] = (-1, 0)
        return pts, nrm

    def quadrature(self, level=48):
        a, b = self.lengths
        px = max(1, int(round(level * a / max(a, b))))
        py = max(1, int(round(level * b / max(a, b))))
        x, wx = gauss_legendre_panels(self.x0, self.x1, px, 4)
        y, wy = gauss_legendre_panels(self.y0, self.y1, py, 4)
        X, Y = np.meshgrid(x, y, indexing="ij")
        return np.column_stack([X.ravel(), Y.ravel()]), np.outer(wx, wy).ravel()

    def extend_boundary_data(self, g, points):
        """Coons (transfinite) interpolation of the edge data; exact on the boundary.

        Reference: W. J. Gordon & C. A. Hall, "Construction of curvilinear co-ordinate systems
        and applications to mesh generation", Int. J. Numer. Methods Eng. 7 (1973).
        """
        p = np.asarray(points, dtype=float)
        a, b = self.lengths
        s = (p[:, 0] - self.x0) / a
        t = (p[:, 1] - self.y0) / b
        xs, ys = p[:, 0], p[:, 1]
        n = len(p)
        bottom = g(np.column_stack([xs, np.full(n, self.y0)]))
        top = g(np.column_stack([xs, np.full(n, self.y1)]))
        left = g(np.column_stack([np.full(n, self.x0), ys]))
        right = g(np.column_stack([np.full(n, self.x1), ys]))
        c = g(np.array([[self.x0, self.y0], [self.x1, self.y0], [self.x0, self.y1], [self.x1, self.y1]]))
        return ((1 - t) * bottom + t * top + (1 - s) * left + s * right
                - ((1 - s) * (1 - t) * c[0] + s * (1 - t) * c[1] + (1 - s) * t * c[2] + s * t * c[3]))

    def to_dict(self):
        return {"kind": self.kind, "x0": self.x0, "x1": self.x1, "y0": self.y0, "y1": self.y1}
