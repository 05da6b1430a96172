"""The PINN family's option spellings, limits and shared validators (no torch, no solver imports).

Every module of `lapbench.solvers.pinn` may import this one; it imports nothing of the family, so the
validation of a config never pulls torch in and no module reaches up into a solver for a name.
"""
from __future__ import annotations

from lapbench.config import ConfigError, positive

__all__ = ["ACTIVATIONS", "LAPLACIAN_METHODS", "LOSSES", "BOUNDARIES", "SAMPLINGS", "PRECISIONS",
           "STRATEGIES", "MAX_DIM", "MAX_WIDTH", "MAX_DEPTH", "MAX_POINTS", "MAX_HISTORY", "count",
           "check_schedule"]

ACTIVATIONS = ("tanh", "sin", "silu")             # model.Network (its torch functions live there)
LAPLACIAN_METHODS = ("forward", "autograd", "func")   # model.Network.derivatives
LOSSES = ("residual", "ritz")                     # losses.Loss
BOUNDARIES = ("soft", "hard")                     # losses.Loss, solver.PINN
SAMPLINGS = ("uniform", "sobol")                  # sampling.interior_points
PRECISIONS = ("float32", "float64")               # model.torch_dtype
STRATEGIES = ("subspace", "sequential")           # eigen.PINNEigen

# Limits that turn a typo (an extra zero or three) into a config error instead of a machine
# brought down by an allocation.
MAX_WIDTH = 4096
MAX_DEPTH = 64
MAX_POINTS = 10_000_000
MAX_HISTORY = 10_000        # L-BFGS curvature pairs
MAX_DIM = 32                # space dimensions (lapbench.domains.box.MAX_DIM; tensors have d + 2 streams)


def count(name: str, value: int, maximum: int | None = None) -> None:
    """A non-negative integer option (0 switches the feature off)."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        raise ConfigError(f"`{name}` must be a non-negative integer, got {value!r}")
    if maximum is not None and value > maximum:
        raise ConfigError(f"`{name}` must be at most {maximum}, got {value!r}")


def check_schedule(p) -> None:
    """Validate the training options every PINN-family Params shares (see `train.Schedule`)."""
    count("adam_steps", p.adam_steps)
    positive("lr", p.lr)
    if not (0 < p.lr_decay <= 1):
        raise ConfigError(f"`lr_decay` must lie in (0, 1], got {p.lr_decay!r}")
    count("lbfgs_steps", p.lbfgs_steps)
    if p.adam_steps + p.lbfgs_steps == 0:
        raise ConfigError("`adam_steps` and `lbfgs_steps` must not both be 0 (nothing to train)")
    positive("lbfgs_history", p.lbfgs_history, integer=True, maximum=MAX_HISTORY)
    count("patience", p.patience)
    if not (p.plateau_tol >= 0):
        raise ConfigError(f"`plateau_tol` must be non-negative, got {p.plateau_tol!r}")
