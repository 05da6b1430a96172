"""The Problem type: data plus the exact solution the harness keeps to itself.

Conventions: ``-Laplace(u) = f`` in the domain, ``u = g`` on the boundary (``kind`` is
``laplace`` when f = 0, ``poisson`` otherwise); eigen problems ``-Laplace(u) = lambda u``,
``u = 0`` on the boundary. Points are arrays of shape ``(m, dim)``.

Solvers receive `Problem.public()`: a view without the exact solution or reference values,
whose boundary data refuses points that are not on the boundary.
"""
from __future__ import annotations

import dataclasses
from typing import Callable, Literal

import numpy as np

from lapbench.config import ConfigError
from lapbench.domains import Domain, Rectangle, make_domain

__all__ = ["Problem", "BoundaryDataError", "MAX_EVAL_LEVEL", "rectangle_domain"]


# Panels per side of the evaluation quadrature for sharp problems, at most: 256 panels of 4 x 4
# Gauss points is 1 M points per evaluation. Finer sets (16 M points at 1024) made evaluation
# cost more than the solves and ran spectral interpolants out of memory.
MAX_EVAL_LEVEL = 256


class BoundaryDataError(ValueError):
    """A solver evaluated boundary data away from the boundary (it would see the exact solution)."""


@dataclasses.dataclass
class Problem:
    """One test problem.

    Attributes
    ----------
    name : str
        Catalogue key (= conf/problem/<name>.yaml = the ``problem`` column of records).
    kind : {'laplace', 'poisson', 'eigen'}
    domain : Domain
    f, g : callable or None
        Source term and Dirichlet data (vectorised over points).
    exact : callable or None
        Exact solution (harness only).
    params : dict
        The difficulty knobs as configured (frequency, width, ...).
    source : str
        Where the exact solution or reference values come from.
    n_eigs : int
        Eigen problems: how many eigenvalues are wanted.
    eigenvalues : ndarray or None
        Eigen problems: reference eigenvalues (harness only).
    eval_level : int
        Panels per side of the evaluation quadrature (raise for sharp features).
    eval_exclude : callable or None
        Mask of evaluation points to leave out (e.g. a strip next to a discontinuity), stated
        in `source`.
    """

    name: str
    kind: Literal["laplace", "poisson", "eigen"]
    domain: Domain
    f: Callable | None = None
    g: Callable | None = None
    exact: Callable | None = None
    params: dict = dataclasses.field(default_factory=dict)
    source: str = ""
    n_eigs: int = 0
    eigenvalues: np.ndarray | None = None
    modes: Callable | None = None
    eval_level: int = 48
    eval_exclude: Callable | None = None
    is_public: bool = False

    def public(self) -> "Problem":
        """The view a solver gets: no exact solution, boundary data guarded."""
        if self.is_public:
            return self
        g = _guarded(self.g, self.domain) if self.g is not None else None
        return dataclasses.replace(self, exact=None, eigenvalues=None, modes=None, g=g,
                                   is_public=True)

    def f_or_zero(self, points: np.ndarray) -> np.ndarray:
        if self.f is None:
            return np.zeros(len(points))
        return np.asarray(self.f(points), dtype=float)

    @property
    def dim(self) -> int:
        """Space dimension (= domain.dim; 2 for every planar problem)."""
        return int(getattr(self.domain, "dim", 2))

    def f_on_grid(self, *axes: np.ndarray) -> np.ndarray:
        """f on the tensor grid axes[0] x ... x axes[d-1] (broadcast where f is a `lapbench.fields.Field`)."""
        from lapbench.fields import on_grid

        if self.f is None:
            return np.zeros(tuple(len(a) for a in axes))
        return on_grid(self.f, *axes)

    def eval_set(self, seed: int = 0):
        es = self.domain.eval_set(seed=seed, level=self.eval_level)
        if self.eval_exclude is None:
            return es
        keep = ~self.eval_exclude(es.points)
        keep_x = ~self.eval_exclude(es.extra)
        return dataclasses.replace(es, points=es.points[keep], weights=es.weights[keep],
                                   extra=es.extra[keep_x],
                                   groups=None if es.groups is None else es.groups[keep])

    def describe(self) -> dict:
        return {"name": self.name, "kind": self.kind, "domain": self.domain.to_dict(),
                "params": self.params, "source": self.source}


def _guarded(g: Callable, domain: Domain) -> Callable:
    def boundary_data(points):
        p = np.asarray(points, dtype=float)
        off = ~domain.on_boundary(p, tol=1e-8 * domain.scale)
        if off.any():
            raise BoundaryDataError(
                f"boundary data evaluated at {int(off.sum())} point(s) off the boundary, "
                f"e.g. {p[off][0].tolist()}")
        return np.asarray(g(p), dtype=float)

    return boundary_data


def rectangle_domain(cfg: dict | None) -> Rectangle:
    """The rectangle a rectangle-only problem is posed on (ConfigError for another kind)."""
    d = make_domain(cfg or {"kind": "rectangle"})
    if not isinstance(d, Rectangle):
        raise ConfigError(f"`problem.domain.kind` must be 'rectangle' for this problem; got {d.kind!r}")
    return d
