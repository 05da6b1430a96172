"""Balls |x - c| < R in d = 1 .. MAX_DIM dimensions.

Exact signed distance, the polynomial distance function (R^2 - r^2) / R^2, uniform interior
and sphere sampling (Gaussian directions: Muller, "A note on a method for generating points
uniformly on n-dimensional spheres", Comm. ACM 2, 1959), the `Disk` quadrature for d = 2 and
randomised quasi-Monte Carlo evaluation sets for d >= 3: d + 1 Sobol coordinates u are mapped
measure-preservingly to the ball by r = R u_0^(1/d) and the direction z / |z|, z_i =
Phi^-1(u_i) (inverse normal CDF), so each scrambled replicate is an unbiased equal-weight rule.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import positive
from lapbench.domains.base import EvalSet, SolidDomain, coordinates, gauss_legendre_panels, sobol_eval_set
from lapbench.domains.round import Disk, _smoothstep

__all__ = ["Ball", "ball_volume", "unit_ball"]

BALL_BLEND_INNER = 0.25      # the boundary-data extension is constant inside this radius fraction
_SPHERE_MEAN_LOG2 = 12       # 2^12 scrambled Sobol directions for the mean of g on the sphere


def ball_volume(dim: int, radius: float = 1.0) -> float:
    """pi^(d/2) R^d / Gamma(d/2 + 1) (closed form [common practice])."""
    return math.pi ** (dim / 2) * radius ** dim / math.gamma(dim / 2 + 1)


def _directions(u: np.ndarray) -> np.ndarray:
    """Unit vectors from points of [0, 1)^d: normalised inverse-normal coordinates."""
    from scipy.special import ndtri

    z = ndtri(np.clip(u, 1e-15, 1 - 1e-15))
    return z / np.linalg.norm(z, axis=1, keepdims=True)


@dataclasses.dataclass(frozen=True)
class Ball(SolidDomain):
    """The ball of centre `center` (one entry per dimension; dim = len(center)) and `radius`."""

    center: tuple[float, ...] = (0.0, 0.0, 0.0)
    radius: float = 1.0
    kind = "ball"

    def __post_init__(self):
        c = coordinates("center", self.center)
        positive("radius", self.radius)
        object.__setattr__(self, "center", c)

    # geometry --------------------------------------------------------------------------------
    @property
    def dim(self) -> int:
        return len(self.center)

    @property
    def bounds(self) -> np.ndarray:
        c = np.asarray(self.center)
        return np.column_stack([c - self.radius, c + self.radius])

    @property
    def volume(self) -> float:
        return ball_volume(self.dim, self.radius)

    @property
    def inradius(self) -> float:
        return float(self.radius)

    def _disk(self) -> Disk:
        return Disk(self.center[0], self.center[1], self.radius)

    def radii(self, points) -> np.ndarray:
        """|x - c|."""
        return np.linalg.norm(self._points(points) - np.asarray(self.center), axis=1)

    def distance(self, points):
        return self.radius - self.radii(points)

    def phi(self, points):
        """(R^2 - r^2) / R^2: a polynomial, zero on the sphere, maximum 1 at the centre."""
        r = self.radii(points)
        return (self.radius ** 2 - r * r) / self.radius ** 2

    # sampling ----------------------------------------------------------------------------------
    def sample_interior(self, n, rng):
        """Uniform in volume: Gaussian direction, radius R U^(1/d)."""
        z = rng.standard_normal((n, self.dim))
        e = z / np.linalg.norm(z, axis=1, keepdims=True)
        r = self.radius * rng.uniform(0.0, 1.0, n) ** (1.0 / self.dim)
        return np.asarray(self.center) + r[:, None] * e

    def sample_boundary(self, n, rng=None):
        """Uniform on the sphere (Gaussian directions); rng=None: equispaced for d = 2 (as
        `Disk`), a fixed-seed sample (seed 0) otherwise. Returns points and outward normals."""
        if self.dim == 2 and rng is None:
            return self._disk().sample_boundary(n, None)
        rng = np.random.default_rng(0) if rng is None else rng
        if self.dim == 1:
            e = np.where(rng.integers(0, 2, n) == 1, 1.0, -1.0)[:, None]
        else:
            z = rng.standard_normal((n, self.dim))
            e = z / np.linalg.norm(z, axis=1, keepdims=True)
        return np.asarray(self.center) + self.radius * e, e

    def _to_ball(self, u: np.ndarray) -> np.ndarray:
        r = self.radius * u[:, 0] ** (1.0 / self.dim)
        return np.asarray(self.center) + r[:, None] * _directions(u[:, 1:])

    def quadrature(self, level=48):
        """The `Disk` rule for d = 2, Gauss-Legendre for d = 1, one scrambled Sobol replicate
        of the evaluation set (equal weights) for d >= 3."""
        if self.dim == 2:
            return self._disk().quadrature(level)
        if self.dim == 1:
            c, R = self.center[0], self.radius
            x, w = gauss_legendre_panels(c - R, c + R, max(1, int(level)), 4)
            return x[:, None], w
        es = self.eval_set(seed=0, replicates=1)
        return es.points, es.weights

    def eval_set(self, seed: int = 0, level: int = 48, n_extra: int = 2000, replicates: int | None = None) -> EvalSet:
        """Quadrature plus random points for d <= 2; randomised QMC (`sobol_eval_set`) for d >= 3."""
        if self.dim <= 2:
            return super().eval_set(seed=seed, level=level, n_extra=n_extra)
        kw = {} if replicates is None else {"replicates": replicates}
        return sobol_eval_set(self._to_ball, self.dim + 1, self.volume, seed, self.sample_interior,
                              n_extra=n_extra, **kw)

    def sphere_mean(self, g) -> float:
        """Mean of g on the sphere: the trapezoid rule for d = 2 (as `Disk`), the two points
        for d = 1, a fixed scrambled Sobol set of 2^12 directions otherwise."""
        from scipy.stats import qmc

        c = np.asarray(self.center)
        if self.dim == 1:
            return float(np.mean(np.asarray(g(np.array([c - self.radius, c + self.radius])), float)))
        if self.dim == 2:
            th = 2 * np.pi * np.arange(512) / 512
            e = np.column_stack([np.cos(th), np.sin(th)])
        else:
            u = qmc.Sobol(self.dim, scramble=True, seed=np.random.default_rng(0)).random_base2(_SPHERE_MEAN_LOG2)
            e = _directions(u)
        return float(np.mean(np.asarray(g(c + self.radius * e), float)))

    def extend_boundary_data(self, g, points):
        """The data continued along rays, blended to their mean towards the centre:

            g_ext(x) = gbar + s((rho - rho0) / (1 - rho0)) (g(P x) - gbar),

        rho = |x - c| / R, P x the radial projection onto the sphere, gbar the mean of g on the
        sphere (`sphere_mean`), s the C2 smoothstep and rho0 = BALL_BLEND_INNER: the `Disk`
        extension in d dimensions. Equal to g on the sphere, constant near the centre, smooth,
        not harmonic; g is queried on the sphere only.
        """
        p = self._points(points)
        c = np.asarray(self.center)
        v = p - c
        r = np.linalg.norm(v, axis=1)
        e = np.where(r[:, None] > 0, v / np.where(r > 0, r, 1.0)[:, None], 0.0)
        e[r == 0, 0] = 1.0
        mean = self.sphere_mean(g)
        blend = _smoothstep((r / self.radius - BALL_BLEND_INNER) / (1.0 - BALL_BLEND_INNER))
        return mean + blend * (np.asarray(g(c + self.radius * e), float) - mean)

    def to_dict(self):
        return {"kind": self.kind, "center": list(self.center), "radius": self.radius}


def unit_ball(dim: int) -> Ball:
    """The unit ball about the origin of R^dim."""
    return Ball(center=(0.0,) * int(dim), radius=1.0)
