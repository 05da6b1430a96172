"""Pixel masks: the region is the union of the closed pixels marked True in a boolean image.

The pixels come from a file (``path``: a ``.npy`` boolean or 0/1 array, or a two-level
``.png``), from an inline array (``data``: rows of 0/1, row 0 at the top, as an image is
written) or from a seeded generator (``shape``: ``blobs``, ``text``, ``scratches``, ``box``).
A frame of False pixels is added around every mask, so the region never touches the image
border. Pixels are squares of side ``h = width / columns`` with the lower-left corner of the
image at ``(x0, y0)``; pixel (i, j) (column i from the left, row j from the bottom) covers
[x0 + i h, x0 + (i+1) h] x [y0 + j h, y0 + (j+1) h].

Queries: membership and the boundary test by pixel look-up (exact); the boundary is the set of
pixel edges between a True and a False pixel, merged into maximal straight segments and
oriented with the region on their left; the signed distance is the exact distance to those
segments (nearest segments by a k-d tree of their midpoints, the candidate count doubled
until the result is certified); ``phi`` is the R-function distance of the segments (Sukumar &
Srivastava, CMAME 389, 2022, eqs. 11-14, as for polygons): zero exactly on every pixel edge of
the boundary, smooth inside, normalised by its maximum over a sub-pixel lattice. The inradius
comes from scipy.ndimage's Euclidean distance transform of the mask upsampled 4 times (to
within an eighth of a pixel). Quadrature: a tensor Gauss-Legendre rule on each pixel
(2 x 2 points per pixel, or 4 x 4 points on sub-panels when the mask is coarser than the
requested level): pixel-centre based and exact for bicubic data on each pixel.
"""
from __future__ import annotations

import dataclasses
import math
import types
from functools import cached_property
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError
from lapbench.domains.base import Domain

__all__ = ["Mask", "MASK_SHAPES", "generate_mask"]

MASK_SHAPES = ("blobs", "text", "scratches", "box")
MAX_MASK_PIXELS = 1 << 24       # 16 M pixels: far beyond the suites; refused beyond

# A 5 x 7 bitmap font of our own for the `text` shape (rows top to bottom); the word is "LAP".
_GLYPHS = {
    "L": ["10000", "10000", "10000", "10000", "10000", "10000", "11111"],
    "A": ["01110", "10001", "10001", "11111", "10001", "10001", "10001"],
    "P": ["11110", "10001", "10001", "11110", "10000", "10000", "10000"],
}


def generate_mask(shape: str, pixels: int, seed: int) -> np.ndarray:
    """A seeded boolean mask (image layout: row 0 at the top) of about `pixels` columns."""
    rng = np.random.default_rng(seed)
    n = int(pixels)
    if shape == "box":
        m = np.zeros((n, n), dtype=bool)
        m[n // 4: n - n // 4, n // 8: n - n // 8] = True
        return m
    if shape == "blobs":
        from skimage.data import binary_blobs

        m = binary_blobs(length=n, blob_size_fraction=0.25, volume_fraction=0.35, rng=int(seed))
        return m.astype(bool)
    if shape == "text":
        word = "LAP"
        scale = max(2, n // (6 * len(word) + 1))
        rows = [np.array([[c == "1" for c in r] for r in _GLYPHS[ch]]) for ch in word]
        gap = np.zeros((7, 1), dtype=bool)
        line = np.hstack(sum(([g, gap] for g in rows), [])[:-1])
        big = np.kron(line, np.ones((scale, scale), dtype=bool))
        m = np.zeros((max(n, big.shape[0] + 2), max(n, big.shape[1] + 2)), dtype=bool)
        r0 = (m.shape[0] - big.shape[0]) // 2
        c0 = (m.shape[1] - big.shape[1]) // 2
        m[r0:r0 + big.shape[0], c0:c0 + big.shape[1]] = big
        return m
    if shape == "scratches":
        from scipy.ndimage import binary_dilation
        from skimage.draw import line

        m = np.zeros((n, n), dtype=bool)
        for _ in range(4):
            r0, c0, r1, c1 = rng.integers(n // 8, n - n // 8, 4)
            rr, cc = line(int(r0), int(c0), int(r1), int(c1))
            m[rr, cc] = True
        # strokes 3 pixels wide: a 1-pixel line has no pixel corner inside the region
        return binary_dilation(m, structure=np.ones((3, 3), dtype=bool))
    raise ConfigError(f"`shape` must be one of {', '.join(MASK_SHAPES)}; got {shape!r}")


def _load(path: str) -> np.ndarray:
    p = Path(path)
    if not p.is_file():
        raise ConfigError(f"`path` must name an existing .npy or .png file; got {path!r}")
    if p.suffix.lower() == ".npy":
        try:
            return np.load(p, allow_pickle=False)
        except ValueError as exc:
            raise ConfigError(f"`path` {path!r} is not a readable .npy array: {exc}") from None
    if p.suffix.lower() == ".png":
        from skimage.io import imread

        a = np.asarray(imread(p))
        if a.ndim == 3:          # grey stored as RGB(A): every channel must agree
            if not all(np.array_equal(a[..., 0], a[..., c]) for c in range(1, min(3, a.shape[2]))):
                raise ConfigError(f"`path` {path!r} must be a two-level (black/white) image; it has colour")
            a = a[..., 0]
        levels = np.unique(a)
        if len(levels) > 2:
            raise ConfigError(f"`path` {path!r} must be a two-level (black/white) image; it has "
                              f"{len(levels)} grey levels")
        return a == levels.max() if len(levels) == 2 else np.full(a.shape, bool(levels[0] > 0))
    raise ConfigError(f"`path` must end in .npy or .png; got {path!r}")


def _as_boolean(a, field: str) -> np.ndarray:
    """The mask as a 2-D boolean array, or a ConfigError naming `field`."""
    try:
        a = np.asarray(a)
    except (TypeError, ValueError) as exc:      # ragged rows
        raise ConfigError(f"`{field}` must be a 2-D array of booleans (rows of equal length): {exc}") from None
    if a.ndim != 2 or min(a.shape) < 2:
        raise ConfigError(f"`{field}` must be a 2-D array of at least 2 x 2 pixels; got shape {a.shape}")
    if a.dtype != bool:
        if a.dtype.kind not in "iuf" or not np.all((a == 0) | (a == 1)):
            raise ConfigError(f"`{field}` must be boolean (True/False or 0/1); got dtype {a.dtype} "
                              f"with values other than 0 and 1")
        a = a == 1
    return a


@dataclasses.dataclass(frozen=True)
class Mask(Domain):
    """Union of the True pixels of a boolean image (see the module docstring).

    Refused with a ConfigError naming the field: more than one of `path`, `data` and a
    non-default source; a mask that is not 2-D, not boolean (values other than 0/1), empty, all
    True, or whose region holds no pixel corner inside it (every stroke thinner than 2 pixels).
    """

    shape: str = "blobs"             # generator when neither `path` nor `data` is given
    pixels: int = 48                 # generator: pixels along a side (before the frame)
    seed: int = 0                    # generator seed
    path: str | None = None          # .npy or two-level .png file
    data: list | None = None         # inline rows of 0/1 (row 0 at the top)
    x0: float = 0.0
    y0: float = 0.0
    width: float = 1.0               # physical width of the image (frame included)
    kind = "mask"

    def __post_init__(self):
        if self.path is not None and self.data is not None:
            raise ConfigError("`path` and `data` both give the mask; set only one of them")
        if self.shape not in MASK_SHAPES:
            raise ConfigError(f"`shape` must be one of {', '.join(MASK_SHAPES)}; got {self.shape!r}")
        if isinstance(self.pixels, bool) or not isinstance(self.pixels, int) or not 4 <= self.pixels <= 4096:
            raise ConfigError(f"`pixels` must be an integer in [4, 4096], got {self.pixels!r}")
        for name in ("x0", "y0", "width"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ConfigError(f"`{name}` must be a finite number, got {v!r}")
        if not self.width > 0:
            raise ConfigError(f"`width` must be positive, got {self.width!r}")
        img = self.image            # validates
        if img.size > MAX_MASK_PIXELS:
            raise ConfigError(f"`{self._field}` holds {img.size} pixels; at most {MAX_MASK_PIXELS}")
        if not img.any():
            raise ConfigError(f"`{self._field}` is empty: no pixel is True")
        raw = self._raw
        if raw.all():
            raise ConfigError(f"`{self._field}` is all True: the region must leave pixels outside it")
        if not self.interior_corners.any():
            raise ConfigError(f"`{self._field}` has no pixel corner inside the region (every stroke is "
                              f"thinner than 2 pixels)")

    # -- pixels ------------------------------------------------------------------------------------
    @property
    def _field(self) -> str:
        return "path" if self.path is not None else "data" if self.data is not None else "shape"

    @cached_property
    def _raw(self) -> np.ndarray:
        if self.path is not None:
            return _as_boolean(_load(self.path), "path")
        if self.data is not None:
            return _as_boolean(self.data, "data")
        return generate_mask(self.shape, self.pixels, self.seed)

    @cached_property
    def image(self) -> np.ndarray:
        """The mask in image layout (row 0 at the top) with its False frame, (rows, cols)."""
        return np.pad(self._raw, 1, constant_values=False)

    @cached_property
    def cells(self) -> np.ndarray:
        """The mask indexed [i, j] = column i from the left, row j from the bottom, (nx, ny)."""
        return np.ascontiguousarray(self.image[::-1].T)

    @property
    def h(self) -> float:
        """Pixel side."""
        return self.width / self.cells.shape[0]

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """(x0, x1, y0, y1) of the whole image, frame included."""
        nx, ny = self.cells.shape
        return (self.x0, self.x0 + nx * self.h, self.y0, self.y0 + ny * self.h)

    @cached_property
    def interior_corners(self) -> np.ndarray:
        """Pixel corners (nx+1, ny+1) whose four pixels are all True: strictly inside the region."""
        c = np.pad(self.cells, 1, constant_values=False)
        return c[:-1, :-1] & c[1:, :-1] & c[:-1, 1:] & c[1:, 1:]

    @cached_property
    def boundary_corners(self) -> np.ndarray:
        """Pixel corners (nx+1, ny+1) touching both a True and a False pixel."""
        c = np.pad(self.cells, 1, constant_values=False)
        anyc = c[:-1, :-1] | c[1:, :-1] | c[:-1, 1:] | c[1:, 1:]
        return anyc & ~self.interior_corners

    def _touching(self, points, tol: float):
        """In-mask flags (m, 4) of the pixels touching each point (at offsets +-tol)."""
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        nx, ny = self.cells.shape
        out = np.zeros((len(p), 4), dtype=bool)
        k = 0
        for sx in (-1, 1):
            for sy in (-1, 1):
                i = np.floor((p[:, 0] + sx * tol - self.x0) / self.h).astype(np.int64)
                j = np.floor((p[:, 1] + sy * tol - self.y0) / self.h).astype(np.int64)
                ok = (i >= 0) & (i < nx) & (j >= 0) & (j < ny)
                out[ok, k] = self.cells[i[ok], j[ok]]
                k += 1
        return out

    # -- geometry ------------------------------------------------------------------------------------
    @cached_property
    def bbox(self):
        I, J = np.nonzero(self.cells)
        h = self.h
        return (self.x0 + h * I.min(), self.x0 + h * (I.max() + 1), self.y0 + h * J.min(), self.y0 + h * (J.max() + 1))

    @property
    def area(self) -> float:
        return float(self.cells.sum()) * self.h ** 2

    @property
    def perimeter(self) -> float:
        A, B = self.segments
        return float(np.abs(B - A).sum())

    def contains(self, points, tol: float = 0.0):
        """Inside or within `tol` of the closed region (pixel look-up; a point on a pixel edge
        or corner belongs to the region when one of the pixels touching it does)."""
        t = max(float(tol), 1e-12 * self.h)
        return self._touching(points, t).any(axis=1)

    def on_boundary(self, points, tol=None):
        """On a boundary pixel edge: touching (within `tol`) both a True and a False pixel."""
        t = 1e-9 * self.scale if tol is None else float(tol)
        t = max(t, 1e-12 * self.h)
        f = self._touching(points, t)
        return f.any(axis=1) & ~f.all(axis=1)

    @cached_property
    def segments(self) -> tuple[np.ndarray, np.ndarray]:
        """Boundary as maximal straight segments (starts A, ends B; each (E, 2)), region on the left."""
        c = np.pad(self.cells, 1, constant_values=False)          # index shift: cell (i, j) -> c[i+1, j+1]
        inner = c[1:-1, 1:-1]
        starts, ends = [], []
        # pixel edges between a True pixel and a False neighbour, as runs along the edge's line
        for side in ("bottom", "top", "left", "right"):
            if side == "bottom":
                flag = inner & ~c[1:-1, :-2]       # (i, j): edge y = j, x in [i, i+1]
            elif side == "top":
                flag = inner & ~c[1:-1, 2:]        # edge y = j+1
            elif side == "left":
                flag = inner & ~c[:-2, 1:-1]       # edge x = i, y in [j, j+1]
            else:
                flag = inner & ~c[2:, 1:-1]        # edge x = i+1
            along_x = side in ("bottom", "top")
            F = flag if along_x else flag.T        # runs along axis 0
            pad = np.pad(F, ((1, 1), (0, 0)), constant_values=False).astype(np.int8)
            d = np.diff(pad, axis=0)
            s_i, s_line = np.nonzero(d == 1)
            e_i, e_line = np.nonzero(d == -1)
            o1 = np.lexsort((s_i, s_line))
            o2 = np.lexsort((e_i, e_line))
            s_i, s_line, e_i = s_i[o1], s_line[o1], e_i[o2]
            off = {"bottom": 0, "top": 1, "left": 0, "right": 1}[side]
            line = s_line + off
            if along_x:
                a = np.column_stack([s_i, line]); b = np.column_stack([e_i, line])
                if side == "top":                  # region below: run leftwards
                    a, b = b, a
            else:
                a = np.column_stack([line, s_i]); b = np.column_stack([line, e_i])
                if side == "left":                 # region to the right: run downwards
                    a, b = b, a
            starts.append(a)
            ends.append(b)
        A = np.vstack(starts).astype(float) * self.h + np.array([self.x0, self.y0])
        B = np.vstack(ends).astype(float) * self.h + np.array([self.x0, self.y0])
        return A, B

    @cached_property
    def _segment_tree(self):
        from scipy.spatial import cKDTree

        A, B = self.segments
        return cKDTree(0.5 * (A + B)), 0.5 * np.linalg.norm(B - A, axis=1).max()

    def _unsigned(self, p: np.ndarray) -> np.ndarray:
        """Exact distance to the boundary segments (certified k nearest midpoints)."""
        A, B = self.segments
        tree, half = self._segment_tree
        E = len(A)
        out = np.full(len(p), np.inf)
        todo = np.arange(len(p))
        k = min(8, E)
        while len(todo):
            dm, idx = tree.query(p[todo], k=k)
            dm, idx = dm.reshape(len(todo), -1), idx.reshape(len(todo), -1)
            q = p[todo][:, None, :]
            a, b = A[idx], B[idx]
            d = b - a
            t = np.clip(((q - a) * d).sum(-1) / (d * d).sum(-1), 0.0, 1.0)
            dist = np.linalg.norm(q - (a + t[..., None] * d), axis=-1).min(axis=1)
            # any segment not among the k has its midpoint beyond dm[:, -1], so lies beyond dm - half
            done = (dist <= dm[:, -1] - half) | (k >= E)
            out[todo[done]] = dist[done]
            todo = todo[~done]
            k = min(2 * k, E)
        return out

    def distance(self, points):
        """Exact signed distance to the boundary (positive inside)."""
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        d = self._unsigned(p)
        inside = self._touching(p, 0.0)[:, 3]     # the pixel containing the point (floor)
        return np.where(inside | (d == 0), d, -d)

    @cached_property
    def inradius(self) -> float:
        """Largest inscribed radius: maximum of scipy.ndimage's EDT of the 4x upsampled mask."""
        from scipy.ndimage import distance_transform_edt

        fine = np.kron(self.cells, np.ones((4, 4), dtype=bool))
        edt = distance_transform_edt(np.pad(fine, 1, constant_values=False))
        # EDT measures between fine pixel centres: the boundary lies half a fine pixel nearer
        return float((edt.max() - 0.5) * self.h / 4)

    # -- hard boundaries ------------------------------------------------------------------------------
    @cached_property
    def _edges_view(self):
        """The segments shaped as a polygon's edges, for the polygon's edge terms and sampler
        (they read only `edges`)."""
        return types.SimpleNamespace(edges=self.segments)

    def _rfun(self, p: np.ndarray) -> np.ndarray:
        """Unnormalised R-function distance 1 / sum_i 1/phi_i of the boundary segments."""
        from lapbench.domains.polygon import Polygon

        E = len(self.segments[0])
        out = np.empty(len(p))
        chunk = max(1, 2_000_000 // E)
        for s in range(0, len(p), chunk):
            _, _, phi_i = Polygon._edge_functions(self._edges_view, p[s:s + chunk])
            with np.errstate(divide="ignore"):
                inv = np.where(phi_i > 0, 1.0 / np.where(phi_i > 0, phi_i, 1.0), np.inf)
            tot = inv.sum(axis=1)
            out[s:s + chunk] = np.where(np.isinf(tot), 0.0, 1.0 / tot)
        return out

    @cached_property
    def _rfun_max(self) -> float:
        I, J = np.nonzero(self.cells)
        u = (np.arange(3) + 0.5) / 3
        U, V = np.meshgrid(u, u, indexing="ij")
        pts = (np.column_stack([I, J])[:, None, :] + np.column_stack([U.ravel(), V.ravel()])[None]).reshape(-1, 2)
        if len(pts) > 200_000:
            pts = pts[np.random.default_rng(0).choice(len(pts), 200_000, replace=False)]
        return float(self._rfun(pts * self.h + np.array([self.x0, self.y0])).max())

    def phi(self, points):
        """R-function distance of the boundary segments (Sukumar & Srivastava, CMAME 389, 2022,
        eqs. 11-14, m = 1), divided by its maximum over a 3 x 3 lattice in every pixel; zero on
        the boundary, smooth inside, negative outside."""
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        v = self._rfun(p) / self._rfun_max
        return np.where(self.contains(p), v, -v)

    def extend_boundary_data(self, g, points):
        """Inverse-distance blend of the data of each boundary segment at its nearest point:
        sum_i w_i g(pi_i(x)), w_i = phi_i^-2 / sum_j phi_j^-2 with phi_i the segment's
        trimmed distance (Sukumar & Srivastava, CMAME 389, 2022, sec. 5, transfinite
        interpolation). On a segment its weight is 1, so the blend equals g there; g is queried
        on the segments only. The nearest-point data have a kink along the normals through the
        segment ends (unlike the polygon's Hermite-type blend): the extension is continuous, and
        smooth away from those normals."""
        from lapbench.domains.polygon import Polygon

        p = np.asarray(points, dtype=float).reshape(-1, 2)
        A, B = self.segments
        d = B - A
        E = len(A)
        out = np.empty(len(p))
        chunk = max(1, 400_000 // E)
        for c in range(0, len(p), chunk):
            q = p[c:c + chunk]
            s, _, phi_i = Polygon._edge_functions(self._edges_view, q)
            sc = np.clip(s, 0.0, 1.0)
            G = np.asarray(g((A[None] + sc[..., None] * d[None]).reshape(-1, 2)), float).reshape(len(q), E)
            pmin = phi_i.min(axis=1, keepdims=True)
            with np.errstate(divide="ignore", invalid="ignore"):
                w = np.where(pmin > 0, (pmin / np.where(phi_i > 0, phi_i, 1.0)) ** 2,
                             (phi_i == 0).astype(float))
            out[c:c + chunk] = (w * G).sum(axis=1) / w.sum(axis=1)
        return out

    # -- sampling and quadrature ---------------------------------------------------------------------
    def sample_interior(self, n, rng):
        """Uniform: a random True pixel (all have the same area), then a uniform point in it."""
        I, J = np.nonzero(self.cells)
        k = rng.integers(0, len(I), n)
        u = rng.uniform(0.0, 1.0, (n, 2))
        return np.column_stack([I[k] + u[:, 0], J[k] + u[:, 1]]) * self.h + np.array([self.x0, self.y0])

    def sample_boundary(self, n, rng=None):
        """Uniform in arc length over the boundary segments; outward normals (right of the
        segment's direction): the polygon's edge sampler on the segments."""
        from lapbench.domains.polygon import Polygon

        return Polygon.sample_boundary(self._edges_view, n, rng)

    def quadrature(self, level=48):
        """Tensor Gauss-Legendre on every True pixel: 2 x 2 points per pixel when the image has
        at least `level` pixels along its longer side, else 4 x 4 points on each of s x s
        sub-panels, s = ceil(level / pixels)."""
        I, J = np.nonzero(self.cells)
        side = max(self.cells.shape)
        if side >= level:
            order, s = 2, 1
        else:
            order, s = 4, int(math.ceil(level / side))
        xi, wi = np.polynomial.legendre.leggauss(order)
        loc = ((np.arange(s)[:, None] + 0.5 * (xi[None, :] + 1.0)) / s).ravel()
        wl = np.tile(0.5 * wi, s) / s
        U, V = np.meshgrid(loc, loc, indexing="ij")
        W = np.outer(wl, wl).ravel()
        base = np.column_stack([I, J]).astype(float)
        pts = (base[:, None, :] + np.column_stack([U.ravel(), V.ravel()])[None]).reshape(-1, 2)
        pts = pts * self.h + np.array([self.x0, self.y0])
        return pts, np.tile(W, len(I)) * self.h ** 2

    def to_dict(self):
        out = {"kind": self.kind, "x0": self.x0, "y0": self.y0, "width": self.width}
        if self.path is not None:
            out["path"] = self.path
        elif self.data is not None:
            out["data"] = [[int(v) for v in row] for row in np.asarray(self._raw, dtype=int)]
        else:
            out.update(shape=self.shape, pixels=self.pixels, seed=self.seed)
        return out
