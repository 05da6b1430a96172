"""Dirichlet Laplacian eigenvalue problems: -Laplace(u) = lambda u in the domain, u = 0 on its boundary.

The catalogue entries are ``eigen_rect`` (rectangles, closed form),
``eigen_disk`` (squares of Bessel zeros), ``eigen_lshape`` (published and exact values plus a
computed reference) and ``eigen_polygon`` (any polygon: computed reference). Each has the knob
``k``, the number of eigenvalues wanted (with multiplicity, ascending).

Reference eigenvalues and modes are the harness's only: `Problem.public()` strips them. A problem
may carry more reference eigenvalues than ``k``: the list always ends with a complete cluster of
equal eigenvalues, so that the eigenspace metric (bench/metrics.py) can compare whole
eigenspaces. ``cluster_rtol`` says which reference eigenvalues count as equal.

Computed references (no closed form): the harness, not the solver, runs the most accurate
classical method it has, conforming P2 finite elements (solvers/eigen.py) on nested uniform
refinements of the polygon's triangulation, and Richardson-extrapolates the last levels with the
observed order of convergence (conforming eigenvalues decrease monotonically on nested meshes, by
the min-max principle; Strang & Fix, An Analysis of the Finite Element Method, 1973, ch. 6). The
estimate of accuracy is the change between the last two extrapolations. The result is cached
under ``<results_dir>/cache/eigen_reference/`` by `EigenProblem.ensure_reference`, which
bench/run.py calls in the parent process before a case is forked, so the reference never counts
against the solver's time or limits. Records label such references as computed (solver,
resolutions, estimated accuracy) in ``problem.reference``.
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains import Disk, Polygon, Rectangle, lshape, make_domain
from lapbench.problems.base import Problem
from lapbench.problems.reference import ReferenceModes, computed_reference

__all__ = ["EigenProblem", "rectangle_spectrum", "disk_spectrum", "LSHAPE_LAMBDA1", "MAX_K", "CATALOGUE"]

# The first Dirichlet eigenvalue of the L-shaped region [-1, 1]^2 minus [0, 1] x [-1, 0]:
# Betcke & Trefethen, "Reviving the method of particular solutions", SIAM Review 47 (2005)
# 469-491 (first 8 digits already in Fox, Henrici & Moler, SIAM J. Numer. Anal. 4 (1967) 89-102).
LSHAPE_LAMBDA1 = 9.6397238440219

MAX_K = 200          # eigenvalues per problem; beyond this the dense and Lanczos paths get slow
CLOSED_FORM_RTOL = 1e-9  # closed-form eigenvalues equal to this relative tolerance are one cluster


@dataclasses.dataclass
class EigenProblem(Problem):
    """An eigen problem; adds the provenance of its reference and the computed-reference recipe.

    Attributes
    ----------
    cluster_rtol : float
        Reference eigenvalues closer than this (relative) form one eigenspace.
    reference : dict
        Provenance written into records (``problem.reference``): kind (closed form, published,
        computed), sources per eigenvalue, solver, resolutions and estimated accuracy.
    recipe : dict or None
        For computed references: what `computed_reference` needs (harness only).
    known : list
        ``(value, source)`` of published or exact eigenvalues that replace computed ones they match.
    """

    cluster_rtol: float = CLOSED_FORM_RTOL
    reference: dict = dataclasses.field(default_factory=dict)
    recipe: dict | None = None
    known: list = dataclasses.field(default_factory=list)

    def public(self) -> "EigenProblem":
        pub = super().public()
        return dataclasses.replace(pub, reference={}, recipe=None, known=[])

    def describe(self) -> dict:
        ref = dict(self.reference)
        if self.eigenvalues is not None:
            ref.setdefault("eigenvalues", [float(v) for v in self.eigenvalues])
        return {**super().describe(), "n_eigs": self.n_eigs, "reference": ref}

    def ensure_reference(self, results_dir: str | Path = "results") -> None:
        """Compute (or load from the cache) a computed reference; a no-op for closed forms."""
        if self.recipe is None or self.modes is not None:
            return
        ref = computed_reference(self.domain, self.recipe, Path(results_dir) / "cache" / "eigen_reference")
        lam = np.array(ref["eigenvalues"], dtype=float)
        est = np.array(ref["estimate"], dtype=float)
        sources = [f"computed (P{self.recipe['order']} FEM + Richardson)"] * len(lam)
        for value, source in self.known:
            hit = np.abs(lam - value) <= np.maximum(3 * est, 1e-7 * value)
            for i in np.nonzero(hit)[0]:
                lam[i], est[i], sources[i] = value, 0.0, source
        rtol = max(CLOSED_FORM_RTOL, 10 * float(np.max(est[: len(lam)] / lam)))
        n = _complete_cluster(lam, self.n_eigs, rtol)
        if n > len(lam):
            raise RuntimeError(f"the computed reference has {len(lam)} eigenvalues but the cluster "
                               f"of lambda_{self.n_eigs} may extend beyond them; raise `problem.ref_extra`")
        self.eigenvalues = lam[:n]
        self.cluster_rtol = rtol
        self.modes = ReferenceModes(ref["mesh_p"], ref["mesh_t"], ref["order"], ref["modes"], n)
        self.reference = {
            "kind": "computed" if any(s.startswith("computed") for s in sources[: self.n_eigs]) else "published",
            "solver": ref["solver"], "resolutions": ref["resolutions"], "observed_order": ref["order_obs"][:n],
            "theory_order": ref["order_theory"], "estimate": [float(e) for e in est[:n]],
            "rel_estimate": [float(e / v) for e, v in zip(est[:n], lam[:n])],
            "sources": sources[:n], "levels": ref["levels"],
            "cache": ref["cache"], "eigenvalues": [float(v) for v in lam[:n]],
        }


def _complete_cluster(lam: np.ndarray, k: int, rtol: float) -> int:
    """Number of leading eigenvalues to keep so that the cluster of the k-th one is complete."""
    n = k
    while n < len(lam) and abs(lam[n] - lam[k - 1]) <= rtol * abs(lam[k - 1]):
        n += 1
    return n


def _check_k(k):
    positive("k", k, integer=True, maximum=MAX_K)


# ------------------------------------------------------------------------------------------
# Rectangles: closed form
# ------------------------------------------------------------------------------------------

def rectangle_spectrum(a: float, b: float, k: int):
    """First k Dirichlet eigenvalues of [0, a] x [0, b] plus the rest of the k-th one's cluster.

    lambda = pi^2 (m^2/a^2 + n^2/b^2), m, n >= 1 (separation of variables) [common practice].
    Returns (eigenvalues, index pairs (m, n)). Equal values are ordered by (m, n).
    """
    # the k smallest have m <= k and n <= k; one more in each direction finds the cluster's end
    M = np.arange(1, k + 2)
    mm, nn = np.meshgrid(M, M, indexing="ij")
    lam = math.pi ** 2 * (mm ** 2 / a ** 2 + nn ** 2 / b ** 2)
    order = np.lexsort((nn.ravel(), mm.ravel(), lam.ravel()))
    lam, mm, nn = lam.ravel()[order], mm.ravel()[order], nn.ravel()[order]
    n = _complete_cluster(lam, k, CLOSED_FORM_RTOL)
    return lam[:n], np.column_stack([mm[:n], nn[:n]])


@dataclasses.dataclass
class RectEigenParams:
    k: int = 6
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})

    def __post_init__(self):
        _check_k(self.k)


def eigen_rect(p: RectEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of the rectangle [x0, x1] x [y0, y1] (a = x1 - x0, b = y1 - y0).

    lambda_{m,n} = pi^2 (m^2/a^2 + n^2/b^2), modes sin(m pi (x-x0)/a) sin(n pi (y-y0)/b),
    m, n >= 1. Coinciding values (on the unit square 5 pi^2 = (1,2) = (2,1), 10 pi^2, ...) form
    multiple eigenvalues whose eigenspace is spanned by all their modes. Source: closed form
    (separation of variables) [common practice].
    """
    d = make_domain(p.domain)
    if not isinstance(d, Rectangle):
        raise ConfigError(f"`problem.domain.kind` must be 'rectangle' for this problem; got {d.kind!r}")
    a, b = d.lengths
    lam, mn = rectangle_spectrum(a, b, p.k)

    def modes(pts):
        pts = np.asarray(pts, dtype=float)
        x = (pts[:, 0:1] - d.x0) / a
        y = (pts[:, 1:2] - d.y0) / b
        return np.sin(np.pi * mn[None, :, 0] * x) * np.sin(np.pi * mn[None, :, 1] * y)

    src = "closed form: lambda = pi^2 (m^2/a^2 + n^2/b^2), modes sin(m pi x/a) sin(n pi y/b)"
    return EigenProblem("eigen_rect", "eigen", d, params={"k": p.k}, source=src, n_eigs=p.k,
                        eigenvalues=lam, modes=modes,
                        eval_level=max(48, 8 * int(mn.max())),
                        reference={"kind": "closed form", "source": src,
                                   "indices": [[int(m), int(n)] for m, n in mn]})


# ------------------------------------------------------------------------------------------
# The disk: Bessel zeros
# ------------------------------------------------------------------------------------------

def disk_spectrum(radius: float, k: int):
    """First k Dirichlet eigenvalues of the disk of radius R plus the rest of the k-th cluster.

    lambda = j_{m,s}^2 / R^2 with j_{m,s} the s-th positive zero of J_m (scipy.special.jn_zeros;
    tabulated in Abramowitz & Stegun, Table 9.5); multiplicity 2 for m >= 1 (modes
    J_m(j r/R) cos(m t) and sin(m t)). Every eigenvalue <= j_{0,k}^2 has m < j_{0,k} (because
    j_{m,1} > m) and s <= k (zeros grow with m), so that candidate set is complete.
    Returns (eigenvalues, rows (m, s, trig) with trig 0 = cos, 1 = sin).
    """
    from scipy.special import jn_zeros

    top = float(jn_zeros(0, k + 1)[-1])   # k + 1: the cluster after the k-th is found as well
    rows, vals = [], []
    for m in range(int(math.ceil(top)) + 1):
        z = jn_zeros(m, k + 1)
        for s, j in enumerate(z, start=1):
            if j > top * (1 + 1e-12):
                break
            for trig in ((0,) if m == 0 else (0, 1)):
                rows.append((m, s, trig))
                vals.append(j)
    vals = np.array(vals)
    rows = np.array(rows)
    order = np.lexsort((rows[:, 2], rows[:, 1], rows[:, 0], vals))
    lam = (vals[order] / radius) ** 2
    rows = rows[order]
    n = _complete_cluster(lam, k, CLOSED_FORM_RTOL)
    return lam[:n], rows[:n]


@dataclasses.dataclass
class DiskEigenParams:
    k: int = 6
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "disk"})

    def __post_init__(self):
        _check_k(self.k)


def eigen_disk(p: DiskEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of the disk of radius R about (cx, cy).

    lambda = j_{m,s}^2 / R^2, modes J_m(j_{m,s} r/R) cos(m t), J_m(j_{m,s} r/R) sin(m t)
    (separation of variables in polar coordinates [common practice]); j_{m,s} from
    scipy.special.jn_zeros (Abramowitz & Stegun, Table 9.5). Unit disk: 5.7831859629468,
    14.6819706421239 (x2), 26.3746164271634 (x2), 30.4712623436621.
    """
    from scipy.special import jn_zeros, jv

    d = make_domain(p.domain)
    if not isinstance(d, Disk):
        raise ConfigError(f"`problem.domain.kind` must be 'disk' for this problem; got {d.kind!r}")
    R = d.radius
    lam, rows = disk_spectrum(R, p.k)
    js = np.array([jn_zeros(int(m), int(s))[-1] for m, s, _ in rows])

    def modes(pts):
        r, th = d.polar(pts)
        out = np.empty((len(r), len(rows)))
        for c, ((m, s, trig), j) in enumerate(zip(rows, js)):
            ang = np.cos(m * th) if trig == 0 else np.sin(m * th)
            out[:, c] = jv(m, j * r / R) * ang
        return out

    src = "closed form: lambda = j_{m,s}^2/R^2, j_{m,s} by scipy.special.jn_zeros (A&S Table 9.5)"
    return EigenProblem("eigen_disk", "eigen", d, params={"k": p.k}, source=src, n_eigs=p.k,
                        eigenvalues=lam, modes=modes, eval_level=max(48, 4 * int(rows[:, 0].max() + rows[:, 1].max())),
                        reference={"kind": "closed form", "source": src,
                                   "indices": [[int(m), int(s), "cos" if t == 0 else "sin"] for m, s, t in rows]})


# ------------------------------------------------------------------------------------------
# Polygons: computed reference (and the L-shape's published values)
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class PolygonEigenParams:
    k: int = 4
    domain: dict = dataclasses.field(default_factory=lambda: {
        "kind": "polygon", "vertices": [[0.0, 0.0], [2.0, 0.0], [1.6, 1.1], [0.3, 1.3]]})
    ref_order: int = 2            # Lagrange degree of the reference FEM (1 or 2)
    ref_levels: int = 4           # nested meshes used (the last three enter the extrapolation)
    ref_triangles: int = 65536    # triangles of the finest mesh (at least)
    ref_extra: int = 2            # eigenvalues computed beyond k (to see where the k-th cluster ends)
    eval_level: int = 48

    def __post_init__(self):
        _check_k(self.k)
        if self.ref_order not in (1, 2):
            raise ConfigError(f"`ref_order` must be one of 1, 2; got {self.ref_order!r}")
        if isinstance(self.ref_levels, bool) or not 3 <= self.ref_levels <= 8:
            raise ConfigError(f"`ref_levels` must be an integer in [3, 8], got {self.ref_levels!r}")
        positive("ref_triangles", self.ref_triangles, integer=True, maximum=1 << 22)
        if isinstance(self.ref_extra, bool) or not 0 <= self.ref_extra <= 50:
            raise ConfigError(f"`ref_extra` must be an integer in [0, 50], got {self.ref_extra!r}")
        positive("eval_level", self.eval_level, integer=True, maximum=2048)


def _recipe(p, d) -> dict:
    return {"order": p.ref_order, "levels": p.ref_levels, "triangles": p.ref_triangles,
            "k": p.k + p.ref_extra, "vertices": [list(map(float, v)) for v in d.ccw]}


def eigen_polygon(p: PolygonEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of a polygon without closed form; the harness computes the reference.

    Reference: conforming P2 (or P1) finite elements on nested uniform refinements of the
    polygon's ear-clipped triangulation, Richardson extrapolation of the last three levels with
    the observed order, accuracy estimated by the change between the last two extrapolations
    (see the module docstring). The default quadrilateral (0,0), (2,0), (1.6,1.1), (0.3,1.3) is of
    this project's own choosing: convex, no symmetry, no closed form.
    """
    d = make_domain(p.domain)
    if not isinstance(d, Polygon):
        raise ConfigError(f"`problem.domain.kind` must be 'polygon' for this problem; got {d.kind!r}")
    return EigenProblem("eigen_polygon", "eigen", d, params={"k": p.k}, n_eigs=p.k,
                        source=(f"computed by the harness: P{p.ref_order} FEM on {p.ref_levels} nested "
                                f"meshes (finest >= {p.ref_triangles} triangles) + Richardson extrapolation"),
                        eval_level=p.eval_level, recipe=_recipe(p, d),
                        reference={"kind": "computed", "status": "computed before the first case runs"})


@dataclasses.dataclass
class LShapeEigenParams:
    k: int = 1
    ref_order: int = 2
    ref_levels: int = 4
    ref_triangles: int = 65536
    ref_extra: int = 2
    eval_level: int = 48

    def __post_init__(self):
        PolygonEigenParams.__post_init__(self)


def eigen_lshape(p: LShapeEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of the L-shaped region [-1, 1]^2 minus [0, 1] x [-1, 0].

    lambda_1 = 9.6397238440219 (Betcke & Trefethen, SIAM Review 47, 2005; 8 digits in Fox, Henrici
    & Moler, SIAM J. Numer. Anal. 4, 1967). 2 pi^2, 5 pi^2 (x2) and 8 pi^2 are exact eigenvalues:
    the square modes sin(m pi x) sin(n pi y) vanish on the whole boundary [common practice].
    The other eigenvalues and all modes come from the computed reference (see `eigen_polygon`);
    a computed value that matches a published or exact one within its estimate is replaced by
    it, and `problem.reference.sources` names the source of each. The first eigenfunction
    behaves like r^(2/3) at the re-entrant corner, so quasi-uniform P1/P2 converge at order 4/3.
    """
    d = lshape()
    pi2 = math.pi ** 2
    exact = "exact: square mode sin(m pi x) sin(n pi y) vanishes on the L-shape's boundary"
    known = [(LSHAPE_LAMBDA1, "published: Betcke & Trefethen, SIAM Review 47 (2005) 469-491"),
             (2 * pi2, exact), (5 * pi2, exact), (8 * pi2, exact)]
    return EigenProblem("eigen_lshape", "eigen", d, params={"k": p.k}, n_eigs=p.k,
                        source=("lambda_1 = 9.6397238440219 (Betcke & Trefethen 2005); exact 2pi^2, "
                                "5pi^2, 8pi^2; the rest and the modes computed by the harness "
                                f"(P{p.ref_order} FEM + Richardson)"),
                        eigenvalues=np.array([LSHAPE_LAMBDA1]) if p.k == 1 else None,
                        eval_level=p.eval_level, recipe=_recipe(p, d), known=known,
                        reference={"kind": "published" if p.k == 1 else "computed",
                                   "sources": [known[0][1]] if p.k == 1 else []})


CATALOGUE = {
    "eigen_rect": (RectEigenParams, eigen_rect,
                   "Dirichlet eigenvalues of a rectangle, closed form pi^2 (m^2/a^2 + n^2/b^2)"),
    "eigen_disk": (DiskEigenParams, eigen_disk,
                   "Dirichlet eigenvalues of a disk, j_{m,s}^2/R^2 (scipy.special.jn_zeros)"),
    "eigen_lshape": (LShapeEigenParams, eigen_lshape,
                     "Dirichlet eigenvalues of the L-shape (Betcke & Trefethen 2005; exact 2pi^2, ...)"),
    "eigen_polygon": (PolygonEigenParams, eigen_polygon,
                      "Dirichlet eigenvalues of any polygon, reference computed by the harness"),
}
