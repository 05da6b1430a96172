"""Problems in d dimensions (d = 1 .. 32): Poisson and Laplace with non-separable exact solutions,
and Dirichlet eigenvalues of the d-box and the d-ball.

Conventions as everywhere: -Laplace(u) = f in the domain, u = g on the boundary. The knob
``domain`` picks the region: ``box`` is the unit cube [0, 1]^d, ``ball`` the unit ball about the
origin; c below is the region's centre (0.5, ..., 0.5) or 0, and R_c its circumradius
(sqrt(d) / 2 for the cube, 1 for the ball), so that every problem means the same thing in both.
``dim`` is the dimension. Frequencies are wave numbers (radians per unit length). Solutions that
are products of one-dimensional factors are avoided on purpose (a tensor method would solve them
exactly): each solution below couples the coordinates.

Random directions (``nd_harmonic``, ``nd_waves``) are drawn from numpy's PCG64 generator seeded
with the knob ``draw``: the same draw gives the same problem on every machine.
"""
from __future__ import annotations

import dataclasses
import itertools
import math
from typing import Literal

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains import unit_ball, unit_box
from lapbench.domains.box import MAX_DIM
from lapbench.fields import Field
from lapbench.problems.base import Problem
from lapbench.problems.eigen import CLOSED_FORM_RTOL, EigenProblem, _check_k, _complete_cluster

__all__ = ["nd_gauss", "nd_harmonic", "nd_pole", "nd_waves", "eigen_box", "eigen_ball", "box_spectrum",
           "ball_spectrum", "bessel_zeros", "harmonic_multiplicity", "harmonic_basis", "CATALOGUE"]


def _check_dim(dim, minimum: int = 1):
    if isinstance(dim, bool) or not isinstance(dim, int) or not minimum <= dim <= MAX_DIM:
        raise ConfigError(f"`dim` must be an integer in [{minimum}, {MAX_DIM}], got {dim!r}")


def _region(kind: str, dim: int):
    """(domain, centre c, circumradius R_c) of the knob ``domain``."""
    if kind == "box":
        return unit_box(dim), np.full(dim, 0.5), math.sqrt(dim) / 2
    return unit_ball(dim), np.zeros(dim), 1.0


def _dot(v: np.ndarray, x) -> np.ndarray:
    """v . x for coordinate arrays x = (x_0, ..., x_{d-1}) that broadcast (points or grids)."""
    return sum(float(vi) * xi for vi, xi in zip(v, x))


def _sq_dist(c: np.ndarray, x) -> np.ndarray:
    return sum((xi - float(ci)) ** 2 for ci, xi in zip(c, x))


@dataclasses.dataclass
class _NDParams:
    dim: int = 3
    domain: Literal["box", "ball"] = "box"

    def __post_init__(self):
        _check_dim(self.dim)


def _problem(name, kind, p, u, f, params, source) -> Problem:
    d, _, _ = _region(p.domain, p.dim)
    return Problem(name, kind, d, f=f, g=u, exact=u, params={"dim": p.dim, **params}, source=source)


# ------------------------------------------------------------------------------------------
# Gaussian bump (Poisson)
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class GaussParams(_NDParams):
    width: float = 0.25

    def __post_init__(self):
        super().__post_init__()
        positive("width", self.width)


def nd_gauss(p: GaussParams) -> Problem:
    """Poisson problem with a Gaussian bump u = exp(-|x - c|^2 / w^2) at the region's centre.

    -Laplace(u) = (2 d / w^2 - 4 |x - c|^2 / w^4) u (the radial Laplacian u'' + (d - 1) u' / r of
    exp(-r^2 / w^2), closed form [common practice]); g = u on the boundary. u is a product of
    one-dimensional Gaussians but f is not a single product (it is a sum of d of them), and no
    sine or Chebyshev expansion of u is finite, so no tensor method is exact. Smaller width =
    sharper bump.
    """
    _, c, _ = _region(p.domain, p.dim)
    w2, dim = p.width ** 2, p.dim
    u = Field(lambda *x: np.exp(-_sq_dist(c, x) / w2))
    f = Field(lambda *x: (2 * dim / w2 - 4 * _sq_dist(c, x) / (w2 * w2)) * np.exp(-_sq_dist(c, x) / w2))
    return _problem("nd_gauss", "poisson", p, u, f, {"width": p.width},
                    "closed form: u = exp(-|x-c|^2/w^2), f = (2d/w^2 - 4|x-c|^2/w^4) u (radial Laplacian)")


# ------------------------------------------------------------------------------------------
# exp(a.x) cos(b.x) (Laplace)
# ------------------------------------------------------------------------------------------

def orthonormal_pair(dim: int, draw: int) -> tuple[np.ndarray, np.ndarray]:
    """Two orthonormal vectors of R^dim from a seeded Gaussian draw (Gram-Schmidt by QR)."""
    q, _ = np.linalg.qr(np.random.default_rng(draw).standard_normal((dim, 2)))
    return q[:, 0], q[:, 1]


@dataclasses.dataclass
class HarmonicParams(_NDParams):
    frequency: float = 2.0
    draw: int = 0

    def __post_init__(self):
        _check_dim(self.dim, minimum=2)
        positive("frequency", self.frequency)


def nd_harmonic(p: HarmonicParams) -> Problem:
    """Laplace problem u = exp(a.(x - c)) cos(b.(x - c)) with |a| = |b| = frequency, a orthogonal to b.

    u = Re exp(z.(x - c)) with z = a + i b, and Laplace(u) = Re (z.z) exp(...) = Re(|a|^2 - |b|^2
    + 2 i a.b) exp(...) = 0: harmonic (closed form [common practice]); g = u on the boundary.
    The directions are a seeded random orthonormal pair (knob ``draw``), so u varies along two
    oblique directions and is no product of coordinate functions. Needs d >= 2.
    """
    _, c, _ = _region(p.domain, p.dim)
    ea, eb = orthonormal_pair(p.dim, p.draw)
    a, b = p.frequency * ea, p.frequency * eb
    ac, bc = float(a @ c), float(b @ c)
    u = Field(lambda *x: np.exp(_dot(a, x) - ac) * np.cos(_dot(b, x) - bc))
    return _problem("nd_harmonic", "laplace", p, u, None, {"frequency": p.frequency, "draw": p.draw},
                    "closed form: u = exp(a.(x-c)) cos(b.(x-c)), |a| = |b|, a.b = 0, harmonic "
                    f"(a, b = seeded orthonormal pair, draw={p.draw}, times the frequency)")


# ------------------------------------------------------------------------------------------
# Fundamental solution with its pole outside (Laplace)
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class PoleParams(_NDParams):
    rho: float = 1.5

    def __post_init__(self):
        super().__post_init__()
        positive("rho", self.rho)
        if not self.rho > 1.0:
            raise ConfigError(f"`rho` must exceed 1 (the pole must lie outside the region), got {self.rho!r}")


def nd_pole(p: PoleParams) -> Problem:
    """Laplace problem with the fundamental solution of a pole outside the region.

    Pole p = c + rho R_c e, e = (1, ..., 1) / sqrt(d): at rho = 1 it would sit on the cube's
    corner (1, ..., 1) and on the sphere, so rho > 1 puts it outside either region at distance
    delta = (rho - 1) R_c from the nearest boundary point. u = (delta / |x - p|)^(d - 2) for
    d >= 3, u = 1 - log(|x - p| / delta) for d = 2 and u = |x - p| / delta for d = 1: the
    fundamental solution of the Laplacian up to scaling (harmonic away from p; e.g. Evans,
    Partial Differential Equations, 2nd ed., 2010, sec. 2.2.1), normalised to 1 at the nearest
    boundary point. g = u on the boundary; rho -> 1 sharpens it.
    """
    _, c, Rc = _region(p.domain, p.dim)
    d = p.dim
    pole = c + p.rho * Rc * np.ones(d) / math.sqrt(d)
    delta = (p.rho - 1.0) * Rc

    def radius(x):
        return np.sqrt(_sq_dist(pole, x))

    if d >= 3:
        u = Field(lambda *x: (delta / radius(x)) ** (d - 2))
    elif d == 2:
        u = Field(lambda *x: 1.0 - np.log(radius(x) / delta))
    else:
        u = Field(lambda *x: radius(x) / delta)
    return _problem("nd_pole", "laplace", p, u, None, {"rho": p.rho},
                    "closed form: fundamental solution (delta/|x-p|)^(d-2) (d>=3; log in 2-D), "
                    "pole p = c + rho R_c (1,...,1)/sqrt(d) outside the region")


# ------------------------------------------------------------------------------------------
# Random-direction plane waves (Poisson)
# ------------------------------------------------------------------------------------------

@dataclasses.dataclass
class WavesParams(_NDParams):
    frequency: float = 6.0
    waves: int = 4
    draw: int = 0

    def __post_init__(self):
        super().__post_init__()
        positive("frequency", self.frequency)
        positive("waves", self.waves, integer=True, maximum=64)


def plane_waves(dim: int, waves: int, frequency: float, draw: int):
    """(wave vectors k_j (J, d) with |k_j| = frequency, phases (J,)), seeded by `draw`."""
    rng = np.random.default_rng(draw)
    z = rng.standard_normal((waves, dim))
    k = frequency * z / np.linalg.norm(z, axis=1, keepdims=True)
    return k, rng.uniform(0.0, 2 * np.pi, waves)


def nd_waves(p: WavesParams) -> Problem:
    """Poisson problem u = J^(-1/2) sum_j sin(k_j . x + c_j), |k_j| = frequency, f = frequency^2 u.

    Each plane wave satisfies -Laplace sin(k.x + c) = |k|^2 sin(k.x + c) (closed form [common
    practice]); directions k_j / |k_j| uniform on the sphere (normalised Gaussians) and phases
    c_j uniform, from the seeded draw (knob ``draw``). g = u on the boundary. Oblique waves are
    no products of coordinate functions; higher frequency = more oscillations per unit length.
    """
    k, c = plane_waves(p.dim, p.waves, p.frequency, p.draw)
    amp = 1.0 / math.sqrt(p.waves)
    lam = p.frequency ** 2

    def u_fn(*x):
        return amp * sum(np.sin(_dot(kj, x) + float(cj)) for kj, cj in zip(k, c))

    u = Field(u_fn)
    f = Field(lambda *x: lam * u_fn(*x))
    return _problem("nd_waves", "poisson", p, u, f, {"frequency": p.frequency, "waves": p.waves, "draw": p.draw},
                    "closed form: u = J^(-1/2) sum_j sin(k_j.x + c_j), |k_j| = frequency, f = |k|^2 u "
                    f"(seeded directions and phases, draw={p.draw})")


# ------------------------------------------------------------------------------------------
# Eigenvalues of the unit cube
# ------------------------------------------------------------------------------------------

def _index_vectors(dim: int, bound: int) -> np.ndarray:
    """All n in {1, 2, ...}^dim with sum n_i^2 <= bound, built coordinate by coordinate (partial
    sums pruned by what the remaining coordinates need at least)."""
    rows = np.zeros((1, 0), dtype=np.int64)
    sums = np.zeros(1, dtype=np.int64)
    top = int(math.isqrt(max(bound - (dim - 1), 0)))
    for i in range(dim):
        rest = dim - i - 1
        n = np.arange(1, top + 1, dtype=np.int64)
        s = sums[:, None] + n[None, :] ** 2
        keep = s + rest <= bound
        r, j = np.nonzero(keep)
        rows = np.column_stack([rows[r], n[j]])
        sums = s[r, j]
    return rows


def box_spectrum(dim: int, k: int):
    """First k Dirichlet eigenvalues of [0, 1]^dim plus the rest of the k-th one's cluster.

    lambda = pi^2 (n_1^2 + ... + n_d^2), n_i >= 1, modes prod_i sin(n_i pi x_i) (separation of
    variables [common practice]). The integer sums are enumerated completely up to the first
    bound that holds k of them, so equal values are compared exactly. Returns (eigenvalues,
    index vectors (K, d)), equal values ordered lexicographically by index.
    """
    bound = dim
    while True:
        n = _index_vectors(dim, bound)
        if len(n) >= k:
            break
        bound += max(3, bound // 4)
    s = np.sum(n * n, axis=1)
    order = np.lexsort(tuple(n[:, i] for i in range(dim - 1, -1, -1)) + (s,))
    n, s = n[order], s[order]
    stop = int(np.searchsorted(s, s[k - 1], side="right"))
    return math.pi ** 2 * s[:stop].astype(float), n[:stop]


@dataclasses.dataclass
class DimEigenParams:
    """Knobs of `eigen_box` and `eigen_ball`."""

    dim: int = 3
    k: int = 6

    def __post_init__(self):
        _check_dim(self.dim)
        _check_k(self.k)


def eigen_box(p: DimEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of the unit cube [0, 1]^d: lambda = pi^2 |n|^2, n in {1, 2, ...}^d.

    Modes prod_i sin(n_i pi x_i); multiple eigenvalues (permutations of n, and sums of squares
    with several representations, e.g. 1 + 1 + 25 = 9 + 9 + 9 in 3-D) form one eigenspace.
    Source: closed form (separation of variables) [common practice].
    """
    lam, n = box_spectrum(p.dim, p.k)
    d = unit_box(p.dim)

    def modes(pts):
        pts = np.asarray(pts, dtype=float)
        out = np.ones((len(pts), len(n)))
        for i in range(p.dim):
            out *= np.sin(np.pi * n[None, :, i] * pts[:, i:i + 1])
        return out

    src = "closed form: lambda = pi^2 (n_1^2 + ... + n_d^2), modes prod sin(n_i pi x_i)"
    return EigenProblem("eigen_box", "eigen", d, params={"dim": p.dim, "k": p.k}, source=src, n_eigs=p.k,
                        eigenvalues=lam, modes=modes, eval_level=max(48, 8 * int(n.max())),
                        reference={"kind": "closed form", "source": src, "indices": n.tolist()})


# ------------------------------------------------------------------------------------------
# Eigenvalues of the unit ball
# ------------------------------------------------------------------------------------------

def bessel_zeros(nu: float, count: int, upto: float | None = None) -> np.ndarray:
    """The first `count` positive zeros j_{nu,1} < j_{nu,2} < ... of J_nu, nu >= 0 (with `upto`:
    only those not above it).

    Integer order: scipy.special.jn_zeros. Other orders: sign changes of scipy.special.jv on a
    grid of step 0.25, each refined by Brent's method (scipy.optimize.brentq) to machine
    precision. The grid cannot miss a pair of zeros: consecutive zeros of J_nu, nu >= 0, are
    more than 3 apart (their spacing tends to pi from below for nu < 1/2 and from above for
    nu > 1/2; Watson, A Treatise on the Theory of Bessel Functions, 1944, sec. 15.8), and
    j_{nu,1} > nu.
    """
    from scipy.optimize import brentq
    from scipy.special import jn_zeros, jv

    if upto is not None and upto <= nu:
        return np.zeros(0)
    if float(nu).is_integer():
        z = np.asarray(jn_zeros(int(nu), count), dtype=float)
    else:
        top = nu + (count + 2) * math.pi + 10.0 if upto is None else upto + 0.5
        while True:
            x = np.arange(max(0.25, nu - 0.25), top, 0.25)
            v = jv(nu, x)
            idx = np.nonzero(np.sign(v[:-1]) * np.sign(v[1:]) < 0)[0]
            if len(idx) >= count or upto is not None:
                break
            top *= 1.5
        z = np.array([brentq(lambda t: jv(nu, t), x[i], x[i + 1], xtol=1e-15, rtol=1e-15, maxiter=200)
                      for i in idx[:count]])
    return z if upto is None else z[z <= upto]


def harmonic_multiplicity(dim: int, l: int) -> int:
    """Dimension of the degree-l spherical harmonics in R^dim: C(l+d-1, d-1) - C(l+d-3, d-1)
    [common practice; e.g. Stein & Weiss, Introduction to Fourier Analysis on Euclidean Spaces,
    1971, ch. IV]; d = 1: the two parities l = 0, 1."""
    if dim == 1:
        return 1 if l in (0, 1) else 0

    def comb(n, r):
        return math.comb(n, r) if n >= r >= 0 else 0

    return comb(l + dim - 1, dim - 1) - comb(l + dim - 3, dim - 1)


def ball_spectrum(dim: int, k: int):
    """First k Dirichlet eigenvalues of the unit ball in R^dim plus the rest of the k-th cluster.

    lambda = j_{l + d/2 - 1, s}^2 (s-th positive zero of the Bessel function of order
    l + d/2 - 1), with the multiplicity of degree-l spherical harmonics (separation of
    variables: u = r^(1 - d/2) J_{l + d/2 - 1}(sqrt(lambda) r) Y_l [common practice]). d = 1 is
    the interval (-1, 1): lambda = (m pi / 2)^2, simple. The l = 0 branch alone gives k values up
    to j_{d/2-1,k}^2, so no eigenvalue needed has s > k; orders whose first zero exceeds the k-th
    smallest value found so far contribute nothing (j_{nu,1} increases with nu), so the search
    over l stops there. Returns (eigenvalues with multiplicity, rows (l, s) one per eigenvalue).
    """
    if dim == 1:
        m = np.arange(1, k + 2)
        lam = (m * math.pi / 2) ** 2
        rows = np.column_stack([(m + 1) % 2, (m + 1) // 2])     # l = parity, s = index within it
        return lam[:k], rows[:k]
    nu0 = dim / 2 - 1
    # candidates (zero, l, s): l = 0 bounds lambda_k by j_{nu0,k}; orders whose first zero lies
    # above the current k-th value add nothing (j_{nu,1} grows with nu), so l stops there
    cand = [(float(j), 0, s) for s, j in enumerate(bessel_zeros(nu0, k), start=1)]
    top = cand[-1][0]
    l = 1
    while True:
        z = bessel_zeros(l + nu0, k, upto=top * (1 + 1e-12))
        if not len(z):
            break
        cand += [(float(j), l, s) for s, j in enumerate(z, start=1)]
        cand.sort()
        total = 0
        for j, ll, _ in cand:
            total += harmonic_multiplicity(dim, ll)
            if total >= k:
                top = j
                break
        l += 1
    vals, rows = [], []
    for j, ll, s in cand:
        if j <= top * (1 + 1e-12):
            vals += [j] * harmonic_multiplicity(dim, ll)
            rows += [(ll, s)] * harmonic_multiplicity(dim, ll)
    vals, rows = np.array(vals), np.array(rows)
    order = np.lexsort((rows[:, 1], rows[:, 0], vals))
    lam, rows = vals[order] ** 2, rows[order]
    n = _complete_cluster(lam, k, CLOSED_FORM_RTOL)
    return lam[:n], rows[:n]


def harmonic_basis(dim: int, l: int) -> tuple[np.ndarray, np.ndarray]:
    """A basis of the homogeneous harmonic polynomials of degree l in R^dim.

    Returns (exponents (M, d) of the degree-l monomials, coefficients (M, N)): column j is the
    j-th basis polynomial sum_a C[a, j] x^exponents[a]. The coefficients span the null space of
    the Laplacian as a map from degree-l to degree-(l-2) monomials (Laplace x^a = sum_i a_i
    (a_i - 1) x^(a - 2 e_i)), orthonormal by SVD (scipy.linalg.null_space); N is the harmonic
    multiplicity (the Laplacian maps onto the degree-(l-2) polynomials [common practice]).
    """
    from scipy.linalg import null_space

    def monomials(deg):
        out = []
        for combo in itertools.combinations_with_replacement(range(dim), deg):
            a = [0] * dim
            for i in combo:
                a[i] += 1
            out.append(tuple(a))
        return out

    top = monomials(l)
    if l < 2:
        return np.array(top, dtype=np.int64).reshape(len(top), dim), np.eye(len(top))
    low = {a: r for r, a in enumerate(monomials(l - 2))}
    L = np.zeros((len(low), len(top)))
    for c, a in enumerate(top):
        for i in range(dim):
            if a[i] >= 2:
                b = list(a)
                b[i] -= 2
                L[low[tuple(b)], c] += a[i] * (a[i] - 1)
    return np.array(top, dtype=np.int64), null_space(L)


def _ball_modes(dim: int, rows: np.ndarray):
    """modes(points) -> (m, K) for the (l, s) rows of `ball_spectrum` (equal rows are one
    eigenspace, in order): J_nu(j r) / r^nu h(x), nu = l + d/2 - 1, h over `harmonic_basis`."""
    from scipy.special import gamma, jv

    if dim == 1:                                   # the interval (-1, 1): sin(m pi (x + 1) / 2)
        m = np.arange(1, len(rows) + 1)
        return lambda pts: np.sin(np.pi * m[None, :] * (np.asarray(pts, float)[:, :1] + 1) / 2)
    groups = []                                    # (l, j, nu, exponents, coefficients)
    for i, (l, s) in enumerate(rows.tolist()):
        if i and rows[i - 1].tolist() == [l, s]:
            continue
        nu = l + dim / 2 - 1
        j = float(bessel_zeros(nu, s)[-1])
        groups.append((l, j, nu) + harmonic_basis(dim, l))

    def modes(pts):
        pts = np.asarray(pts, dtype=float)
        r = np.linalg.norm(pts, axis=1)
        cols = []
        for l, j, nu, expo, coef in groups:
            with np.errstate(divide="ignore", invalid="ignore"):
                radial = np.where(r > 1e-12, jv(nu, j * r) / np.maximum(r, 1e-300) ** nu,
                                  (j / 2) ** nu / gamma(nu + 1))     # the limit at r = 0
            mono = np.ones((len(pts), len(expo)))
            for i in range(dim):
                if expo[:, i].any():
                    mono *= pts[:, i:i + 1] ** expo[None, :, i]
            cols.append(radial[:, None] * (mono @ coef))
        return np.hstack(cols)

    return modes


def eigen_ball(p: DimEigenParams) -> EigenProblem:
    """Dirichlet eigenvalues of the unit ball in R^d: j_{l+d/2-1,s}^2 with multiplicity
    C(l+d-1, d-1) - C(l+d-3, d-1) (see `ball_spectrum`); Bessel zeros from scipy.special
    (jn_zeros for integer order, Brent's method on jv for half-integer order). d = 3:
    lambda_1 = pi^2 (j_{1/2,1} = pi). Modes r^(1-d/2) J_nu(j r) Y_l(x/r) = J_nu(j r) r^-nu h(x),
    nu = l + d/2 - 1, h any homogeneous harmonic polynomial of degree l (`harmonic_basis`) [common
    practice]."""
    lam, rows = ball_spectrum(p.dim, p.k)
    src = ("closed form: lambda = j_{l+d/2-1,s}^2 (scipy.special Bessel zeros), multiplicity "
           "C(l+d-1,d-1) - C(l+d-3,d-1), modes J_nu(j r) r^-nu h(x) with h harmonic polynomials")
    return EigenProblem("eigen_ball", "eigen", unit_ball(p.dim), params={"dim": p.dim, "k": p.k}, source=src,
                        n_eigs=p.k, eigenvalues=lam, modes=_ball_modes(p.dim, rows),
                        reference={"kind": "closed form", "source": src, "indices": rows.tolist()})


CATALOGUE = {
    "nd_gauss": (GaussParams, nd_gauss, "Poisson in d dimensions: Gaussian bump exp(-|x-c|^2/w^2) (box or ball)"),
    "nd_harmonic": (HarmonicParams, nd_harmonic,
                    "Laplace in d dimensions: exp(a.x) cos(b.x), |a| = |b|, a orthogonal to b (box or ball)"),
    "nd_pole": (PoleParams, nd_pole, "Laplace in d dimensions: fundamental solution, pole outside (box or ball)"),
    "nd_waves": (WavesParams, nd_waves, "Poisson in d dimensions: seeded random-direction plane waves (box or ball)"),
    "eigen_box": (DimEigenParams, eigen_box, "Dirichlet eigenvalues of the unit d-cube, pi^2 |n|^2"),
    "eigen_ball": (DimEigenParams, eigen_ball,
                   "Dirichlet eigenvalues of the unit d-ball, Bessel zeros j_{l+d/2-1,s}^2 with multiplicities"),
}
