"""Harness-side errors: the only place where exact solutions meet computed ones.

`MEASURES` maps a problem kind to its measure ``(problem, solution, eval_set) -> metrics``:
``laplace`` and ``poisson`` by `solution_errors` (relative L2 by the eval set's quadrature,
max abs error, nodal max; on randomised QMC sets of d >= 3 also the estimate's sampling error
``rel_l2_stderr`` from independent scramblings, see `sampling_error`), ``eigen`` by `eigen_errors`:

- ``eig_rel``: |lambda_h,i - lambda_i| / lambda_i for each of the first k eigenvalues
  (``eig_rel_1``: the first; ``eig_rel_max``: the worst).
- ``mode_angle``: for each of the first k modes, the largest principal angle (radians) between
  the span of the computed modes that belong to its reference eigenvalue's cluster and the exact
  eigenspace, in the L2(domain) inner product of the problem's quadrature rule. Any basis of a
  multiple eigenvalue and any sign of a mode score 0; an unrelated mode scores pi/2.
  With Q_e, Q_h orthonormal bases (weighted QR / SVD), sin(theta) = ||(I - Q_e Q_e^T) Q_h||_2,
  which stays accurate for tiny angles where arccos of the cosines would not (Golub & Van Loan,
  Matrix Computations, 4th ed., 2013, sec. 6.4.3; Bjorck & Golub, Math. Comp. 27, 1973).
  When k cuts a cluster, the k-th mode's computed companions span fewer directions than the
  exact eigenspace; the angle then measures how far they lie outside it.

`monitor_fn` gives learned methods' training checkpoints the same relative L2 and max error.
"""
from __future__ import annotations

import numpy as np

__all__ = ["MEASURES", "measure", "monitor_fn", "eigen_errors", "eigenspace_angle", "clusters", "BadSolution",
           "solution_errors", "checked_values", "error_field", "sampling_error"]


CHUNK = 65536   # points per evaluate call when measuring errors


class BadSolution(ValueError):
    """A solver returned values of the wrong shape or non-finite values (record: `failed`)."""


def checked_values(fn, points: np.ndarray, what: str = "Solution.evaluate") -> np.ndarray:
    """Call ``fn(points)`` and insist on a finite float vector of matching length.

    Large point sets are passed in chunks of `CHUNK` points, so that an interpolant's
    temporary arrays (e.g. barycentric weight matrices) stay bounded in memory.
    """
    try:
        if len(points) > CHUNK:
            v = np.concatenate([np.asarray(fn(points[i:i + CHUNK]), dtype=float).reshape(-1)
                                for i in range(0, len(points), CHUNK)])
        else:
            v = np.asarray(fn(points), dtype=float)
    except (TypeError, ValueError) as exc:
        raise BadSolution(f"{what} returned something that is not an array of numbers: {exc}") from None
    if v.ndim == 2 and v.shape[1] == 1:
        v = v[:, 0]
    if v.shape != (len(points),):
        raise BadSolution(f"{what} returned shape {v.shape} for {len(points)} points")
    bad = ~np.isfinite(v)
    if bad.any():
        raise BadSolution(f"{what} returned {int(bad.sum())} non-finite value(s)")
    return v


def solution_errors(problem, solution, eval_set) -> dict:
    """Relative L2 error by quadrature, max abs error, nodal max error.

    ``rel_l2 = ||u_h - u||_2 / ||u||_2`` with the domain's quadrature rule (absolute when
    ||u|| = 0); ``max_abs`` over quadrature and seeded random points; ``nodal_max`` at the
    solver's own nodes (when it has nodes).
    """
    pts = eval_set.points
    uh = checked_values(solution.evaluate, pts)
    u = problem.exact(pts)
    e = uh - u
    w = eval_set.weights
    num = float(np.sqrt(np.sum(w * e * e)))
    den = float(np.sqrt(np.sum(w * u * u)))
    out = {"rel_l2": num / den if den > 0 else num, "abs_l2": num}
    if getattr(eval_set, "groups", None) is not None:
        out.update(sampling_error(e, u, w, eval_set.groups, den > 0))
        out["eval_method"] = eval_set.method
    extra = eval_set.extra
    ex = checked_values(solution.evaluate, extra) - problem.exact(extra) if len(extra) else np.zeros(0)
    out["max_abs"] = float(max(np.max(np.abs(e)), np.max(np.abs(ex)) if len(ex) else 0.0))
    scale = float(np.max(np.abs(u))) if len(u) else 0.0
    out["rel_max"] = out["max_abs"] / scale if scale > 0 else out["max_abs"]
    if solution.nodes is not None and solution.values is not None and len(solution.nodes):
        vals = np.asarray(solution.values, dtype=float).ravel()
        if vals.shape != (len(solution.nodes),) or not np.all(np.isfinite(vals)):
            raise BadSolution("Solution.values does not match Solution.nodes or is not finite")
        keep = np.ones(len(vals), dtype=bool)
        if problem.eval_exclude is not None:
            keep = ~problem.eval_exclude(solution.nodes)
        if keep.any():
            out["nodal_max"] = float(np.max(np.abs(vals[keep] - problem.exact(solution.nodes[keep]))))
    return out


def sampling_error(e: np.ndarray, u: np.ndarray, w: np.ndarray, groups: np.ndarray, relative: bool) -> dict:
    """Sampling error of the L2 error estimate on a randomised QMC set of R replicates.

    Each replicate r (its points re-weighted to a rule of its own) gives an estimate
    rel_r = ||e||_r / ||u||_r; the replicates are independent (independent scramblings), so the
    standard error of their mean, s / sqrt(R) with s their sample standard deviation, estimates
    the sampling error of the pooled estimate ``rel_l2`` (Owen, Ann. Statist. 25, 1997;
    L'Ecuyer & Lemieux, "Recent advances in randomized quasi-Monte Carlo methods", 2002).
    Returns ``rel_l2_stderr`` (absolute, in the units of rel_l2), ``rel_l2_replicates`` and
    ``eval_points``.
    """
    R = int(groups.max()) + 1
    num = np.bincount(groups, weights=w * e * e, minlength=R)
    den = np.bincount(groups, weights=w * u * u, minlength=R)
    reps = np.sqrt(num / den) if relative else np.sqrt(num * R)
    return {"rel_l2_stderr": float(np.std(reps, ddof=1) / np.sqrt(R)) if R > 1 else float("nan"),
            "rel_l2_replicates": [float(v) for v in reps], "eval_points": int(len(e))}


def _field_plane(domain, m: int):
    """Axes and points of an m x m grid over the domain's first two coordinates, the others
    at the middle of their ranges (a 2-D slice for d >= 3)."""
    b = domain.bounds
    xs, ys = np.linspace(b[0, 0], b[0, 1], m), np.linspace(b[1, 0], b[1, 1], m)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.tile(b.mean(axis=1), (m * m, 1))
    pts[:, 0], pts[:, 1] = X.ravel(), Y.ravel()
    return xs, ys, pts


def error_field(problem, solution, m: int = 41) -> dict:
    """Pointwise error u_h - u on an m x m grid over the bounding box (NaN outside the domain);
    for d >= 3 on the plane through the box's centre spanned by the first two coordinates
    (``slice`` names the fixed coordinates). d = 1 has no field (empty dict)."""
    if problem.dim < 2:
        return {}
    xs, ys, pts = _field_plane(problem.domain, m)
    inside = problem.domain.contains(pts, tol=1e-12)
    if problem.eval_exclude is not None:
        inside &= ~problem.eval_exclude(pts)
    err = np.full(len(pts), np.nan)
    if inside.any():
        err[inside] = checked_values(solution.evaluate, pts[inside]) - problem.exact(pts[inside])
    out = {"x": xs.tolist(), "y": ys.tolist(),
           "error": [None if not np.isfinite(v) else float(v) for v in err]}
    if problem.dim > 2:
        out["slice"] = {f"x{i}": float(v) for i, v in enumerate(pts[0, 2:], start=2)}
    return out


# -- eigen problems ------------------------------------------------------------------------------
def clusters(lam: np.ndarray, rtol: float) -> list[tuple[int, int]]:
    """Index ranges [start, stop) of equal reference eigenvalues (relative tolerance `rtol`)."""
    out, s = [], 0
    for i in range(1, len(lam) + 1):
        if i == len(lam) or abs(lam[i] - lam[s]) > rtol * abs(lam[s]):
            out.append((s, i))
            s = i
    return out


def _orth(A: np.ndarray) -> np.ndarray | None:
    """Orthonormal basis of the columns of A; None if they are (numerically) dependent."""
    U, s, _ = np.linalg.svd(A, full_matrices=False)
    if len(s) == 0 or s[-1] <= 1e-10 * max(s[0], 1e-300):
        return None
    return U


def eigenspace_angle(exact: np.ndarray, computed: np.ndarray, weights: np.ndarray) -> float:
    """Largest angle (radians) of span(computed) away from span(exact), weighted L2 inner product.

    `exact` (m, d_e) and `computed` (m, d_h) are mode values at quadrature points with `weights`;
    d_h <= d_e. Dependent computed columns (a mode returned twice) give pi/2.
    """
    sw = np.sqrt(np.asarray(weights, dtype=float))[:, None]
    Qe = _orth(sw * exact)
    if Qe is None:
        raise ValueError("reference modes are linearly dependent on the evaluation set (harness bug)")
    Qh = _orth(sw * computed)
    if Qh is None:
        return float(np.pi / 2)
    R = Qh - Qe @ (Qe.T @ Qh)
    s = float(np.linalg.norm(R, 2)) if R.size else 0.0
    return float(np.arcsin(min(1.0, s)))


def _values(fn, pts, cols_min: int, what: str) -> np.ndarray:
    try:
        V = np.asarray(fn(pts), dtype=float)
    except (TypeError, ValueError) as exc:
        raise BadSolution(f"{what} returned something that is not an array of numbers: {exc}") from None
    if V.ndim == 1:
        V = V[:, None]
    if V.ndim != 2 or V.shape[0] != len(pts) or V.shape[1] < cols_min:
        raise BadSolution(f"{what} returned shape {V.shape} for {len(pts)} points; expected "
                          f"({len(pts)}, >= {cols_min})")
    if not np.all(np.isfinite(V)):
        raise BadSolution(f"{what} returned {int((~np.isfinite(V)).sum())} non-finite value(s)")
    return V


def eigen_errors(problem, solution, eval_set) -> dict:
    """Eigenvalue relative errors and eigenspace angles of the first k = problem.n_eigs modes."""
    k = int(problem.n_eigs)
    if problem.eigenvalues is None:
        raise RuntimeError("the eigen problem has no reference eigenvalues; call "
                           "problem.ensure_reference(results_dir) first (the harness does)")
    ref = np.asarray(problem.eigenvalues, dtype=float)
    if solution.eigenvalues is None:
        raise BadSolution("Solution.eigenvalues is missing (required for eigen problems)")
    lam = np.asarray(solution.eigenvalues, dtype=float).ravel()
    if len(lam) < k:
        raise BadSolution(f"Solution.eigenvalues holds {len(lam)} value(s); the problem asks for k={k}")
    if not np.all(np.isfinite(lam[:k])):
        raise BadSolution("Solution.eigenvalues has non-finite values")
    rel = np.abs(lam[:k] - ref[:k]) / np.abs(ref[:k])
    out = {"eig_rel_1": float(rel[0]), "eig_rel_max": float(rel.max()),
           "eig_rel": [float(v) for v in rel], "n_eigs": k}
    if problem.modes is None:
        out["mode_angle_note"] = "no reference modes for this problem"
        return out
    if solution.modes is None:
        raise BadSolution("Solution.modes is missing (required for eigen problems)")
    pts, w = eval_set.points, eval_set.weights
    E = _values(problem.modes, pts, len(ref), "reference modes")
    U = _values(solution.modes, pts, k, "Solution.modes")
    angles = np.zeros(k)
    for s, e in clusters(ref, float(getattr(problem, "cluster_rtol", 1e-9))):
        if s >= k:
            break
        stop = min(e, k)
        angles[s:stop] = eigenspace_angle(E[:, s:e], U[:, s:stop], w)
    out["mode_angle"] = [float(a) for a in angles]
    out["mode_angle_max"] = float(angles.max())
    out["mode_angle_1"] = float(angles[0])
    return out


# -- training history ------------------------------------------------------------------------------
def monitor_fn(problem, eval_set):
    """Training-history errors: relative L2 and max abs of an interpolant (harness side)."""
    pts, w = eval_set.points, eval_set.weights
    u = problem.exact(pts) if problem.exact is not None else None
    norm = float(np.sqrt(np.sum(w * u * u))) if u is not None else 0.0

    def monitor(evaluate):
        if u is None:
            return {}
        try:
            e = checked_values(evaluate, pts) - u
        except BadSolution:
            return {"rel_l2": float("nan"), "max_abs": float("nan")}
        num = float(np.sqrt(np.sum(w * e * e)))
        return {"rel_l2": num / norm if norm > 0 else num, "max_abs": float(np.max(np.abs(e)))}

    return monitor


def image_errors(problem, solution, eval_set) -> dict:
    """Image problems: `solution_errors` against the discrete reference, plus the PSNRs of the
    hole pixels (`lapbench.image_metrics`)."""
    from lapbench.image_metrics import image_measures

    out = solution_errors(problem, solution, eval_set)
    out.update(image_measures(problem, checked_values(solution.evaluate, problem.hole_points)))
    return out


# problem kind (or a problem's own `measure_kind`) -> measure(problem, solution, eval_set) -> metrics
MEASURES = {"laplace": solution_errors, "poisson": solution_errors, "eigen": eigen_errors, "image": image_errors}


def measure(problem, solution, eval_set) -> dict:
    """The metrics of `solution` on `problem` (the measure of its kind)."""
    return MEASURES[getattr(problem, "measure_kind", problem.kind)](problem, solution, eval_set)
