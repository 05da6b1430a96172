"""Triangles: quadrature rules on triangles (plain, subdivided, graded towards a corner) and the
triangulation of simple polygons (ear clipping, then Lawson flips towards a Delaunay mesh)."""
from __future__ import annotations

import math

import numpy as np

from lapbench.config import ConfigError
from lapbench.domains.base import gauss_legendre_panels

__all__ = ["triangle_rule", "ear_clip"]


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
