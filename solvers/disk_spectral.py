"""Spectral collocation on the disk: Chebyshev in radius x Fourier in angle, mode by mode."""
from __future__ import annotations

import dataclasses

import numpy as np

from bench.config import ConfigError, positive
from solvers.base import Solution, Solver, Tags
from solvers.spectral import barycentric_matrix, cheb

__all__ = ["DiskChebyshev"]


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
    preload_modules = ("scipy.linalg", "solvers.eigen")
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
        if problem.kind == "eigen":  # radial eigenproblems per wavenumber (solvers/eigen.py)
            from solvers.eigen import disk_eigen

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
