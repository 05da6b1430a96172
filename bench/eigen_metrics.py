"""Harness-side errors of eigen problems: eigenvalue errors and eigenspace angles.

Importing this module registers ``MEASURES["eigen"]`` in bench.run.

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
"""
from __future__ import annotations

import numpy as np

from bench.metrics import BadSolution

__all__ = ["eigen_errors", "eigenspace_angle", "clusters"]


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


def _register():
    from bench.run import MEASURES

    MEASURES["eigen"] = eigen_errors


_register()
