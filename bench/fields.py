"""Functions of points that can also be evaluated on tensor grids by broadcasting.

A problem's data (source f, boundary data g, exact solution u) are callables of points of shape
``(m, 2)``. Where the mathematics is a closed formula in x and y, the catalogue wraps it in a
`Field`, which evaluates the same formula on a tensor grid ``x (nx,) x y (ny,)`` by numpy
broadcasting: a separable factor is then computed nx + ny times instead of nx * ny times, and
no (nx * ny, 2) point array is built. Every grid method gets the same favour through
`on_grid`, which falls back to evaluating the points of the grid for any other callable.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["Field", "on_grid"]


class Field:
    """``u(points)`` for points (m, 2), and ``u.grid(x, y)`` -> (len(x), len(y)), from ``fxy(x, y)``.

    `fxy` must be written with numpy operations that broadcast (x of shape (nx, 1) against y of
    shape (1, ny)); its result may be a scalar or broadcast against the grid.
    """

    def __init__(self, fxy: Callable):
        self.fxy = fxy

    def __call__(self, points) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        v = np.asarray(self.fxy(p[:, 0], p[:, 1]), dtype=float)
        return v if v.shape == (len(p),) else np.broadcast_to(v, (len(p),)).copy()

    def grid(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        v = np.asarray(self.fxy(x[:, None], y[None, :]), dtype=float)
        shape = (len(x), len(y))
        return v if v.shape == shape else np.broadcast_to(v, shape).copy()


def on_grid(fn: Callable, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Values of `fn` on the tensor grid x by y, shape (len(x), len(y)) (x index first)."""
    grid = getattr(fn, "grid", None)
    if grid is not None:
        return grid(x, y)
    X, Y = np.meshgrid(x, y, indexing="ij")
    return np.asarray(fn(np.column_stack([X.ravel(), Y.ravel()])), dtype=float).reshape(len(x), len(y))
