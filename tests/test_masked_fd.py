"""fd5 on non-rectangular domains (masked grid, Shortley-Weller) and the disk spectral solver."""
import numpy as np
import pytest

from lapbench.config import ConfigError
from lapbench.metrics import solution_errors
from lapbench.problems import make_problem
from lapbench.solvers import SOLVERS
from lapbench.solvers.disk_spectral import DiskChebyshev
from lapbench.solvers.fd import FD5


def slope(h, e):
    return float(np.polyfit(np.log(h), np.log(e), 1)[0])


@pytest.mark.parametrize("problem", ["disk_harmonic", "annulus_poisson"])
def test_shortley_weller_second_order(problem):
    """Bramble & Hubbard (Numer. Math. 4, 1962): Shortley-Weller converges at order 2;
    the issue asks 2 +- 0.2 on the disk. The max error near the boundary (points within one h)
    must converge at order 2 as well: the interpolant must not lower the order there."""
    p = make_problem({"name": problem})
    es = p.eval_set(0)
    rng = np.random.default_rng(0)
    pts = p.domain.sample_interior(50_000, rng)
    h, e, near = [], [], []
    for n in (16, 32, 64, 128):
        sol = FD5(n=n).solve(p.public())
        h.append(sol.info["h"])
        e.append(solution_errors(p, sol, es)["abs_l2"])
        band = pts[p.domain.distance(pts) < sol.info["h"]]
        near.append(np.max(np.abs(sol.evaluate(band) - p.exact(band))))
    assert abs(slope(h, e) - 2) <= 0.2, f"observed L2 order {slope(h, e):.3f}"
    # measured near-boundary orders 1.6-2.1 between successive grids; fitted over 4 grids >= 1.7
    assert slope(h, near) >= 1.7, f"observed near-boundary max order {slope(h, near):.3f}"


@pytest.mark.parametrize("u, domain", [
    ("x**2 + 2*y**2 - x*y", {"kind": "disk", "cx": 0.13, "cy": -0.07, "radius": 1.0}),
    ("x*x - 3*y*y + 2*x*y + y", {"kind": "annulus", "r_in": 0.35, "r_out": 1.0}),
    ("x*x - 3*y*y + 2*x*y", {"kind": "polygon", "vertices": [[0, 0], [2, 0.3], [1, 1.7]]}),
])
def test_shortley_weller_exact_for_quadratics(u, domain):
    """The three-point second difference with unequal arms is exact for quadratics (closed form:
    divided differences of a quadratic), so the nodal error is roundoff only."""
    p = make_problem({"name": "expr", "u": u, "domain": domain})
    sol = FD5(n=24).solve(p.public())
    assert np.max(np.abs(sol.values - p.exact(sol.nodes))) < 1e-11


def test_on_grid_polygon_is_the_plain_five_point_scheme():
    """A polygon that is the unit square gives the same nodal values as the tensor-grid fd5."""
    u = "exp(x)*sin(3*y) + x**4"
    sq = make_problem({"name": "expr", "u": u, "domain": {"kind": "polygon",
                                                          "vertices": [[0, 0], [1, 0], [1, 1], [0, 1]]}})
    rect = make_problem({"name": "expr", "u": u})
    a = FD5(n=16).solve(sq.public())
    b = FD5(n=16).solve(rect.public())
    order = np.lexsort((a.nodes[:, 1], a.nodes[:, 0]))
    order_b = np.lexsort((b.nodes[:, 1], b.nodes[:, 0]))
    assert np.allclose(a.nodes[order], b.nodes[order_b], atol=1e-15)
    assert np.max(np.abs(a.values[order] - b.values[order_b])) < 1e-12


def lshape_discrete_energy(sol, p):
    """Discrete H1 seminorm of the nodal error: sqrt(sum over grid edges of (e_i - e_j)^2);
    boundary nodes carry exact data (error 0)."""
    h = sol.info["h"]
    idx = np.rint((sol.nodes + 1.0) / h).astype(int)
    n = int(round(2 / h))
    E = np.zeros((n + 1, n + 1))
    E[idx[:, 0], idx[:, 1]] = sol.values - p.exact(sol.nodes)
    return float(np.sqrt(np.sum(np.diff(E, axis=0) ** 2) + np.sum(np.diff(E, axis=1) ** 2)))


def test_lshape_corner_rates_fd5():
    """r^(2/3) singularity (Strang & Fix 1973; Mitchell 2013): L2 order 4/3, energy order 2/3.
    Tolerances as for fem_p1: L2 +-0.12 (measured 1.29-1.32 over n = 16-128, approaching 4/3
    from below), discrete energy +-0.05 (measured 0.648, 0.660, 0.664, 0.666 over n = 16-256)."""
    p = make_problem({"name": "lshape"})
    es = p.eval_set(0)
    h, l2, en = [], [], []
    for n in (16, 32, 64, 128):
        sol = FD5(n=n).solve(p.public())
        h.append(sol.info["h"])
        l2.append(solution_errors(p, sol, es)["abs_l2"])
        en.append(lshape_discrete_energy(sol, p))
    assert abs(slope(h, l2) - 4 / 3) <= 0.12, f"observed L2 order {slope(h, l2):.3f}"
    assert abs(slope(h, en) - 2 / 3) <= 0.05, f"observed energy order {slope(h, en):.3f}"


def test_masked_amg_matches_direct():
    p = make_problem({"name": "disk_harmonic"})
    a = FD5(n=48, linear_solver="amg", tol=1e-12).solve(p.public())
    d = FD5(n=48).solve(p.public())
    assert np.max(np.abs(a.values - d.values)) < 1e-9


# -- disk spectral ----------------------------------------------------------------------------------

def test_disk_spectral_smooth_harmonic_below_1e_11():
    """u = Re(rho / (rho - zeta)), rho = 2: Fourier coefficients 2^-k (closed form), so 96 angular
    points leave a truncation error near 2^-48 ~ 4e-15; the issue asks < 1e-11."""
    p = make_problem({"name": "disk_harmonic", "rho": 2.0})
    sol = DiskChebyshev(n=48, m=96).solve(p.public())
    e = solution_errors(p, sol, p.eval_set(0))
    assert e["max_abs"] < 1e-11 and e["rel_l2"] < 1e-11


def test_disk_spectral_poisson_off_centre():
    # f = -Laplace(exp(x) sin(2y) + x^2) = 3 exp(x) sin(2y) - 2 (sympy / by hand), entire data
    p = make_problem({"name": "expr", "u": "exp(x)*sin(2*y) + x**2",
                      "domain": {"kind": "disk", "cx": 0.3, "cy": -1.0, "radius": 1.5}})
    sol = DiskChebyshev(n=28, m=56).solve(p.public())
    assert solution_errors(p, sol, p.eval_set(0))["max_abs"] < 1e-11


def test_disk_spectral_geometric_convergence():
    """Errors fall like rho^-(m/2) (coefficients rho^-k, closed form): from m = 16 to m = 32 at
    rho = 2 the predicted factor is 2^8 = 256; assert at least 100."""
    p = make_problem({"name": "disk_harmonic", "rho": 2.0})
    es = p.eval_set(0)
    e1 = solution_errors(p, DiskChebyshev(n=8, m=16).solve(p.public()), es)["rel_l2"]
    e2 = solution_errors(p, DiskChebyshev(n=16, m=32).solve(p.public()), es)["rel_l2"]
    assert e1 / e2 > 100, f"error ratio {e1 / e2:.1f}"


def test_disk_spectral_params_refused():
    with pytest.raises(ConfigError, match=r"^`solver\.m` must be an even integer"):
        SOLVERS["disk_cheb"](m=15)
    with pytest.raises(ConfigError, match=r"^`solver\.n` must be a positive integer"):
        SOLVERS["disk_cheb"](n=0)
