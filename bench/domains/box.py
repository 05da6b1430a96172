"""Axis-aligned boxes [lo_0, hi_0] x ... x [lo_{d-1}, hi_{d-1}] in d = 1 .. MAX_DIM dimensions.

Exact signed distance, the product distance function, uniform interior and surface sampling,
Gauss-Legendre quadrature for d <= 2 (the 2-D box is the `Rectangle` rule) and randomised
quasi-Monte Carlo evaluation sets for d >= 3 (`lapbench.domains.base.sobol_eval_set`).
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError
from lapbench.domains.base import MAX_DIM, EvalSet, SolidDomain, coordinates, gauss_legendre_panels, sobol_eval_set
from lapbench.domains.rectangle import Rectangle

__all__ = ["Box", "MAX_DIM", "unit_box"]

@dataclasses.dataclass(frozen=True)
class Box(SolidDomain):
    """The box with corners `lo` and `hi` (one entry per dimension); dim = len(lo)."""

    lo: tuple[float, ...] = (0.0, 0.0, 0.0)
    hi: tuple[float, ...] = (1.0, 1.0, 1.0)
    kind = "box"

    def __post_init__(self):
        lo, hi = coordinates("lo", self.lo), coordinates("hi", self.hi)
        if len(hi) != len(lo):
            raise ConfigError(f"`hi` must have as many entries as `lo` ({len(lo)}), got {len(hi)}")
        bad = [i for i in range(len(lo)) if not hi[i] > lo[i]]
        if bad:
            i = bad[0]
            raise ConfigError(f"`hi` must exceed `lo` in every coordinate; coordinate {i}: lo={lo[i]}, hi={hi[i]}")
        object.__setattr__(self, "lo", lo)
        object.__setattr__(self, "hi", hi)

    # geometry --------------------------------------------------------------------------------
    @property
    def dim(self) -> int:
        return len(self.lo)

    @property
    def bounds(self) -> np.ndarray:
        return np.column_stack([self.lo, self.hi])

    @property
    def lengths(self) -> np.ndarray:
        return np.asarray(self.hi) - np.asarray(self.lo)

    @property
    def volume(self) -> float:
        return float(np.prod(self.lengths))

    @property
    def inradius(self) -> float:
        return 0.5 * float(np.min(self.lengths))

    def _rectangle(self) -> Rectangle:
        return Rectangle(self.lo[0], self.hi[0], self.lo[1], self.hi[1])

    def distance(self, points):
        p = self._points(points)
        lo, hi = np.asarray(self.lo), np.asarray(self.hi)
        inside = np.minimum(p - lo, hi - p).min(axis=1)
        out = np.maximum(np.maximum(lo - p, p - hi), 0.0)
        return np.where(inside >= 0, inside, -np.sqrt(np.sum(out * out, axis=1)))

    def phi(self, points):
        """Product form prod_i 4 (x_i - lo_i)(hi_i - x_i) / L_i^2: a polynomial, zero on every
        face, maximum 1 at the centre (the 2-D `Rectangle` form in d dimensions)."""
        p = self._points(points)
        lo, hi, L = np.asarray(self.lo), np.asarray(self.hi), self.lengths
        return np.prod(4.0 * (p - lo) * (hi - p) / (L * L), axis=1)

    # sampling ----------------------------------------------------------------------------------
    def sample_interior(self, n, rng):
        return np.asarray(self.lo) + self.lengths * rng.uniform(0.0, 1.0, (n, self.dim))

    def sample_boundary(self, n, rng=None):
        """Uniform on the surface: a face pair chosen in proportion to its (d-1)-volume, a side
        at random, a uniform point on the face. rng=None: equispaced for d = 2 (as `Rectangle`),
        a fixed-seed sample (seed 0) otherwise."""
        if self.dim == 2 and rng is None:
            return self._rectangle().sample_boundary(n, None)
        rng = np.random.default_rng(0) if rng is None else rng
        d, L = self.dim, self.lengths
        face_area = np.array([np.prod(np.delete(L, i)) for i in range(d)])
        axis = rng.choice(d, size=n, p=face_area / face_area.sum())
        side = rng.integers(0, 2, n)
        pts = self.sample_interior(n, rng)
        rows = np.arange(n)
        pts[rows, axis] = np.where(side == 1, np.asarray(self.hi)[axis], np.asarray(self.lo)[axis])
        nrm = np.zeros((n, d))
        nrm[rows, axis] = np.where(side == 1, 1.0, -1.0)
        return pts, nrm

    def quadrature(self, level=48):
        """Composite Gauss-Legendre (4 points per panel) for d <= 2; for d >= 3 one scrambled
        Sobol replicate of the evaluation set (equal weights)."""
        if self.dim == 2:
            return self._rectangle().quadrature(level)
        if self.dim == 1:
            x, w = gauss_legendre_panels(self.lo[0], self.hi[0], max(1, int(level)), 4)
            return x[:, None], w
        es = self.eval_set(seed=0, replicates=1)
        return es.points, es.weights

    def eval_set(self, seed: int = 0, level: int = 48, n_extra: int = 2000, replicates: int | None = None) -> EvalSet:
        """Quadrature plus random points for d <= 2; randomised QMC (`sobol_eval_set`) for d >= 3."""
        if self.dim <= 2:
            return super().eval_set(seed=seed, level=level, n_extra=n_extra)
        lo, L = np.asarray(self.lo), self.lengths
        kw = {} if replicates is None else {"replicates": replicates}
        return sobol_eval_set(lambda u: lo + L * u, self.dim, self.volume, seed, self.sample_interior,
                              n_extra=n_extra, **kw)

    def extend_boundary_data(self, g, points):
        """Smooth extension of the face data; exact on the boundary, g queried on faces only.

        d = 2: the Coons patch of `Rectangle`. Otherwise an inverse-distance blend of the data at
        the orthogonal projections onto the 2d face hyperplanes,

            g_ext(x) = sum_f w_f g(P_f x) / sum_f w_f,   w_f = 1 / dist(x, face f)^2,

        (Shepard-type weights over faces [common practice]): smooth inside, equal to g on each
        face (its weight dominates there), and not harmonic, so it does not solve a Laplace
        problem for the solver. Costs 2 d evaluations of g per point.
        """
        if self.dim == 2:
            return self._rectangle().extend_boundary_data(g, points)
        p = self._points(points)
        lo, hi = np.asarray(self.lo), np.asarray(self.hi)
        dist = np.clip(np.concatenate([p - lo, hi - p], axis=1), 0.0, None)   # (m, 2d): faces lo_i, then hi_i
        dmin = dist.min(axis=1, keepdims=True)
        # w_f = (dmin / d_f)^2 (the weights scaled by dmin^2, at most 1); on a face (dmin = 0) only
        # the faces through the point count, equally
        w = np.where(dmin > 0, (dmin / np.where(dist > 0, dist, 1.0)) ** 2, (dist == 0).astype(float))
        num = np.zeros(len(p))
        for f in range(2 * self.dim):
            i, value = f % self.dim, (lo if f < self.dim else hi)[f % self.dim]
            proj = p.copy()
            proj[:, i] = value
            num += w[:, f] * np.asarray(g(proj), dtype=float)
        return num / w.sum(axis=1)

    def to_dict(self):
        return {"kind": self.kind, "lo": list(self.lo), "hi": list(self.hi)}


def unit_box(dim: int) -> Box:
    """[0, 1]^dim."""
    return Box(lo=(0.0,) * int(dim), hi=(1.0,) * int(dim))
