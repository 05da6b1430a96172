"""Round domains: the disk and the annulus (exact distances, polar quadrature, boundary data
continued along rays for hard boundary conditions)."""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains.base import Domain, gauss_legendre_panels

__all__ = ["Disk", "Annulus", "polar"]

# Boundary-data extensions (hard boundary conditions) must be smooth and exact on the boundary,
# and must not solve the problem: a harmonic extension of Laplace data IS the solution, which
# would hand a hard-boundary network the answer (tests/test_shapes.py checks every kind).
# Disk: the data are continued along rays and blended to their mean inside this radius fraction.
DISK_BLEND_INNER = 0.25
_MEAN_POINTS = 512          # trapezoid rule for the mean of the data on a circle


def _smoothstep(t: np.ndarray) -> np.ndarray:
    """0 for t <= 0, 1 for t >= 1, t^3 (10 - 15 t + 6 t^2) between: C2, so the Laplacian of a
    blend with it stays continuous [common practice]."""
    t = np.clip(t, 0.0, 1.0)
    return t * t * t * (10.0 + t * (-15.0 + 6.0 * t))


def _circle_mean(g, cx: float, cy: float, radius: float) -> float:
    """Mean of g on a circle by the trapezoid rule, exponentially accurate for smooth periodic
    data (Trefethen & Weideman, "The exponentially convergent trapezoidal rule", SIAM Review 56,
    2014)."""
    th = 2 * np.pi * np.arange(_MEAN_POINTS) / _MEAN_POINTS
    return float(np.mean(np.asarray(g(np.column_stack([cx + radius * np.cos(th), cy + radius * np.sin(th)])), float)))


def polar(points, cx: float, cy: float):
    """Radius and angle in [0, 2 pi) of points about the centre (cx, cy)."""
    p = np.asarray(points, dtype=float)
    dx, dy = p[:, 0] - cx, p[:, 1] - cy
    return np.hypot(dx, dy), np.mod(np.arctan2(dy, dx), 2 * np.pi)

@dataclasses.dataclass(frozen=True)
class Disk(Domain):
    """Disk of centre (cx, cy) and radius `radius`."""

    cx: float = 0.0
    cy: float = 0.0
    radius: float = 1.0
    kind = "disk"

    def __post_init__(self):
        positive("radius", self.radius)

    @property
    def bbox(self):
        R = self.radius
        return (self.cx - R, self.cx + R, self.cy - R, self.cy + R)

    @property
    def area(self) -> float:
        return math.pi * self.radius ** 2

    @property
    def inradius(self) -> float:
        return self.radius

    def polar(self, points):
        """Radius and angle in [0, 2 pi) about the centre."""
        return polar(points, self.cx, self.cy)

    def distance(self, points):
        r, _ = self.polar(points)
        return self.radius - r

    def phi(self, points):
        """(R^2 - r^2) / R^2: smooth (a polynomial), zero on the circle, maximum 1 at the centre."""
        p = np.asarray(points, dtype=float)
        r2 = (p[:, 0] - self.cx) ** 2 + (p[:, 1] - self.cy) ** 2
        return (self.radius ** 2 - r2) / self.radius ** 2

    def sample_interior(self, n, rng):
        """Uniform in area: r = R sqrt(U), theta uniform."""
        r = self.radius * np.sqrt(rng.uniform(0, 1, n))
        th = rng.uniform(0, 2 * np.pi, n)
        return np.column_stack([self.cx + r * np.cos(th), self.cy + r * np.sin(th)])

    def sample_boundary(self, n, rng=None):
        th = rng.uniform(0, 2 * np.pi, n) if rng is not None else 2 * np.pi * (np.arange(n) + 0.5) / n
        nrm = np.column_stack([np.cos(th), np.sin(th)])
        return np.column_stack([self.cx, self.cy]) + self.radius * nrm, nrm

    def quadrature(self, level=48):
        """Composite Gauss-Legendre in r (weight r dr) times the trapezoid rule in theta.

        The trapezoid rule is spectrally accurate for periodic integrands (Trefethen & Weideman,
        SIAM Review 56, 2014); the rule is exact for the area. About 8 level^2 points.
        """
        level = max(int(level), 2)
        r, wr = gauss_legendre_panels(0.0, self.radius, max(2, level // 2), 4)
        m = max(16, 4 * level)
        th = 2 * np.pi * (np.arange(m) + 0.5) / m
        R, TH = np.meshgrid(r, th, indexing="ij")
        pts = np.column_stack([(self.cx + R * np.cos(TH)).ravel(), (self.cy + R * np.sin(TH)).ravel()])
        return pts, np.outer(wr * r, np.full(m, 2 * np.pi / m)).ravel()

    def extend_boundary_data(self, g, points):
        """The data continued along rays, blended to their mean towards the centre:

            g_ext(x) = gbar + s((rho - rho0) / (1 - rho0)) (g(P x) - gbar),

        with rho = |x - c| / R, P x the radial projection onto the circle, gbar the mean of g on
        the circle, s the C2 smoothstep and rho0 = DISK_BLEND_INNER: equal to g on the circle,
        constant near the centre (where the angle is undefined), smooth, and not harmonic (it
        does not solve a Laplace problem for the solver). g is queried on the circle only.
        """
        p = np.asarray(points, dtype=float)
        dx, dy = p[:, 0] - self.cx, p[:, 1] - self.cy
        r = np.hypot(dx, dy)
        th = np.arctan2(dy, dx)
        proj = np.column_stack([self.cx + self.radius * np.cos(th), self.cy + self.radius * np.sin(th)])
        mean = _circle_mean(g, self.cx, self.cy, self.radius)
        blend = _smoothstep((r / self.radius - DISK_BLEND_INNER) / (1.0 - DISK_BLEND_INNER))
        return mean + blend * (np.asarray(g(proj), float) - mean)

    def to_dict(self):
        return {"kind": self.kind, "cx": self.cx, "cy": self.cy, "radius": self.radius}


# ------------------------------------------------------------------------------------------
# Annulus
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class Annulus(Domain):
    """Annulus r_in < |x - c| < r_out about the centre (cx, cy)."""

    cx: float = 0.0
    cy: float = 0.0
    r_in: float = 0.5
    r_out: float = 1.0
    kind = "annulus"

    def __post_init__(self):
        positive("r_in", self.r_in)
        positive("r_out", self.r_out)
        if not self.r_out > self.r_in:
            raise ConfigError(f"`r_out` must exceed `r_in`, got r_in={self.r_in}, r_out={self.r_out}")

    @property
    def bbox(self):
        R = self.r_out
        return (self.cx - R, self.cx + R, self.cy - R, self.cy + R)

    @property
    def area(self) -> float:
        return math.pi * (self.r_out ** 2 - self.r_in ** 2)

    @property
    def inradius(self) -> float:
        return 0.5 * (self.r_out - self.r_in)

    def polar(self, points):
        """Radius and angle in [0, 2 pi) about the centre."""
        return polar(points, self.cx, self.cy)

    def distance(self, points):
        r, _ = self.polar(points)
        return np.minimum(r - self.r_in, self.r_out - r)

    def phi(self, points):
        """4 (r^2 - a^2)(b^2 - r^2) / (b^2 - a^2)^2: a polynomial, zero on both circles, max 1."""
        p = np.asarray(points, dtype=float)
        r2 = (p[:, 0] - self.cx) ** 2 + (p[:, 1] - self.cy) ** 2
        a2, b2 = self.r_in ** 2, self.r_out ** 2
        return 4 * (r2 - a2) * (b2 - r2) / (b2 - a2) ** 2

    def sample_interior(self, n, rng):
        """Uniform in area: r^2 uniform on [a^2, b^2]."""
        a2, b2 = self.r_in ** 2, self.r_out ** 2
        r = np.sqrt(rng.uniform(a2, b2, n))
        th = rng.uniform(0, 2 * np.pi, n)
        return np.column_stack([self.cx + r * np.cos(th), self.cy + r * np.sin(th)])

    def sample_boundary(self, n, rng=None):
        """Uniform in arc length over both circles; normals point out of the annulus."""
        a, b = self.r_in, self.r_out
        if rng is not None:
            outer = rng.uniform(0, a + b, n) < b
            th = rng.uniform(0, 2 * np.pi, n)
        else:
            n_out = int(round(n * b / (a + b)))
            outer = np.arange(n) < n_out
            th = np.empty(n)
            th[outer] = 2 * np.pi * (np.arange(n_out) + 0.5) / max(n_out, 1)
            th[~outer] = 2 * np.pi * (np.arange(n - n_out) + 0.5) / max(n - n_out, 1)
        e = np.column_stack([np.cos(th), np.sin(th)])
        r = np.where(outer, b, a)[:, None]
        sign = np.where(outer, 1.0, -1.0)[:, None]
        return np.column_stack([self.cx, self.cy]) + r * e, sign * e

    def quadrature(self, level=48):
        """Composite Gauss-Legendre in r (weight r dr) on [a, b] times the trapezoid rule in theta."""
        level = max(int(level), 2)
        a, b = self.r_in, self.r_out
        r, wr = gauss_legendre_panels(a, b, max(2, int(math.ceil(level * (b - a) / (2 * b)))), 4)
        m = max(16, 4 * level)
        th = 2 * np.pi * (np.arange(m) + 0.5) / m
        R, TH = np.meshgrid(r, th, indexing="ij")
        pts = np.column_stack([(self.cx + R * np.cos(TH)).ravel(), (self.cy + R * np.sin(TH)).ravel()])
        return pts, np.outer(wr * r, np.full(m, 2 * np.pi / m)).ravel()

    def extend_boundary_data(self, g, points):
        """The data of both circles continued along rays and blended linearly in the radius,

            g_ext = (1 - w) g(c + r_in e) + w g(c + r_out e),   w = (r - r_in) / (r_out - r_in),

        e the direction of x from the centre: equal to g on both circles, smooth, and not
        harmonic (it does not solve a Laplace problem for the solver). g is queried on the two
        circles only.
        """
        p = np.asarray(points, dtype=float)
        a, b = self.r_in, self.r_out
        dx, dy = p[:, 0] - self.cx, p[:, 1] - self.cy
        r = np.hypot(dx, dy)
        th = np.arctan2(dy, dx)
        e = np.column_stack([np.cos(th), np.sin(th)])
        c0 = np.array([self.cx, self.cy])
        w = (r - a) / (b - a)
        return (1 - w) * np.asarray(g(c0 + a * e), float) + w * np.asarray(g(c0 + b * e), float)

    def to_dict(self):
        return {"kind": self.kind, "cx": self.cx, "cy": self.cy, "r_in": self.r_in, "r_out": self.r_out}
