"""Curved and polygonal domains (disk, annulus, simple polygon) and the problems that live on them.

Importing this module registers the domain kinds ``disk``, ``annulus`` and ``polygon`` in
`bench.domains.DOMAIN_KINDS` and the problems ``lshape``, ``disk_harmonic`` and
``annulus_poisson`` in the problem catalogue (`bench.problems` imports it lazily through
``_EXTENSIONS``).

Config vocabulary (one for all shapes)::

    domain: {kind: disk, cx: 0.0, cy: 0.0, radius: 1.0}
    domain: {kind: annulus, cx: 0.0, cy: 0.0, r_in: 0.5, r_out: 1.0}
    domain: {kind: polygon, vertices: [[x0, y0], [x1, y1], ...]}

The L-shaped region [-1, 1]^2 minus [0, 1] x [-1, 0] is the polygon preset `LSHAPE_VERTICES`
(also the default vertex list of ``kind: polygon``); `lshape()` builds it.
"""
from __future__ import annotations

import dataclasses
import math
from functools import cached_property

import numpy as np

from bench.config import ConfigError, positive
from bench.domains import DOMAIN_KINDS, Domain, gauss_legendre_panels, make_domain

__all__ = ["Disk", "Annulus", "Polygon", "LSHAPE_VERTICES", "lshape", "triangle_rule",
           "ear_clip", "LShapeParams", "DiskHarmonicParams", "AnnulusPoissonParams"]

# The L-shaped region [-1, 1]^2 minus the quadrant [0, 1] x [-1, 0], counter-clockwise; the
# re-entrant corner (interior angle 3 pi / 2) is the origin.
LSHAPE_VERTICES = [[-1.0, -1.0], [0.0, -1.0], [0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [-1.0, 1.0]]

# Boundary-data extensions (hard boundary conditions) must be smooth and exact on the boundary,
# and must not solve the problem: a harmonic extension of Laplace data IS the solution, which
# would hand a hard-boundary network the answer (tests/test_shapes.py checks every kind).
# Disk: the data are continued along rays and blended to their mean inside this radius fraction.
DISK_BLEND_INNER = 0.25
_MEAN_POINTS = 512          # trapezoid rule for the mean of the data on a circle


def lshape() -> "Polygon":
    """The L-shaped region [-1, 1]^2 minus [0, 1] x [-1, 0] (re-entrant corner at the origin)."""
    return Polygon(vertices=[list(v) for v in LSHAPE_VERTICES])


# ------------------------------------------------------------------------------------------
# Quadrature on triangles
# ------------------------------------------------------------------------------------------

def triangle_rule(order: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """Collapsed (Duffy) Gauss-Legendre rule on the reference triangle {xi, eta >= 0, xi+eta <= 1}.

    xi = s (1 - t), eta = s t with Jacobian s; ``order`` Gauss points in s and t integrate
    polynomials of total degree <= 2 order - 2 exactly (Stroud, Approximate Calculation of
    Multiple Integrals, 1971, sec. 2.5 conical product rules). Returns barycentric-free
    coordinates (k, 2) and weights summing to 1/2.
    """
    x, w = np.polynomial.legendre.leggauss(order)
    s, ws = 0.5 * (x + 1), 0.5 * w
    S, T = np.meshgrid(s, s, indexing="ij")
    W = np.outer(ws * s, ws)
    return np.column_stack([(S * (1 - T)).ravel(), (S * T).ravel()]), W.ravel()


def _map_rule(tri: np.ndarray, ref: np.ndarray, wref: np.ndarray):
    """Map a reference-triangle rule onto triangles ``tri`` (T, 3, 2); vectorised."""
    a, b, c = tri[:, 0], tri[:, 1], tri[:, 2]
    e1, e2 = b - a, c - a
    det = np.abs(e1[:, 0] * e2[:, 1] - e1[:, 1] * e2[:, 0])
    pts = a[:, None, :] + ref[None, :, 0, None] * e1[:, None, :] + ref[None, :, 1, None] * e2[:, None, :]
    w = det[:, None] * wref[None, :]
    return pts.reshape(-1, 2), w.ravel()


def _subdivide(tri: np.ndarray, n: int) -> np.ndarray:
    """Split each triangle (T, 3, 2) into n^2 congruent triangles (barycentric lattice)."""
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    up = (i + j) <= n - 1
    iu, ju = i[up], j[up]
    down = (i + j) <= n - 2
    id_, jd = i[down], j[down]
    lat = np.concatenate([
        np.stack([np.column_stack([iu, ju]), np.column_stack([iu + 1, ju]), np.column_stack([iu, ju + 1])], 1),
        np.stack([np.column_stack([id_ + 1, jd]), np.column_stack([id_ + 1, jd + 1]),
                  np.column_stack([id_, jd + 1])], 1)]) / n                       # (k, 3, 2) in (xi, eta)
    a = tri[:, None, None, 0, :]
    e1 = (tri[:, 1] - tri[:, 0])[:, None, None, :]
    e2 = (tri[:, 2] - tri[:, 0])[:, None, None, :]
    out = a + lat[None, :, :, 0, None] * e1 + lat[None, :, :, 1, None] * e2
    return out.reshape(-1, 3, 2)


def _graded_corner_rule(tri: np.ndarray, n: int, layers: int, sigma: float = 0.15, order: int = 4,
                        order_s: int = 8):
    """Rule on triangles (T, 3, 2) collapsed at vertex 0, geometrically graded towards it.

    Duffy map x = A + s ((1-t)(B-A) + t (C-A)), Jacobian 2|T| s. In s: n uniform panels whose
    first panel is replaced by `layers` geometric layers of ratio `sigma`; in t: n uniform
    panels. Geometric grading integrates corner singularities r^alpha with exponential
    convergence in the number of layers (Schwab, p- and hp-Finite Element Methods, 1998, ch. 4).
    Each s-panel gets `order_s` Gauss points: with 4, the r^(2/3) corner integral of the L-shape
    kept a relative error of 1e-8 at level 16; with 8 it fell to 2e-12 (measured).
    """
    xg, wg = np.polynomial.legendre.leggauss(order_s)
    edges = np.concatenate([[0.0], sigma ** np.arange(layers, 0, -1) / n, np.arange(1, n + 1) / n])
    lo, hi = edges[:-1], edges[1:]
    s = (0.5 * (lo + hi)[:, None] + 0.5 * (hi - lo)[:, None] * xg[None, :]).ravel()
    ws = (0.5 * (hi - lo)[:, None] * wg[None, :]).ravel()
    t, wt = gauss_legendre_panels(0.0, 1.0, n, order)
    S, T = np.meshgrid(s, t, indexing="ij")
    W = np.outer(ws * s, wt).ravel()
    S, T = S.ravel(), T.ravel()
    a, b, c = tri[:, 0], tri[:, 1], tri[:, 2]
    area2 = np.abs((b - a)[:, 0] * (c - a)[:, 1] - (b - a)[:, 1] * (c - a)[:, 0])
    pts = (a[:, None, :] + S[None, :, None] * ((1 - T)[None, :, None] * (b - a)[:, None, :]
                                               + T[None, :, None] * (c - a)[:, None, :]))
    return pts.reshape(-1, 2), (area2[:, None] * W[None, :]).ravel()


# ------------------------------------------------------------------------------------------
# Extension of circle data (disk, annulus)
# ------------------------------------------------------------------------------------------

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


# ------------------------------------------------------------------------------------------
# Disk
# ------------------------------------------------------------------------------------------


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


# ------------------------------------------------------------------------------------------
# Polygon
# ------------------------------------------------------------------------------------------

def _cross(u, v):
    return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]


def _segments_intersect(p1, p2, q1, q2, tol):
    """Whether closed segments p1p2 and q1q2 share a point (orientation tests with tolerance)."""
    d1 = _cross(p2 - p1, q1 - p1)
    d2 = _cross(p2 - p1, q2 - p1)
    d3 = _cross(q2 - q1, p1 - q1)
    d4 = _cross(q2 - q1, p2 - q1)
    if ((d1 > tol and d2 < -tol) or (d1 < -tol and d2 > tol)) and \
            ((d3 > tol and d4 < -tol) or (d3 < -tol and d4 > tol)):
        return True

    def on_seg(a, b, c, d):  # c lies on segment ab (d = cross(b - a, c - a))
        return abs(d) <= tol and min(a[0], b[0]) - tol <= c[0] <= max(a[0], b[0]) + tol \
            and min(a[1], b[1]) - tol <= c[1] <= max(a[1], b[1]) + tol

    return on_seg(p1, p2, q1, d1) or on_seg(p1, p2, q2, d2) or on_seg(q1, q2, p1, d3) or on_seg(q1, q2, p2, d4)


def ear_clip(V: np.ndarray) -> np.ndarray:
    """Triangulate a simple counter-clockwise polygon (no collinear vertices) by ear clipping.

    Among the current ears the one with the largest minimum angle is cut first, which avoids
    slivers on the small polygons of configs (Meisters, "Polygons have ears", Amer. Math.
    Monthly 82, 1975; O(n^3) here, fine for tens of vertices). Returns index triples (T, 3).
    """
    idx = list(range(len(V)))
    tris = []
    while len(idx) > 3:
        best, best_q = None, -1.0
        m = len(idx)
        for k in range(m):
            i0, i1, i2 = idx[k - 1], idx[k], idx[(k + 1) % m]
            a, b, c = V[i0], V[i1], V[i2]
            if _cross(b - a, c - b) <= 0:
                continue  # reflex or degenerate: not an ear
            others = [j for j in idx if j not in (i0, i1, i2)]
            if others:
                P = V[others]
                inside = ((_cross(b - a, P - a) >= 0) & (_cross(c - b, P - b) >= 0)
                          & (_cross(a - c, P - c) >= 0))
                if inside.any():
                    continue
            q = _min_angle(a, b, c)
            if q > best_q:
                best, best_q = k, q
        if best is None:  # numerically degenerate input; validation should have refused it
            raise ConfigError("`problem.domain.vertices` could not be triangulated (degenerate polygon)")
        m = len(idx)
        tris.append((idx[best - 1], idx[best], idx[(best + 1) % m]))
        idx.pop(best)
    tris.append(tuple(idx))
    return _lawson_flips(V, np.array(tris, dtype=int))


def _lawson_flips(V: np.ndarray, tris: np.ndarray) -> np.ndarray:
    """Flip interior edges until the triangulation is constrained Delaunay (better shapes).

    An interior edge is flipped when the two angles opposite it sum to more than pi and the
    quadrilateral is convex (Lawson, "Software for C1 surface interpolation", 1977).
    """
    tris = [list(t) for t in tris]
    changed = True
    while changed:
        changed = False
        owner: dict = {}
        for k, t in enumerate(tris):
            for e in range(3):
                a, b = t[e], t[(e + 1) % 3]
                owner.setdefault((min(a, b), max(a, b)), []).append(k)
        for (a, b), ks in owner.items():
            if len(ks) != 2:
                continue
            t1, t2 = tris[ks[0]], tris[ks[1]]
            c = next(v for v in t1 if v not in (a, b))
            d = next(v for v in t2 if v not in (a, b))
            ang = 0.0
            for o in (c, d):
                u, w = V[a] - V[o], V[b] - V[o]
                ang += math.atan2(abs(_cross(u, w)), float(np.dot(u, w)))
            if ang <= np.pi + 1e-12:
                continue
            # the new triangles (c, d, a) and (d, c, b) must both be proper (convex quadrilateral)
            new1, new2 = [c, d, a], [d, c, b]
            ok = True
            for tri in (new1, new2):
                if abs(_cross(V[tri[1]] - V[tri[0]], V[tri[2]] - V[tri[0]])) <= 1e-14:
                    ok = False
            if not ok:
                continue
            # keep counter-clockwise orientation
            tris[ks[0]] = new1 if _cross(V[d] - V[c], V[a] - V[c]) > 0 else [d, c, a]
            tris[ks[1]] = new2 if _cross(V[c] - V[d], V[b] - V[d]) > 0 else [c, d, b]
            changed = True
            break
    return np.array(tris, dtype=int)


def _min_angle(a, b, c) -> float:
    ang = []
    for p, q, r in ((a, b, c), (b, c, a), (c, a, b)):
        u, v = q - p, r - p
        ang.append(math.atan2(abs(_cross(u, v)), float(np.dot(u, v))))
    return min(ang)


@dataclasses.dataclass(frozen=True)
class Polygon(Domain):
    """Simple polygon given by its vertex list (either orientation; stored as given).

    Refused with a ConfigError naming ``problem.domain.vertices``: fewer than 3 vertices,
    non-finite coordinates, repeated vertices (also the first repeated at the end), zero area,
    self-intersection. The default is the L-shaped region `LSHAPE_VERTICES`.
    """

    vertices: list[list[float]] = dataclasses.field(default_factory=lambda: [list(v) for v in LSHAPE_VERTICES])
    kind = "polygon"

    def __post_init__(self):
        V = self.vertices
        if len(V) < 3:
            raise ConfigError(f"`vertices` must list at least 3 vertices [x, y], got {len(V)}")
        for i, v in enumerate(V):
            if len(v) != 2:
                raise ConfigError(f"`vertices` entries must be pairs [x, y]; vertex {i} is {v!r}")
            if not all(math.isfinite(c) for c in v):
                raise ConfigError(f"`vertices` must be finite numbers; vertex {i} is {v!r}")
        P = np.asarray(V, dtype=float)
        scale = float(np.ptp(P, axis=0).max())
        tol = 1e-12 * max(scale, 1e-300)
        diff = np.linalg.norm(P[:, None, :] - P[None, :, :], axis=2)
        iu = np.triu_indices(len(P), 1)
        rep = diff[iu] <= tol
        if rep.any():
            i, j = iu[0][rep][0], iu[1][rep][0]
            raise ConfigError(f"`vertices` must not repeat a vertex (the polygon closes itself); "
                              f"vertices {i} and {j} are both {V[i]!r}")
        area = 0.5 * float(np.sum(P[:, 0] * np.roll(P[:, 1], -1) - np.roll(P[:, 0], -1) * P[:, 1]))
        if abs(area) <= 1e-12 * scale ** 2:
            raise ConfigError(f"`vertices` must enclose a positive area; the shoelace area is {area:g}")
        n = len(P)
        ctol = 1e-12 * scale ** 2
        for i in range(n):
            for j in range(i + 1, n):
                if j == i + 1 or (i == 0 and j == n - 1):
                    # adjacent edges meet at their shared vertex only; they overlap if they fold back
                    if j == i + 1:
                        a, s, b = P[i], P[j], P[(j + 1) % n]
                    else:
                        a, s, b = P[n - 2], P[n - 1], P[0]
                    if abs(_cross(s - a, b - s)) <= ctol and np.dot(s - a, b - s) < 0:
                        raise ConfigError(f"`vertices` must form a simple polygon; edges {i} and {j} "
                                          f"fold back onto each other at {s.tolist()!r}")
                    continue
                if _segments_intersect(P[i], P[(i + 1) % n], P[j], P[(j + 1) % n], ctol):
                    raise ConfigError(f"`vertices` must form a simple polygon; edge {i} "
                                      f"({V[i]!r} -> {V[(i + 1) % n]!r}) meets edge {j} "
                                      f"({V[j]!r} -> {V[(j + 1) % n]!r})")

    # -- derived geometry ------------------------------------------------------------------------
    @cached_property
    def ccw(self) -> np.ndarray:
        """Vertices in counter-clockwise order, (n, 2)."""
        P = np.asarray(self.vertices, dtype=float)
        return P if self.signed_area > 0 else P[::-1].copy()

    @cached_property
    def signed_area(self) -> float:
        P = np.asarray(self.vertices, dtype=float)
        return 0.5 * float(np.sum(P[:, 0] * np.roll(P[:, 1], -1) - np.roll(P[:, 0], -1) * P[:, 1]))

    @property
    def area(self) -> float:
        """Shoelace formula."""
        return abs(self.signed_area)

    @property
    def bbox(self):
        P = self.ccw
        return (float(P[:, 0].min()), float(P[:, 0].max()), float(P[:, 1].min()), float(P[:, 1].max()))

    @cached_property
    def edges(self) -> tuple[np.ndarray, np.ndarray]:
        """Edge start points and end points (counter-clockwise), each (E, 2)."""
        P = self.ccw
        return P, np.roll(P, -1, axis=0)

    @cached_property
    def interior_angles(self) -> np.ndarray:
        """Interior angle at each counter-clockwise vertex, in (0, 2 pi)."""
        P = self.ccw
        prev, nxt = np.roll(P, 1, axis=0), np.roll(P, -1, axis=0)
        u, v = prev - P, nxt - P
        ang = np.arctan2(_cross(v, u), np.einsum("ij,ij->i", u, v))  # from v (next) to u (prev), ccw
        return np.mod(ang, 2 * np.pi)

    @property
    def reentrant(self) -> np.ndarray:
        """Indices (into `ccw`) of re-entrant vertices (interior angle > pi)."""
        return np.nonzero(self.interior_angles > np.pi * (1 + 1e-12))[0]

    def _segment_geometry(self, p):
        """Distances (m, E) to each edge and the closest points (m, E, 2)."""
        A, B = self.edges
        d = B - A
        L2 = np.einsum("ij,ij->i", d, d)
        t = np.clip(((p[:, None, :] - A[None]) * d[None]).sum(-1) / L2[None], 0.0, 1.0)
        proj = A[None] + t[..., None] * d[None]
        dist = np.linalg.norm(p[:, None, :] - proj, axis=-1)
        return dist, proj

    def _inside(self, p) -> np.ndarray:
        """Crossing-number test (vectorised over points and edges)."""
        A, B = self.edges
        x, y = p[:, 0:1], p[:, 1:2]
        ya, yb = A[None, :, 1], B[None, :, 1]
        straddle = (ya > y) != (yb > y)
        with np.errstate(divide="ignore", invalid="ignore"):
            xint = A[None, :, 0] + (y - ya) * (B[None, :, 0] - A[None, :, 0]) / (yb - ya)
        return (np.count_nonzero(straddle & (x < xint), axis=1) % 2) == 1

    def distance(self, points):
        """Exact signed distance: min over edges of the segment distance, sign by crossing number."""
        p = np.asarray(points, dtype=float)
        out = np.empty(len(p))
        chunk = max(1, 2_000_000 // max(len(self.ccw), 1))
        for s in range(0, len(p), chunk):
            q = p[s:s + chunk]
            dist, _ = self._segment_geometry(q)
            dmin = dist.min(axis=1)
            out[s:s + chunk] = np.where(self._inside(q), dmin, -dmin)
        return out

    def _edge_functions(self, p):
        """Per edge (m, E): parameter s along the edge's line (0 and 1 at its vertices), signed
        distance f to the line (positive inside), and the trimmed segment function phi_i of
        Sukumar & Srivastava (CMAME 389, 2022, eqs. 11-13), zero exactly on the segment."""
        A, B = self.edges
        d = B - A
        L = np.linalg.norm(d, axis=1)
        xc = 0.5 * (A + B)
        s = ((p[:, None, :] - A[None]) * d[None]).sum(-1) / (L * L)[None]
        f = _cross(d[None], p[:, None, :] - A[None]) / L[None]
        t = ((0.5 * L[None]) ** 2 - ((p[:, None, :] - xc[None]) ** 2).sum(-1)) / L[None]
        return s, f, np.sqrt(f ** 2 + (0.5 * (np.sqrt(t ** 2 + f ** 4) - t)) ** 2)

    def _rfun(self, p) -> np.ndarray:
        """Unnormalised R-function distance (Sukumar & Srivastava, CMAME 389, 2022, eqs. 11-13)."""
        _, _, phi_i = self._edge_functions(p)
        with np.errstate(divide="ignore"):
            inv = np.where(phi_i > 0, 1.0 / np.where(phi_i > 0, phi_i, 1.0), np.inf)
        s = inv.sum(axis=1)   # R-equivalence with m = 1: phi = 1 / sum(1 / phi_i)
        return np.where(np.isinf(s), 0.0, 1.0 / s)

    def _maximise(self, fn) -> float:
        """Maximum of `fn` over the polygon: grid search, then shrinking local grids (vectorised)."""
        x0, x1, y0, y1 = self.bbox
        xs, ys = np.linspace(x0, x1, 161), np.linspace(y0, y1, 161)
        X, Y = np.meshgrid(xs, ys, indexing="ij")
        P = np.column_stack([X.ravel(), Y.ravel()])
        P = P[self._inside(P)]
        v = fn(P)
        best, vbest = P[np.argmax(v)], float(v.max())
        h = max(xs[1] - xs[0], ys[1] - ys[0])
        u = np.linspace(-1, 1, 21)
        U, W = np.meshgrid(u, u, indexing="ij")
        offsets = np.column_stack([U.ravel(), W.ravel()])
        while h > 1e-12 * self.scale:  # each pass shrinks the window tenfold
            Q = best + h * offsets
            Q = Q[self._inside(Q)]
            vq = fn(Q)
            if vq.max() > vbest:
                best, vbest = Q[np.argmax(vq)], float(vq.max())
            h *= 0.1
        return vbest

    @cached_property
    def _rfun_max(self) -> float:
        return self._maximise(self._rfun)

    def phi(self, points):
        """R-function approximate distance of the edges, normalised to maximum 1 inside.

        phi_i per edge is the trimmed segment function of Sukumar & Srivastava (CMAME 389,
        2022, 114333, eqs. 11-13), smooth away from the vertices; the edges are joined by the
        R-equivalence phi = 1 / sum_i 1/phi_i (their eq. 14 with m = 1), which is zero exactly on
        the boundary and smooth inside. Divided by its maximum over the polygon (grid search plus
        shrinking local grids), negative outside.
        """
        p = np.asarray(points, dtype=float)
        v = self._rfun(p) / self._rfun_max
        return np.where(self._inside(p), v, -v)

    @cached_property
    def inradius(self) -> float:
        """Radius of the largest inscribed circle: maximum of the signed distance."""
        return self._maximise(self.distance)

    def sample_interior(self, n, rng):
        x0, x1, y0, y1 = self.bbox
        out = np.empty((0, 2))
        frac = self.area / ((x1 - x0) * (y1 - y0))
        while len(out) < n:
            m = max(int(1.2 * (n - len(out)) / frac) + 16, 64)
            cand = np.column_stack([rng.uniform(x0, x1, m), rng.uniform(y0, y1, m)])
            out = np.vstack([out, cand[self._inside(cand)]])
        return out[:n]

    def sample_boundary(self, n, rng=None):
        """Uniform in arc length; outward normal of the edge (rotate the ccw tangent clockwise)."""
        A, B = self.edges
        d = B - A
        L = np.linalg.norm(d, axis=1)
        cum = np.concatenate([[0.0], np.cumsum(L)])
        s = rng.uniform(0, cum[-1], n) if rng is not None else (np.arange(n) + 0.5) * cum[-1] / n
        e = np.clip(np.searchsorted(cum, s, side="right") - 1, 0, len(L) - 1)
        t = (s - cum[e]) / L[e]
        pts = A[e] + t[:, None] * d[e]
        nrm = np.column_stack([d[e, 1], -d[e, 0]]) / L[e, None]
        return pts, nrm

    @cached_property
    def triangles(self) -> np.ndarray:
        """Coarse triangulation (T, 3, 2) by ear clipping, collinear vertices dropped."""
        V, _ = self._corner_vertices()
        return V[ear_clip(V)]

    def _corner_vertices(self):
        P = self.ccw
        ang = self.interior_angles
        keep = np.abs(ang - np.pi) > 1e-12 * 2 * np.pi
        return P[keep], np.nonzero(keep)[0]

    def quadrature(self, level=48):
        """Triangle rules on the ear-clipped triangulation, graded towards re-entrant corners.

        Each coarse triangle is split once into four (so no piece touches two original
        vertices). Pieces touching a re-entrant vertex get the collapsed rule graded
        geometrically towards it (12 layers of ratio 0.15), the rest a uniform subdivision with
        the 16-point collapsed Gauss rule (exact to degree 6) on each sub-triangle; about
        16 level^2 points per bounding-box area, as for rectangles.
        """
        level = max(int(level), 1)
        tri = _subdivide(self.triangles, 2)
        corners = self.ccw[self.reentrant]
        scale = self.scale
        pts_all, w_all = [], []
        ref, wref = triangle_rule(4)
        # which piece touches a re-entrant vertex, and at which local vertex
        hit = np.full(len(tri), -1)
        for c in corners:
            near = np.linalg.norm(tri - c[None, None, :], axis=2) <= 1e-12 * scale
            rows = near.any(axis=1)
            hit[rows] = np.argmax(near[rows], axis=1)
        areas = 0.5 * np.abs(_cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]))
        nsub = np.maximum(1, np.ceil(level * np.sqrt(areas) / scale)).astype(int)
        for n in np.unique(nsub):
            sel = (nsub == n) & (hit < 0)
            if sel.any():
                p, w = _map_rule(_subdivide(tri[sel], int(n)), ref, wref)
                pts_all.append(p)
                w_all.append(w)
            for k in range(3):
                sel = (nsub == n) & (hit == k)
                if sel.any():
                    rolled = np.roll(tri[sel], -k, axis=1)   # corner becomes local vertex 0
                    p, w = _graded_corner_rule(rolled, int(n), layers=12)
                    pts_all.append(p)
                    w_all.append(w)
        return np.vstack(pts_all), np.concatenate(w_all)

    def extend_boundary_data(self, g, points):
        """Transfinite blend of the edge data: sum_i w_i G_i(x), w_i = phi_i^-2 / sum_j phi_j^-2.

        phi_i is the edge's R-function distance (Sukumar & Srivastava, CMAME 389, 2022, sec. 5,
        transfinite interpolation after Rvachev et al., "Transfinite interpolation over
        implicitly defined sets", CAGD 18, 2001, with inverse-distance weights). G_i is the data
        of edge i as a function of the parameter s of the edge's line (s = 0 at its first vertex,
        1 at its second), plus a first-order term across the edge:

            G_i(x) = g_i(s) + c_i(s) f_i(x),

        with g_i = g on the edge for s in [0, 1] and beyond the ends its second-order Taylor
        polynomial at the end, f_i the signed distance to the edge's line (positive inside) and
        c_i linear in s between the normal derivatives at the two vertices implied by the
        tangential derivatives of the two edges meeting there (Hermite-type transfinite
        interpolation). Why: evaluating g at the closest point of the segment (clamping s) leaves
        a kink along the normals through the vertices (a line of Dirac mass in the Laplacian),
        and without the normal term two neighbouring G_i differ to first order near their vertex,
        which the angle-dependent weights turn into a Laplacian growing like 1 / r. With both,
        the extension reproduces affine data exactly and its Laplacian stays bounded; a
        hard-boundary PINN on the unit square given as a polygon reached 2.8e-3 instead of 1.1e-2
        (20 s, e^x sin y; the rectangle's Coons patch with the same phi: 2.8e-3). On edge i,
        w_i = 1 and f_i = 0, so the blend equals g there. g is queried on the edges only.
        """
        p = np.asarray(points, dtype=float)
        out = np.empty(len(p))
        A, B = self.edges
        d = B - A
        E = len(A)
        ends = self._edge_taylor(g)                                         # (E, 2, 3)
        normal = self._vertex_normal_derivatives(ends)                      # (E, 2)
        chunk = max(1, 200_000 // E)
        for c in range(0, len(p), chunk):
            q = p[c:c + chunk]
            s, f, phi_i = self._edge_functions(q)                           # (m, E) each
            sc = np.clip(s, 0.0, 1.0)
            G = np.asarray(g((A[None] + sc[..., None] * d[None]).reshape(-1, 2)), float).reshape(len(q), E)
            for end, side in ((0, s < 0.0), (1, s > 1.0)):
                ds = np.where(side, s - end, 0.0)
                G += ds * ends[None, :, end, 1] + 0.5 * ds * ds * ends[None, :, end, 2]
            G += (normal[None, :, 0] * (1.0 - s) + normal[None, :, 1] * s) * f
            pmin = phi_i.min(axis=1, keepdims=True)
            with np.errstate(divide="ignore", invalid="ignore"):
                w = np.where(pmin > 0, (pmin / phi_i) ** 2, (phi_i == 0).astype(float))
            out[c:c + chunk] = (w * G).sum(axis=1) / w.sum(axis=1)
        return out

    def _vertex_normal_derivatives(self, ends: np.ndarray) -> np.ndarray:
        """(E, 2): inward normal derivative of the data at the start and end of each edge.

        At each vertex the tangential derivatives along its two edges determine a gradient
        (2 x 2 solve); where the edges are (nearly) collinear they do not, and the term is 0.
        """
        A, B = self.edges
        d = B - A
        L = np.linalg.norm(d, axis=1)
        tangent = d / L[:, None]
        inward = np.column_stack([-tangent[:, 1], tangent[:, 0]])          # counter-clockwise order
        out = np.zeros((len(A), 2))
        for k in range(len(A)):
            km = k - 1                                  # the edge ending at vertex k (wraps around)
            M = np.array([tangent[km], tangent[k]])
            if abs(np.linalg.det(M)) < 1e-6:
                continue
            grad = np.linalg.solve(M, [ends[km, 1, 1] / L[km], ends[k, 0, 1] / L[k]])
            out[k, 0] = inward[k] @ grad
            out[km, 1] = inward[km] @ grad
        return out

    def _edge_taylor(self, g, h: float = 1e-3) -> np.ndarray:
        """(E, 2, 3): g and its first two derivatives in the edge parameter s at both ends.

        One-sided differences on the edge with step h in s, second order for both derivatives:
        g' = (-3 g0 + 4 g1 - g2) / 2h, g'' = (2 g0 - 5 g1 + 4 g2 - g3) / h^2 [common practice];
        at the second end mirrored (steps towards the first), so the sign of g' flips back.
        """
        A, B = self.edges
        d = B - A
        k = np.arange(4) * h
        pts = np.concatenate([A[:, None, :] + k[None, :, None] * d[:, None, :],
                              B[:, None, :] - k[None, :, None] * d[:, None, :]], axis=1)   # (E, 8, 2)
        v = np.asarray(g(pts.reshape(-1, 2)), float).reshape(len(A), 2, 4)
        d1 = (-3 * v[..., 0] + 4 * v[..., 1] - v[..., 2]) / (2 * h)
        d2 = (2 * v[..., 0] - 5 * v[..., 1] + 4 * v[..., 2] - v[..., 3]) / h ** 2
        d1[:, 1] *= -1.0                                                      # steps ran backwards
        return np.stack([v[..., 0], d1, d2], axis=-1)

    def to_dict(self):
        return {"kind": self.kind, "vertices": [list(map(float, v)) for v in self.vertices]}


DOMAIN_KINDS.update({"disk": Disk, "annulus": Annulus, "polygon": Polygon})


# ------------------------------------------------------------------------------------------
# Problems on these shapes
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class LShapeParams:
    eval_level: int = 48

    def __post_init__(self):
        positive("eval_level", self.eval_level, integer=True, maximum=2048)


def lshape_corner(p: LShapeParams):
    """Re-entrant corner (Laplace) on the L-shaped region [-1, 1]^2 minus [0, 1] x [-1, 0].

    u = r^(2/3) sin(2 theta / 3), theta in [0, 3 pi / 2] measured from the positive x-axis;
    harmonic (f = 0), u = 0 on the two edges meeting at the re-entrant corner, g = u elsewhere.
    grad u ~ r^(-1/3) is unbounded at the origin, so u lies in H^(1 + 2/3 - eps) only and
    quasi-uniform methods converge at L2 order 4/3 and energy order 2/3 (Strang & Fix, An
    Analysis of the Finite Element Method, 1973, ch. 8). Source: W. F. Mitchell, "A collection
    of 2D elliptic problems for testing adaptive grid refinement algorithms", Appl. Math.
    Comput. 220 (2013) 350-364, "reentrant corner" with omega = 3 pi / 2.
    """
    from bench.problems import Problem

    d = lshape()

    def u(pts):
        pts = np.asarray(pts, dtype=float)
        r = np.hypot(pts[:, 0], pts[:, 1])
        th = np.mod(np.arctan2(pts[:, 1], pts[:, 0]), 2 * np.pi)
        return r ** (2.0 / 3.0) * np.sin(2.0 * th / 3.0)

    return Problem("lshape", "laplace", d, f=None, g=u, exact=u, params={},
                   source=("Mitchell, Appl. Math. Comput. 220 (2013) 350-364, reentrant corner "
                           "omega = 3 pi/2: u = r^(2/3) sin(2 theta/3)"),
                   eval_level=p.eval_level)


@dataclasses.dataclass
class DiskHarmonicParams:
    rho: float = 2.0
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "disk"})

    def __post_init__(self):
        positive("rho", self.rho)
        if not self.rho > 1.0:
            raise ConfigError(f"`rho` must exceed 1 (the pole must lie outside the disk), got {self.rho!r}")


def disk_harmonic(p: DiskHarmonicParams):
    """Laplace on a disk with a harmonic solution whose pole sits outside at rho radii.

    With zeta = (z - c) / R, u = Re(rho / (rho - zeta)) = sum_k Re(zeta^k) rho^-k,
    i.e. u = rho (rho - xi) / ((rho - xi)^2 + eta^2), zeta = xi + i eta. Harmonic (real part of
    an analytic function), g = u on the circle. Its Fourier coefficients decay like rho^-k, so
    rho -> 1 sharpens the data near the point c + R (1, 0). Source: closed form (geometric
    series of an analytic function) [common practice].
    """
    from bench.problems import Problem

    d = make_domain(p.domain)
    if not isinstance(d, Disk):
        raise ConfigError(f"`problem.domain.kind` must be 'disk' for this problem; got {d.kind!r}")
    rho = p.rho

    def u(pts):
        pts = np.asarray(pts, dtype=float)
        xi = (pts[:, 0] - d.cx) / d.radius
        eta = (pts[:, 1] - d.cy) / d.radius
        return rho * (rho - xi) / ((rho - xi) ** 2 + eta ** 2)

    level = int(min(1024, max(48, 24 / (rho - 1))))
    return Problem("disk_harmonic", "laplace", d, f=None, g=u, exact=u, params={"rho": rho},
                   source="closed form: u = Re(rho / (rho - zeta)), zeta = (z - c)/R",
                   eval_level=level)


@dataclasses.dataclass
class AnnulusPoissonParams:
    k: int = 3
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "annulus"})

    def __post_init__(self):
        if isinstance(self.k, bool) or self.k < 0 or self.k > 1024:
            raise ConfigError(f"`k` must be an integer in [0, 1024], got {self.k!r}")


def annulus_poisson(p: AnnulusPoissonParams):
    """Poisson on the annulus a < r < b with angular frequency k and nonzero data.

    u = sin(pi (r - a)/(b - a)) cos(k theta) + r^2 / b^2, r and theta about the centre;
    with s = pi / (b - a): f = -Laplace(u) = cos(k theta) (s^2 sin(s (r-a)) - (s/r) cos(s (r-a))
    + (k^2/r^2) sin(s (r-a))) - 4/b^2 (the polar Laplacian u_rr + u_r/r + u_thth/r^2);
    g = a^2/b^2 on the inner circle, 1 on the outer. Source: closed form [common practice].
    """
    from bench.problems import Problem

    d = make_domain(p.domain)
    if not isinstance(d, Annulus):
        raise ConfigError(f"`problem.domain.kind` must be 'annulus' for this problem; got {d.kind!r}")
    a, b, k = d.r_in, d.r_out, p.k
    s = math.pi / (b - a)

    def u(pts):
        r, th = d.polar(pts)
        return np.sin(s * (r - a)) * np.cos(k * th) + r ** 2 / b ** 2

    def f(pts):
        r, th = d.polar(pts)
        S, C = np.sin(s * (r - a)), np.cos(s * (r - a))
        return np.cos(k * th) * (s * s * S - s * C / r + k * k * S / r ** 2) - 4.0 / b ** 2

    return Problem("annulus_poisson", "poisson", d, f=f, g=u, exact=u, params={"k": k},
                   source="closed form: u = sin(pi (r-a)/(b-a)) cos(k theta) + r^2/b^2",
                   eval_level=max(48, 8 * k))


def _register():
    from bench.problems import register_problem

    register_problem("lshape", LShapeParams, lshape_corner,
                     "re-entrant corner on the L-shape, u = r^(2/3) sin(2 theta/3) (Mitchell 2013)")
    register_problem("disk_harmonic", DiskHarmonicParams, disk_harmonic,
                     "Laplace on a disk, u = Re(rho/(rho - zeta)), pole outside at rho radii")
    register_problem("annulus_poisson", AnnulusPoissonParams, annulus_poisson,
                     "Poisson on an annulus, angular frequency k, nonzero data on both circles")


_register()
