"""Disk, annulus and polygon domains, their problems, config validation and unsupported pairings."""
import math

import numpy as np
import pytest
from omegaconf import OmegaConf

from lapbench.cli import conf_dir
from lapbench.config import ConfigError
from lapbench.domains import Rectangle, make_domain
from lapbench.problems import BoundaryDataError, make_problem
from lapbench.domains import LSHAPE_VERTICES, Annulus, Disk, Polygon, lshape
from lapbench.numerics import fd_laplacian  # fourth-order central differences (common practice)

SQUARE = [[0, 0], [1, 0], [1, 1], [0, 1]]
TRIANGLE = [[0, 0], [4, 0], [0, 3]]
# a non-convex "comb": two teeth of width 1 above a base [0, 3] x [0, 1]
COMB = [[0, 0], [3, 0], [3, 2], [2, 2], [2, 1], [1, 1], [1, 2], [0, 2]]


def _domains():
    return [Disk(cx=0.5, cy=-1.0, radius=2.0), Annulus(cx=1.0, cy=0.0, r_in=0.3, r_out=1.2),
            lshape(), Polygon(vertices=TRIANGLE), Polygon(vertices=COMB)]


# -- polygons -------------------------------------------------------------------------------------

@pytest.mark.parametrize("verts, area", [
    (SQUARE, 1.0),              # shoelace: unit square
    (TRIANGLE, 6.0),            # shoelace: (1/2) * 4 * 3
    (LSHAPE_VERTICES, 3.0),     # shoelace: three unit squares
    (COMB, 5.0),                # shoelace: base 3 plus two unit teeth
    (TRIANGLE[::-1], 6.0),      # clockwise order: same area
])
def test_polygon_area_shoelace(verts, area):
    assert Polygon(vertices=verts).area == pytest.approx(area, rel=1e-14)


def test_polygon_membership_hand_checked():
    comb = Polygon(vertices=COMB)
    inside = np.array([[0.5, 1.5], [2.5, 1.5], [1.5, 0.5], [0.1, 0.1]])   # teeth, base (by hand)
    outside = np.array([[1.5, 1.5], [3.5, 0.5], [-0.1, 1.0], [1.5, 2.5]])  # notch, right, left, above
    assert comb.contains(inside).all()
    assert not comb.contains(outside).any()
    L = lshape()
    assert L.contains(np.array([[-0.5, -0.5], [0.5, 0.5], [-0.5, 0.5]])).all()
    assert not L.contains(np.array([[0.5, -0.5]])).any()   # the removed quadrant


def test_signed_distances_by_hand():
    L = lshape()
    # (-0.5, 0.5): 0.5 to the edges x = -1 and y = 1; the corner (0, 0) is sqrt(0.5) away
    # (0.5, -0.5): outside, 0.5 from the edges y = 0 and x = 0 of the notch
    # (0.1, 0.1): nearest is the edge y = 0 (x in [0, 1]) at 0.1
    d = L.distance(np.array([[-0.5, 0.5], [0.5, -0.5], [0.1, 0.1]]))
    assert np.allclose(d, [0.5, -0.5, 0.1], atol=1e-15)
    D = Disk(cx=1.0, cy=2.0, radius=3.0)
    assert np.allclose(D.distance(np.array([[1.0, 2.0], [4.0, 2.0], [1.0, 7.0]])), [3.0, 0.0, -2.0])
    A = Annulus(r_in=0.5, r_out=1.0)
    assert np.allclose(A.distance(np.array([[0.75, 0.0], [0.0, 0.2], [0.0, -1.5]])), [0.25, -0.3, -0.5])


def test_lshape_inradius():
    # Largest inscribed circle: tangent to x = -1 and y = 1 and passing through the corner (0, 0):
    # centre (-1 + r, 1 - r), sqrt(2) (1 - r) = r  =>  r = 2 - sqrt(2) (by hand)
    assert lshape().inradius == pytest.approx(2 - math.sqrt(2), rel=1e-9)


@pytest.mark.parametrize("verts, rule", [
    ([[0, 0], [1, 0]], "at least 3 vertices"),
    ([[0, 0], [1, 0], [1, 1], [0, 0]], "must not repeat a vertex"),
    ([[0, 0], [1, 0], [1, 1], [1, 0]], "must not repeat a vertex"),
    ([[0, 0], [1, 0], [2, 0]], "positive area"),
    ([[0, 0], [2, 2], [2, 0], [0, 1]], "simple polygon"),                 # bow tie
    ([[0, 0], [1, 0], [1, 1], [0.5, -0.5], [0, 1]], "simple polygon"),
    ([[0, 0], [2, 0], [1, 0], [1, 1]], "simple polygon"),                 # edge folds back
])
def test_bad_polygons_are_refused(verts, rule):
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.vertices`.*" + rule):
        make_domain({"kind": "polygon", "vertices": verts})


def test_bad_circles_and_kinds_are_refused():
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.radius` must be positive"):
        make_domain({"kind": "disk", "radius": -1.0})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.r_out` must exceed `r_in`"):
        make_domain({"kind": "annulus", "r_in": 1.0, "r_out": 0.5})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.kind` must be one of .*polygon"):
        make_domain({"kind": "hexagon"})
    with pytest.raises(ConfigError, match=r"^`problem\.domain\.kind` must be 'disk'"):
        make_problem({"name": "disk_harmonic", "domain": {"kind": "annulus"}})


# -- sampling, quadrature, distance functions ------------------------------------------------------

@pytest.mark.parametrize("dom", _domains(), ids=lambda d: d.kind)
def test_boundary_samples_and_normals(dom):
    for rng in (None, np.random.default_rng(3)):
        pts, nrm = dom.sample_boundary(400, rng)
        assert np.allclose(np.linalg.norm(nrm, axis=1), 1.0, atol=1e-14)
        assert dom.on_boundary(pts).all()
        eps = 1e-6 * dom.scale      # outward: a small step along n leaves the domain
        assert (dom.distance(pts + eps * nrm) < 0).all() and (dom.distance(pts - eps * nrm) > 0).all()
    inner = dom.sample_interior(500, np.random.default_rng(4))
    assert (dom.distance(inner) > 0).all()


@pytest.mark.parametrize("dom", _domains(), ids=lambda d: d.kind)
def test_quadrature_area_and_phi(dom):
    pts, w = dom.quadrature(24)
    assert w.sum() == pytest.approx(dom.area, rel=1e-12)   # area: closed form / shoelace
    assert dom.contains(pts, tol=1e-12).all()
    ph = dom.phi(np.vstack([pts, dom.sample_interior(2000, np.random.default_rng(0))]))
    assert ph.min() > 0 and ph.max() <= 1 + 1e-9 and ph.max() > 0.98   # normalised to max 1
    bp, _ = dom.sample_boundary(200, None)
    assert np.abs(dom.phi(bp)).max() < 1e-12


def test_quadrature_moments_closed_form():
    D = Disk(cx=0.0, cy=0.0, radius=2.0)
    p, w = D.quadrature(16)
    assert np.sum(w * (p ** 2).sum(1)) == pytest.approx(math.pi * 2 ** 4 / 2, rel=1e-13)   # pi R^4 / 2
    A = Annulus(r_in=0.5, r_out=1.0)
    p, w = A.quadrature(16)
    assert np.sum(w * p[:, 0] ** 2) == pytest.approx(math.pi * (1 - 0.5 ** 4) / 4, rel=1e-13)  # pi (b^4-a^4)/4


def test_lshape_quadrature_of_singular_function_against_scipy():
    from scipy.integrate import dblquad

    def u(x, y):
        return np.hypot(x, y) ** (2 / 3) * np.sin(2 / 3 * np.mod(np.arctan2(y, x), 2 * np.pi))

    # reference: scipy.integrate.dblquad over the three unit squares of the L
    ref = sum(dblquad(lambda y, x: u(x, y), x0, x0 + 1, y0, y0 + 1, epsabs=1e-13, epsrel=1e-12)[0]
              for x0, y0 in ((-1, -1), (-1, 0), (0, 0)))
    p, w = lshape().quadrature(16)
    assert np.sum(w * u(p[:, 0], p[:, 1])) == pytest.approx(ref, rel=1e-9)


@pytest.mark.parametrize("dom", _domains() + [Rectangle(x0=-0.5, x1=1.0, y0=0.0, y1=2.0)],
                         ids=lambda d: d.kind)
def test_extension_does_not_solve_laplace_problems(dom):
    """Fairness: the boundary-data extension of hard-boundary PINNs must not be a solver. For
    harmonic data u = Re exp(z) the extension must differ from u inside by a clear margin (an earlier harmonic extension on the disk reproduced u to 1e-15,
    handing the network the exact solution of every Laplace problem on it)."""
    u = lambda p: np.exp(p[:, 0]) * np.cos(p[:, 1])  # noqa: E731  (Re exp(z): harmonic, closed form)
    pts = dom.sample_interior(400, np.random.default_rng(1))
    ext = dom.extend_boundary_data(_boundary_only(u, dom), pts)
    assert np.max(np.abs(ext - u(pts))) > 1e-2 * np.max(np.abs(u(pts)))


@pytest.mark.parametrize("dom", _domains(), ids=lambda d: d.kind)
def test_extension_has_a_bounded_laplacian(dom):
    """Smoothness: the 5-point Laplacian of the extension of smooth data does not grow as the
    step shrinks (h = 1e-3 and 1e-4 agree to a few per cent away from the boundary), so a
    hard-boundary network is not asked to cancel a kink or a line of Dirac mass. Fourth-order
    data derivatives bounded: truncation O(h^2), rounding eps |g| / h^2 ~ 1e-8 [common practice]."""
    u = lambda p: np.sin(p[:, 0]) * np.cosh(0.5 * p[:, 1]) + p[:, 0] * p[:, 1] ** 2  # noqa: E731
    g = _boundary_only(u, dom)
    pts = dom.sample_interior(300, np.random.default_rng(4))
    pts = pts[dom.distance(pts) > 0.05 * dom.inradius]
    laps = []
    for h in (1e-3, 1e-4):
        lap = -4 * dom.extend_boundary_data(g, pts)
        for e in ((h, 0), (-h, 0), (0, h), (0, -h)):
            lap += dom.extend_boundary_data(g, pts + np.array(e))
        laps.append(lap / h ** 2)
    scale = max(1.0, np.max(np.abs(laps[0])))
    assert np.max(np.abs(laps[0] - laps[1])) < 0.05 * scale


@pytest.mark.parametrize("verts", [LSHAPE_VERTICES, TRIANGLE, COMB], ids=["lshape", "triangle", "comb"])
def test_polygon_extension_reproduces_affine_data(verts):
    """First-order consistency of the Hermite-type blend: for g = 2 - 3x + 0.5y (affine) every edge
    term equals g itself, so the extension is g everywhere (closed form), up to the rounding of
    the one-sided difference derivatives (step 1e-3 in the edge parameter, exact for affine data)."""
    dom = Polygon(vertices=verts)
    u = lambda p: 2.0 - 3.0 * p[:, 0] + 0.5 * p[:, 1]  # noqa: E731
    pts = dom.sample_interior(300, np.random.default_rng(8))
    np.testing.assert_allclose(dom.extend_boundary_data(_boundary_only(u, dom), pts), u(pts), atol=1e-9)


def test_polygon_extension_has_no_kink_along_vertex_normals():
    """Across the line y = 0, x < 0 of the L-shape (the normal through the re-entrant vertex of
    the edge x = 0, -1 <= y <= 0) the second difference of the extension stays O(1) as h shrinks;
    a closest-point extension there has a kink (measured: -844 at h = 1e-3, -8443 at 1e-4)."""
    dom = lshape()
    u = lambda p: p[:, 0] ** 2 + 3 * p[:, 1] + p[:, 0] * p[:, 1] ** 2  # noqa: E731
    g = _boundary_only(u, dom)
    for x in (-0.5, -0.8):
        second = []
        for h in (1e-3, 1e-4):
            v = dom.extend_boundary_data(g, np.array([[x, -h], [x, 0.0], [x, h]]))
            second.append((v[0] - 2 * v[1] + v[2]) / h ** 2)
        assert abs(second[0]) < 10 and abs(second[0] - second[1]) < 1e-3 * max(1.0, abs(second[0]))


@pytest.mark.parametrize("dom", _domains(), ids=lambda d: d.kind)
def test_extension_matches_data_on_boundary(dom):
    u = lambda p: np.sin(p[:, 0]) * np.cosh(0.5 * p[:, 1]) + p[:, 0] * p[:, 1]  # noqa: E731
    g = _boundary_only(u, dom)
    bp, _ = dom.sample_boundary(300, np.random.default_rng(2))
    assert np.max(np.abs(dom.extend_boundary_data(g, bp) - u(bp))) < 1e-12
    inner = dom.extend_boundary_data(g, dom.sample_interior(300, np.random.default_rng(5)))
    assert np.all(np.isfinite(inner))


def _boundary_only(u, dom):
    def g(p):
        if not dom.on_boundary(p, tol=1e-8 * dom.scale).all():
            raise BoundaryDataError("extension queried data off the boundary")
        return u(p)
    return g


# -- problems on shapes ---------------------------------------------------------------------------



@pytest.mark.parametrize("cfg", [
    {"name": "lshape"},
    {"name": "disk_harmonic"},
    {"name": "annulus_poisson"},
    {"name": "annulus_poisson", "k": 0, "domain": {"kind": "annulus", "cx": 1, "r_in": 0.2, "r_out": 2}},
    {"name": "expr", "u": "exp(x)*sin(2*y) + x**2", "domain": {"kind": "disk", "cx": 0.3, "radius": 1.5}},
    {"name": "expr", "u": "x**3 - y", "domain": {"kind": "polygon", "vertices": COMB}},
], ids=lambda c: c["name"])
def test_shape_problems_satisfy_pde_and_boundary(cfg):
    p = make_problem(cfg)
    pts = p.domain.sample_interior(300, np.random.default_rng(0))
    pts = pts[p.domain.distance(pts) > 0.05 * p.domain.scale]       # away from the corner / edges
    lap = fd_laplacian(p.exact, pts, 1e-3)
    f = p.f_or_zero(pts)
    # FD truncation ~1e-12 u^(6) at h = 1e-3; roundoff ~1e-16 / h^2 = 1e-10 (common practice)
    assert np.max(np.abs(-lap - f)) <= 1e-6 * max(1.0, np.abs(f).max())
    bp, _ = p.domain.sample_boundary(200, np.random.default_rng(1))
    assert np.allclose(p.public().g(bp), p.exact(bp), atol=1e-14)


def test_lshape_solution_values():
    # u = r^(2/3) sin(2 theta / 3) (Mitchell 2013): zero on the edges at the corner; at (-1, 0):
    # r = 1, theta = pi, u = sin(2 pi / 3) = sqrt(3)/2; at (0, 1): theta = pi/2, u = sin(pi/3)
    p = make_problem({"name": "lshape"})
    pts = np.array([[0.5, 0.0], [0.0, -0.5], [-1.0, 0.0], [0.0, 1.0]])
    assert np.allclose(p.exact(pts), [0.0, 0.0, math.sqrt(3) / 2, math.sqrt(3) / 2], atol=1e-15)


def test_presets_build_and_polygon_config_from_yaml():
    for name in ("lshape", "disk_harmonic", "annulus_poisson"):
        cfg = OmegaConf.to_container(OmegaConf.load(conf_dir() / "problem" / f"{name}.yaml"))
        assert make_problem(cfg).name == name
    cfg = OmegaConf.create({"name": "expr", "u": "x*y",
                            "domain": {"kind": "polygon", "vertices": [[0, 0], [2, 0], [1, 1]]}})
    p = make_problem(cfg)
    assert p.domain.area == pytest.approx(1.0) and p.domain.to_dict()["vertices"][1] == [2.0, 0.0]


def test_unsupported_pairing_is_a_record(tmp_path):
    from lapbench.run import Case, run_case

    rec, _ = run_case(Case(problem={"name": "disk_harmonic"}, solver={"name": "cheb", "n": 8}),
                      results_dir=tmp_path)
    assert rec["status"] == "unsupported"
    assert "disk" in rec["reason"]
    rec, _ = run_case(Case(problem={"name": "lshape"}, solver={"name": "disk_cheb"}), results_dir=tmp_path)
    assert rec["status"] == "unsupported" and "polygon" in rec["reason"]
