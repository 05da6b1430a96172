"""Shared helpers of the Dirichlet Laplacian eigen paths, -Laplace(u) = lambda u, u = 0 on the boundary.

Each classical family owns its eigen path, next to the discrete operator it already uses for
Poisson problems, and calls it when ``problem.kind == "eigen"``:

- fd5/fd9 on rectangles: `lapbench.solvers.fd.grid_eigen`; fd5 elsewhere: `lapbench.solvers.masked.masked_eigen`
- fem_p1/fem_p2: `lapbench.solvers.fem.fem_eigen` and `fem_eigen_solution`
- cheb: `lapbench.solvers.spectral.cheb_eigen`; disk_cheb: `lapbench.solvers.disk_spectral.disk_eigen`

This module holds what they share and imports no family module (imports run families -> eigen
-> base). Every path returns a `Solution` built by `eigen_solution`, with ascending
``eigenvalues``, a ``modes(points)`` callable of shape ``(m, k)`` and ``evaluate`` = the first
mode. Modes are normalised to unit L2 norm (discretely) and signed so that their largest nodal
value is positive (`sign_fix`), which makes repeated runs identical; the harness's eigenspace
metric ignores sign and basis anyway.

Shared methods (each with its source):

- sparse matrices (finite differences, finite elements): the generalised symmetric problem
  ``A x = lambda B x`` by ARPACK's implicitly restarted Lanczos method in shift-invert mode about
  sigma = 0 (Lehoucq, Sorensen & Yang, ARPACK Users' Guide, SIAM 1998, sec. 3.2), with the
  factorisation of A done by SuperLU with the minimum-degree ordering that `lapbench.solvers.linalg` uses
  (`eigsh_lowest`).
- collocation matrices (Chebyshev on rectangles and on the disk): inaccurate or spurious
  eigenvalues are filtered by the drift test between two resolutions (J. P. Boyd, Chebyshev and
  Fourier Spectral Methods, 2nd ed., Dover 2001, ch. 7) (`drift_accept`, `DRIFT_TOL`).
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from lapbench.solvers.base import Solution

__all__ = ["eigsh_lowest", "shift_invert", "eigen_solution", "field_modes", "sign_fix", "drift_accept",
           "DRIFT_TOL"]

# Boyd's drift test: an eigenvalue is trusted when it moves by less than this (relative) between
# degree n and degree n + n/2. Spurious and unresolved eigenvalues of collocation matrices move by
# O(1); 1e-3 drops them while keeping the coarse resolutions of an error-versus-cost sweep. The
# finer degree's values (the more accurate ones) are reported.
DRIFT_TOL = 1e-3


def sign_fix(V: np.ndarray) -> np.ndarray:
    """Sign each column so that its entry of largest magnitude is positive (deterministic output)."""
    idx = np.argmax(np.abs(V), axis=0)
    s = np.sign(V[idx, np.arange(V.shape[1])])
    s[s == 0] = 1.0
    return V * s


def shift_invert(A: sps.spmatrix, permc_spec: str = "MMD_AT_PLUS_A") -> tuple[spla.LinearOperator, np.ndarray]:
    """ARPACK's shift-invert operator A^-1 about sigma = 0 (SuperLU) and a fixed start vector.

    The start vector is fixed because ARPACK's own random start would make runs differ in the
    last digits.
    """
    N = A.shape[0]
    lu = spla.splu(sps.csc_matrix(A), permc_spec=permc_spec)
    OPinv = spla.LinearOperator(A.shape, matvec=lu.solve, dtype=float)
    return OPinv, np.ones(N) + 0.1 * np.cos(np.arange(N))


def eigsh_lowest(A: sps.spmatrix, k: int, B: sps.spmatrix | None = None,
                 permc_spec: str = "MMD_AT_PLUS_A") -> tuple[np.ndarray, np.ndarray]:
    """The `k` smallest eigenpairs of the symmetric positive definite pencil (A, B).

    Shift-invert Lanczos about sigma = 0: the operator A^-1 B has the wanted eigenvalues as its
    largest ones, so ARPACK converges in few iterations. Eigenvectors are B-orthonormal.
    `permc_spec` is SuperLU's fill-reducing ordering (see `lapbench.solvers.fem.fem_eigen` for why it
    differs there).
    """
    N = A.shape[0]
    if k >= N - 1:
        # ARPACK needs k < N - 1; tiny systems are solved densely instead.
        from scipy.linalg import eigh

        Ad = A.toarray()
        Bd = None if B is None else B.toarray()
        lam, V = eigh(Ad, Bd)
        k = min(k, N)
        return lam[:k], sign_fix(V[:, :k])
    OPinv, v0 = shift_invert(A, permc_spec)
    lam, V = spla.eigsh(A, k=k, M=B, sigma=0.0, which="LM", OPinv=OPinv, v0=v0)
    order = np.argsort(lam)
    return lam[order], sign_fix(V[:, order])


def eigen_solution(lam: np.ndarray, modes, info: dict, nodes=None, first_values=None) -> Solution:
    """Solution of an eigen problem: evaluate = first mode, modes(points) -> (m, k)."""
    lam = np.asarray(lam, dtype=float)

    def evaluate(points):
        return np.asarray(modes(points), dtype=float)[:, 0]

    return Solution(evaluate=evaluate, nodes=nodes, values=first_values, eigenvalues=lam, modes=modes,
                    info={**info, "n_eigs": int(len(lam)), "lambda_1": float(lam[0]) if len(lam) else None})


def field_modes(fields):
    """``modes(points) -> (m, k)`` from one interpolant (a callable of points) per mode."""

    def modes(points):
        p = np.asarray(points, dtype=float)
        return np.column_stack([f(p) for f in fields])

    return modes


def drift_accept(mu_coarse: np.ndarray, mu_fine: np.ndarray, tol: float) -> int:
    """How many leading eigenvalues pass Boyd's ordinal drift test (stop at the first failure)."""
    m = min(len(mu_coarse), len(mu_fine))
    ok = np.isfinite(mu_coarse[:m]) & np.isfinite(mu_fine[:m])
    with np.errstate(invalid="ignore", divide="ignore"):
        drift = np.abs(mu_coarse[:m] - mu_fine[:m]) / np.abs(mu_fine[:m])
    good = ok & (drift < tol)
    return int(np.argmin(good)) if not good.all() else m

