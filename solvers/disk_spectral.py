"""Spectral collocation on the disk: Chebyshev in radius x Fourier in angle, mode by mode.

Eigenproblems (`disk_eigen`) solve one radial eigenproblem per Fourier wavenumber and keep the
eigenvalues that pass the drift test of `lapbench.solvers.eigen`.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.eigen import DRIFT_TOL, drift_accept, eigen_solution
from lapbench.solvers.spectral import barycentric_matrix, cheb

__all__ = ["DiskChebyshev", "disk_eigen"]


@dataclasses.dataclass
class DiskChebParams:
    """Options of the disk spectral solver."""

    n: int = 16     # radial collocation points in (0, R) (Chebyshev degree 2n + 1 on [-R, R])
    m: int = 32     # angular points (even); Fourier modes |k| <= m/2

    def __post_init__(self):
        positive("n", self.n, integer=True, maximum=2048)
        positive("m", self.m, integer=True, maximum=8192)
        if self.m % 2 or self.m < 4:
            raise ConfigError(f"`m` must be an even integer >= 4 (angular points), got {self.m!r}")


class DiskChebyshev(Solver):
    """Chebyshev-Fourier collocation for -Laplace(u) = f on a disk with Dirichlet data.

    The radius runs over [-1, 1] on Chebyshev points of odd degree N = 2n + 1 (the centre is no
    node), with the symmetry u(-r, theta) = u(r, theta + pi) that makes the polar grid smooth
    at the centre (Fornberg 1996; Trefethen, Spectral Methods in MATLAB, SIAM 2000, ch. 11,
    program 29). The angle carries m equispaced points. Because the operator commutes with
    rotations, each Fourier mode k decouples: u_k'' + u_k'/r - k^2 u_k / r^2 = -R^2 f_k on the
    n positive nodes, with u_k(-r) = (-1)^k u_k(r) folding the negative half; n x n solves for
    m/2 + 1 modes instead of one dense (n m)^2 system. Boundary data enter through the columns
    of r = +-1. `evaluate` interpolates spectrally: barycentric in r (Berrut & Trefethen 2004),
    trigonometric in theta.
    """

    name = "disk_cheb"
    family = "spectral"
    preload_modules = ("scipy.linalg",)
    description = "Chebyshev (radius) x Fourier (angle) collocation on a disk, mode by mode"
    reference = "Trefethen, Spectral Methods in MATLAB, SIAM 2000, ch. 11; Fornberg 1996"
    Params = DiskChebParams
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=frozenset({"disk"}))

    def resolution(self) -> dict:
        return {"n": self.params.n, "m": self.params.m}

    def memory_estimate_mb(self) -> float:
        """Per-mode n x n matrices (m/2 + 1 of them) plus the grid data."""
        n, m = self.params.n, self.params.m
        return (8 * (m // 2 + 1) * n * n * 3 + 16 * (2 * n + 2) * m * 4) / 2 ** 20

    def _solve(self, problem, budget, ctx):
        d = problem.domain
        n, m = self.params.n, self.params.m
        if problem.kind == "eigen":  # radial eigenproblems per wavenumber
            with ctx.phase("solve"):
                return disk_eigen((d.cx, d.cy), d.radius, 2 * n + 1, problem.n_eigs,
                                  {"h": float(d.radius / n)}, max_wavenumber=m // 2)
        N = 2 * n + 1
        with ctx.phase("setup"):
            D, r = cheb(N)                       # r_0 = 1 > r_1 > ... > r_N = -1
            D2 = D @ D
            pos = np.arange(1, n + 1)            # interior nodes with r > 0
            neg = N - pos                        # their mirror images, r_{N-j} = -r_j
            Rinv = 1.0 / r[pos]
            A = D2[pos] + Rinv[:, None] * D[pos]            # rows: u'' + u'/r at positive nodes
            th = 2 * np.pi * np.arange(m) / m
            K = m // 2 + 1
            k = np.arange(K)
            rp = r[pos]
            X = d.cx + d.radius * rp[:, None] * np.cos(th)[None, :]
            Y = d.cy + d.radius * rp[:, None] * np.sin(th)[None, :]
            F = problem.f_or_zero(np.column_stack([X.ravel(), Y.ravel()])).reshape(n, m)
            Fk = np.fft.rfft(F, axis=1) / m                                  # (n, K)
            bpts = np.column_stack([d.cx + d.radius * np.cos(th), d.cy + d.radius * np.sin(th)])
            G = problem.g(bpts) if problem.g is not None else np.zeros(m)
            Gk = np.fft.rfft(np.asarray(G, dtype=float)) / m                # (K,)
            sign = (-1.0) ** k
            # mode-k operator on the positive nodes, negative half folded by parity
            L = (A[None, :, pos] + sign[:, None, None] * A[None][:, :, neg]
                 - (k[:, None, None] ** 2) * np.diag(Rinv ** 2)[None])
            rhs = (-d.radius ** 2 * Fk.T
                   - (A[:, 0][None, :] + sign[:, None] * A[:, N][None, :]) * Gk[:, None])   # (K, n)
        with ctx.phase("solve"):
            sol = np.linalg.solve(L, np.stack([rhs.real, rhs.imag], axis=-1))
            Uk = sol[..., 0] + 1j * sol[..., 1]                               # (K, n)
        # all N + 1 radial values per mode: boundary, positive nodes, mirrored nodes
        V = np.empty((K, N + 1), dtype=complex)
        V[:, 0] = Gk
        V[:, N] = sign * Gk
        V[:, pos] = Uk
        V[:, neg] = sign[:, None] * Uk
        weights = np.full(K, 2.0)
        weights[0] = 1.0
        weights[-1] = 1.0                        # Nyquist mode counted once
        values = np.fft.irfft(Uk.T * m, n=m, axis=1)                          # (n, m) nodal values
        nodes = np.column_stack([X.ravel(), Y.ravel()])
        evaluate = _DiskInterpolant(d, r, V, weights)
        return Solution(evaluate=evaluate, nodes=nodes, values=values.ravel(),
                        info={"dofs": int(n * m), "iterations": 0, "modes": int(K),
                              "chebyshev_degree": int(N)})


class _DiskInterpolant:
    """u(rho, theta) = Re sum_k w_k u_k(rho) e^{i k theta}, u_k by barycentric interpolation."""

    def __init__(self, domain, r, V, weights):
        self.d, self.r, self.V, self.w = domain, r, V, weights

    def __call__(self, points):
        p = np.asarray(points, dtype=float).reshape(-1, 2)
        out = np.empty(len(p))
        K = self.V.shape[0]
        k = np.arange(K)
        for s in range(0, len(p), 20_000):
            q = p[s:s + 20_000]
            dx, dy = q[:, 0] - self.d.cx, q[:, 1] - self.d.cy
            rho = np.hypot(dx, dy) / self.d.radius
            th = np.arctan2(dy, dx)
            B = barycentric_matrix(self.r, rho)                 # (q, N+1)
            Uk = B @ self.V.T                                   # (q, K)
            out[s:s + 20_000] = np.real((Uk * self.w[None, :]) * np.exp(1j * th[:, None] * k[None, :])).sum(1)
        return out


# -- eigenproblems ---------------------------------------------------------------------------------
def _disk_radial(N: int, m: int):
    """Eigenpairs of the radial operator for Fourier wavenumber m on the unit disk.

    Chebyshev points r_j = cos(j pi / N) on [-1, 1] with N odd; only r > 0 are unknowns, the
    values at r < 0 follow from u(-r, t) = u(r, t + pi), i.e. a factor (-1)^m (Trefethen 2000,
    program 28). Returns ascending eigenvalues of -(d_rr + d_r / r - m^2 / r^2) and the
    eigenvectors at r_1 .. r_{(N-1)/2}.
    """
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
    Each m >= 1 contributes the cos and the sin mode (multiplicity 2). Chebyshev in r on
    [-1, 1] with the parity trick and Fourier modes in t follow Trefethen (Spectral Methods in
    MATLAB, SIAM 2000, ch. 11, program 28); each wavenumber gives a small dense radial problem.
    """
    N = n if n % 2 == 1 else n + 1
    Nf = N + 2 * max(1, N // 4)                       # odd too, about 1.5 times the degree
    cands = []   # (lambda on the unit disk, m, trig, radial vector on the fine grid)
    cut = np.inf
    m = 0
    r = None
    while True:
        mu_c, _, _ = _disk_radial(N, m)
        mu, V, r = _disk_radial(Nf, m)
        acc = drift_accept(mu_c, mu, DRIFT_TOL)
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
