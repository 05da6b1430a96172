"""Solvers: one module per method family, all registered in SOLVERS (key = conf/solver/<key>.yaml)."""
from lapbench.solvers.base import Budget, Diverged, RunContext, Solution, Solver, Tags, Unsupported
from lapbench.solvers.fast_poisson import FST5, FST9
from lapbench.solvers.disk_spectral import DiskChebyshev
from lapbench.solvers.fd import FD5, FD9
from lapbench.solvers.fem import FEMP1, FEMP2
from lapbench.solvers.pixel import Pixel5
from lapbench.solvers.pinn import PINNFourier, PINNHard, PINNRar, PINNRitz, PINNSoft
from lapbench.solvers.pinn.eigen import PINNEigen
from lapbench.solvers.spectral import Chebyshev
from lapbench.solvers.sparse_grid import SparseGridCT
from lapbench.solvers.walk_on_spheres import WalkOnSpheres

# The one registry: name -> class. Later families add their entries here.
SOLVERS: dict[str, type[Solver]] = {
    "fd5": FD5,
    "fd9": FD9,
    "fst5": FST5,
    "fst9": FST9,
    "cheb": Chebyshev,
    "disk_cheb": DiskChebyshev,
    "fem_p1": FEMP1,
    "fem_p2": FEMP2,
    "pixel5": Pixel5,
    "pinn_soft": PINNSoft,
    "pinn_hard": PINNHard,
    "pinn_ritz": PINNRitz,
    "pinn_fourier": PINNFourier,
    "pinn_rar": PINNRar,
    "pinn_eigen": PINNEigen,
    "sparse_grid": SparseGridCT,
    "wos": WalkOnSpheres,
}

__all__ = ["SOLVERS", "Solver", "Solution", "Budget", "RunContext", "Tags", "Unsupported",
           "Diverged", "get_solver"]


def get_solver(name: str) -> type[Solver]:
    """The registered solver class `name`, or a ConfigError listing the valid names."""
    from lapbench.config import ConfigError

    if name not in SOLVERS:
        raise ConfigError(f"`solver.name` must be one of {', '.join(sorted(SOLVERS))}; got {name!r}")
    return SOLVERS[name]
