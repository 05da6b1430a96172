"""Harness-side error measurement: the only place where exact solutions are compared."""
from __future__ import annotations

import numpy as np

__all__ = ["BadSolution", "solution_errors", "checked_values", "error_field"]


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


def error_field(problem, solution, m: int = 41) -> dict:
    """Pointwise error u_h - u on an m x m grid over the bounding box (NaN outside the domain)."""
    x0, x1, y0, y1 = problem.domain.bbox
    xs, ys = np.linspace(x0, x1, m), np.linspace(y0, y1, m)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.column_stack([X.ravel(), Y.ravel()])
    inside = problem.domain.contains(pts, tol=1e-12)
    if problem.eval_exclude is not None:
        inside &= ~problem.eval_exclude(pts)
    err = np.full(len(pts), np.nan)
    if inside.any():
        err[inside] = checked_values(solution.evaluate, pts[inside]) - problem.exact(pts[inside])
    return {"x": xs.tolist(), "y": ys.tolist(),
            "error": [None if not np.isfinite(v) else float(v) for v in err]}
