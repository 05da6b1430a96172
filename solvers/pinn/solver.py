"""The PINN solvers: one configurable class and the presets a practitioner would try first.

This module does not import torch at import time (``lapbench list`` and the classical cases stay
fast); ``preload()`` imports it in the harness parent so that forked cases do not pay for it.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from lapbench.config import ConfigError, one_of, positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.pinn.options import (ACTIVATIONS, BOUNDARIES, LAPLACIAN_METHODS, LOSSES, MAX_DEPTH,
                                  MAX_DIM, MAX_POINTS, MAX_WIDTH, PRECISIONS, SAMPLINGS, check_schedule, count)
from lapbench.solvers.pinn.runtime import preload_torch, retain_freed_memory

__all__ = ["PINN", "PINNParams", "PINNSoft", "PINNHard", "PINNRitz", "PINNFourier", "PINNRar",
           "PRESETS"]

EVAL_CHUNK = 16384          # points per forward pass in evaluate(): bounds its memory
# L-BFGS restarts with a fresh curvature history after an early stop (train.Schedule): none.
# Measured (pinn_hard on sine, default options, seed 0): L-BFGS stops by its float32 change
# tolerance after 174 iterations; 10 allowed restarts ran 4 (4 more iterations), the loss fell
# from 4.8807e-6 to 4.8806e-6 and the relative L2 error stayed 1.451e-5; at the nightly step
# budgets no chunk stops early.
LBFGS_RESTARTS = 0
# dimensions the family runs in (tests/test_pinn_nd.py checks d = 1, 3, 10 and 20 end to end
# through the forward Laplacian against torch autograd)
PINN_DIMS = frozenset(range(1, MAX_DIM + 1))


@dataclasses.dataclass
class PINNParams:
    """Options of the PINN solvers (conf/solver/pinn_*.yaml lists each with a comment)."""

    loss: str = "residual"          # residual (strong form) | ritz (Deep Ritz energy)
    boundary: str = "soft"          # soft (penalty) | hard (u = g_ext + phi N)
    bc_weight: float = 100.0        # penalty weight of the boundary term (soft only)
    width: int = 50                 # neurons per hidden layer
    depth: int = 4                  # hidden layers
    activation: str = "tanh"        # tanh | sin | silu
    fourier_features: int = 0       # random Fourier frequencies (0: none)
    fourier_scale: float = 1.0      # standard deviation of the Fourier frequencies
    precision: str = "float32"      # float32 | float64
    n_interior: int = 2000          # interior collocation points
    n_boundary: int = 400           # boundary points (soft only)
    sampling: str = "uniform"       # uniform | sobol
    resample_every: int = 0         # draw fresh points every k Adam steps (0: never)
    rar_every: int = 0              # residual-based refinement every k Adam steps (0: never)
    rar_candidates: int = 10000     # candidates examined per refinement
    rar_add: int = 100              # points added per refinement
    adam_steps: int = 2000          # Adam steps
    lr: float = 1e-3                # initial Adam learning rate
    lr_decay: float = 0.1           # final / initial learning rate (exponential schedule)
    lbfgs_steps: int = 1000         # L-BFGS iterations after Adam
    lbfgs_history: int = 50         # L-BFGS memory
    patience: int = 1000            # stop a phase after this many steps without improvement (0: never)
    plateau_tol: float = 1e-4       # relative improvement that counts
    laplacian: str = "forward"      # forward | autograd | func (bench/perf/pinn_step.py)
    laplacian_dims: int = 0         # differentiate k random coordinates per step, scaled d/k (0: all)

    def __post_init__(self):
        one_of("loss", self.loss, LOSSES)
        one_of("boundary", self.boundary, BOUNDARIES)
        positive("bc_weight", self.bc_weight)
        positive("width", self.width, integer=True, maximum=MAX_WIDTH)
        positive("depth", self.depth, integer=True, maximum=MAX_DEPTH)
        one_of("activation", self.activation, ACTIVATIONS)
        count("fourier_features", self.fourier_features, maximum=MAX_WIDTH)
        positive("fourier_scale", self.fourier_scale)
        one_of("precision", self.precision, PRECISIONS)
        positive("n_interior", self.n_interior, integer=True, maximum=MAX_POINTS)
        positive("n_boundary", self.n_boundary, integer=True, maximum=MAX_POINTS)
        one_of("sampling", self.sampling, SAMPLINGS)
        count("resample_every", self.resample_every)
        count("rar_every", self.rar_every)
        positive("rar_candidates", self.rar_candidates, integer=True, maximum=MAX_POINTS)
        positive("rar_add", self.rar_add, integer=True, maximum=MAX_POINTS)
        if self.rar_add > self.rar_candidates:
            raise ConfigError(f"`rar_add` must not exceed `rar_candidates` ({self.rar_candidates}), "
                              f"got {self.rar_add}")
        check_schedule(self)
        one_of("laplacian", self.laplacian, LAPLACIAN_METHODS)
        count("laplacian_dims", self.laplacian_dims, maximum=MAX_DIM)


class PINN(Solver):
    """Physics-informed neural network for -Lap u = f, u = g (the configurable base of the presets).

    A fully connected network (optionally on random Fourier features) is trained on collocation
    points by Adam then L-BFGS to minimise the strong-form residual (Raissi, Perdikaris &
    Karniadakis, J. Comput. Phys. 378, 2019) or the Deep Ritz energy (E & Yu, Commun. Math.
    Stat. 6, 2018), with the boundary condition as a penalty or built in as u = g_ext + phi N
    (Sukumar & Srivastava, CMAME 389, 2022). The domain supplies phi, the boundary extension
    g_ext and the samplers, so every domain kind that has them runs every variant.

    Dimensions: inputs are points of R^d for every d in PINN_DIMS (the network, the forward
    Laplacian and the samplers are written for any d); ``laplacian_dims = k`` differentiates
    k random coordinates per step with the d / k scaling of Hu, Shukla, Karniadakis & Kawaguchi
    (Neural Networks, 2024; `lapbench.solvers.pinn.losses`), so a step costs k + 2 derivative streams.

    Reproducibility: the case seed fixes the initialisation and every point set; with the same
    seed and thread count two runs agree to rounding as long as they stop on a step budget or a
    loss plateau. A run cut by the wall-clock cap (``info["stopped"] == "time_cap"``) stops
    after a machine-dependent number of steps.
    """

    name = ""
    family = "pinn"
    description = "physics-informed neural network (configurable)"
    reference = "Raissi, Perdikaris & Karniadakis, J. Comput. Phys. 378 (2019) 686-707"
    Params = PINNParams
    # deterministic: same seed, same thread count -> same result to rounding (see class docstring)
    tags = Tags(kinds=frozenset({"laplace", "poisson"}),
                domains=frozenset({"rectangle", "disk", "annulus", "polygon", "mask", "box", "ball"}),
                deterministic=True, dims=PINN_DIMS)

    @classmethod
    def preload(cls) -> None:
        """Import torch and take one Adam step in the harness parent (`runtime.preload_torch`)."""
        preload_torch()

    def resolution(self) -> dict:
        p = self.params
        return {"width": p.width, "depth": p.depth, "n_interior": p.n_interior}

    def memory_estimate_mb(self) -> float:
        """Rough peak: the derivative-propagating graph keeps ~8 (d + 2)-row tensors per layer."""
        p = self.params
        size = 8 if p.precision == "float64" else 4
        points = p.n_interior + (p.adam_steps // p.rar_every) * p.rar_add if p.rar_every else p.n_interior
        points = max(points, p.rar_candidates if p.rar_every else 0)
        layers = p.depth + (1 if p.fourier_features else 0)
        graph = 8 * 4 * points * max(p.width, 2 * p.fourier_features) * layers * size
        lbfgs = 2 * p.lbfgs_history * (p.width * p.width * p.depth) * size
        return (graph + lbfgs) / 2 ** 20

    def _solve(self, problem, budget, ctx):
        import torch

        from lapbench.solvers.pinn.losses import Collocation, Loss, PINNObjective
        from lapbench.solvers.pinn.model import Network, torch_dtype
        from lapbench.solvers.pinn.train import Schedule, train

        self.preload()   # once per process, outside the timed phases (the harness did it already)
        retain_freed_memory()
        p = self.params
        hard = p.boundary == "hard"
        with ctx.phase("setup"):
            dtype = torch_dtype(p.precision)
            # separate, seeded streams: initialisation (torch) and point sets (numpy)
            gen = torch.Generator().manual_seed(ctx.seed)
            rng = np.random.default_rng(np.random.SeedSequence([ctx.seed, 2024]))
            net = Network(problem.domain.bbox, p.width, p.depth, p.activation, p.fourier_features,
                          p.fourier_scale, dtype, gen)
            colloc = Collocation(problem, p.n_interior, p.n_boundary, p.sampling, hard, dtype, rng)
            loss = Loss(kind=p.loss, hard=hard, bc_weight=p.bc_weight, laplacian=p.laplacian,
                        area=float(getattr(problem.domain, "volume", problem.domain.area)),
                        laplacian_dims=p.laplacian_dims, seed=ctx.seed)
            objective = PINNObjective(net, loss, colloc, p.resample_every, p.rar_every,
                                      p.rar_candidates, p.rar_add)
            evaluate = _Evaluator(net, problem, hard, dtype)
            sched = Schedule.of(p, lbfgs_restarts=LBFGS_RESTARTS)
        with ctx.phase("train"):
            result = train(objective, sched, budget.train_cap, ctx, evaluate)
        info = {"params": net.n_parameters, "iterations": result.steps, "dofs": None,
                **dataclasses.asdict(result), "n_interior": len(colloc.batch),
                "laplacian": p.laplacian, "precision": p.precision, "dim": net.dim,
                "laplacian_dims": p.laplacian_dims or net.dim}
        return Solution(evaluate=evaluate, nodes=None, values=None, info=info)


class _Evaluator:
    """``points -> float64 values`` of the trained network with its boundary treatment."""

    def __init__(self, net, problem, hard: bool, dtype):
        self.net, self.problem, self.hard, self.dtype = net, problem, hard, dtype
        self._cache: tuple | None = None   # (points, g_ext, phi) of the last call

    def _boundary_parts(self, pts):
        c = self._cache
        if c is not None and c[0].shape == pts.shape and np.array_equal(c[0], pts):
            return c[1], c[2]
        d = self.problem.domain
        g = (np.zeros(len(pts)) if self.problem.g is None
             else np.asarray(d.extend_boundary_data(self.problem.g, pts), dtype=float))
        phi = np.asarray(d.phi(pts), dtype=float)
        self._cache = (pts.copy(), g, phi)
        return g, phi

    def __call__(self, points) -> np.ndarray:
        import copy

        import torch

        pts = np.ascontiguousarray(np.asarray(points, dtype=float).reshape(-1, self.net.dim))
        out = np.empty(len(pts))
        # Evaluate the trained weights in float64: the same function, rounded 1e-9 times less,
        # and the value at a point then does not depend on which other points share the call
        # (float32 matrix kernels round rows differently by their position in the block).
        net = self.net if self.dtype == torch.float64 else copy.deepcopy(self.net).double()
        with torch.no_grad():
            for i in range(0, len(pts), EVAL_CHUNK):
                x = torch.as_tensor(pts[i:i + EVAL_CHUNK], dtype=torch.float64)
                out[i:i + EVAL_CHUNK] = net(x).numpy()
        if self.hard:
            g, phi = self._boundary_parts(pts)
            out = g + phi * out
        return out


# -- presets: the variants a practitioner tries first; they differ only in their defaults -------
@dataclasses.dataclass
class SoftParams(PINNParams):
    pass


@dataclasses.dataclass
class HardParams(PINNParams):
    boundary: str = "hard"
    sampling: str = "sobol"


@dataclasses.dataclass
class RitzParams(PINNParams):
    loss: str = "ritz"
    boundary: str = "hard"
    sampling: str = "sobol"
    resample_every: int = 100


@dataclasses.dataclass
class FourierParams(PINNParams):
    boundary: str = "hard"
    sampling: str = "sobol"
    fourier_features: int = 32
    # frequencies per unit of the scaled input [-1, 1]: measured (20 s, seed 0) on sine data with
    # k = l = 1, 4, 8, scale 0.25 gave rel L2 2.1e-4, 1.3e-3, 0.20 against 0.13, 0.12, 0.74 at 1.0
    fourier_scale: float = 0.25


@dataclasses.dataclass
class RarParams(PINNParams):
    boundary: str = "hard"
    rar_every: int = 200


class PINNSoft(PINN):
    """Strong-form PINN with a boundary penalty: the baseline of Raissi, Perdikaris &
    Karniadakis (J. Comput. Phys. 378, 2019), Adam then L-BFGS."""

    name = "pinn_soft"
    description = "PINN, strong-form residual, boundary penalty (soft), uniform points"
    Params = SoftParams


class PINNHard(PINN):
    """Strong-form PINN with the boundary condition built in, u = g_ext + phi N, phi from the
    domain (Sukumar & Srivastava, CMAME 389, 2022); scrambled Sobol collocation points."""

    name = "pinn_hard"
    description = "PINN, strong-form residual, exact boundary (u = g_ext + phi N), Sobol points"
    reference = "Sukumar & Srivastava, Comput. Methods Appl. Mech. Engrg. 389 (2022) 114333"
    Params = HardParams


class PINNRitz(PINN):
    """Deep Ritz method (E & Yu, Commun. Math. Stat. 6, 2018): the Dirichlet energy by
    quasi-Monte Carlo on resampled Sobol points, boundary built in as in `PINNHard`."""

    name = "pinn_ritz"
    description = "Deep Ritz energy, exact boundary, resampled Sobol points"
    reference = "E & Yu, Commun. Math. Stat. 6 (2018) 1-12"
    Params = RitzParams


class PINNFourier(PINN):
    """Strong-form PINN on random Fourier features (Tancik et al., NeurIPS 2020; Wang, Wang &
    Perdikaris, CMAME 384, 2021) against spectral bias, boundary built in."""

    name = "pinn_fourier"
    description = "PINN on random Fourier features, exact boundary, Sobol points"
    reference = "Wang, Wang & Perdikaris, Comput. Methods Appl. Mech. Engrg. 384 (2021) 113938"
    Params = FourierParams


class PINNRar(PINN):
    """Strong-form PINN with residual-based adaptive refinement of the collocation set (Lu, Meng,
    Mao & Karniadakis, SIAM Review 63, 2021), boundary built in."""

    name = "pinn_rar"
    description = "PINN with residual-based adaptive refinement, exact boundary"
    reference = "Lu, Meng, Mao & Karniadakis, SIAM Review 63 (2021) 208-228"
    Params = RarParams


PRESETS: dict[str, type[PINN]] = {cls.name: cls for cls in (PINNSoft, PINNHard, PINNRitz, PINNFourier,
                                                            PINNRar)}
