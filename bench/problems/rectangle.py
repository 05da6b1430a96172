"""Problems on rectangles with closed-form or manufactured solutions: sine, harmonic, plate,
peak, wavefront, layer (each builder's docstring states the mathematics and its source)."""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains import Rectangle
from lapbench.fields import Field
from lapbench.problems.base import MAX_EVAL_LEVEL, Problem, rectangle_domain

__all__ = ["sine", "harmonic", "plate", "peak", "wavefront", "layer", "plate_series", "plate_terms", "CATALOGUE"]


@dataclasses.dataclass
class SineParams:
    k: int = 1
    l: int = 1
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})

    def __post_init__(self):
        positive("k", self.k, integer=True, maximum=4096)
        positive("l", self.l, integer=True, maximum=4096)


def sine(p: SineParams) -> Problem:
    """Poisson sine mode.

    ``u = sin(k pi s) sin(l pi t)`` with s, t the coordinates scaled to [0, 1] on the rectangle
    [x0, x1] x [y0, y1]; ``f = pi^2 (k^2/a^2 + l^2/b^2) u``, u = 0 on the boundary.
    Source: closed form (separation of variables) [common practice].
    """
    d = rectangle_domain(p.domain)
    a, b = d.lengths
    lam = math.pi ** 2 * (p.k ** 2 / a ** 2 + p.l ** 2 / b ** 2)

    def sx(x):
        return np.sin(p.k * np.pi * (x - d.x0) / a)

    def sy(y):
        return np.sin(p.l * np.pi * (y - d.y0) / b)

    u = Field(lambda x, y: sx(x) * sy(y))
    f = Field(lambda x, y: (lam * sx(x)) * sy(y))
    return Problem("sine", "poisson", d, f=f, g=Field(lambda x, y: 0.0 * (x + y)),
                   exact=u, params={"k": p.k, "l": p.l},
                   source="closed form: u = sin(k pi x) sin(l pi y), f = pi^2 (k^2/a^2 + l^2/b^2) u",
                   eval_level=max(48, 8 * max(p.k, p.l)))


@dataclasses.dataclass
class HarmonicParams:
    omega: float = 1.0
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})

    def __post_init__(self):
        positive("omega", self.omega, maximum=200.0)


def harmonic(p: HarmonicParams) -> Problem:
    """Laplace problem with nonzero Dirichlet data on every edge.

    ``u = exp(omega x) cos(omega y)`` (the real part of exp(omega z)), harmonic everywhere;
    ``g = u`` on the boundary. Source: closed form [common practice].
    """
    d = rectangle_domain(p.domain)
    w = p.omega

    u = Field(lambda x, y: np.exp(w * x) * np.cos(w * y))
    return Problem("harmonic", "laplace", d, f=None, g=u, exact=u, params={"omega": w},
                   source="closed form: u = exp(omega x) cos(omega y) = Re exp(omega z)")


@dataclasses.dataclass
class PlateParams:
    temperature: float = 1.0
    profile: str = "uniform"
    exclude: float = 0.05
    tol: float = 1e-14
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})

    def __post_init__(self):
        if self.profile not in ("uniform", "sine"):
            raise ConfigError(f"`profile` must be one of 'uniform', 'sine'; got {self.profile!r}")
        if not (0 <= self.exclude < 0.5):
            raise ConfigError(f"`exclude` must lie in [0, 0.5), got {self.exclude!r}")
        positive("tol", self.tol)


def plate_terms(a: float, b: float, delta: float, tol: float, cap: int = 100_001) -> int:
    """Largest odd N so that the series tail after n <= N is below `tol` (times U0) at distance
    `delta` from the hot edge.

    Tail bound after terms n <= N (N odd): (4 / (pi (N+2))) exp(-(N+2) pi delta/a) /
    (1 - exp(-2 pi delta/a)) [computed; see the problem docstring].
    """
    if delta <= 0:
        return cap
    q = 1.0 - math.exp(-2 * math.pi * delta / a)
    N = 1
    while N < cap:
        tail = 4.0 / (math.pi * (N + 2)) * math.exp(-(N + 2) * math.pi * delta / a) / q
        if tail < tol:
            return N
        N += 2
    return cap


def plate_series(pts: np.ndarray, a: float, b: float, U0: float, N: int, x0=0.0, y0=0.0) -> np.ndarray:
    """Evaluate (4 U0/pi) sum_{n odd <= N} sin(n pi x/a) sinh(n pi y/a) / (n sinh(n pi b/a)).

    The sinh ratio is evaluated as exp(n pi (y-b)/a) (1 - exp(-2 n pi y/a)) / (1 - exp(-2 n pi b/a)),
    which neither overflows nor cancels.
    """
    x = (pts[:, 0] - x0)[:, None]
    y = (pts[:, 1] - y0)[:, None]
    out = np.zeros(len(pts))
    chunk = 256
    for start in range(1, N + 1, 2 * chunk):
        n = np.arange(start, min(N, start + 2 * chunk - 1) + 1, 2, dtype=float)[None, :]
        k = n * np.pi / a
        ratio = np.exp(k * (y - b)) * (-np.expm1(-2 * k * y)) / (-np.expm1(-2 * k * b))
        out += (np.sin(k * x) * ratio / n).sum(axis=1)
    return 4.0 * U0 / np.pi * out


def plate(p: PlateParams) -> Problem:
    """Steady heated plate: Laplace on [0, a] x [0, b], u = 0 on three edges, hot top edge.

    ``profile='uniform'``: u(x, b) = U0, the classical series
    u = (4 U0/pi) sum_{n odd} sin(n pi x/a) sinh(n pi y/a) / (n sinh(n pi b/a))
    (separation of variables; Kreyszig, Advanced Engineering Mathematics). The series is truncated
    where its tail bound falls below ``tol * U0`` at the evaluation points; because the data jump
    at the two hot corners, errors are measured outside the strip ``y > b - exclude * b``.
    The corner nodes carry U0/2.
    ``profile='sine'``: u(x, b) = U0 sin(pi x/a), exact single term
    u = U0 sin(pi x/a) sinh(pi y/a)/sinh(pi b/a); no exclusion.
    """
    d = rectangle_domain(p.domain)
    a, b = d.lengths
    U0 = p.temperature
    x0, y0 = d.x0, d.y0
    on_top = lambda pts: np.isclose(pts[:, 1], d.y1, rtol=0, atol=1e-12 * max(a, b))  # noqa: E731

    if p.profile == "sine":
        def u(pts):
            return plate_series_sine(pts, a, b, U0, x0, y0)

        return Problem("plate", "laplace", d, g=u, exact=u, params={"profile": "sine", "temperature": U0},
                       source="closed form: u = U0 sin(pi x/a) sinh(pi y/a) / sinh(pi b/a)")

    delta = p.exclude * b
    N = plate_terms(a, b, delta, p.tol) if delta > 0 else 100_001

    def g(pts):
        val = np.where(on_top(pts), U0, 0.0)
        corner = on_top(pts) & (np.isclose(pts[:, 0], d.x0, atol=1e-12 * a) |
                                np.isclose(pts[:, 0], d.x1, atol=1e-12 * a))
        return np.where(corner, 0.5 * U0, val)

    def u(pts):
        return np.where(on_top(pts), g(pts), plate_series(pts, a, b, U0, N, x0, y0))

    exclude = (lambda pts: pts[:, 1] > d.y1 - delta) if delta > 0 else None
    return Problem("plate", "laplace", d, g=g, exact=u,
                   params={"profile": "uniform", "temperature": U0, "exclude": p.exclude, "terms": N},
                   source=("Fourier series (separation of variables; Kreyszig, Advanced Engineering "
                           f"Mathematics), {N} odd terms, tail < {p.tol:g} U0 outside the strip "
                           f"y > b - {p.exclude:g} b, which is excluded from error measurement"),
                   eval_exclude=exclude)


def plate_series_sine(pts, a, b, U0, x0=0.0, y0=0.0):
    k = np.pi / a
    x, y = pts[:, 0] - x0, pts[:, 1] - y0
    return U0 * np.sin(k * x) * np.exp(k * (y - b)) * (-np.expm1(-2 * k * y)) / (-np.expm1(-2 * k * b))


@dataclasses.dataclass
class PeakParams:
    alpha: float = 1000.0
    xc: float = 0.5
    yc: float = 0.5

    def __post_init__(self):
        positive("alpha", self.alpha, maximum=1e8)


def peak(p: PeakParams) -> Problem:
    """Gaussian peak (Poisson) on the unit square.

    u = exp(-alpha rho^2), rho^2 = (x-xc)^2 + (y-yc)^2, f = 4 alpha (1 - alpha rho^2) u, g = u.
    Source: W. F. Mitchell, "A collection of 2D elliptic problems for testing adaptive grid
    refinement algorithms", Appl. Math. Comput. 220 (2013) 350-364 (sets: alpha = 1000 at
    (0.5, 0.5); alpha = 100000 at (0.51, 0.117)).
    """
    d = Rectangle()
    al, xc, yc = p.alpha, p.xc, p.yc

    def rho2(x, y):
        return (x - xc) ** 2 + (y - yc) ** 2

    u = Field(lambda x, y: np.exp(-al * rho2(x, y)))

    def fxy(x, y):
        r2 = rho2(x, y)
        return 4 * al * (1 - al * r2) * np.exp(-al * r2)

    f = Field(fxy)

    width = 1 / math.sqrt(al)
    level = int(min(MAX_EVAL_LEVEL, max(48, 4 / width)))
    return Problem("peak", "poisson", d, f=f, g=u, exact=u, params={"alpha": al, "xc": xc, "yc": yc},
                   source="Mitchell, Appl. Math. Comput. 220 (2013) 350-364: Gaussian peak",
                   eval_level=level)


@dataclasses.dataclass
class WavefrontParams:
    alpha: float = 20.0
    xc: float = -0.05
    yc: float = -0.05
    r0: float = 0.7

    def __post_init__(self):
        positive("alpha", self.alpha, maximum=1e6)
        positive("r0", self.r0)


def wavefront(p: WavefrontParams) -> Problem:
    """Wave front (Poisson) on the unit square: u = atan(alpha (r - r0)), r = |(x, y) - (xc, yc)|.

    f = -Laplace(u) derived by sympy; g = u. Source: Mitchell, Appl. Math. Comput. 220 (2013)
    350-364 (sets (alpha, xc, yc, r0): (20, -0.05, -0.05, 0.7), (1000, -0.05, -0.05, 0.7),
    (1000, 1.5, 0.25, 0.92), (50, 0.5, 0.5, 0.25)).
    """
    from lapbench.expr import manufactured

    m = manufactured(f"atan({p.alpha!r}*(sqrt((x-({p.xc!r}))**2 + (y-({p.yc!r}))**2) - {p.r0!r}))")
    level = int(min(MAX_EVAL_LEVEL, max(48, 2 * p.alpha)))
    return Problem("wavefront", "poisson", Rectangle(), f=m.f, g=m.u, exact=m.u,
                   params={"alpha": p.alpha, "xc": p.xc, "yc": p.yc, "r0": p.r0},
                   source="Mitchell, Appl. Math. Comput. 220 (2013) 350-364: wave front; f by sympy",
                   eval_level=level)


@dataclasses.dataclass
class LayerParams:
    eps: float = 0.05

    def __post_init__(self):
        positive("eps", self.eps)
        if self.eps < 1e-4:
            raise ConfigError(f"`eps` must be at least 1e-4 (layers thinner than the float64 "
                              f"evaluation set resolves), got {self.eps!r}")


def layer(p: LayerParams) -> Problem:
    """Boundary layers (Poisson) on the unit square, layer width `eps` at x = 1 and y = 1.

    u = (1 - exp(-(1-x)/eps)) (1 - exp(-(1-y)/eps)) cos(pi (x+y)); f = -Laplace(u) by sympy; g = u.
    A manufactured Poisson counterpart of the boundary-layer problem in Mitchell's collection
    (Appl. Math. Comput. 220 (2013) 350-364), where that problem is convection-diffusion.
    """
    from lapbench.expr import manufactured

    e = repr(p.eps)
    m = manufactured(f"(1 - exp(-(1-x)/{e}))*(1 - exp(-(1-y)/{e}))*cos(pi*(x+y))")
    level = int(min(MAX_EVAL_LEVEL, max(48, 8 / p.eps)))
    return Problem("layer", "poisson", Rectangle(), f=m.f, g=m.u, exact=m.u, params={"eps": p.eps},
                   source="manufactured boundary-layer solution (after Mitchell 2013); f by sympy",
                   eval_level=level)


# name -> (Params schema, builder, one-line description)
CATALOGUE = {
    "sine": (SineParams, sine, "Poisson sine mode sin(k pi x) sin(l pi y) on a rectangle"),
    "harmonic": (HarmonicParams, harmonic, "Laplace, u = exp(w x) cos(w y), nonzero data on all edges"),
    "plate": (PlateParams, plate, "steady heated plate: Laplace, hot top edge, Fourier-series solution"),
    "peak": (PeakParams, peak, "Gaussian peak (Mitchell 2013), width knob alpha"),
    "wavefront": (WavefrontParams, wavefront, "circular wave front (Mitchell 2013), sharpness alpha"),
    "layer": (LayerParams, layer, "manufactured boundary layers of width eps at x=1, y=1"),
}
