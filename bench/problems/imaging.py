"""Problems on pixel-mask regions: exact solutions, harmonic inpainting, seamless cloning.

The region is a `lapbench.domains.Mask` (the union of its True pixels). For the image problems
the photograph is placed with its pixel centres on the mask's pixel corners: the image has
(rows + 1) x (cols + 1) pixels for a mask of rows x cols pixels (frame included). The pixel
corners strictly inside the region are the unknown pixels (the hole); those on its boundary
are known pixels and carry the Dirichlet data. Data between nodes are bilinear
(`lapbench.images.LatticeField`), so every method sees the same continuous problem, and at
pixel resolution the 5-point scheme is exactly the discrete image-editing system.

Image problems have no closed-form solution: their reference is the discrete 5-point solution
at pixel resolution computed by a direct solver (`lapbench.solvers.pixel.pixel_solve`, SuperLU), and the
errors of a record are against that discrete reference (``reference`` in the problem's params
and source says so). Inpainting records also report the PSNR against the original pixels of
the hole (`lapbench.image_metrics`), a different question (how well a harmonic fill restores the
photograph) reported separately.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from lapbench.config import ConfigError, one_of
from lapbench.domains import Mask, make_domain
from lapbench.fields import Field
from lapbench.images import CHANNELS, IMAGES, LatticeField, check_channel, image_to_lattice, load_image
from lapbench.problems.base import Problem

__all__ = ["ImageProblem", "mask_exact", "inpaint", "clone", "CATALOGUE", "DISCRETE_REFERENCE"]

DISCRETE_REFERENCE = "discrete 5-point solution at pixel resolution (SuperLU direct solve)"
EXACT_SOLUTIONS = ("cubic", "exp_sin", "wave")


def _mask(cfg: dict) -> Mask:
    d = make_domain(cfg)
    if not isinstance(d, Mask):
        raise ConfigError(f"`problem.domain.kind` must be 'mask' for this problem; got {d.kind!r}")
    return d


def _default_mask(shape: str, pixels: int = 48):
    return lambda: {"kind": "mask", "shape": shape, "pixels": pixels, "seed": 0}


@dataclasses.dataclass
class ImageProblem(Problem):
    """A problem on a photograph: the lattice of pixel values and the hole, for measures and figures.

    `image` is the full lattice (original pixels; harness only), `hole` the (I, J) lattice
    indices of the unknown pixels, `reference_values` the discrete reference there and
    `truth` the original pixels there (inpainting; None for cloning). The public view drops
    `image` and `truth`.
    """

    image: np.ndarray | None = None
    hole: tuple | None = None
    reference_values: np.ndarray | None = None
    truth: np.ndarray | None = None
    measure_kind: str = "image"

    @property
    def hole_points(self) -> np.ndarray:
        d = self.domain
        I, J = self.hole
        return np.column_stack([d.x0 + d.h * I, d.y0 + d.h * J])

    def public(self) -> "Problem":
        if self.is_public:
            return self
        pub = super().public()
        return dataclasses.replace(pub, image=None, truth=None, reference_values=None)


@dataclasses.dataclass
class MaskExactParams:
    solution: str = "cubic"          # cubic | exp_sin (harmonic) | wave (Poisson)
    k: float = 2.0                   # wave: frequency
    domain: dict = dataclasses.field(default_factory=_default_mask("blobs", 32))

    def __post_init__(self):
        one_of("solution", self.solution, EXACT_SOLUTIONS)
        if isinstance(self.k, bool) or not isinstance(self.k, (int, float)) or not 0 < self.k <= 64:
            raise ConfigError(f"`k` must be a number in (0, 64], got {self.k!r}")


def mask_exact(p: MaskExactParams) -> Problem:
    """Closed-form solutions on a pixel-mask region; g = u on the boundary (pixel edges).

    - ``cubic``: u = x^3 - 3 x y^2 + (x^2 - y^2)/2 + x y + y = Re(z^3 + z^2/2 - i z^2/2 - i z),
      harmonic (f = 0); the 5-point scheme reproduces it to rounding [common practice].
    - ``exp_sin``: u = exp(pi x) sin(pi y) / exp(pi), harmonic (f = 0).
    - ``wave``: u = sin(k pi x) cos(k pi y) + x, f = 2 k^2 pi^2 sin(k pi x) cos(k pi y).
    Source: closed forms [common practice].
    """
    d = _mask(p.domain)
    k = float(p.k)
    if p.solution == "cubic":
        u = Field(lambda x, y: x ** 3 - 3 * x * y ** 2 + 0.5 * (x ** 2 - y ** 2) + x * y + y)
        f, kind, src = None, "laplace", "closed form: u = x^3 - 3xy^2 + (x^2 - y^2)/2 + xy + y (harmonic cubic)"
    elif p.solution == "exp_sin":
        u = Field(lambda x, y: np.exp(math.pi * (x - 1.0)) * np.sin(math.pi * y))
        f, kind, src = None, "laplace", "closed form: u = exp(pi (x - 1)) sin(pi y) (harmonic)"
    else:
        w = k * math.pi
        u = Field(lambda x, y: np.sin(w * x) * np.cos(w * y) + x)
        f = Field(lambda x, y: 2 * w * w * np.sin(w * x) * np.cos(w * y))
        kind, src = "poisson", "closed form: u = sin(k pi x) cos(k pi y) + x, f = 2 k^2 pi^2 sin(k pi x) cos(k pi y)"
    params = {"solution": p.solution}
    if p.solution == "wave":
        params["k"] = k
    return Problem("mask_exact", kind, d, f=f, g=u, exact=u, params=params, source=src,
                   eval_level=max(48, int(8 * k)))


def _image_problem(name, kind, d: Mask, V: np.ndarray, f, params: dict, source: str, truth: bool):
    """Common part: boundary data from the lattice V, the discrete reference, the hole."""
    from lapbench.solvers.pixel import PixelInterpolant, pixel_solve

    h = d.h
    inside = d.interior_corners
    # the solver's boundary data hold the known pixels only (hole pixels zeroed): g is queried
    # on pixel edges between boundary nodes, so the zeros are never seen
    g = LatticeField(np.where(inside, 0.0, V), d.x0, d.y0, h)
    grid, U, info = pixel_solve(d, f, g, 1, "direct")
    exact = PixelInterpolant(grid, U)
    I, J = grid.I, grid.J
    params = {**params, "reference": "discrete"}
    return ImageProblem(name, kind, d, f=f, g=g, exact=exact, params=params,
                        source=f"{source}; errors against the {DISCRETE_REFERENCE}",
                        eval_level=48, image=V, hole=(I, J), reference_values=U[I, J],
                        truth=V[I, J] if truth else None)


def _lattice_shape(d: Mask) -> tuple[int, int]:
    """(rows, cols) of the image whose pixel centres are the mask's pixel corners."""
    nx, ny = d.cells.shape
    return ny + 1, nx + 1


@dataclasses.dataclass
class InpaintParams:
    image: str = "camera"
    channel: str = "grey"            # grey | red | green | blue
    domain: dict = dataclasses.field(default_factory=_default_mask("scratches", 64))

    def __post_init__(self):
        one_of("image", self.image, IMAGES)
        one_of("channel", self.channel, CHANNELS)
        check_channel("image", self.image, self.channel)


def inpaint(p: InpaintParams) -> Problem:
    """Harmonic inpainting: -Laplace(u) = 0 in the hole, u = the photograph's known pixels around it.

    The photograph (skimage.data, one channel, resized to the mask's pixel corners) gives the
    boundary data; the hole's original pixels are kept from the solver and serve only for the
    PSNR. Reference: the discrete 5-point solution at pixel resolution (direct solve).
    Source: harmonic (membrane) interpolation, Perez, Gangnet & Blake, "Poisson image
    editing", SIGGRAPH 2003, eq. 2 with v = 0.
    """
    d = _mask(p.domain)
    V = image_to_lattice(load_image(p.image, p.channel, _lattice_shape(d)))
    return _image_problem("inpaint", "laplace", d, V, None, {"image": p.image, "channel": p.channel},
                          f"harmonic inpainting of skimage.data.{p.image} ({p.channel})", truth=True)


@dataclasses.dataclass
class CloneParams:
    target: str = "coffee"
    source: str = "astronaut"
    channel: str = "grey"            # grey | red | green | blue
    domain: dict = dataclasses.field(default_factory=_default_mask("blobs", 64))

    def __post_init__(self):
        one_of("target", self.target, IMAGES)
        one_of("source", self.source, IMAGES)
        one_of("channel", self.channel, CHANNELS)
        check_channel("target", self.target, self.channel)
        check_channel("source", self.source, self.channel)
        if self.source == self.target:
            raise ConfigError(f"`source` must differ from `target` (cloning an image into itself is "
                              f"the identity); both are {self.source!r}")


def clone(p: CloneParams) -> Problem:
    """Seamless cloning: -Laplace(u) = -div v in the region, u = target on its boundary.

    The guidance field is the gradient of the source photograph, v = grad s, so div v is the
    5-point Laplacian of the source's pixels (Perez, Gangnet & Blake, "Poisson image editing",
    SIGGRAPH 2003, eqs. 7-11: sum over neighbours of s_p - s_q); f = -Laplace_h s at the pixel
    corners, bilinear in between. The target photograph gives the boundary data. Reference:
    the discrete 5-point solution at pixel resolution (direct solve).
    """
    d = _mask(p.domain)
    shape = _lattice_shape(d)
    V = image_to_lattice(load_image(p.target, p.channel, shape))
    S = image_to_lattice(load_image(p.source, p.channel, shape))
    F = np.zeros_like(S)
    F[1:-1, 1:-1] = (4 * S[1:-1, 1:-1] - S[2:, 1:-1] - S[:-2, 1:-1] - S[1:-1, 2:] - S[1:-1, :-2]) / d.h ** 2
    f = LatticeField(F, d.x0, d.y0, d.h)
    return _image_problem("clone", "poisson", d, V, f,
                          {"target": p.target, "source": p.source, "channel": p.channel},
                          f"seamless cloning of skimage.data.{p.source} into {p.target} ({p.channel})",
                          truth=False)


CATALOGUE = {
    "mask_exact": (MaskExactParams, mask_exact,
                   "closed-form solutions (harmonic cubic, exp-sin, Poisson wave) on a pixel-mask region"),
    "inpaint": (InpaintParams, inpaint,
                "harmonic inpainting of a photograph's masked pixels; error vs the discrete reference, PSNR"),
    "clone": (CloneParams, clone,
              "seamless cloning (Perez et al. 2003): guidance field from a second photograph"),
}
