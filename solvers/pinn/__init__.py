"""Physics-informed neural networks on the CPU (torch is imported only when a PINN runs)."""
from lapbench.solvers.pinn.eigen import PINNEigen
from lapbench.solvers.pinn.solver import (PINN, PRESETS, PINNFourier, PINNHard, PINNParams, PINNRar, PINNRitz,
                                 PINNSoft)

__all__ = ["PINN", "PINNParams", "PRESETS", "PINNSoft", "PINNHard", "PINNRitz", "PINNFourier", "PINNRar",
           "PINNEigen"]
