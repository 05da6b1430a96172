"""Dirichlet Laplacian eigenvalue problems, -Laplace(u) = lambda u, u = 0 on the boundary.

The classical families call into this module when ``problem.kind == "eigen"``: each builds the
discrete operator it already uses for Poisson problems and asks for its lowest ``problem.n_eigs``
eigenpairs. Every path returns a `Solution` with ascending ``eigenvalues``, a ``modes(points)``
callable of shape ``(m, k)`` and ``evaluate`` = the first mode. Modes are normalised to unit L2
norm (discretely) and signed so that their largest nodal value is positive, which makes repeated
runs identical; the harness's eigenspace metric ignores sign and basis anyway.

Methods (each with its source):

- sparse matrices (finite differences, finite elements): the generalised symmetric problem
  ``A x = lambda B x`` by ARPACK's implicitly restarted Lanczos method in shift-invert mode about
  sigma = 0 (Lehoucq, Sorensen & Yang, ARPACK Users' Guide, SIAM 1998, sec. 3.2), with the
  factorisation of A done by SuperLU with the minimum-degree ordering that `solvers.linalg` uses.
- Chebyshev collocation on rectangles: the interior second-derivative matrices are diagonalised
  once per direction, so the 2-D spectrum is the set of sums of 1-D eigenvalues (the matrix
  diagonalisation of Haidvogel & Zang, JCP 30, 1979); inaccurate or spurious 1-D eigenvalues are
  filtered by the drift test between two resolutions (J. P. Boyd, Chebyshev and Fourier Spectral
  Methods, 2nd ed., Dover 2001, ch. 7).
- the disk: Chebyshev in r on [-1, 1] with the parity trick u(-r, t) = u(r, t + pi) and Fourier
  modes in t (Trefethen, Spectral Methods in MATLAB, SIAM 2000, ch. 11, program 28); each Fourier
  wavenumber m gives a small dense radial problem, filtered by the same drift test.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from solvers.base import Solution

__all__ = ["eigsh_lowest", "grid_eigen", "masked_eigen", "cheb_eigen", "disk_eigen",
           "fem_eigen", "fem_eigen_solution", "eigen_solution", "DRIFT_TOL"]

# Boyd's drift test: an eigenvalue is trusted when it moves by less than this (relative) between
# degree n and degree n + n/2. Spurious and unresolved eigenvalues of collocation matrices move by
# O(1); 1e-3 drops them while keeping the coarse resolutions of an error-versus-cost sweep. The
# finer degree's values (the more accurate ones) are reported.
DRIFT_TOL = 1e-3


def _sign_fix(V: np.ndarray) -> np.ndarray:
    """Sign each column so that its entry of largest magnitude is positive (deterministic output)."""
    idx = np.argmax(np.abs(V), axis=0)
    s = np.sign(V[idx, np.arange(V.shape[1])])
    s[s == 0] = 1.0
    return V * s


def eigsh_lowest(A: sps.spmatrix, k: int, B: sps.spmatrix | None = None,
                 permc_spec: str = "MMD_AT_PLUS_A") -> tuple[np.ndarray, np.ndarray]:
    """The `k` smallest eigenpairs of the symmetric positive definite pencil (A, B).

    Shift-invert Lanczos about sigma = 0: the operator A^-1 B has the wanted eigenvalues as its
    largest ones, so ARPACK converges in few iterations. Eigenvectors are B-orthonormal.
    `permc_spec` is SuperLU's fill-reducing ordering (see `fem_eigen` for why it differs there).
    """
    N = A.shape[0]
    if k >= N - 1:
        # ARPACK needs k < N - 1; tiny systems are solved densely instead.
        from scipy.linalg import eigh

        Ad = A.toarray()
        Bd = None if B is None else B.toarray()
        lam, V = eigh(Ad, Bd)
        k = min(k, N)
        return lam[:k], _sign_fix(V[:, :k])
    lu = spla.splu(sps.csc_matrix(A), permc_spec=permc_spec)
    OPinv = spla.LinearOperator(A.shape, matvec=lu.solve, dtype=float)
    # a fixed start vector: ARPACK's own random start would make runs differ in the last digits
    v0 = np.ones(N) + 0.1 * np.cos(np.arange(N))
    lam, V = spla.eigsh(A, k=k, M=B, sigma=0.0, which="LM", OPinv=OPinv, v0=v0)
    order = np.argsort(lam)
    return lam[order], _sign_fix(V[:, order])


def eigen_solution(lam: np.ndarray, modes, info: dict, nodes=None, first_values=None) -> Solution:
    """Solution of an eigen problem: evaluate = first mode, modes(points) -> (m, k)."""
    lam = np.asarray(lam, dtype=float)

    def evaluate(points):
        return np.asarray(modes(points), dtype=float)[:, 0]

    return Solution(evaluate=evaluate, nodes=nodes, values=first_values, eigenvalues=lam, modes=modes,
                    info={**info, "n_eigs": int(len(lam)), "lambda_1": float(lam[0]) if len(lam) else None})


# -- finite differences on tensor grids ------------------------------------------------------------
def grid_eigen(grid, compact: bool, k: int, info: dict) -> Solution:
    """5-point (order 2) or compact 9-point (order 4) eigenvalues on a rectangle's tensor grid.

    The compact scheme applies the Mehrstellen correction to both sides:
    -(Dxx + Dyy + (hx^2 + hy^2)/12 Dxx Dyy) u = lambda (I + (hx^2 Dxx + hy^2 Dyy)/12) u, the
    eigenvalue form of the corrected right-hand side (Collatz 1960; LeVeque 2007, sec. 3.5), which
    is fourth order for the eigenvalues of smooth eigenfunctions.
    """
    from solvers.grid import LocalLagrange, interior_matrix, second_difference

    A = interior_matrix(grid, compact)
    B = None
    if compact:
        m = grid.n - 1
        I = sps.identity(m, format="csr")
        B = (sps.identity(m * m, format="csr") + (grid.hx ** 2 * sps.kron(second_difference(m, grid.hx), I)
                                                   + grid.hy ** 2 * sps.kron(I, second_difference(m, grid.hy))) / 12.0)
        B = B.tocsr()
    lam, V = eigsh_lowest(A, k, B)
    m = grid.n - 1
    h2 = grid.hx * grid.hy
    V = V / np.sqrt(h2 * np.sum(V * V, axis=0))      # discrete L2 normalisation
    fields = []
    for j in range(V.shape[1]):
        U = np.zeros((grid.n + 1, grid.n + 1))
        U[1:-1, 1:-1] = V[:, j].reshape(m, m)
        fields.append(LocalLagrange(grid.x, grid.y, U, 3 if compact else 1))

    def modes(points):
        p = np.asarray(points, dtype=float)
        return np.column_stack([f(p) for f in fields])

    return eigen_solution(lam, modes, {**info, "dofs": int(m * m)}, nodes=grid.interior_points,
                          first_values=V[:, 0])


def masked_eigen(problem, n: int, k: int, info: dict) -> Solution:
    """Shortley-Weller 5-point eigenpairs on a masked grid over a non-rectangular domain.

    The operator is the one `solvers.masked` uses for Poisson problems (arms shortened to the
    boundary crossing; Shortley & Weller, J. Appl. Phys. 9, 1938) with zero boundary values. It is
    symmetric when no arm is cut (polygons with grid-aligned edges, such as the L-shape at even n)
    and then solved by the symmetric Lanczos path; otherwise ARPACK's non-symmetric Arnoldi in
    shift-invert mode (Lehoucq, Sorensen & Yang 1998) gives the eigenvalues nearest 0, whose
    imaginary parts are rounding (the scheme is similar to a symmetric one only approximately).
    """
    from solvers.masked import _DIRS, MaskedGrid, MaskedInterpolant

    grid = MaskedGrid(problem.domain, n)
    h = grid.h
    I, J = np.nonzero(grid.inside)
    row = grid.index[I, J]
    N = len(row)
    if N <= k + 1:
        raise ValueError(f"grid with n={n} has only {N} nodes inside the domain; raise `solver.n`")
    P = grid.points.reshape(grid.nx + 1, grid.ny + 1, 2)[I, J]
    arm, col = {}, {}
    for (di, dj) in _DIRS:
        i2, j2 = I + di, J + dj
        valid = (i2 >= 0) & (i2 <= grid.nx) & (j2 >= 0) & (j2 <= grid.ny)
        i2c, j2c = np.clip(i2, 0, grid.nx), np.clip(j2, 0, grid.ny)
        unknown = valid & grid.inside[i2c, j2c]
        cut = ~(unknown | (valid & grid.onb[i2c, j2c]))
        s = np.full(N, h)
        if cut.any():
            s[cut] = grid.crossing(P[cut], np.array([di, dj], dtype=float))
        arm[(di, dj)] = s
        col[(di, dj)] = np.where(unknown, grid.index[i2c, j2c], -1)
    diag = np.zeros(N)
    rows, cols, data = [], [], []
    for axis in (((1, 0), (-1, 0)), ((0, 1), (0, -1))):
        hp, hm = arm[axis[0]], arm[axis[1]]
        for dd, hd, ho in ((axis[0], hp, hm), (axis[1], hm, hp)):
            c = 2.0 / (hd * (hd + ho))
            diag += c
            unk = col[dd] >= 0
            rows.append(row[unk])
            cols.append(col[dd][unk])
            data.append(-c[unk])
    A = sps.csr_matrix((np.concatenate([diag] + data), (np.concatenate([row] + rows),
                                                         np.concatenate([row] + cols))), shape=(N, N))
    asym = abs(A - A.T).max()
    if asym <= 1e-12 * abs(A).max():
        lam, V = eigsh_lowest(A, k)
        method = "symmetric Lanczos"
    else:
        lu = spla.splu(A.tocsc(), permc_spec="MMD_AT_PLUS_A")
        OPinv = spla.LinearOperator(A.shape, matvec=lu.solve, dtype=float)
        v0 = np.ones(N) + 0.1 * np.cos(np.arange(N))
        lam, V = spla.eigs(A, k=k, sigma=0.0, which="LM", OPinv=OPinv, v0=v0)
        order = np.argsort(lam.real)
        lam, V = lam.real[order], _sign_fix(V.real[:, order])
        method = "shift-invert Arnoldi (non-symmetric Shortley-Weller matrix)"
    V = V / np.sqrt(h * h * np.sum(V * V, axis=0))
    fields = [MaskedInterpolant(grid, V[:, j], problem) for j in range(V.shape[1])]

    def modes(points):
        p = np.asarray(points, dtype=float)
        return np.column_stack([f(p) for f in fields])

    return eigen_solution(lam, modes, {**info, "dofs": int(N), "h": float(h), "scheme": "shortley-weller",
                                       "eigen_method": method}, nodes=P, first_values=V[:, 0])


# -- Chebyshev collocation on rectangles -----------------------------------------------------------
def _cheb_dirichlet_1d(n: int, length: float):
    """Eigen-decomposition of -d^2/dx^2 (interior Chebyshev collocation, Dirichlet) on [0, length].

    Returns ascending eigenvalues mu, eigenvectors P (interior values) and the nodes (row order).
    """
    from solvers.spectral import cheb

    D, t = cheb(n)
    D2 = (D @ D)[::-1, ::-1] * (2.0 / length) ** 2
    mu, P = np.linalg.eig(-D2[1:-1, 1:-1])
    # spurious eigenvalues of the collocation matrix may come out complex; they sort last and
    # never pass the drift test below
    bad = np.abs(mu.imag) > 1e-8 * np.abs(mu)
    mu = np.where(bad, np.inf, mu.real)
    order = np.argsort(mu)
    x = 0.5 * length * (1 - t[::-1])
    return mu[order], P[:, order].real, x


def _drift_accept(mu_coarse: np.ndarray, mu_fine: np.ndarray, tol: float) -> int:
    """How many leading eigenvalues pass Boyd's ordinal drift test (stop at the first failure)."""
    m = min(len(mu_coarse), len(mu_fine))
    ok = np.isfinite(mu_coarse[:m]) & np.isfinite(mu_fine[:m])
    with np.errstate(invalid="ignore", divide="ignore"):
        drift = np.abs(mu_coarse[:m] - mu_fine[:m]) / np.abs(mu_fine[:m])
    good = ok & (drift < tol)
    return int(np.argmin(good)) if not good.all() else m


def cheb_eigen(domain, n: int, k: int, info: dict) -> Solution:
    """Chebyshev collocation eigenpairs on a rectangle (degree n per direction, plus a drift check).

    The 2-D operator is the Kronecker sum of the 1-D ones, so its eigenpairs are
    (mu_x,i + mu_y,j, P_x[:, i] (x) P_y[:, j]). 1-D eigenvalues are computed at degree n_f = n + n/2
    (reported) and n (check); those failing the drift test are dropped, and only 2-D eigenvalues
    below the smallest sum involving a dropped one are reported (so none is skipped).
    """
    from solvers.spectral import barycentric_matrix

    a, b = domain.lengths
    nf = n + max(2, n // 2)
    mux_c, _, _ = _cheb_dirichlet_1d(n, a)
    muy_c, _, _ = _cheb_dirichlet_1d(n, b)
    mux, Px, x = _cheb_dirichlet_1d(nf, a)
    muy, Py, y = _cheb_dirichlet_1d(nf, b)
    ax = _drift_accept(mux_c, mux, DRIFT_TOL)
    ay = _drift_accept(muy_c, muy, DRIFT_TOL)
    cut = np.inf
    if ax < len(mux):
        cut = min(cut, mux[ax] + muy[0])
    if ay < len(muy):
        cut = min(cut, mux[0] + muy[ay])
    S = mux[:ax, None] + muy[None, :ay]
    flat = np.argsort(S, axis=None, kind="stable")
    vals = S.ravel()[flat]
    keep = vals < cut
    flat, vals = flat[keep][:k], vals[keep][:k]
    if len(vals) < k:
        raise RuntimeError(f"Chebyshev degree n={n} resolves only {len(vals)} of the k={k} wanted "
                           f"eigenvalues (drift tolerance {DRIFT_TOL:g}); raise `solver.n`")
    I, J = np.unravel_index(flat, S.shape)
    # full grids of the 1-D vectors with the zero boundary values, normalised in discrete L2
    def pad(P):
        return np.vstack([np.zeros((1, P.shape[1])), P, np.zeros((1, P.shape[1]))])

    Fx, Fy = pad(Px[:, I]), pad(Py[:, J])
    wx = _cc_weights(x)
    wy = _cc_weights(y)
    Fx /= np.sqrt(wx @ (Fx * Fx))
    Fy /= np.sqrt(wy @ (Fy * Fy))
    # sign: largest value of each 2-D mode positive
    sx = np.sign(Fx[np.argmax(np.abs(Fx), axis=0), np.arange(len(I))])
    sy = np.sign(Fy[np.argmax(np.abs(Fy), axis=0), np.arange(len(J))])
    Fx *= sx
    Fy *= sy

    def modes(points):
        p = np.asarray(points, dtype=float)
        Lx = barycentric_matrix(x, p[:, 0])
        Ly = barycentric_matrix(y, p[:, 1])
        return (Lx @ Fx) * (Ly @ Fy)

    X, Y = np.meshgrid(x[1:-1], y[1:-1], indexing="ij")
    nodes = np.column_stack([X.ravel(), Y.ravel()])
    first = np.outer(Fx[1:-1, 0], Fy[1:-1, 0]).ravel() if len(vals) else None
    return eigen_solution(vals, modes, {**info, "dofs": int((nf - 1) ** 2), "n_check": n, "n_used": nf,
                                        "drift_tol": DRIFT_TOL, "accepted_1d": [ax, ay]},
                          nodes=nodes if len(vals) else None, first_values=first)


def _cc_weights(x: np.ndarray) -> np.ndarray:
    """Clenshaw-Curtis quadrature weights on the mapped Chebyshev points x (Trefethen 2000, clencurt.m)."""
    n = len(x) - 1
    theta = np.pi * np.arange(n + 1) / n
    w = np.zeros(n + 1)
    v = np.ones(n - 1)
    if n % 2 == 0:
        w[0] = w[n] = 1.0 / (n * n - 1)
        for j in range(1, n // 2):
            v -= 2 * np.cos(2 * j * theta[1:-1]) / (4 * j * j - 1)
        v -= np.cos(n * theta[1:-1]) / (n * n - 1)
    else:
        w[0] = w[n] = 1.0 / (n * n)
        for j in range(1, (n - 1) // 2 + 1):
            v -= 2 * np.cos(2 * j * theta[1:-1]) / (4 * j * j - 1)
    w[1:-1] = 2 * v / n
    return w * 0.5 * abs(x[-1] - x[0])


# -- the disk: Chebyshev in r with parity, Fourier in theta ----------------------------------------
def _disk_radial(N: int, m: int):
    """Eigenpairs of the radial operator for Fourier wavenumber m on the unit disk.

    Chebyshev points r_j = cos(j pi / N) on [-1, 1] with N odd; only r > 0 are unknowns, the
    values at r < 0 follow from u(-r, t) = u(r, t + pi), i.e. a factor (-1)^m (Trefethen 2000,
    program 28). Returns ascending eigenvalues of -(d_rr + d_r / r - m^2 / r^2) and the
    eigenvectors at r_1 .. r_{(N-1)/2}.
    """
    from solvers.spectral import cheb

    D, r = cheb(N)
    N2 = (N - 1) // 2
    DD = D @ D
    D1, D2 = DD[1:N2 + 1, 1:N2 + 1], DD[1:N2 + 1, N - 1:N2:-1]
    E1, E2 = D[1:N2 + 1, 1:N2 + 1], D[1:N2 + 1, N - 1:N2:-1]
    R = np.diag(1.0 / r[1:N2 + 1])
    s = (-1.0) ** m
    L = D1 + R @ E1 + s * (D2 + R @ E2) - m * m * R @ R
    mu, V = np.linalg.eig(-L)
    bad = (np.abs(mu.imag) > 1e-8 * np.abs(mu)) | (mu.real <= 0)
    mu = np.where(bad, np.inf, mu.real)
    order = np.argsort(mu)
    return mu[order], V[:, order].real, r


def disk_eigen(center, radius: float, n: int, k: int, info: dict, max_wavenumber: int | None = None) -> Solution:
    """Eigenpairs of the disk by the Chebyshev-Fourier spectral method with the drift filter.

    `n` is the Chebyshev degree on [-1, 1] (made odd). Wavenumbers m = 0, 1, ... are added until
    m^2 exceeds the k-th accepted eigenvalue (the radial eigenvalues for wavenumber m exceed
    m^2, because j_{m,1} > m), or up to `max_wavenumber` (the angular resolution of the caller;
    eigenvalues above the lowest one of wavenumber max_wavenumber + 1 are then not trusted).
    Each m >= 1 contributes the cos and the sin mode (multiplicity 2).
    """
    from solvers.spectral import barycentric_matrix

    N = n if n % 2 == 1 else n + 1
    Nf = N + 2 * max(1, N // 4)                       # odd too, about 1.5 times the degree
    cands = []   # (lambda on the unit disk, m, trig, radial vector on the fine grid)
    cut = np.inf
    m = 0
    r = None
    while True:
        mu_c, _, _ = _disk_radial(N, m)
        mu, V, r = _disk_radial(Nf, m)
        acc = _drift_accept(mu_c, mu, DRIFT_TOL)
        if acc < len(mu) and np.isfinite(mu[acc]):
            cut = min(cut, mu[acc])
        for j in range(acc):
            for trig in ((0,) if m == 0 else (0, 1)):
                cands.append((mu[j], m, trig, V[:, j]))
        vals = sorted(c[0] for c in cands if c[0] < cut)
        if (len(vals) >= k and m * m > vals[k - 1]) or m * m > cut or m > 4 * Nf:
            break
        if max_wavenumber is not None and m >= max_wavenumber:
            # wavenumbers above the caller's angular resolution are not represented: trust only
            # eigenvalues below the lowest one of wavenumber m + 1 (they grow with m)
            cut = min(cut, float(_disk_radial(Nf, m + 1)[0][0]))
            break
        m += 1
    cands = sorted((c for c in cands if c[0] < cut), key=lambda c: (c[0], c[1], c[2]))[:k]
    if len(cands) < k:
        raise RuntimeError(f"disk spectral degree n={n} resolves only {len(cands)} of the k={k} "
                           f"wanted eigenvalues (drift tolerance {DRIFT_TOL:g}); raise `solver.n`")
    N2 = (Nf - 1) // 2
    cx, cy = float(center[0]), float(center[1])
    lam = np.array([c[0] for c in cands]) / radius ** 2
    radial = []
    for mu_j, mm, trig, v in cands:
        full = np.zeros(Nf + 1)            # values at all Chebyshev points r_0 = 1 .. r_N = -1
        full[1:N2 + 1] = v
        full[Nf - 1:N2:-1] = (-1.0) ** mm * v
        radial.append(full)
    radial = np.array(radial).T            # (Nf + 1, k)
    ms = np.array([c[1] for c in cands])
    trigs = np.array([c[2] for c in cands])
    # L2 normalisation over the unit disk: int_0^1 v(r)^2 r dr times 2 pi (m = 0) or pi (m >= 1)
    rr = np.linspace(0.0, 1.0, 2001)
    vr = barycentric_matrix(r, rr) @ radial
    norm2 = np.trapezoid(vr * vr * rr[:, None], rr, axis=0) * np.where(ms == 0, 2 * np.pi, np.pi)
    radial = radial / np.sqrt(norm2) / radius
    peak = np.argmax(np.abs(vr), axis=0)
    radial *= np.sign(vr[peak, np.arange(len(ms))])

    def modes(points):
        p = np.asarray(points, dtype=float)
        dx, dy = (p[:, 0] - cx) / radius, (p[:, 1] - cy) / radius
        rho = np.minimum(np.hypot(dx, dy), 1.0)
        th = np.arctan2(dy, dx)
        vals = barycentric_matrix(r, rho) @ radial
        ang = np.where(trigs[None, :] == 0, np.cos(ms[None, :] * th[:, None]), np.sin(ms[None, :] * th[:, None]))
        return vals * ang

    return eigen_solution(lam, modes, {**info, "dofs": int(N2 * (2 * int(ms.max()) + 1)), "n_used": Nf,
                                       "drift_tol": DRIFT_TOL, "max_wavenumber": int(ms.max())})


# -- finite elements --------------------------------------------------------------------------------
def fem_eigen(mesh, order: int, k: int):
    """Conforming Lagrange P1/P2 eigenpairs: K x = lambda M x on the interior dofs of `mesh`.

    By the min-max principle the conforming Galerkin eigenvalues bound the exact ones from above
    and converge at order 2p for smooth eigenfunctions (Strang & Fix, An Analysis of the Finite
    Element Method, 1973, ch. 6). On a quadratic (isoparametric) mesh the basis follows the
    curved geometry. Returns (eigenvalues, basis, full coefficient vectors (ndofs, k)).
    """
    from skfem import Basis, BilinearForm, ElementTriP1, ElementTriP2, asm
    from skfem.helpers import dot, grad

    from solvers.fem import boundary_facets

    @BilinearForm
    def stiffness(u, v, w):
        return dot(grad(u), grad(v))

    @BilinearForm
    def mass(u, v, w):
        return u * v

    elem = {1: ElementTriP1, 2: ElementTriP2}[order]()
    basis = Basis(mesh, elem, intorder=2 * order + 1)
    K = asm(stiffness, basis)
    M = asm(mass, basis)
    D = basis.get_dofs(facets=boundary_facets(mesh)).flatten()
    free = np.setdiff1d(np.arange(basis.N), D)
    # COLAMD, not the minimum-degree ordering of the grid solvers: on the P2 L-shape matrix with
    # 32k unknowns SuperLU took 15 s with MMD_AT_PLUS_A and 1.1 s with COLAMD (measured here)
    lam, Vi = eigsh_lowest(K[free][:, free].tocsr(), k, M[free][:, free].tocsr(), permc_spec="COLAMD")
    V = np.zeros((basis.N, len(lam)))
    V[free] = Vi
    return lam, basis, V


def fem_eigen_solution(mesh, order: int, k: int, info: dict) -> Solution:
    """Solution object of `fem_eigen`: modes evaluated through the elements' own interpolant."""
    from solvers.fem import FEMFunction, boundary_facets

    lam, basis, V = fem_eigen(mesh, order, k)
    fields = [FEMFunction(basis, V[:, j]) for j in range(V.shape[1])]

    def modes(points):
        p = np.asarray(points, dtype=float)
        return np.column_stack([f(p) for f in fields])

    dofs = int(basis.N - len(basis.get_dofs(facets=boundary_facets(mesh)).flatten()))
    return eigen_solution(lam, modes, {**info, "dofs": dofs}, nodes=basis.doflocs.T.copy(),
                          first_values=V[:, 0])
