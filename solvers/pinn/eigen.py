"""A neural-network eigen-solver for -Laplace(u) = lambda u, u = 0 on the boundary.

One network N_j per mode (lapbench.solvers.pinn.model.Network), hard Dirichlet condition
u_j = phi N_j with the domain's normalised distance function phi (Sukumar & Srivastava, CMAME
389, 2022), so every u_j vanishes on the boundary exactly; integrals by the domain's quadrature
rule. Two strategies (`strategy`):

- ``subspace`` (default): all k networks trained together on the trace of the generalised
  Rayleigh quotient, tr(B^-1 A) with A_ij = int grad u_i . grad u_j and B_ij = int u_i u_j. Its
  minimum over k-dimensional trial spaces is lambda_1 + ... + lambda_k, attained by the span of
  the first k eigenfunctions (Ky Fan's trace principle, K. Fan, Proc. Natl. Acad. Sci. 35 (1949)
  652-655; the trace-minimisation method of A. H. Sameh & J. A. Wisniewski, SIAM J. Numer. Anal.
  19 (1982) 1243-1259 [both from memory]). The loss does not depend on the basis of the span, so
  multiple eigenvalues and the ordering of the modes need no special care, and every mode gets the
  whole training time. Measured on the unit square, k = 6, width 24, 20 s: every eigenvalue
  within 5e-4 relative, where the sequential strategy left modes 4-6 at 0.4 %, 0.8 % and 32 %.
  On the L-shape (first mode singular at the re-entrant corner) its lambda_1 stalls (default
  steps, seed 0, about 35 s: 23, 2.2, 1.3, 0.8 % for lambda_1..4) and the sequential strategy
  gets 0.3, 0.5, 0.4, 2.2 %.
- ``sequential``: mode by mode, each minimising its Rayleigh quotient R(u) = int |grad u|^2 /
  int u^2 (the variational (Deep Ritz) formulation of the lowest eigenvalue, E & Yu, "The Deep
  Ritz method", Commun. Math. Stat. 6, 2018) plus an orthogonality penalty against the modes
  already found (frozen): R(u_j) + w R(u_j) sum_{i<j} <u_j, u_i>^2 / (|u_j|^2 |u_i|^2), the
  penalised variational approach of W. Zhang, T. Li & C. Schuette, "Solving eigenvalue PDEs of
  metastable diffusion processes using artificial neural networks", J. Comput. Phys. 465 (2022)
  [memory for the details]. The factor R(u_j) (held fixed in the gradient) makes the penalty
  outweigh the gain (lambda_j - lambda_i) sin^2(theta) of leaning towards a found mode whenever
  w > 1. Each mode gets the remaining time divided by the modes still to train. It is the more
  accurate for lambda_1 alone, and stalls on higher modes.

Both train through the family's driver (`lapbench.solvers.pinn.train.train`: Adam, then L-BFGS with a
strong-Wolfe line search, restarted here with a fresh curvature history when it stops early while
still gaining: LBFGS_RESTARTS), and end with a Rayleigh-Ritz
projection onto span{u_1..u_k} with an accurate quadrature of the domain (stiffness and mass
matrices of the trained functions, k x k generalised eigenproblem): it orders the modes, rotates
bases of multiple eigenvalues, and its Ritz values bound the exact eigenvalues from above up to
quadrature error (min-max principle).

Budget: the training time cap ``budget.train_cap``; NaN/Inf (or a mass matrix that lost rank)
raises `Diverged`; history entries carry the loss and the Rayleigh quotient of the mode in
training (sequential) or the trace (subspace). torch is imported only inside `_solve` and
`preload`.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError, one_of, positive
from lapbench.solvers.base import Diverged, Solver, Tags
from lapbench.solvers.eigen import eigen_solution
from lapbench.solvers.pinn.options import (ACTIVATIONS, MAX_DEPTH, MAX_DIM, MAX_WIDTH, PRECISIONS, STRATEGIES,
                                  check_schedule)
from lapbench.solvers.pinn.runtime import preload_torch

__all__ = ["PINNEigen", "PINNEigenParams", "STRATEGIES"]

# L-BFGS restarts (fresh curvature history, from the best point) after an early stop by its own
# tolerances, while they still gain (train.LBFGS_RESTART_GAIN). The early stops once seen on the
# L-shape ("the line search failed after 19 iterations") were chunks cut by their evaluation
# allowance, which the driver now simply continues; since then no measured run restarted
# (L-shape k = 4, both strategies, 200 and 600 L-BFGS steps; the nightly square cases).
LBFGS_RESTARTS = 10


@dataclasses.dataclass
class PINNEigenParams:
    """Options of the neural eigen-solver (conf/solver/pinn_eigen.yaml comments each)."""

    strategy: str = "subspace"    # subspace (trace of the Rayleigh quotient) | sequential
    width: int = 24
    depth: int = 3
    activation: str = "tanh"
    precision: str = "float64"
    train_level: int = 12         # quadrature level of the training integrals
    adam_steps: int = 200         # per mode (sequential) or in all (subspace); L-BFGS then does the work
    lr: float = 1e-3
    lr_decay: float = 0.1
    lbfgs_steps: int = 200        # per mode (sequential) or in all (subspace)
    lbfgs_history: int = 50
    patience: int = 200
    plateau_tol: float = 1e-7
    ortho_weight: float = 10.0
    quad_level: int = 48          # quadrature level of the final Rayleigh-Ritz projection

    def __post_init__(self):
        one_of("strategy", self.strategy, STRATEGIES)
        positive("width", self.width, integer=True, maximum=MAX_WIDTH)
        positive("depth", self.depth, integer=True, maximum=MAX_DEPTH)
        one_of("activation", self.activation, ACTIVATIONS)
        one_of("precision", self.precision, PRECISIONS)
        positive("train_level", self.train_level, integer=True, maximum=512)
        check_schedule(self)
        if not self.ortho_weight > 1:
            raise ConfigError(f"`ortho_weight` must exceed 1 (the penalty must outweigh the "
                              f"eigenvalue gap), got {self.ortho_weight!r}")
        positive("quad_level", self.quad_level, integer=True, maximum=1024)


class PINNEigen(Solver):
    """Neural eigen-solver: hard Dirichlet condition, the trace of the Rayleigh quotient over all
    modes (subspace) or a Rayleigh quotient per mode with orthogonality penalties (sequential),
    final Rayleigh-Ritz projection (see the module docstring).

    Sources: Fan, PNAS 35 (1949) and Sameh & Wisniewski, SIAM J. Numer. Anal. 19 (1982) (trace
    minimisation); E & Yu, Commun. Math. Stat. 6 (2018) (Rayleigh-quotient / Deep Ritz
    eigenvalues); Zhang, Li & Schuette, J. Comput. Phys. 465 (2022) (orthogonality penalties for
    the first k eigenpairs); Sukumar & Srivastava, CMAME 389 (2022) (distance functions for exact
    boundary conditions).
    """

    name = "pinn_eigen"
    family = "pinn"
    description = "neural eigen-solver: hard BC, trace of the Rayleigh quotient (or per-mode penalties), Rayleigh-Ritz"
    reference = ("Fan, PNAS 35 (1949); Sameh & Wisniewski, SIAM J. Numer. Anal. 19 (1982); E & Yu, "
                 "Commun. Math. Stat. 6 (2018); Zhang, Li & Schuette, J. Comput. Phys. 465 (2022); "
                 "Sukumar & Srivastava, CMAME 389 (2022)")
    Params = PINNEigenParams
    # same seed, same thread count -> same result to rounding (a run cut by the time cap excepted)
    # d-boxes and d-balls: the domain's quadrature is its randomised QMC rule for d >= 3
    tags = Tags(kinds=frozenset({"eigen"}),
                domains=frozenset({"rectangle", "disk", "annulus", "polygon", "box", "ball"}),
                deterministic=True, dims=frozenset(range(1, MAX_DIM + 1)))

    preload_modules = ("scipy.linalg",)

    @classmethod
    def preload(cls) -> None:
        """torch and its first optimiser step (`runtime.preload_torch`), then `preload_modules`."""
        preload_torch()
        super().preload()

    def resolution(self) -> dict:
        p = self.params
        return {"width": p.width, "depth": p.depth, "train_level": p.train_level}

    def memory_estimate_mb(self) -> float:
        p = self.params
        size = 8 if p.precision == "float64" else 4
        points = 16 * p.train_level ** 2          # a rectangle's rule: (4 level)^2 points
        graph = 8 * 3 * points * p.width * p.depth * size
        lbfgs = 2 * p.lbfgs_history * (p.width * p.width * p.depth) * size
        return (graph + lbfgs) / 2 ** 20

    def _solve(self, problem, budget, ctx):
        import torch

        from lapbench.solvers.pinn.model import Network, torch_dtype
        from lapbench.solvers.pinn.train import Objective, Schedule, train

        p = self.params
        k = int(problem.n_eigs)
        d = problem.domain
        with ctx.phase("setup"):
            dtype = torch_dtype(p.precision)
            gen = torch.Generator().manual_seed(ctx.seed)
            # integrals by the domain's quadrature rule, not Monte Carlo: with fewer random points
            # than weights the network lowered the sampled Rayleigh quotient below lambda_1 on the
            # L-shape (8.1 < 9.64) while the true quotient was 46 (measured here)
            x, wq = d.quadrature(p.train_level)
            keep = d.distance(x) > 0
            x, wq = x[keep], wq[keep]
            phi, gphi = _phi_gradient(d, x)
            X = torch.as_tensor(x, dtype=dtype)
            W = torch.as_tensor(wq / wq.sum(), dtype=dtype)
            PHI = torch.as_tensor(phi, dtype=dtype)
            GPHI = torch.as_tensor(gphi, dtype=dtype)
            nets = [Network(d.bbox, p.width, p.depth, p.activation, 0, 1.0, dtype, gen) for _ in range(k)]
        t0 = ctx.elapsed()
        cap = budget.train_cap
        sched = Schedule.of(p, lbfgs_restarts=LBFGS_RESTARTS)
        results = []

        def fields(net):
            return _hard_fields(net, X, PHI, GPHI)

        with ctx.phase("train"):
            if p.strategy == "subspace":
                objective = Objective(_trace_objective(nets, fields, W),
                                      [q for net in nets for q in net.parameters()])
                results.append(train(objective, sched, cap, ctx, modes=k))
            else:
                found: list = []      # values of the finished modes at the quadrature points (frozen)
                for j, net in enumerate(nets):
                    share = max(0.0, cap - (ctx.elapsed() - t0)) / (k - j)
                    objective = Objective(_penalised_objective(net, fields, W, found, p.ortho_weight),
                                          list(net.parameters()))
                    step = results[-1].steps if results else 0
                    results.append(train(objective, sched, share, ctx, step=step, mode=j + 1))
                    with torch.no_grad():
                        found.append((PHI * net(X)).detach())
        step = results[-1].steps
        with ctx.phase("solve"):
            lam, C, fields = _rayleigh_ritz(nets, d, p.quad_level)
        if not np.all(np.isfinite(lam)):
            raise Diverged("Rayleigh-Ritz eigenvalues are not finite", step)

        def modes(points):
            return fields(np.asarray(points, dtype=float)) @ C

        info = {"params": int(sum(n.n_parameters for n in nets)), "iterations": step, "dofs": None,
                **{c: sum(getattr(r, c) for r in results)
                   for c in ("adam_steps", "lbfgs_iterations", "lbfgs_evaluations", "lbfgs_restarts")},
                "stopped": [r.stopped for r in results], "precision": p.precision, "strategy": p.strategy}
        return eigen_solution(lam, modes, info)

def _hard_fields(net, X, PHI, GPHI):
    """u = phi N and grad u = N grad phi + phi grad N at the points X (torch tensors)."""
    u, g, _ = net.derivatives(X, order=1)
    return PHI * u, GPHI * u[:, None] + PHI[:, None] * g


def _penalised_objective(net, fields, W, found, weight):
    """Sequential strategy: Rayleigh quotient of one mode plus orthogonality penalties."""
    import torch

    def objective(step):
        v, gv = fields(net)
        den = (W * v * v).sum()
        R = (W * (gv * gv).sum(1)).sum() / den
        pen = torch.zeros((), dtype=v.dtype)
        for f in found:
            pen = pen + (W * v * f).sum() ** 2 / (den * (W * f * f).sum())
        return R + weight * R.detach() * pen, {"rayleigh": R.detach(), "ortho": pen.detach()}

    return objective


def _trace_objective(nets, fields, W):
    """Subspace strategy: tr(B^-1 A) over the span of all modes (float64 k x k algebra)."""
    import torch

    def objective(step):
        V, G = zip(*(fields(net) for net in nets))
        V, G = torch.stack(V, 1), torch.stack(G, 1)                 # (m, k), (m, k, d)
        B = (V.T @ (W[:, None] * V)).double()
        A = torch.einsum("mkd,m,mld->kl", G, W, G).double()
        L, info = torch.linalg.cholesky_ex(B)
        # Rounding can leave a tiny positive pivot where B is singular (two equal trial functions
        # give l22^2 = b - (b / sqrt(b))^2 ~ eps b): a squared pivot below 64 eps of its diagonal
        # entry, in the precision B was formed in, is a lost rank too [common practice].
        pivots = torch.diagonal(L) ** 2
        if int(info) != 0 or bool((pivots <= 64 * torch.finfo(V.dtype).eps * torch.diagonal(B)).any()):
            raise Diverged(f"the mass matrix of the {len(nets)} trial functions lost rank at "
                           f"step {step} (they became linearly dependent)", step)
        Y = torch.linalg.solve_triangular(L, A, upper=False)
        M = torch.linalg.solve_triangular(L, Y.T, upper=False)      # L^-1 A L^-T, similar to B^-1 A
        trace = torch.trace(M)
        return trace, {"trace": trace.detach()}

    return objective


def _phi_gradient(domain, x: np.ndarray):
    """phi and its gradient at interior points by central differences of a local step.

    The step is a thousandth of the point's distance to the boundary (capped at 1e-4 of the
    domain size), so the stencil stays inside and resolves phi even at quadrature points graded
    towards corners, where a fixed step would span a region far larger than the distance
    (truncation O((h/d)^2) relative: about 1e-6) [common practice].
    """
    x = np.asarray(x, dtype=float)
    dist = np.asarray(domain.distance(x), dtype=float)
    h = np.clip(1e-3 * dist, 1e-12 * domain.scale, 1e-4 * domain.scale)[:, None]
    phi = np.asarray(domain.phi(x), dtype=float)
    grad = np.empty_like(x)
    for i in range(x.shape[1]):
        e = np.zeros(x.shape[1])
        e[i] = 1.0
        grad[:, i] = (np.asarray(domain.phi(x + h * e), dtype=float)
                      - np.asarray(domain.phi(x - h * e), dtype=float)) / (2 * h[:, 0])
    return phi, grad


def _rayleigh_ritz(nets, domain, level: int):
    """Ritz values and coefficients on span{phi N_j}, quadrature of the domain at `level`.

    Returns (ascending eigenvalues, coefficient matrix C (k, k) with unit-L2 Ritz vectors,
    fields(points) -> (m, k) values of the trained functions phi N_j in float64).
    """
    import copy

    import scipy.linalg
    import torch

    nets64 = [copy.deepcopy(n).double() for n in nets]
    pts, w = domain.quadrature(level)
    inside = domain.distance(pts) > 0
    pts, w = pts[inside], w[inside]
    phi, gphi = _phi_gradient(domain, pts)
    X = torch.as_tensor(pts, dtype=torch.float64)
    PHI, GPHI = torch.as_tensor(phi), torch.as_tensor(gphi)
    with torch.no_grad():
        V, G = zip(*(_hard_fields(net, X, PHI, GPHI) for net in nets64))
    V = torch.stack(V, 1).numpy()                             # (m, k)
    G = torch.stack(G, 1).numpy()                             # (m, k, d)
    A = np.einsum("m,mid,mjd->ij", w, G, G)
    B = np.einsum("m,mi,mj->ij", w, V, V)
    lam, C = scipy.linalg.eigh(A, B)
    # sign: largest value of each Ritz vector on the quadrature points positive (deterministic)
    R = V @ C
    s = np.sign(R[np.argmax(np.abs(R), axis=0), np.arange(R.shape[1])])
    s[s == 0] = 1.0
    C = C * s

    def fields(points):
        q = np.ascontiguousarray(np.asarray(points, dtype=float).reshape(-1, nets64[0].dim))
        ph = np.asarray(domain.phi(q), dtype=float)
        with torch.no_grad():
            Xq = torch.as_tensor(q, dtype=torch.float64)
            return np.column_stack([ph * n(Xq).numpy() for n in nets64])

    return lam, C, fields
