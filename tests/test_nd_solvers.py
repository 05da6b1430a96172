"""Classical solvers on d-dimensional boxes: fst5/fst9 (tensor DST-I), cheb (tensor Chebyshev),
fd5 (sparse Kronecker sum), sparse_grid (combination technique) and their kernels.

Check values come from outside the project: closed-form solutions (each named beside its test),
numpy's dense eigensolver, binomial counts, and the orders the literature gives for each method
(second order for the (2d + 1)-point scheme, fourth for the compact one, geometric convergence
for Chebyshev collocation of analytic data, h^2 log(1/h)^(d-1) for the combination technique:
Bungartz & Griebel, "Sparse grids", Acta Numerica 13, 2004, sec. 3 and 4.4).
"""
from __future__ import annotations

from math import comb

import numpy as np
import pytest

from lapbench.fields import Field
from lapbench.problems import make_problem
from lapbench.solvers import SOLVERS
from lapbench.solvers.base import Budget
from lapbench.solvers.fast_poisson import box_eigenvalues, box_solve, divide_by_eigenvalues
from lapbench.solvers.fd import box_matrix
from lapbench.solvers.grid import (TensorLagrange, apply_stencil, box_axes, box_fold_boundary, box_operator, box_rhs,
                          default_n)
from lapbench.solvers.linalg import solve_spd
from lapbench.solvers.sparse_grid import combination_levels, combination_solve, combine, grid_count
from lapbench.solvers.spectral import TensorBarycentric, cheb_axes, cheb_box_solve

UNIT3 = np.array([[0.0, 1.0]] * 3)
# closed form: exp(x + y) sin(sqrt(2) z) is harmonic (1 + 1 - 2 = 0), not a product of sines
HARM = Field(lambda x, y, z: np.exp(x + y) * np.sin(np.sqrt(2.0) * z))


def _points(d: int, m: int = 3000, seed: int = 0, box=None) -> np.ndarray:
    p = np.random.default_rng(seed).random((m, d))
    if box is not None:
        p = box[:, 0] + p * (box[:, 1] - box[:, 0])
    return p


def _orders(errors) -> np.ndarray:
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


def _rel_l2(sol, problem, pts) -> float:
    u = problem.exact(pts)
    return float(np.sqrt(np.mean((sol.evaluate(pts) - u) ** 2) / np.mean(u ** 2)))


# -- kernels ---------------------------------------------------------------------------------------
def test_compact_operator_is_mehrstellen_in_2d():
    """In 2-D the compact d-box operator is the Mehrstellen 9-point operator (Collatz 1960)."""
    U = np.random.default_rng(1).standard_normal((9, 7))
    for compact in (False, True):
        np.testing.assert_allclose(box_operator(U, [1 / 8, 1 / 6], compact),
                                   apply_stencil(U, 1 / 8, 1 / 6, compact), rtol=1e-12, atol=1e-10)


@pytest.mark.parametrize("compact", [False, True])
def test_box_eigenvalues_match_dense_operator(compact):
    """The sine-basis eigenvalues are the spectrum of the assembled operator (numpy.linalg.eigvalsh)
    on an anisotropic 3-D grid; the compact operator is positive definite even in d = 8, where the
    additive Mehrstellen form would not be (its symbol vanishes at d = 4)."""
    ns, hs = [4, 3, 5], [0.25, 0.5, 0.1]
    m = [n - 1 for n in ns]
    N = int(np.prod(m))
    A = np.zeros((N, N))
    for k in range(N):
        U = np.zeros([n + 1 for n in ns])
        U[(slice(1, -1),) * 3] = np.eye(N)[k].reshape(m)
        A[:, k] = box_operator(U, hs, compact).ravel()
    np.testing.assert_allclose(A, A.T, atol=1e-9)
    np.testing.assert_allclose(np.sort(box_eigenvalues(ns, hs, compact).ravel()), np.linalg.eigvalsh(A),
                               rtol=1e-10)
    assert box_eigenvalues([4] * 8, [0.25] * 8, compact).min() > 0
    w = np.random.default_rng(3).standard_normal([n - 1 for n in ns])
    np.testing.assert_allclose(divide_by_eigenvalues(w.copy(), ns, hs, compact),
                               w / box_eigenvalues(ns, hs, compact), rtol=1e-13)


@pytest.mark.parametrize("ns", [[2, 3, 5], [3, 2, 2, 4], [6], [4, 5]])
@pytest.mark.parametrize("compact", [False, True])
def test_boundary_fold_equals_whole_operator(ns, compact):
    """Folding the boundary data on face slabs gives the operator applied to the whole grid of
    boundary values (one or two interior layers per axis included)."""
    axes = box_axes(np.array([[0.0, 1.0]] * len(ns)), ns)
    hs = [a[1] - a[0] for a in axes]
    Ub = np.random.default_rng(2).standard_normal([n + 1 for n in ns])
    Ub[(slice(1, -1),) * len(ns)] = 0.0
    rhs = np.zeros([n - 1 for n in ns])
    box_fold_boundary(rhs, Ub, hs, compact)
    np.testing.assert_allclose(rhs, -box_operator(Ub, hs, compact), rtol=1e-12, atol=1e-9)


def test_fd5_matrix_is_the_fst5_system():
    """fd5's Kronecker-sum matrix and fst5's sine transforms solve the same 3-D system."""
    ns = [6, 4, 5]
    axes = box_axes(UNIT3, ns)
    hs = [a[1] - a[0] for a in axes]
    rhs, _ = box_rhs(axes, None, HARM, compact=False)
    x, _ = solve_spd(box_matrix(ns, hs), rhs.ravel(), "direct")
    _, U = box_solve(UNIT3, ns, None, HARM, compact=False)
    np.testing.assert_allclose(x, U[1:-1, 1:-1, 1:-1].ravel(), rtol=1e-11, atol=1e-12)


def test_tensor_interpolants_reproduce_polynomials():
    """Closed forms: degree-1 local Lagrange is exact for multilinear functions, degree 3 for
    tricubic ones, barycentric Chebyshev interpolation of degree n for degree-n polynomials."""
    box = np.array([[0.0, 1.0], [-1.0, 2.0], [0.5, 1.5]])
    p = _points(3, 500, box=box)
    lin = Field(lambda x, y, z: 1 + 2 * x - y + 3 * x * y * z - z * y)
    cub = Field(lambda x, y, z: x ** 3 * y ** 2 - z ** 3 + x * y * z ** 2)
    axes = box_axes(box, [4, 6, 3])
    np.testing.assert_allclose(TensorLagrange(axes, lin.grid(*axes), 1)(p), lin(p), atol=1e-12)
    np.testing.assert_allclose(TensorLagrange(axes, cub.grid(*axes), 3)(p), cub(p), atol=1e-11)
    caxes, _ = cheb_axes(box, [3, 3, 3])
    np.testing.assert_allclose(TensorBarycentric(caxes, cub.grid(*caxes))(p), cub(p), atol=1e-11)


def test_default_resolution_shrinks_with_dimension():
    """Default n per d keeps (n - 1)^d at most 2^21 (powers of 2 from 64)."""
    assert [default_n(d) for d in (1, 2, 3, 4, 5, 6, 8)] == [64, 64, 64, 32, 16, 8, 4]


# -- observed orders in d = 3 (closed form) ---------------------------------------------------------
@pytest.mark.parametrize("compact, ns, order", [(False, (8, 16, 32), 2.0), (True, (4, 8, 16), 4.0)])
def test_fst_orders_closed_form_anisotropic(compact, ns, order):
    """Nodal max error on exp(x + y) sin(sqrt(2) z) (closed form) with 1 : 2 : 1 intervals per
    axis on [0, 1] x [-1, 1] x [0, 1]: order 2 (fst5) and 4 (fst9)."""
    box = np.array([[0.0, 1.0], [-1.0, 1.0], [0.0, 1.0]])
    errs = []
    for n in ns:
        axes, U = box_solve(box, [n, 2 * n, n], None, HARM, compact)
        errs.append(np.abs(U - HARM.grid(*axes)).max())
    assert np.all(np.abs(_orders(errs) - order) < 0.2), errs


def test_cheb_converges_geometrically_closed_form():
    """Chebyshev collocation of the analytic closed form: the error falls by more than 100x per
    4 degrees down to rounding (geometric convergence; Trefethen, Spectral Methods in MATLAB,
    2000, ch. 4)."""
    p = _points(3)
    errs = []
    for n in (4, 8, 12):
        axes, U = cheb_box_solve(UNIT3, [n, n + 1, n], None, HARM)
        errs.append(np.abs(TensorBarycentric(axes, U)(p) - HARM(p)).max())
    assert errs[0] / errs[1] > 100 and errs[1] / errs[2] > 100 and errs[2] < 1e-11, errs


# -- the solvers on the catalogue's d-dimensional problems ------------------------------------------
@pytest.mark.parametrize("name", ["nd_harmonic", "nd_waves"])
@pytest.mark.parametrize("solver, ns, order", [("fst5", (8, 16, 32), 2.0), ("fst9", (4, 8, 16), 4.0),
                                               ("fd5", (8, 16), 2.0)])
def test_solver_orders_on_nd_problems(name, solver, ns, order):
    """Observed orders in d = 3 on nd_harmonic (Laplace, exp(a.x) cos(b.x)) and nd_waves
    (Poisson, plane waves): relative L2 error at random points, interpolant included."""
    problem = make_problem({"name": name, "dim": 3})
    pts = problem.domain.sample_interior(3000, np.random.default_rng(0))
    errs = [_rel_l2(SOLVERS[solver](n=n).solve(problem.public()), problem, pts) for n in ns]
    assert np.all(np.abs(_orders(errs) - order) < 0.3), errs


@pytest.mark.parametrize("solver, order", [("fst5", 2.0), ("fst9", 4.0)])
def test_fst_orders_in_five_dimensions(solver, order):
    """The orders hold in d = 5 (nd_harmonic, frequency 1; n = 4, 8, 12, up to 11^5 unknowns)."""
    problem = make_problem({"name": "nd_harmonic", "dim": 5, "frequency": 1.0})
    pts = problem.domain.sample_interior(3000, np.random.default_rng(0))
    ns = np.array([4, 8, 12])
    errs = np.array([_rel_l2(SOLVERS[solver](n=int(n)).solve(problem.public()), problem, pts) for n in ns])
    observed = np.log(errs[:-1] / errs[1:]) / np.log(ns[1:] / ns[:-1])
    assert np.all(np.abs(observed - order) < 0.4), errs


def test_cheb_spectral_on_nd_harmonic():
    """cheb on nd_harmonic, d = 3: geometric convergence to below 1e-10 at degree 10."""
    problem = make_problem({"name": "nd_harmonic", "dim": 3})
    pts = problem.domain.sample_interior(3000, np.random.default_rng(0))
    errs = [_rel_l2(SOLVERS["cheb"](n=n).solve(problem.public()), problem, pts) for n in (4, 7, 10)]
    assert errs[0] / errs[1] > 100 and errs[1] / errs[2] > 100 and errs[2] < 1e-10, errs


# -- sparse grids ------------------------------------------------------------------------------------
@pytest.mark.parametrize("level, dim", [(1, 3), (4, 1), (5, 3), (6, 4), (3, 6)])
def test_combination_levels(level, dim):
    """Grids with |l|_1 = level + dim - 1 - q number binom(level + dim - 2 - q, dim - 1)
    (compositions into dim parts >= 1); the coefficients (-1)^q binom(dim - 1, q) sum to 1."""
    grids = combination_levels(level, dim)
    assert len(grids) == grid_count(level, dim)
    assert abs(sum(c for _, c in grids) - 1) == 0
    for q in range(min(dim, level)):
        lv = [l for l, c in grids if sum(l) == level + dim - 1 - q]
        assert len(lv) == comb(level + dim - 2 - q, dim - 1)
        assert all(c == (-1) ** q * comb(dim - 1, q) for l, c in grids if sum(l) == level + dim - 1 - q)
        assert all(min(l) >= 1 for l in lv)


def test_combination_exact_for_multilinear_harmonic():
    """x y z + x - 2 y is harmonic and multilinear (closed form): every 5-point component is exact
    and so is each multilinear interpolant, hence the combination reproduces it to rounding."""
    u = Field(lambda x, y, z: x * y * z + x - 2 * y)
    p = _points(3)
    np.testing.assert_allclose(combine(combination_solve(UNIT3, 4, None, u))(p), u(p), atol=1e-12)


def test_combination_exact_for_multilinear_harmonic_in_six_dimensions():
    """x0 x1 ... x5 - 3 x2 x4 is harmonic and multilinear (closed form): the combination of
    level 3 in d = 6 (56 grids) reproduces it to rounding."""
    u = Field(lambda *x: x[0] * x[1] * x[2] * x[3] * x[4] * x[5] - 3 * x[2] * x[4])
    p = _points(6, 1000)
    np.testing.assert_allclose(combine(combination_solve(np.array([[0.0, 1.0]] * 6), 3, None, u))(p), u(p),
                               atol=1e-12)


def test_sparse_grid_order_in_level():
    """Error of the level-L combination ~ h_L^2 log2(1/h_L)^(d-1), h_L = 2^-L (Bungartz & Griebel
    2004): on nd_harmonic in d = 3 the error divided by 4^-L L^2 stays within a factor 1.5 over
    L = 4..7, while the raw rate lies between 1 and 2 (2 less the logarithm's share)."""
    problem = make_problem({"name": "nd_harmonic", "dim": 3})
    pts = problem.domain.sample_interior(3000, np.random.default_rng(0))
    levels = np.arange(4, 8)
    errs = np.array([_rel_l2(SOLVERS["sparse_grid"](level=int(L)).solve(problem.public()), problem, pts)
                     for L in levels])
    scaled = errs / (4.0 ** -levels * levels ** 2)
    assert scaled.max() / scaled.min() < 1.5, errs
    rates = _orders(errs)
    assert np.all((rates > 1.0) & (rates < 2.0)), rates


# -- contract ----------------------------------------------------------------------------------------
def test_dimensions_and_memory_are_refused():
    """fd5 refuses d = 5 boxes (supports), every box solver refuses eigen problems on boxes, and
    a grid that cannot fit the memory budget stops before allocating."""
    p5 = make_problem({"name": "nd_harmonic", "dim": 5}).public()
    ok, why = SOLVERS["fd5"]().supports(p5)
    assert not ok and "dimensions" in why
    eig = make_problem({"name": "eigen_box", "dim": 3}).public()
    for name in ("fd5", "fst5", "cheb", "sparse_grid"):
        assert not SOLVERS[name]().supports(eig)[0]
    p32 = make_problem({"name": "nd_harmonic", "dim": 32}).public()
    with pytest.raises(ValueError, match="component grids"):    # binom(60, 31) grids at level 30
        SOLVERS["sparse_grid"](level=30).solve(p32)
    with pytest.raises(MemoryError, match="memory_limit_mb"):
        SOLVERS["fst5"](n=512).solve(make_problem({"name": "nd_harmonic", "dim": 3}).public(),
                                    budget=Budget(memory_limit_mb=100))
