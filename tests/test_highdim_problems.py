"""Boxes and balls in d dimensions, the nd_* problems, the d-box and d-ball spectra, and the
harness's randomised-QMC error estimate with its sampling error."""
import itertools
import math

import numpy as np
import pytest
from omegaconf import OmegaConf

from lapbench.config import ConfigError, conf_dir
from lapbench.domains import Ball, Box, make_domain, unit_ball, unit_box
from lapbench.fields import Field, on_grid
from lapbench.metrics import error_field, measure
from lapbench.numerics import fd_laplacian  # fourth-order central differences (common practice)
from lapbench.problems import make_problem
from lapbench.problems.highdim import ball_spectrum, bessel_zeros, box_spectrum, harmonic_multiplicity
from lapbench.solvers.base import Solution

ND = ["nd_gauss", "nd_harmonic", "nd_pole", "nd_waves"]


def _interior(domain, n, seed=0, margin=0.1):
    """Random points at least `margin` inside (room for the FD stencil)."""
    pts = domain.sample_interior(4 * n, np.random.default_rng(seed))
    return pts[domain.distance(pts) > margin][:n]


# -- problems -------------------------------------------------------------------------------------

@pytest.mark.parametrize("dim", [2, 3, 7])
@pytest.mark.parametrize("region", ["box", "ball"])
@pytest.mark.parametrize("name", ND)
def test_exact_solution_satisfies_pde(name, region, dim):
    p = make_problem({"name": name, "dim": dim, "domain": region})
    assert p.dim == dim and p.domain.dim == dim and p.domain.kind == region
    pts = _interior(p.domain, 100)
    lap = fd_laplacian(p.exact, pts, 2e-3)
    f = p.f_or_zero(pts)
    scale = max(1.0, np.max(np.abs(f)), np.max(np.abs(p.exact(pts))))
    # FD truncation ~ h^4 u^(6) / 90 per coordinate: about 1e-9 for these frequencies
    assert np.max(np.abs(-lap - f)) <= 1e-6 * scale, (name, region, dim)
    bpts, _ = p.domain.sample_boundary(50, np.random.default_rng(1))
    assert np.allclose(p.public().g(bpts), p.exact(bpts), rtol=1e-14)


def test_yaml_defaults_build_and_are_three_dimensional():
    for name in ND + ["eigen_box", "eigen_ball"]:
        cfg = OmegaConf.to_container(OmegaConf.load(conf_dir() / "problem" / f"{name}.yaml"))
        assert make_problem(cfg).dim == 3, name


def test_solutions_are_not_separable_products():
    # a product u = prod_i u_i(x_i) satisfies u(x) u(y) = u(x with y_0) u(y with x_0) for swapping
    # the first coordinate; each nd_* solution must violate this (the point: no tensor
    # method may be exact). nd_gauss is a product by construction; its source is not.
    rng = np.random.default_rng(5)
    for name in ND:
        p = make_problem({"name": name, "dim": 4})
        fn = p.exact if name != "nd_gauss" else p.f
        x, y = rng.uniform(0.2, 0.8, (2, 4))
        xs, ys = x.copy(), y.copy()
        xs[0], ys[0] = y[0], x[0]
        lhs = fn(np.array([x]))[0] * fn(np.array([y]))[0]
        rhs = fn(np.array([xs]))[0] * fn(np.array([ys]))[0]
        assert abs(lhs - rhs) > 1e-6 * max(abs(lhs), 1e-12), name


def test_harmonic_directions_and_pole_position():
    from lapbench.problems.highdim import orthonormal_pair

    a, b = orthonormal_pair(9, draw=3)
    assert abs(a @ b) < 1e-14 and abs(a @ a - 1) < 1e-14 and abs(b @ b - 1) < 1e-14
    # pole at rho = 1.5 outside the cube: nearest boundary value is 1 (the normalisation)
    p = make_problem({"name": "nd_pole", "dim": 4, "rho": 1.5})
    assert p.exact(np.ones((1, 4)))[0] == pytest.approx(1.0, rel=1e-14)   # corner (1,..,1) is nearest
    q = make_problem({"name": "nd_pole", "dim": 3, "domain": "ball", "rho": 2.0})
    e = np.ones(3) / math.sqrt(3)
    # closed form: |x - p| = 1 at the nearest point e, delta = 1, u = 1; at the centre |x-p| = 2
    assert q.exact(np.array([e, np.zeros(3)])) == pytest.approx([1.0, 0.5], rel=1e-14)


@pytest.mark.parametrize("cfg, rule", [
    ({"name": "nd_gauss", "dim": 0}, r"^`problem\.dim` must be an integer in \[1, 32\]"),
    ({"name": "nd_gauss", "dim": 33}, r"^`problem\.dim` must be an integer in \[1, 32\]"),
    ({"name": "nd_harmonic", "dim": 1}, r"^`problem\.dim` must be an integer in \[2, 32\]"),
    ({"name": "nd_pole", "rho": 0.9}, r"^`problem\.rho` must exceed 1"),
    ({"name": "nd_waves", "domain": "cube"}, r"^`problem\.domain` must be one of 'box', 'ball'"),
    ({"name": "eigen_ball", "k": 0}, r"^`problem\.k` must be a positive integer"),
])
def test_bad_knobs_are_one_line_errors(cfg, rule):
    with pytest.raises(ConfigError, match=rule):
        make_problem(cfg)


def test_existing_problems_are_two_dimensional():
    assert make_problem({"name": "sine"}).dim == 2
    assert make_problem({"name": "disk_harmonic"}).dim == 2


# -- fields ---------------------------------------------------------------------------------------

def test_field_grid_equals_point_values_in_d():
    u = Field(lambda x, y, z: np.sin(x) * np.exp(y) + z ** 2)
    axes = [np.linspace(0, 1, 3), np.linspace(0, 2, 4), np.linspace(-1, 0, 5)]
    G = u.grid(*axes)
    X = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    assert G.shape == (3, 4, 5)
    assert np.array_equal(G.ravel(), u(X))
    assert np.array_equal(on_grid(lambda p: p[:, 0] - p[:, 2], *axes).ravel(), X[:, 0] - X[:, 2])
    # 2-D use unchanged; a constant broadcasts to the grid
    c = Field(lambda x, y: 2.0)
    assert c.grid(np.zeros(2), np.zeros(3)).shape == (2, 3) and np.all(c(np.zeros((4, 2))) == 2.0)


# -- geometry -------------------------------------------------------------------------------------

def test_volumes_closed_form():
    assert unit_ball(3).volume == pytest.approx(4 * math.pi / 3, rel=1e-14)    # 4/3 pi R^3
    assert unit_ball(4).volume == pytest.approx(math.pi ** 2 / 2, rel=1e-14)   # pi^2/2 R^4
    assert Ball(center=(0.0, 0.0), radius=2.0).volume == pytest.approx(4 * math.pi, rel=1e-14)
    assert Ball(center=(1.0,), radius=0.5).volume == pytest.approx(1.0, rel=1e-14)   # interval
    assert Box(lo=(0, 0, 0, 0), hi=(1, 2, 3, 4)).volume == 24.0
    b = Box(lo=(0, -1), hi=(2, 1))
    assert b.area == b.volume == 4.0 and np.array_equal(b.bounds, [[0, 2], [-1, 1]])


@pytest.mark.parametrize("dom", [unit_box(1), unit_box(3), Box(lo=(0, -1, 2, 0, 0), hi=(1, 1, 3, 2, 0.5)),
                                 unit_ball(1), unit_ball(3), Ball(center=(1.0, 0.0, -1.0, 0.5, 0.0, 0.0), radius=0.7)],
                         ids=lambda d: f"{d.kind}{d.dim}")
def test_sampling_normals_phi(dom):
    for rng in (None, np.random.default_rng(3)):
        pts, nrm = dom.sample_boundary(300, rng)
        assert pts.shape == (300, dom.dim)
        assert np.allclose(np.linalg.norm(nrm, axis=1), 1.0, atol=1e-14)
        assert dom.on_boundary(pts).all()
        eps = 1e-6 * dom.scale
        assert (dom.distance(pts + eps * nrm) < 0).all() and (dom.distance(pts - eps * nrm) > 0).all()
        assert np.abs(dom.phi(pts)).max() < 1e-12
    inner = dom.sample_interior(2000, np.random.default_rng(4))
    assert (dom.distance(inner) > 0).all()
    centre = dom.bounds.mean(axis=1)[None, :]
    assert dom.phi(centre)[0] == pytest.approx(1.0, rel=1e-14)           # normalised: max 1 at the centre
    assert dom.distance(centre)[0] == pytest.approx(dom.inradius, rel=1e-14)
    ph = dom.phi(inner)
    assert ph.min() > 0 and ph.max() <= 1 + 1e-12


def test_distances_by_hand():
    b = unit_box(3)
    # (0.5, 0.5, 0.1): 0.1 to the face x_2 = 0; (2, 0.5, 0.5): 1 outside; (2, 2, 0.5): sqrt(2) outside
    assert np.allclose(b.distance(np.array([[0.5, 0.5, 0.1], [2, 0.5, 0.5], [2, 2, 0.5]])), [0.1, -1, -math.sqrt(2)])
    B = Ball(center=(1.0, 0.0, 0.0, 0.0), radius=2.0)
    assert np.allclose(B.distance(np.array([[1.0, 0, 0, 0], [1, 0, 0, 3], [1, 1, 1, 1]])), [2, -1, 2 - math.sqrt(3)])


@pytest.mark.parametrize("dom", [unit_box(4), Box(lo=(0, 0, 0), hi=(1, 2, 0.5)), unit_ball(3)],
                         ids=lambda d: f"{d.kind}{d.dim}")
def test_boundary_extension_exact_on_boundary_and_not_harmonic(dom):
    g = Field(lambda *x: np.exp(x[0]) * np.cos(x[1]) + x[-1])    # harmonic data (closed form)
    bp, _ = dom.sample_boundary(200, np.random.default_rng(0))
    assert np.allclose(dom.extend_boundary_data(g, bp), g(bp), atol=1e-12)
    pts = _interior(dom, 60, margin=0.05 * dom.scale)
    lap = fd_laplacian(lambda q: dom.extend_boundary_data(g, q), pts, 1e-3)
    assert np.max(np.abs(lap)) > 1e-2           # not a harmonic extension (would solve Laplace)


def test_two_dimensional_box_and_ball_reuse_the_planar_rules():
    from lapbench.domains import Disk, Rectangle

    assert np.array_equal(Box(lo=(0, 0), hi=(1, 2)).quadrature(8)[0], Rectangle(0, 1, 0, 2).quadrature(8)[0])
    assert np.array_equal(Ball(center=(0, 0), radius=1).quadrature(8)[1], Disk().quadrature(8)[1])


def test_domain_config_errors():
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.hi` must have as many entries as `lo` \(3\)"):
        make_domain({"kind": "box", "lo": [0, 0, 0], "hi": [1, 1]})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.hi` must exceed `lo`.*coordinate 1"):
        make_domain({"kind": "box", "lo": [0, 0], "hi": [1, 0]})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.radius` must be positive"):
        make_domain({"kind": "ball", "center": [0, 0, 0], "radius": 0})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.center` must have 1 to 32 entries"):
        make_domain({"kind": "ball", "center": [], "radius": 1})
    assert make_domain({"kind": "ball", "center": [0, 0, 0, 0], "radius": 1}).to_dict() == {
        "kind": "ball", "center": [0.0] * 4, "radius": 1.0}


# -- evaluation sets and the sampling error -------------------------------------------------------

@pytest.mark.parametrize("dom", [unit_box(5), unit_ball(6)], ids=lambda d: f"{d.kind}{d.dim}")
def test_sobol_set_integrates_second_moment(dom):
    es = dom.eval_set(seed=11)
    assert es.groups is not None and es.weights.sum() == pytest.approx(dom.volume, rel=1e-13)
    assert dom.contains(es.points).all() and dom.contains(es.extra).all()
    assert np.array_equal(es.points, dom.eval_set(seed=11).points)          # seeded
    assert not np.array_equal(es.points, dom.eval_set(seed=12).points)
    d = dom.dim
    r2 = np.sum((es.points - dom.bounds.mean(axis=1)) ** 2, axis=1)
    # closed forms: int_[0,1]^d |x - c|^2 = d / 12; int_ball |x|^2 = d/(d+2) V_d
    exact = d / 12 if dom.kind == "box" else d / (d + 2) * dom.volume
    assert np.sum(es.weights * r2) == pytest.approx(exact, rel=1e-4)


def test_relative_l2_and_its_sampling_error():
    # u = 1 + x_0 on [0, 1]^6, u_h = u + 0.1 sin(3 x_1 + 2 x_2) (not a polynomial: scrambled nets
    # integrate low-degree polynomials almost exactly). Closed forms: ||u||^2 = 1 + 1 + 1/3 = 7/3;
    # ||e||^2 = 0.01 (1/2 - Re(E(6) E(4)) / 2), E(a) = int_0^1 exp(i a t) dt = (exp(i a) - 1) / (i a)
    p = make_problem({"name": "nd_gauss", "dim": 6})
    p.exact = Field(lambda *x: 1.0 + x[0])
    sol = Solution(evaluate=lambda q: 1.0 + q[:, 0] + 0.1 * np.sin(3 * q[:, 1] + 2 * q[:, 2]))

    def E(a):
        return (np.exp(1j * a) - 1) / (1j * a)

    exact = math.sqrt(0.01 * (0.5 - 0.5 * (E(6) * E(4)).real) / (7 / 3))
    estimates, stderrs = [], []
    for seed in range(8):
        m = measure(p, sol, p.eval_set(seed=seed))
        estimates.append(m["rel_l2"])
        stderrs.append(m["rel_l2_stderr"])
        assert len(m["rel_l2_replicates"]) == 8 and m["eval_points"] == 8 * 4096
        assert "Sobol" in m["eval_method"]
    estimates, stderrs = np.array(estimates), np.array(stderrs)
    assert np.all(stderrs > 0) and np.all(stderrs < 1e-4 * exact)
    assert np.all(np.abs(estimates - exact) <= 6 * stderrs)
    # the stated error matches the spread of independent estimates (within a factor 3: the
    # standard deviation of 8 samples is uncertain by about 25 %)
    spread = np.std(estimates, ddof=1)
    assert stderrs.mean() / 3 < spread < 3 * stderrs.mean()


def test_error_field_is_a_slice_in_three_dimensions():
    p = make_problem({"name": "nd_waves", "dim": 3})
    sol = Solution(evaluate=lambda q: p.exact(q) + q[:, 2])
    f = error_field(p, sol, m=5)
    assert len(f["error"]) == 25 and f["slice"] == {"x2": 0.5}
    assert np.allclose(np.array(f["error"], float), 0.5)          # the error x_2 on the slice x_2 = 0.5


# -- spectra --------------------------------------------------------------------------------------

def test_box_spectrum_by_hand_and_by_brute_force():
    lam, n = box_spectrum(3, 14)
    # sums of three squares >= 1 each (by hand): 3; 6 (x3); 9 (x3); 11 (x3); 12; 14 (x6: perms of 1,2,3)
    assert np.allclose(lam / math.pi ** 2, [3, 6, 6, 6, 9, 9, 9, 11, 11, 11, 12, 14, 14, 14, 14, 14, 14])
    assert np.array_equal(np.sum(n * n, axis=1), np.rint(lam / math.pi ** 2))
    brute = sorted(sum(v * v for v in t) for t in itertools.product(range(1, 8), repeat=4))
    lam4, _ = box_spectrum(4, 40)
    k = len(lam4)
    assert np.array_equal(np.rint(lam4 / math.pi ** 2).astype(int), brute[:k])
    assert brute[k] > brute[k - 1]                                  # the cluster is complete


def test_eigen_box_modes_are_eigenfunctions():
    p = make_problem({"name": "eigen_box", "dim": 4, "k": 10})
    pts = _interior(p.domain, 40)
    for i in range(len(p.eigenvalues)):
        mode = lambda q, i=i: p.modes(q)[:, i]
        assert np.allclose(-fd_laplacian(mode, pts, 1e-3), p.eigenvalues[i] * mode(pts), atol=1e-5 * p.eigenvalues[i])


def test_bessel_zeros_half_integer_order():
    # J_{1/2}(x) = sqrt(2/(pi x)) sin x: zeros s pi (closed form)
    assert np.allclose(bessel_zeros(0.5, 6), math.pi * np.arange(1, 7), rtol=1e-14)
    # J_{3/2}(x) = sqrt(2/(pi x)) (sin x / x - cos x): zeros solve tan x = x (closed form)
    z = bessel_zeros(1.5, 5)
    assert np.allclose(np.sin(z) / z - np.cos(z), 0, atol=1e-13)
    assert np.all(np.diff(z) > 3) and z[0] > 1.5 and z[0] < 1.5 * math.pi   # the first root of tan x = x
    from scipy.special import jn_zeros

    assert np.array_equal(bessel_zeros(2.0, 4), jn_zeros(2, 4))


def _monomials(d, degree):
    return sum(1 for t in itertools.product(range(degree + 1), repeat=d) if sum(t) == degree)


@pytest.mark.parametrize("d", [2, 3, 4, 5])
def test_harmonic_multiplicity_counts_harmonic_polynomials(d):
    # homogeneous harmonic polynomials of degree l = kernel of the (onto) Laplacian P_l -> P_{l-2},
    # so their number is #monomials(l) - #monomials(l - 2), counted here by enumeration
    for l in range(6):
        expected = _monomials(d, l) - (_monomials(d, l - 2) if l >= 2 else 0)
        assert harmonic_multiplicity(d, l) == expected, (d, l)


def test_ball_spectrum_three_dimensions():
    lam, rows = ball_spectrum(3, 10)
    assert lam[0] == pytest.approx(math.pi ** 2, rel=1e-14)        # j_{1/2,1} = pi (closed form)
    j32 = bessel_zeros(1.5, 1)[0]
    j52 = bessel_zeros(2.5, 1)[0]
    expect = [math.pi ** 2] + [j32 ** 2] * 3 + [j52 ** 2] * 5 + [(2 * math.pi) ** 2]  # multiplicities 2l + 1
    assert np.allclose(lam, expect, rtol=1e-14)
    assert [tuple(r) for r in rows[:5]] == [(0, 1), (1, 1), (1, 1), (1, 1), (2, 1)]


def test_ball_spectrum_matches_disk_and_four_dimensions():
    from lapbench.problems.eigen import disk_spectrum
    from scipy.special import jn_zeros

    assert np.allclose(ball_spectrum(2, 12)[0], disk_spectrum(1.0, 12)[0], rtol=1e-14)
    # d = 4: orders l + 1 (integer; scipy.special.jn_zeros), multiplicity (l + 1)^2 (closed form)
    lam, _ = ball_spectrum(4, 14)
    j1, j2, j3 = jn_zeros(1, 2), jn_zeros(2, 1)[0], jn_zeros(3, 1)[0]
    expect = sorted([j1[0] ** 2] + [j2 ** 2] * 4 + [j3 ** 2] * 9 + [j1[1] ** 2])
    assert np.allclose(lam, expect[: len(lam)], rtol=1e-14) and len(lam) == 14
    # the interval (-1, 1): (m pi / 2)^2 (closed form)
    assert np.allclose(ball_spectrum(1, 4)[0], (np.arange(1, 5) * math.pi / 2) ** 2, rtol=1e-14)


def test_eigen_problems_in_high_dimension_are_cheap_and_complete():
    for name in ("eigen_box", "eigen_ball"):
        p = make_problem({"name": name, "dim": 20, "k": 200})
        lam = p.eigenvalues
        assert len(lam) >= 200 and np.all(np.diff(lam) >= 0)
        assert np.all(np.abs(lam[200:] - lam[199]) <= 1e-9 * lam[199])   # only the k-th cluster beyond k


def _fd_laplacian_columns(fn, pts, h):
    """Laplace of every column of fn(points) -> (m, K) by fourth-order central differences
    (common practice), all columns per evaluation."""
    u0 = fn(pts)
    out = np.zeros_like(u0)
    for i in range(pts.shape[1]):
        e = np.zeros(pts.shape[1])
        e[i] = h
        out += (-fn(pts + 2 * e) + 16 * fn(pts + e) - 30 * u0 + 16 * fn(pts - e) - fn(pts - 2 * e)) / (12 * h * h)
    return out


@pytest.mark.parametrize("dim, k", [(2, 8), (3, 12), (4, 10), (7, 12)])
def test_eigen_ball_modes_are_eigenfunctions_spanning_each_cluster(dim, k):
    p = make_problem({"name": "eigen_ball", "dim": dim, "k": k})
    pts = _interior(p.domain, 60, margin=0.1)
    M = p.modes(pts)
    assert M.shape == (len(pts), len(p.eigenvalues))
    lap = _fd_laplacian_columns(p.modes, pts, 1e-3)
    scale = np.abs(M).max(axis=0)
    assert np.all(np.abs(-lap - p.eigenvalues * M).max(axis=0) <= 1e-6 * p.eigenvalues * scale)
    bp, _ = p.domain.sample_boundary(100, np.random.default_rng(2))
    assert np.abs(p.modes(bp)).max() < 1e-12 * scale.max()          # Dirichlet condition
    es = p.eval_set(seed=0)
    assert np.linalg.matrix_rank(p.modes(es.points)) == len(p.eigenvalues)   # a basis of each eigenspace


def test_eigen_metric_accepts_any_basis_of_a_ball_eigenspace():
    # rotate the reference modes inside each cluster: eigenvalue error 0 and every angle 0
    from lapbench.metrics import clusters

    p = make_problem({"name": "eigen_ball", "dim": 3, "k": 9})
    Q = np.eye(len(p.eigenvalues))
    rng = np.random.default_rng(7)
    for s, e in clusters(p.eigenvalues, 1e-9):
        Q[s:e, s:e] = np.linalg.qr(rng.standard_normal((e - s, e - s)))[0]
    sol = Solution(evaluate=lambda q: p.modes(q)[:, 0], eigenvalues=p.eigenvalues.copy(),
                   modes=lambda q: p.modes(q) @ Q)
    m = measure(p, sol, p.eval_set(seed=1))
    assert m["eig_rel_max"] == 0 and m["mode_angle_max"] < 1e-6
    bad = Solution(evaluate=sol.evaluate, eigenvalues=p.eigenvalues.copy(), modes=lambda q: p.modes(q)[:, ::-1])
    assert measure(p, bad, p.eval_set(seed=1))["mode_angle_max"] > 1.0   # wrong eigenspaces: far off


def test_run_records_the_sampling_error_of_a_four_dimensional_case(tmp_path, lapbench_cmd):
    import json
    import subprocess

    p = subprocess.run(lapbench_cmd + ["run", "problem=nd_harmonic", "problem.dim=4", "solver=fst5",
                                       "timing.repeats=1", "timing.min_time=0", f"results_dir={tmp_path}",
                                       f"hydra.run.dir={tmp_path}/hydra"], capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    (path,) = (tmp_path / "runs").glob("nd_harmonic__fst5__*.json")
    rec = json.loads(path.read_text())
    assert rec["status"] == "ok", rec["reason"]
    assert rec["problem"]["id"].endswith("[box lo=0^4 hi=1^4]")
    m = rec["metrics"]
    assert m["eval_points"] == 8 * 4096 and len(m["rel_l2_replicates"]) == 8 and "Sobol" in m["eval_method"]
    # the replicates scatter around the pooled estimate by about the stated standard error
    assert 0 < m["rel_l2_stderr"] < 0.05 * m["rel_l2"]
    assert abs(np.mean(m["rel_l2_replicates"]) - m["rel_l2"]) < 5 * m["rel_l2_stderr"]
