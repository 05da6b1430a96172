"""Sample photographs for the imaging problems, and bilinear fields on a pixel lattice.

Photographs come from scikit-image's data module, whose images ship inside the installed
package (no download). `load_image` converts to floats in [0, 1], picks a channel (``grey`` by
ITU-R BT.709 luminance through skimage.color.rgb2gray for colour images, or one of ``red``,
``green``, ``blue``), crops the centre to the requested aspect ratio and resizes with
anti-aliasing to the requested (rows, cols).

A `LatticeField` is the bilinear interpolant of values on a square lattice: the pixel values
of an image placed with its pixel centres on the pixel corners of a `lapbench.domains.Mask`
(value at node (i, j) = point (x0 + i h, y0 + j h), i along x, j along y).
"""
from __future__ import annotations

import numpy as np

from lapbench.config import ConfigError

__all__ = ["IMAGES", "CHANNELS", "GREY_IMAGES", "check_channel", "load_image", "LatticeField", "image_to_lattice", "lattice_to_image"]

# skimage.data images shipped inside the wheel (data_dir): grey and colour photographs
IMAGES = ("camera", "moon", "coins", "astronaut", "coffee", "chelsea", "rocket", "immunohistochemistry")
CHANNELS = ("grey", "red", "green", "blue")
GREY_IMAGES = ("camera", "moon", "coins")      # the rest are RGB


def check_channel(image_field: str, image: str, channel: str) -> None:
    """ConfigError unless `channel` exists for `image` (grey images have only ``grey``)."""
    if image in GREY_IMAGES and channel != "grey":
        raise ConfigError(f"`channel` must be 'grey' for the grey image `{image_field}` = {image!r}; "
                          f"got {channel!r}")


def load_image(name: str, channel: str = "grey", shape: tuple[int, int] | None = None) -> np.ndarray:
    """Image `name` of skimage.data as floats in [0, 1], one channel, optionally resized to `shape`."""
    if name not in IMAGES:
        raise ConfigError(f"`image` must be one of {', '.join(IMAGES)}; got {name!r}")
    if channel not in CHANNELS:
        raise ConfigError(f"`channel` must be one of {', '.join(CHANNELS)}; got {channel!r}")
    import skimage.data
    from skimage.util import img_as_float

    img = img_as_float(getattr(skimage.data, name)())
    if img.ndim == 3:
        img = img[..., :3]
        if channel == "grey":
            from skimage.color import rgb2gray

            img = rgb2gray(img)
        else:
            img = img[..., CHANNELS.index(channel) - 1]
    elif channel != "grey":
        raise ConfigError(f"`channel` must be 'grey' for the grey image {name!r}; got {channel!r}")
    if shape is not None:
        from skimage.transform import resize

        rows, cols = shape
        R, C = img.shape
        # centre crop to the target aspect ratio, then an anti-aliased resize
        if R * cols > C * rows:
            keep = int(round(C * rows / cols))
            img = img[(R - keep) // 2:(R - keep) // 2 + keep]
        else:
            keep = int(round(R * cols / rows))
            img = img[:, (C - keep) // 2:(C - keep) // 2 + keep]
        img = resize(img, (rows, cols), anti_aliasing=True, preserve_range=True)
    return np.clip(np.asarray(img, dtype=float), 0.0, 1.0)


def image_to_lattice(img: np.ndarray) -> np.ndarray:
    """Image layout (row 0 at the top) -> lattice layout [i along x, j along y]."""
    return np.ascontiguousarray(np.asarray(img)[::-1].T)


def lattice_to_image(V: np.ndarray) -> np.ndarray:
    """Lattice layout [i along x, j along y] -> image layout (row 0 at the top)."""
    return np.ascontiguousarray(np.asarray(V).T[::-1])


class LatticeField:
    """Bilinear interpolant of lattice values V[i, j] at (x0 + i h, y0 + j h); clamped outside."""

    def __init__(self, V: np.ndarray, x0: float, y0: float, h: float):
        self.V = np.asarray(V, dtype=float)
        self.x0, self.y0, self.h = float(x0), float(y0), float(h)

    def __call__(self, points):
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        nx, ny = self.V.shape
        sx = np.clip((p[:, 0] - self.x0) / self.h, 0.0, nx - 1.0)
        sy = np.clip((p[:, 1] - self.y0) / self.h, 0.0, ny - 1.0)
        i = np.minimum(np.floor(sx).astype(np.int64), nx - 2)
        j = np.minimum(np.floor(sy).astype(np.int64), ny - 2)
        tx, ty = sx - i, sy - j
        V = self.V
        return ((1 - tx) * (1 - ty) * V[i, j] + tx * (1 - ty) * V[i + 1, j]
                + (1 - tx) * ty * V[i, j + 1] + tx * ty * V[i + 1, j + 1])
