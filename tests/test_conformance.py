"""Every registered solver passes the same conformance checks (bench/conformance.py).

Ids are <solver>-<check>. Known failures live in KNOWN_FAILURES with their reason (xfail),
never as silent skips.
"""
from pathlib import Path

import pytest

from lapbench.conformance import CHECKS, NotApplicable, CheckFailure
from lapbench.solvers import SOLVERS

# The one table of tiny test budgets: solver -> params overriding its defaults (comment why).
TEST_BUDGETS = {
    "fd5": {"n": 16},     # 225 unknowns: enough for order-2 accuracy on smooth data
    "fd9": {"n": 16},
    "fst5": {"n": 16},
    "fst9": {"n": 16},
    "cheb": {"n": 12},    # degree 12 resolves sin(pi x) sin(pi y) to ~1e-9
    "fem_p1": {"level": 3},           # 8 x 4^3 elements at most: order-2 accuracy, milliseconds
    "fem_p2": {"level": 2},           # P2 on 4^2 times the coarse mesh: ~1e-3 on smooth data
    "disk_cheb": {"n": 10, "m": 20},  # ~1e-4 on disk_harmonic (rho = 2) in milliseconds
    "pixel5": {"refine": 1},          # pixel corners of a 34 x 34 mask: exact at the nodes for the harmonic cubic
    "sparse_grid": {"level": 5},      # 2-D combination of 9 grids, finest h = 1/32: order-2 accuracy
    # PINNs: 2 x 12 tanh net, 128 points, 100 Adam + 30 L-BFGS steps: about a second per solve,
    # rel. L2 on sine well below the 0.5 sanity bound (measured: 1e-2 soft, 1e-3 hard)
    **{name: {"width": 12, "depth": 2, "n_interior": 128, "n_boundary": 64, "adam_steps": 100,
              "lbfgs_steps": 30, **extra}
       for name, extra in (("pinn_soft", {}), ("pinn_hard", {}),
                           ("pinn_ritz", {"resample_every": 50}),
                           ("pinn_fourier", {"fourier_features": 8}),
                           ("pinn_rar", {"rar_every": 50, "rar_candidates": 512, "rar_add": 16}))},
    # eigen PINN on eigen_square (k = 6 modes, one net each): 50 Adam + 20 L-BFGS steps per mode;
    # lambda_1 within 1e-2 of 2 pi^2 (the sanity bound is 0.5), a few seconds per solve
    "pinn_eigen": {"width": 12, "depth": 2, "train_level": 6, "adam_steps": 50, "lbfgs_steps": 20,
                   "quad_level": 16},
    # walk-on-spheres on nd_gauss (d = 3 box, 3.5e4 evaluation points): 24 walks, shell 3e-2
    # (statistical error ~ 0.44 sqrt(16 / 24) = 0.36 against the 0.5 sanity bound; ~3 s per solve)
    "wos": {"walks": 24, "eps": 3e-2},
}

# (solver, check) -> reason. Empty: every solver passes every applicable check.
KNOWN_FAILURES: dict[tuple[str, str], str] = {}


def _make(name):
    return lambda: SOLVERS[name](params=dict(TEST_BUDGETS.get(name, {})))


@pytest.mark.parametrize("check", list(CHECKS))
@pytest.mark.parametrize("solver", sorted(SOLVERS))
def test_conformance(solver, check):
    if (solver, check) in KNOWN_FAILURES:
        pytest.xfail(KNOWN_FAILURES[(solver, check)])
    try:
        CHECKS[check](_make(solver))
    except NotApplicable as exc:
        # Deliberate: capability tags decide which checks apply (e.g. the unsupported-pairing
        # check for a solver that supports every catalogue problem); the reason is reported.
        pytest.skip(f"not applicable: {exc}")
    except CheckFailure as exc:
        pytest.fail(f"{solver}-{check}: {exc}")


def test_every_solver_registered_with_config():
    """Registry key = conf/solver/<key>.yaml = the record's solver name (STYLE.md rule 3)."""
    from omegaconf import OmegaConf

    from lapbench.cli import conf_dir

    for name, cls in SOLVERS.items():
        path = conf_dir() / "solver" / f"{name}.yaml"
        assert path.is_file(), f"solver {name} has no config file {path}"
        assert OmegaConf.load(path).get("name") == name, f"{path} must say name: {name}"
        assert cls.name == name, f"SOLVERS[{name!r}] is {cls.__name__} with name {cls.name!r}"


def test_every_solver_has_a_test_budget():
    """Keeps the suite fast: each solver states its tiny test parameters."""
    missing = sorted(set(SOLVERS) - set(TEST_BUDGETS))
    assert not missing, f"add TEST_BUDGETS entries for {missing}"
