"""Example lapbench plug-in: red-black SOR on the 5-point system (kept outside lapbench's tree)."""
from sor_solver.solver import SOR, optimal_omega

__all__ = ["SOR", "optimal_omega"]
