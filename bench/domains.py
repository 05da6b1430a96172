"""Domains: geometry that problems live on and that solvers and the harness query.

Every domain provides membership, boundary sampling with outward normals, area, a signed
distance (positive inside), a normalised distance-like function ``phi`` for hard boundary
conditions (zero on the boundary, maximum 1 inside), and the seeded evaluation/quadrature set
that the harness uses for errors.
"""
from __future__ import annotations

import abc
import dataclasses

import numpy as np

from bench.config import ConfigError

__all__ = ["Domain", "Rectangle", "EvalSet", "gauss_legendre_panels", "DOMAIN_KINDS", "make_domain"]


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


# kind -> constructor from a config mapping; other domain kinds register here.
DOMAIN_KINDS: dict[str, type] = {"rectangle": Rectangle}


def make_domain(cfg: dict, field: str = "problem.domain") -> Domain:
    """Build a domain from its config mapping ``{kind: ..., <geometry>}``."""
    from bench.config import build_params
    from bench.problems import _load_extensions

    _load_extensions()  # shape modules register their domain kinds on import
    cfg = dict(cfg)
    kind = cfg.pop("kind", "rectangle")
    if kind not in DOMAIN_KINDS:
        raise ConfigError(f"`{field}.kind` must be one of {', '.join(sorted(DOMAIN_KINDS))}; got {kind!r}")
    return build_params(DOMAIN_KINDS[kind], cfg, prefix=field)
