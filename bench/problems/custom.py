"""User-defined problems by config: the catalogue entry `custom`.

A problem config with ``name: custom`` defines its own problem, typically in the user's own
config folder (``--config-dir``), without code in lapbench's tree::

    name: custom
    domain: {kind: polygon, vertices: [[0, 0], [2, 0], [2, 1], [1, 1.6], [0, 1]]}
    exact: "exp(x) * sin(y) + x*y"          # u(x, y); f and g derived when not given
    source: null                             # f = -Laplace(u): expression or {_target_: ...}
    boundary: null                           # g = u on the boundary: expression or {_target_: ...}

Each of `exact`, `source` and `boundary` is either a safe expression in x, y (lapbench.expr: parsed,
never evaluated as Python) or an importable vectorised callable ``{_target_: pkg.mod.func,
<keyword>: <value>, ...}`` taking points of shape (m, 2) and returning m values. With an
exact solution, a given source and boundary are checked against it (fourth-order finite
differences of the exact solution, boundary values at sampled boundary points), so a sign slip
is a config error, not a silently wrong benchmark.

Without an exact solution (`source` and `boundary` only) the harness computes a reference: the
most accurate registered classical solver that supports the problem (`lapbench.problems.reference.REFERENCE_SOLVERS`) at a
fine resolution, with an error estimate from the same solver at a half and a quarter of that
resolution: ``|u_fine - u_half| / (2^p - 1)`` (Richardson's estimate) with p the smaller of the
method's order and the observed order, so that singular data do not get an optimistic one. The
problem's `source` text and its params (``reference: computed``, ``reference_error``) label it
as computed in every record and report.

Eigen problems (``kind: eigen``, u = 0 on the boundary) state reference `eigenvalues` with
`eigenvalues_source` (where they come from), or get computed ones by the same route.
"""
from __future__ import annotations

import dataclasses
import functools
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.domains import make_domain
from lapbench.numerics import fd_laplacian
from lapbench.problems.base import Problem
from lapbench.problems.reference import ReferenceConfig, attach_reference

__all__ = ["CustomParams", "custom", "CATALOGUE"]

# Relative tolerance of the consistency checks between exact, source and boundary. The finite
# differences (fourth order, h = 1e-3 x domain size) are accurate to ~1e-10 for smooth data;
# the bound is loose on purpose so that only real mistakes (sign, factor, wrong term) trip it.
CONSISTENCY_RTOL = 1e-3
FD_STEP = 1e-3


@dataclasses.dataclass
class CustomParams:
    """Fields of a ``name: custom`` problem config (see the module docstring)."""

    kind: str | None = None                 # laplace | poisson | eigen; None: inferred
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})
    exact: str | dict | None = None         # u(x, y)
    source: str | dict | None = None        # f = -Laplace(u)
    boundary: str | dict | None = None      # g = u on the boundary
    citation: str = ""                      # where the exact solution comes from
    eigenvalues: list[float] | None = None  # eigen: reference values, ascending
    eigenvalues_source: str = ""            # eigen: where the values come from (required with them)
    n_eigs: int | None = None               # eigen: how many are wanted (default: all stated, or 4)
    reference: ReferenceConfig = dataclasses.field(default_factory=ReferenceConfig)
    check_data: bool = True                 # check source/boundary against exact
    eval_level: int = 48

    def __post_init__(self):
        if self.kind is not None and self.kind not in ("laplace", "poisson", "eigen"):
            raise ConfigError(f"`kind` must be one of 'laplace', 'poisson', 'eigen' or null; got {self.kind!r}")
        positive("eval_level", self.eval_level, integer=True, maximum=2048)
        if self.n_eigs is not None:
            positive("n_eigs", self.n_eigs, integer=True, maximum=200)
        if self.eigenvalues is not None:
            ev = self.eigenvalues
            if not ev or any(not math.isfinite(v) or v <= 0 for v in ev) or any(b < a for a, b in zip(ev, ev[1:])):
                raise ConfigError(f"`eigenvalues` must be positive, finite and ascending, got {ev!r}")
            if not self.eigenvalues_source.strip():
                raise ConfigError("`eigenvalues_source` must say where the stated eigenvalues come from "
                                  "(paper, handbook or closed form)")
            if self.kind not in (None, "eigen"):
                raise ConfigError(f"`eigenvalues` belong to kind 'eigen', not {self.kind!r}")


# -- data: expression or callable ----------------------------------------------------------------
def _from_expression(text: str, field: str):
    """(vectorised function of points, sympy expression) for a safe expression in x, y."""
    import sympy as sp

    from lapbench.expr import X, Y, parse

    e = parse(text, field)
    fn = sp.lambdify((X, Y), e, modules="numpy")

    def f(points):
        p = np.asarray(points, dtype=float)
        return np.broadcast_to(np.asarray(fn(p[:, 0], p[:, 1]), dtype=float), (len(p),)).copy()

    return f, e


def _from_callable(spec: dict, field: str, probe: np.ndarray):
    """A user's vectorised callable ``{_target_: pkg.mod.func, **keywords}``, probed once."""
    from lapbench.config import import_object

    spec = dict(spec)
    target = spec.pop("_target_", None)
    if target is None:
        raise ConfigError(f"`{field}` must be an expression string or a mapping with `_target_` "
                          f"naming a function of points (m, 2); got keys {sorted(spec)}")
    obj = import_object(target, f"{field}._target_")
    if not callable(obj):
        raise ConfigError(f"`{field}._target_` {target!r} is not callable")
    fn = functools.partial(obj, **spec) if spec else obj

    def f(points):
        return np.asarray(fn(np.asarray(points, dtype=float)), dtype=float).reshape(len(points))

    try:
        v = np.asarray(fn(probe), dtype=float)
    except Exception as exc:  # noqa: BLE001  (the user's function fails on valid points)
        raise ConfigError(f"`{field}._target_` {target!r} failed on {len(probe)} points of shape "
                          f"{probe.shape}: {type(exc).__name__}: {exc}") from None
    if v.shape not in ((len(probe),), (len(probe), 1)):
        raise ConfigError(f"`{field}._target_` {target!r} returned shape {v.shape} for points of shape "
                          f"{probe.shape}; it must return one value per point ({len(probe)},)")
    if not np.all(np.isfinite(v)):
        raise ConfigError(f"`{field}._target_` {target!r} returned non-finite values inside the domain")
    return f


def _data(spec, field: str, probe: np.ndarray):
    """(function, sympy expression or None, text for the record) of one data field."""
    if spec is None:
        return None, None, None
    if isinstance(spec, str):
        f, e = _from_expression(spec, field)
        return f, e, spec
    f = _from_callable(spec, field, probe)
    return f, None, f"callable {spec.get('_target_')}"


def _check_source(u, f, domain, field: str) -> None:
    rng = np.random.default_rng(0)
    h = FD_STEP * domain.scale
    pts = domain.sample_interior(400, rng)
    pts = pts[domain.distance(pts) > 3 * h][:200]
    if not len(pts):
        return
    lap = fd_laplacian(u, pts, h)
    fv = f(pts) if f is not None else np.zeros(len(pts))
    scale = max(1.0, float(np.max(np.abs(fv))), float(np.max(np.abs(lap))))
    bad = np.abs(-lap - fv)
    if bad.max() > CONSISTENCY_RTOL * scale:
        i = int(np.argmax(bad))
        raise ConfigError(f"`{field}` disagrees with -Laplace(problem.exact): at {pts[i].round(6).tolist()} "
                          f"f = {fv[i]:.6g} but -Laplace(u) = {-lap[i]:.6g} (fourth-order differences, "
                          f"h = {h:.3g}); fix the data or set problem.check_data=false")


def _check_boundary(u, g, domain, field: str) -> None:
    pts, _ = domain.sample_boundary(200, np.random.default_rng(0))
    a, b = g(pts), u(pts)
    scale = max(1.0, float(np.max(np.abs(b))))
    bad = np.abs(a - b)
    if bad.max() > 1e-8 * scale:
        i = int(np.argmax(bad))
        raise ConfigError(f"`{field}` disagrees with problem.exact on the boundary: at "
                          f"{pts[i].round(6).tolist()} g = {a[i]:.6g} but u = {b[i]:.6g}; fix the data "
                          f"or set problem.check_data=false")


# -- the builder ---------------------------------------------------------------------------------
def custom(p: CustomParams) -> Problem:
    """A user-defined problem (see the module docstring for the fields and the reference rules).

    PDE: -Laplace(u) = f in the domain, u = g on its boundary (kind laplace when f = 0), or the
    Dirichlet eigenproblem -Laplace(u) = lambda u, u = 0 on the boundary (kind eigen). The
    exact solution and its source are the user's (`citation`); without one the reference is
    computed and labelled as such.
    """
    domain = make_domain(p.domain)
    probe = domain.sample_interior(8, np.random.default_rng(1))
    level = p.eval_level
    if p.kind == "eigen" or p.eigenvalues is not None:
        for fld in ("exact", "source", "boundary"):
            if getattr(p, fld) is not None:
                raise ConfigError(f"`problem.{fld}` does not apply to kind 'eigen' (u = 0 on the boundary)")
        n = p.n_eigs or (len(p.eigenvalues) if p.eigenvalues is not None else 4)
        zero = lambda pts: np.zeros(len(pts))  # noqa: E731
        if p.eigenvalues is not None:
            if n > len(p.eigenvalues):
                raise ConfigError(f"`problem.n_eigs` = {n} exceeds the {len(p.eigenvalues)} stated eigenvalues")
            return Problem("custom", "eigen", domain, g=zero, n_eigs=n,
                           eigenvalues=np.asarray(p.eigenvalues[:n], dtype=float),
                           params={"n_eigs": n}, source=f"stated eigenvalues: {p.eigenvalues_source}",
                           eval_level=level)
        prob = Problem("custom", "eigen", domain, g=zero, n_eigs=n, params={"n_eigs": n},
                       source="Dirichlet eigenproblem", eval_level=level)
        return attach_reference(prob, p)

    u, u_expr, u_text = _data(p.exact, "problem.exact", probe)
    f, f_expr, f_text = _data(p.source, "problem.source", probe)
    g, _, g_text = _data(p.boundary, "problem.boundary", probe)
    if u is not None and u_expr is None and f is None and p.kind != "laplace":
        raise ConfigError("`problem.source` is required when `problem.exact` is a callable (lapbench cannot "
                          "differentiate it); or set problem.kind=laplace for a harmonic u")
    derived = False
    if f is None and u_expr is not None:
        import sympy as sp

        from lapbench.expr import X, Y

        f_expr = -(sp.diff(u_expr, X, 2) + sp.diff(u_expr, Y, 2))
        if sp.simplify(f_expr) != 0:
            f, _ = _from_expression(str(f_expr), "problem.source")
            f_text, derived = "-Laplace(u) by sympy", True
        else:
            f_expr = sp.Integer(0)
    if f_expr is not None and f_expr == 0:
        f = None
    kind = p.kind or ("poisson" if f is not None else "laplace")
    if kind == "laplace" and f is not None:
        raise ConfigError(f"`problem.kind` is 'laplace' but the source is not zero ({f_text}); "
                          f"use kind poisson or null")
    if g is None:
        if u is None:
            raise ConfigError("`problem.boundary` is required when there is no `problem.exact`")
        g, g_text = u, "u"
    if u is not None and p.check_data:
        if not derived:
            _check_source(u, f, domain, "problem.source")
        if p.boundary is not None:
            _check_boundary(u, g, domain, "problem.boundary")
    params = {"kind": kind}
    if u is not None:
        params["exact"] = u_text
        source = (f"user-defined: u = {u_text}; f = {f_text or 0}; g = {g_text}"
                  f"{'; ' + p.citation if p.citation else ''}")
        return Problem("custom", kind, domain, f=f, g=g, exact=u, params=params, source=source,
                       eval_level=level)
    params.update(source=f_text or "0", boundary=g_text)
    prob = Problem("custom", kind, domain, f=f, g=g, params=params,
                   source=f"f = {f_text or 0}; g = {g_text}", eval_level=level)
    return attach_reference(prob, p)


CATALOGUE = {"custom": (CustomParams, custom, "user-defined problem: own domain, data as expressions or callables, "
                                             "stated or computed reference")}
