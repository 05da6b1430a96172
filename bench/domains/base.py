"""The Domain contract: geometry that problems live on and that solvers and the harness query.

Every domain provides membership, boundary sampling with outward normals, area (``volume`` in
d dimensions), its ``bounds`` (a (d, 2) array of coordinate ranges), a signed distance (positive
inside), a normalised distance-like function ``phi`` for hard boundary conditions (zero on the
boundary, maximum 1 inside), its dimension, and the seeded evaluation/quadrature set that the
harness uses for errors.

Evaluation sets in d >= 3 dimensions are randomised quasi-Monte Carlo (`sobol_eval_set`): R
independent scramblings of a Sobol sequence (scipy.stats.qmc.Sobol, Owen's scrambling), each an
unbiased equal-weight rule; ``EvalSet.groups`` says which scrambling a point belongs to, so that
the harness can state the sampling error of its error estimate from the spread of the
replicates (Owen, "Scrambled net variance for integrals of smooth functions", Ann. Statist. 25,
1997; L'Ecuyer & Lemieux, "Recent advances in randomized quasi-Monte Carlo methods", 2002).
"""
from __future__ import annotations

import abc
import dataclasses

import numpy as np

__all__ = ["Domain", "SolidDomain", "coordinates", "MAX_DIM", "EvalSet", "gauss_legendre_panels", "sobol_eval_set", "SOBOL_REPLICATES", "SOBOL_LOG2_POINTS"]

# randomised QMC evaluation sets (d >= 3): independent scramblings x 2^m points each. Eight
# replicates give the sampling error of the relative L2 estimate with 7 degrees of freedom;
# 2^12 points per replicate keep the whole set (32768 points) cheap to evaluate for any solver.
SOBOL_REPLICATES = 8
SOBOL_LOG2_POINTS = 12
MAX_DIM = 32        # dimensions a box or ball accepts (the issue asks for 1 .. 20 at least)


@dataclasses.dataclass(frozen=True)
class EvalSet:
    """The shared point set on which the harness measures errors.

    ``points``/``weights`` are a quadrature rule for L2 norms over the domain; ``extra`` are
    seeded random interior points that join the quadrature points for the max-abs error.
    ``groups`` (randomised QMC sets only): the replicate index of each point; the weights of
    each replicate alone are a rule for the whole domain, and all weights together are their
    mean. ``method`` names the rule (for records).
    """

    points: np.ndarray
    weights: np.ndarray
    extra: np.ndarray
    groups: np.ndarray | None = None
    method: str = "quadrature"

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


def sobol_eval_set(to_domain, n_u: int, volume: float, seed: int, interior, n_extra: int = 2000,
                   replicates: int = SOBOL_REPLICATES, log2_points: int = SOBOL_LOG2_POINTS) -> EvalSet:
    """Randomised QMC evaluation set: `replicates` scrambled Sobol sets mapped into a domain.

    `to_domain` maps points of the unit cube [0, 1)^n_u to the domain so that uniform points
    become uniform points of the domain (a measure-preserving map), hence each replicate is an
    unbiased equal-weight rule ``volume / 2^m``. The scramblings are seeded from `seed`
    (numpy SeedSequence spawning), so the set is reproducible. `interior(n, rng)` gives the
    seeded random extra points for the max-abs error.
    """
    from scipy.stats import qmc

    seqs = np.random.SeedSequence(int(seed)).spawn(replicates + 1)
    n = 1 << int(log2_points)
    pts = [to_domain(qmc.Sobol(n_u, scramble=True, seed=np.random.default_rng(s)).random_base2(int(log2_points)))
           for s in seqs[:replicates]]
    points = np.vstack(pts)
    weights = np.full(len(points), float(volume) / (n * replicates))
    groups = np.repeat(np.arange(replicates), n)
    extra = interior(n_extra, np.random.default_rng(seqs[-1]))
    return EvalSet(points, weights, extra, groups=groups,
                   method=f"scrambled Sobol: {replicates} independent scramblings x 2^{int(log2_points)} points")


class Domain(abc.ABC):
    """Base class: subclasses set `kind` and implement the abstract geometric queries."""

    kind: str = ""
    dim: int = 2

    # geometry --------------------------------------------------------------------------------
    @property
    @abc.abstractmethod
    def bbox(self) -> tuple[float, float, float, float]:
        """(x0, x1, y0, y1) of the bounding box; in d dimensions (lo_0, hi_0, ..., lo_{d-1}, hi_{d-1})."""

    @property
    @abc.abstractmethod
    def area(self) -> float:
        """Area of the domain."""

    @property
    def volume(self) -> float:
        """d-dimensional volume (the area for d = 2)."""
        return self.area

    @property
    def bounds(self) -> np.ndarray:
        """Coordinate ranges of the bounding box, shape (d, 2): row i is (lo_i, hi_i)."""
        return np.asarray(self.bbox, dtype=float).reshape(-1, 2)

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
        """Largest side of the bounding box."""
        b = self.bounds
        return float(np.max(b[:, 1] - b[:, 0]))

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


def coordinates(name: str, value) -> tuple[float, ...]:
    """A config list of 1 .. MAX_DIM finite numbers as a tuple (ConfigError naming `name`)."""
    from lapbench.config import ConfigError

    try:
        out = tuple(float(v) for v in value)
    except (TypeError, ValueError):
        raise ConfigError(f"`{name}` must be a list of numbers, got {value!r}") from None
    if not all(np.isfinite(out)):
        raise ConfigError(f"`{name}` must hold finite numbers, got {value!r}")
    if not 1 <= len(out) <= MAX_DIM:
        raise ConfigError(f"`{name}` must have 1 to {MAX_DIM} entries (the dimension), got {len(out)}")
    return out


class SolidDomain(Domain):
    """A domain in d dimensions given by its `bounds` and `volume` (boxes, balls): `bbox` is the
    flat (lo_0, hi_0, ..., lo_{d-1}, hi_{d-1}), `area` the volume, and points are checked to have
    d columns."""

    @property
    @abc.abstractmethod
    def bounds(self) -> np.ndarray:
        """(d, 2) coordinate ranges."""

    @property
    @abc.abstractmethod
    def volume(self) -> float:
        """d-dimensional volume."""

    @property
    def bbox(self):
        return tuple(float(v) for row in self.bounds for v in row)

    @property
    def area(self) -> float:
        """The d-dimensional volume (the area when d = 2)."""
        return self.volume

    def _points(self, points) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        if p.ndim != 2 or p.shape[1] != self.dim:
            raise ValueError(f"points for a {self.dim}-D {self.kind} must have shape (m, {self.dim}), got {p.shape}")
        return p
