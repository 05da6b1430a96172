"""Functions of points that can also be evaluated on tensor grids by broadcasting.

A problem's data (source f, boundary data g, exact solution u) are callables of points of shape
``(m, d)``. Where the mathematics is a closed formula in the coordinates, the catalogue wraps it
in a `Field` written in the d coordinate arrays, ``Field(lambda x, y: ...)`` in 2-D,
``Field(lambda *x: ...)`` in any dimension. The same formula is then evaluated on a tensor grid
``axes[0] x ... x axes[d-1]`` by numpy broadcasting: a separable factor is computed
n_0 + ... + n_{d-1} times instead of n_0 * ... * n_{d-1} times, and no (prod n_i, d) point array
is built. Every grid method gets the same favour through `on_grid`, which falls back to
evaluating the points of the grid for any other callable.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["Field", "on_grid", "grid_points"]


class Field:
    """``u(points)`` for points (m, d), and ``u.grid(*axes)`` -> (len(axes[0]), ..., len(axes[d-1])).

    `fn` takes the d coordinate arrays ``fn(x0, x1, ..., x_{d-1})`` and must be written with
    numpy operations that broadcast (on a grid, axis i arrives with shape 1 everywhere but in
    position i); its result may be a scalar or broadcast against the grid.
    """

    def __init__(self, fn: Callable):
        self.fn = fn

    @property
    def fxy(self) -> Callable:
        """The coordinate function (its 2-D name)."""
        return self.fn

    def __call__(self, points) -> np.ndarray:
        p = np.asarray(points, dtype=float)
        if p.ndim != 2:
            raise ValueError(f"points must have shape (m, d), got {p.shape}")
        v = np.asarray(self.fn(*(p[:, i] for i in range(p.shape[1]))), dtype=float)
        return v if v.shape == (len(p),) else np.broadcast_to(v, (len(p),)).copy()

    def grid(self, *axes: np.ndarray) -> np.ndarray:
        axes = [np.asarray(a, dtype=float).ravel() for a in axes]
        d = len(axes)
        shaped = [a.reshape([-1 if j == i else 1 for j in range(d)]) for i, a in enumerate(axes)]
        v = np.asarray(self.fn(*shaped), dtype=float)
        shape = tuple(len(a) for a in axes)
        return v if v.shape == shape else np.broadcast_to(v, shape).copy()


def grid_points(*axes: np.ndarray) -> np.ndarray:
    """The points of the tensor grid axes[0] x ... x axes[d-1], shape (prod n_i, d), first axis slowest."""
    mesh = np.meshgrid(*[np.asarray(a, dtype=float) for a in axes], indexing="ij")
    return np.column_stack([m.ravel() for m in mesh])


def on_grid(fn: Callable, *axes: np.ndarray) -> np.ndarray:
    """Values of `fn` on the tensor grid axes[0] x ... x axes[d-1] (first index = first axis)."""
    grid = getattr(fn, "grid", None)
    if grid is not None:
        return grid(*axes)
    shape = tuple(len(a) for a in axes)
    return np.asarray(fn(grid_points(*axes)), dtype=float).reshape(shape)
