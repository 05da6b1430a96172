"""Loss functions: the strong-form residual and the Deep Ritz energy, soft or hard boundaries.

Strong form (Raissi, Perdikaris & Karniadakis, J. Comput. Phys. 378, 2019):
    L = mean_i (Lap u(x_i) + f(x_i))^2  [+ w mean_j (u(y_j) - g(y_j))^2  for soft boundaries].
Deep Ritz (E & Yu, Commun. Math. Stat. 6, 2018): the Dirichlet energy by Monte Carlo,
    E = |Omega| mean_i (|grad u(x_i)|^2 / 2 - f(x_i) u(x_i))  [+ w mean_j (u(y_j) - g(y_j))^2],
whose minimiser over functions with u = g on the boundary solves -Lap u = f.
Hard boundaries (Sukumar & Srivastava, CMAME 389, 2022): u = g_ext + phi N with phi = 0 on the
boundary, so u = g there whatever the network N does; product rule
    grad u = grad g_ext + N grad phi + phi grad N,
    Lap u  = Lap g_ext + N Lap phi + 2 grad phi . grad N + phi Lap N,
with g_ext, phi and their derivatives fixed per point (sampling.point_data).

Stochastic dimension sampling (``laplacian_dims = k``, 0 < k < d; Hu, Shukla, Karniadakis &
Kawaguchi, "Tackling the curse of dimensionality with physics-informed neural networks", Neural
Networks 176 (2024) 106369 [volume and article number from memory]): each step draws k of the d
coordinates I uniformly without replacement (the same I for every point of the step) and the
network is differentiated along I only, so the forward Laplacian carries k + 2 streams, not
d + 2. Since P(i in I) = k / d, the estimates

    Lap N ~ (d / k) sum_{i in I} N_ii,   grad phi . grad N ~ (d / k) sum_{i in I} phi_i N_i,
    |grad u|^2 ~ (d / k) sum_{i in I} (u_i)^2

are unbiased; Lap g_ext and Lap phi are fixed data and stay exact. The squared residual of an
unbiased Laplacian is a biased estimate of the squared residual (by the estimator's variance),
which the paper accepts; the subset is a function of (seed, step), so runs are reproducible.
The sampling applies to the Adam phase only (the paper trains with Adam): L-BFGS needs one
deterministic objective (a chunked run whose subset changed between chunks diverged, measured:
nd_harmonic, d = 5, k = 2), so `PINNObjective.before_lbfgs` switches to all d coordinates.

`Collocation` holds the current point sets; `PINNObjective` is the loss on them in the form the
training driver (`lapbench.solvers.pinn.train`) takes, with the point resampling and residual-based
refinement between Adam steps.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import torch

from lapbench.solvers.pinn.options import BOUNDARIES, LOSSES
from lapbench.solvers.pinn.sampling import PointData, boundary_points, interior_points, point_data

__all__ = ["Batch", "Boundary", "Collocation", "Loss", "PINNObjective", "LOSSES", "BOUNDARIES"]


class Batch:
    """`PointData` as torch tensors of one dtype (built once per collocation set)."""

    FIELDS = ("x", "f", "g", "grad_g", "lap_g", "phi", "grad_phi", "lap_phi")

    def __init__(self, data: PointData, dtype: torch.dtype):
        self.data = data
        for name in self.FIELDS:
            v = getattr(data, name)
            setattr(self, name, None if v is None else torch.as_tensor(np.ascontiguousarray(v), dtype=dtype))

    def __len__(self) -> int:
        return len(self.data)


@dataclasses.dataclass
class Boundary:
    """Boundary points and data for soft boundary conditions (torch tensors)."""

    x: torch.Tensor
    g: torch.Tensor


@dataclasses.dataclass
class Loss:
    """One loss configuration; call it on a batch to get ``(loss, {"loss_pde", "loss_bc"})``."""

    kind: str = "residual"          # residual | ritz
    hard: bool = False
    bc_weight: float = 100.0
    laplacian: str = "forward"      # forward | autograd | func (see model.Network.derivatives)
    area: float = 1.0               # |Omega| for the Ritz energy
    laplacian_dims: int = 0         # k of d coordinates sampled per step (0 or >= d: all)
    seed: int = 0                   # with the step, fixes the sampled coordinates

    def sampled_dims(self, d: int, step: int | None):
        """The sorted coordinates differentiated at `step` (None: all d, also for step None)."""
        k = self.laplacian_dims
        if step is None or k <= 0 or k >= d:
            return None
        gen = torch.Generator().manual_seed(int(self.seed) * 1_000_003 + int(step))
        return sorted(torch.randperm(d, generator=gen)[:k].tolist())

    def solution(self, net, batch: Batch, order: int, step: int | None = None):
        """``(u, grad u, None)`` (order 1) or ``(u, None, Lap u)`` (order 2) of the
        boundary-treated solution at the batch points (the losses need no more).

        With coordinate sampling at `step` (module docstring) grad u holds the sampled
        coordinates scaled by sqrt(d / k) (so that |grad u|^2 is the unbiased estimate) and
        Lap u is the unbiased estimate."""
        d = batch.x.shape[1]
        dims = self.sampled_dims(d, step)
        N, gN, lN = net.derivatives(batch.x, order, self.laplacian, dims)
        if dims is None:
            grad_g, grad_phi, c = batch.grad_g, batch.grad_phi, 1.0
        else:
            c = d / len(dims)
            grad_g = None if batch.grad_g is None else batch.grad_g[:, dims]
            grad_phi = None if batch.grad_phi is None else batch.grad_phi[:, dims]
        if not self.hard:
            return (N, gN * c ** 0.5, None) if order == 1 else (N, None, c * lN)
        u = batch.g + batch.phi * N
        if order == 1:
            return u, (grad_g + N[:, None] * grad_phi + batch.phi[:, None] * gN) * c ** 0.5, None
        lu = batch.lap_g + N * batch.lap_phi + c * (2.0 * (grad_phi * gN).sum(1) + batch.phi * lN)
        return u, None, lu

    def residual(self, net, batch: Batch) -> torch.Tensor:
        """Pointwise strong-form residual Lap u + f (for adaptive refinement)."""
        with torch.enable_grad():
            _, _, lu = self.solution(net, batch, 2)
        return (lu + batch.f).detach()

    def __call__(self, net, batch: Batch, boundary: Boundary | None, step: int | None = None):
        if self.kind == "residual":
            _, _, lu = self.solution(net, batch, 2, step)
            pde = torch.mean((lu + batch.f) ** 2)
        else:
            u, gu, _ = self.solution(net, batch, 1, step)
            pde = self.area * torch.mean(0.5 * (gu * gu).sum(1) - batch.f * u)
        if self.hard or boundary is None:
            return pde, {"loss_pde": pde, "loss_bc": None}
        bc = torch.mean((net(boundary.x) - boundary.g) ** 2)
        return pde + self.bc_weight * bc, {"loss_pde": pde, "loss_bc": bc}


class Collocation:
    """The current interior (and, for soft boundaries, boundary) points with their fixed data."""

    def __init__(self, problem, n_interior: int, n_boundary: int, sampling: str, hard: bool,
                 dtype: torch.dtype, rng: np.random.Generator):
        self.problem, self.n_interior, self.n_boundary = problem, n_interior, n_boundary
        self.sampling, self.hard, self.dtype, self.rng = sampling, hard, dtype, rng
        self.added = None
        self.resample()

    def resample(self) -> None:
        """Fresh interior (and boundary) points; points added by refinement are kept."""
        x = interior_points(self.problem.domain, self.n_interior, self.sampling, self.rng)
        self.base = point_data(self.problem, x, self.hard)
        self._rebuild()
        self.boundary = None
        if not self.hard:
            xb = boundary_points(self.problem.domain, self.n_boundary, self.rng)
            # no data: homogeneous boundary condition
            g = np.zeros(len(xb)) if self.problem.g is None else self.problem.g(xb)
            self.boundary = Boundary(torch.as_tensor(xb, dtype=self.dtype),
                                     torch.as_tensor(g, dtype=self.dtype))

    def _rebuild(self) -> None:
        data = self.base if self.added is None else self.base.concat(self.added)
        self.batch = Batch(data, self.dtype)

    def refine(self, net, loss: Loss, n_candidates: int, n_add: int) -> None:
        """Residual-based adaptive refinement: add the `n_add` candidates of largest |residual|.

        Lu, Meng, Mao & Karniadakis, "DeepXDE: a deep learning library for solving differential
        equations", SIAM Review 63 (2021), section on RAR: uniform random candidates, the points
        with the largest PDE residual join the training set.
        """
        x = interior_points(self.problem.domain, n_candidates, "uniform", self.rng)
        cand = point_data(self.problem, x, self.hard)
        r = loss.residual(net, Batch(cand, self.dtype)).abs().numpy()
        top = np.argsort(-r, kind="stable")[:n_add]
        pick = type(cand)(**{k: (None if v is None else v[top]) for k, v in vars(cand).items()})
        self.added = pick if self.added is None else self.added.concat(pick)
        self._rebuild()


@dataclasses.dataclass
class PINNObjective:
    """The PINN loss on the current collocation set, as `lapbench.solvers.pinn.train.train` takes it.

    ``resample_every`` / ``rar_every``: fresh points, or a residual-based refinement adding
    ``rar_add`` of ``rar_candidates`` points, every k Adam steps (0: never; none after the last).
    """

    net: torch.nn.Module
    loss: Loss
    colloc: Collocation
    resample_every: int = 0
    rar_every: int = 0
    rar_candidates: int = 10000
    rar_add: int = 100

    @property
    def params(self):
        return list(self.net.parameters())

    sample_dims: bool = True        # coordinate sampling on (Adam phase); before_lbfgs ends it

    def __call__(self, step: int):
        return self.loss(self.net, self.colloc.batch, self.colloc.boundary,
                         step if self.sample_dims else None)

    def before_lbfgs(self) -> None:
        self.sample_dims = False

    def after_adam_step(self, step: int, more: bool) -> None:
        if self.resample_every and step % self.resample_every == 0 and more:
            self.colloc.resample()
        if self.rar_every and step % self.rar_every == 0 and more:
            self.colloc.refine(self.net, self.loss, self.rar_candidates, self.rar_add)
