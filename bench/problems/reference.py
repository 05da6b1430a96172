"""Computed references, for problems without a closed form: run by the harness, never by a solver.

Two recipes, one module: each names its solver, resolutions and estimated accuracy in the
records, and both rest on Richardson's idea of comparing successive refinements.

* Eigenvalues of a polygon (`computed_reference`): conforming P2 (or P1) finite elements on
  nested uniform refinements, each eigenvalue Richardson-extrapolated with its observed order
  (`richardson`); cached on disk under ``<results_dir>/cache/eigen_reference/`` and computed in
  the harness parent before a case is forked (``EigenProblem.ensure_reference``), so it never
  counts against a solver's time.
* Fields of a `custom` problem (`attach_reference`): the most accurate registered classical
  solver that supports the problem (`REFERENCE_SOLVERS`) at three resolutions, the error of the
  finest estimated by Richardson with the smaller of the method's and the observed order
  (`richardson_estimate`); computed when the problem is built (cached per process).
"""
from __future__ import annotations

import dataclasses
import fcntl
import hashlib
import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError

__all__ = ["richardson", "richardson_estimate", "computed_reference", "ReferenceModes", "attach_reference",
           "ReferenceConfig", "REFERENCE_SOLVERS", "REFERENCE_VERSION"]

REFERENCE_VERSION = 1  # bump when the eigen computed-reference recipe changes (invalidates the cache)

# Reference solvers, most accurate first: (registry name, resolution option, fine value, order).
# The order p is the method's convergence order for smooth data; it enters the error estimate.
REFERENCE_SOLVERS = (
    ("fst9", "n", 512, 4),      # compact 9-point by sine transform: O(N log N), rectangles
    ("fd9", "n", 256, 4),
    ("fem_p2", "level", 5, 3),  # P2 elements, L2 order 3 (when registered: shapes issue)
    ("fem_p1", "level", 6, 2),
    ("fd5", "n", 512, 2),
)


@dataclasses.dataclass
class ReferenceConfig:
    """How to compute a reference when no exact solution is given."""

    solver: str | None = None       # a registered classical solver; None: first fitting REFERENCE_SOLVERS
    resolution: int | None = None   # its resolution option (n or level); None: the table's value


# -- eigenvalues of polygons -----------------------------------------------------------------------
def richardson(values: np.ndarray, p: int) -> tuple[float, float, float]:
    """Extrapolate a monotone sequence on meshes halved each level: (limit, estimate, order).

    The observed order q = log2(d1/d2) of the last two differences (clipped to [0.5, 2p], the
    range of conforming eigenvalue convergence), the limit lambda_L - d2/(2^q - 1). The estimate is
    the change between this extrapolation and the one from the three levels before, a bound that
    is conservative whenever the extrapolation converges faster than the raw values.
    """
    v = np.asarray(values, dtype=float)

    def extrap(a, b, c):
        d1, d2 = a - b, b - c
        if d1 <= 0 or d2 <= 0 or d2 >= d1:
            return c, float("nan")
        q = float(np.clip(math.log2(d1 / d2), 0.5, 2 * p))
        return c - d2 / (2 ** q - 1), q

    e_last, q = extrap(*v[-3:])
    if len(v) >= 4:
        e_prev, _ = extrap(*v[-4:-1])
        est = abs(e_last - e_prev)
    else:
        est = abs(v[-1] - v[-2])
    # never claim more than the raw values' round-off allows
    est = max(est, 1e-13 * abs(e_last), abs(v[-1] - e_last) * 1e-3)
    return float(e_last), float(est), q


def _mesh_levels(domain, triangles: int, levels: int):
    """Nested uniform refinements of the polygon's coarse triangulation (lapbench.solvers.fem.build_mesh);
    the finest has at least `triangles` triangles, and the coarsest is refined at least once."""
    from lapbench.solvers.fem import build_mesh

    T0 = build_mesh(domain, 0).t.shape[1]
    top = max(levels, int(math.ceil(math.log(max(triangles / T0, 1.0), 4))))
    return [build_mesh(domain, L) for L in range(top - levels + 1, top + 1)]


def computed_reference(domain, recipe: dict, cache_dir: str | Path) -> dict:
    """Eigenvalues, estimates and finest-level modes of `domain`, from the cache or computed.

    The cache file is named by a hash of the recipe (vertices, degree, levels, size, count) and
    `REFERENCE_VERSION`; a lock file keeps parallel workers from computing it twice.
    """
    key = hashlib.sha256(json.dumps({**recipe, "version": REFERENCE_VERSION}, sort_keys=True).encode()).hexdigest()[:16]
    cache_dir = Path(cache_dir)
    cache_dir.mkdir(parents=True, exist_ok=True)
    path = cache_dir / f"{key}.npz"
    with open(cache_dir / f"{key}.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        try:
            if path.exists():
                try:
                    return _load_reference(path)
                except (OSError, ValueError, KeyError):
                    pass  # unreadable cache entry: recompute and overwrite
            ref = _compute_reference(domain, recipe)
            fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".npz", dir=cache_dir)
            os.close(fd)
            meta = {k: v for k, v in ref.items() if k not in ("mesh_p", "mesh_t", "modes")}
            np.savez_compressed(tmp, mesh_p=ref["mesh_p"], mesh_t=ref["mesh_t"], modes=ref["modes"],
                                meta=np.array(json.dumps(meta)))
            os.chmod(tmp, 0o644)
            os.replace(tmp, path)
            ref["cache"] = str(path)
            return ref
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)


def _load_reference(path: Path) -> dict:
    with np.load(path, allow_pickle=False) as z:
        meta = json.loads(str(z["meta"]))
        return {**meta, "mesh_p": z["mesh_p"], "mesh_t": z["mesh_t"], "modes": z["modes"], "cache": str(path)}


def _compute_reference(domain, recipe: dict) -> dict:
    """Run the reference FEM on every level and extrapolate each eigenvalue (progress on stderr)."""
    import sys

    from tqdm import tqdm

    from lapbench.solvers.fem import fem_eigen

    order, k = int(recipe["order"]), int(recipe["k"])
    meshes = _mesh_levels(domain, int(recipe["triangles"]), int(recipe["levels"]))
    table = []
    basis = V = None
    for mesh in tqdm(meshes, desc="eigen reference", file=sys.stderr, disable=not sys.stderr.isatty()):
        lam, basis, V = fem_eigen(mesh, order, k)
        table.append(lam)
    table = np.array(table)                                  # (levels, k)
    ext = [richardson(table[:, i], order) for i in range(table.shape[1])]
    angles = domain.interior_angles
    q_theory = min(2.0 * order, 2 * math.pi / float(angles.max()))
    mesh = meshes[-1]
    return {
        "eigenvalues": [e[0] for e in ext], "estimate": [e[1] for e in ext],
        "order_obs": [e[2] for e in ext], "order_theory": q_theory,
        "levels": table.tolist(), "solver": f"fem_p{order} (scikit-fem, ARPACK shift-invert)",
        "resolutions": [{"triangles": int(m.t.shape[1]), "h": float(_hmax(m))} for m in meshes],
        "order": order, "mesh_p": mesh.p, "mesh_t": mesh.t, "modes": V,
    }


def _hmax(mesh) -> float:
    p, t = mesh.p, mesh.t
    e = np.concatenate([p[:, t[0]] - p[:, t[1]], p[:, t[1]] - p[:, t[2]], p[:, t[2]] - p[:, t[0]]], axis=1)
    return float(np.sqrt((e ** 2).sum(axis=0)).max())


class ReferenceModes:
    """Modes of a computed reference: the finest-level FEM functions (lapbench.solvers.fem.FEMFunction)."""

    def __init__(self, p, t, order, V, n):
        self.p, self.t, self.order, self.V = np.asarray(p), np.asarray(t), int(order), np.asarray(V)[:, :n]
        self._fields = None

    def __call__(self, points):
        if self._fields is None:
            from skfem import Basis, ElementTriP1, ElementTriP2, MeshTri1

            from lapbench.solvers.fem import FEMFunction

            basis = Basis(MeshTri1(self.p, self.t), {1: ElementTriP1, 2: ElementTriP2}[self.order]())
            self._fields = [FEMFunction(basis, self.V[:, j]) for j in range(self.V.shape[1])]
        p = np.asarray(points, dtype=float)
        return np.column_stack([f(p) for f in self._fields])


# -- fields of custom problems ---------------------------------------------------------------------
def _reference_solver(problem, cfg: ReferenceConfig):
    """(solver class, option, fine value, order) of the reference solver for `problem`."""
    from lapbench.solvers import SOLVERS

    table = {name: (opt, fine, order) for name, opt, fine, order in REFERENCE_SOLVERS}
    if cfg.solver is not None:
        if cfg.solver not in table or cfg.solver not in SOLVERS:
            usable = [n for n, *_ in REFERENCE_SOLVERS if n in SOLVERS]
            raise ConfigError(f"`problem.reference.solver` must be one of {', '.join(usable)}; got {cfg.solver!r}")
        names = [cfg.solver]
    else:
        names = [n for n, *_ in REFERENCE_SOLVERS if n in SOLVERS]
    pub = problem.public()
    for name in names:
        cls = SOLVERS[name]
        opt, fine, order = table[name]
        if cfg.resolution is not None:
            fine = cfg.resolution
        solver = cls(params={opt: fine})
        ok, reason = solver.supports(pub)
        if ok:
            return cls, opt, fine, order
        if cfg.solver is not None:
            raise ConfigError(f"`problem.reference.solver` {name} cannot run this problem: {reason}")
    raise ConfigError(f"`problem.exact` is required here: no registered classical solver can compute a "
                      f"reference for a {problem.kind} problem on a {problem.domain.kind} (tried "
                      f"{', '.join(names) or 'none'})")


_REFERENCE_CACHE: dict[str, tuple] = {}


def _computed_reference(key: str, problem, cfg: ReferenceConfig):
    """Coarse and fine runs of the reference solver (cached per problem config within a process:
    planning and the basic launcher's jobs build the same problem several times)."""
    from lapbench.solvers.base import Budget, RunContext

    if key in _REFERENCE_CACHE:
        return _REFERENCE_CACHE[key]
    cls, opt, fine, order = _reference_solver(problem, cfg)
    ladder = [fine // 4, fine // 2, fine] if opt == "n" else [fine - 2, fine - 1, fine]
    if ladder[0] < 2:
        raise ConfigError(f"`problem.reference.resolution` must be at least {8 if opt == 'n' else 3}, got {fine}")
    budget = Budget(time_limit=3600.0)
    runs = []
    for res in ladder:
        try:
            runs.append(cls(params={opt: res}).solve(problem.public(), budget, RunContext()))
        except ConfigError:
            raise
        except Exception as exc:  # noqa: BLE001  (the data break the reference solver)
            raise ConfigError(f"`problem` reference run {cls.name} {opt}={res} failed: "
                              f"{type(exc).__name__}: {exc}") from None
    out = _REFERENCE_CACHE[key] = (cls.name, opt, ladder, order, runs)
    return out


def richardson_estimate(d_coarse: float, d_fine: float, order: int) -> tuple[float, float]:
    """(error estimate of the finest run, order used) from differences of successive runs.

    Richardson's estimate d_fine / (2^p - 1) with p the smaller of the method's order and the
    observed order log2(d_coarse / d_fine), so that data whose singularities slow convergence
    (re-entrant corners, incompatible corner data) do not get an optimistic estimate (the
    observed-order safeguard of P. J. Roache, "Perspective: a method for uniform reporting of
    grid refinement studies", J. Fluids Eng. 116 (1994) 405-413). Outside the asymptotic range
    (no observed convergence) the estimate is d_fine itself.
    """
    if d_fine == 0.0:
        return 0.0, float(order)
    if d_coarse <= d_fine:
        return d_fine, 0.0
    p = min(float(order), math.log2(d_coarse / d_fine))
    return d_fine / (2.0 ** p - 1.0) if p > 1e-3 else d_fine, p


def attach_reference(problem, params):
    """Fill the exact solution (or eigenvalues) of `problem` with a computed, labelled reference."""
    key = json.dumps(dataclasses.asdict(params), sort_keys=True, default=str)
    name, opt, ladder, order, runs = _computed_reference(key, problem, params.reference)
    sol_f = runs[-1]
    if problem.kind == "eigen":
        lams = [np.asarray(r.eigenvalues, dtype=float) for r in runs]
        k = min(min(len(v) for v in lams), problem.n_eigs)
        rel = lambda a, b: float(np.max(np.abs(a[:k] - b[:k]) / np.abs(lams[-1][:k])))  # noqa: E731
        err, p_used = richardson_estimate(rel(lams[1], lams[0]), rel(lams[2], lams[1]), order)
        problem.eigenvalues = lams[-1][:k]
        problem.modes = sol_f.modes
        what = f"eigenvalues, estimated max relative error {err:.2e}"
    else:
        es = problem.domain.eval_set(seed=0, level=problem.eval_level)
        pts = es.all_points
        u = [r.evaluate(pts) for r in runs]
        err, p_used = richardson_estimate(float(np.max(np.abs(u[1] - u[0]))), float(np.max(np.abs(u[2] - u[1]))), order)
        problem.exact = sol_f.evaluate
        what = f"estimated max error {err:.2e}"
    problem.params.update(reference="computed", reference_error=float(f"{err:.3g}"))
    problem.source = (f"computed reference (no exact solution): {name} at {opt}={ladder[-1]}; {what} "
                      f"(Richardson with order {p_used:.2f} = min(method order {order}, observed order "
                      f"over {opt}={ladder[0]}, {ladder[1]}, {ladder[2]})); data: {problem.source}")
    return problem
