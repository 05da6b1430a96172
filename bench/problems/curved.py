"""Problems on disks, annuli and polygons: the re-entrant corner on the L-shape, a harmonic
function with a pole outside a disk, a Poisson problem on an annulus."""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains import Annulus, Disk, lshape, make_domain
from lapbench.problems.base import Problem

__all__ = ["lshape_corner", "disk_harmonic", "annulus_poisson", "CATALOGUE"]


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


CATALOGUE = {
    "lshape": (LShapeParams, lshape_corner,
               "re-entrant corner on the L-shape, u = r^(2/3) sin(2 theta/3) (Mitchell 2013)"),
    "disk_harmonic": (DiskHarmonicParams, disk_harmonic,
                      "Laplace on a disk, u = Re(rho/(rho - zeta)), pole outside at rho radii"),
    "annulus_poisson": (AnnulusPoissonParams, annulus_poisson,
                        "Poisson on an annulus, angular frequency k, nonzero data on both circles"),
}
