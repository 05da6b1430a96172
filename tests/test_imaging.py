"""Pixel masks, the pixel-resolution 5-point solver and the imaging problems, against outside facts."""
import numpy as np
import pytest

from lapbench.config import ConfigError
from lapbench.domains import Mask, Rectangle, make_domain
from lapbench.fields import Field
from lapbench.image_metrics import psnr
from lapbench.metrics import measure
from lapbench.problems import Problem, make_problem
from lapbench.solvers import SOLVERS
from lapbench.solvers.pixel import PIXEL_SOLVERS, pixel_solve

# a 10 x 10 mask whose inner 8 x 8 pixels are True: with the frame, 12 x 12 pixels of side 1/12,
# the region is the square [2/12, 10/12]^2
BOX = [[0] * 10] + [[0] + [1] * 8 + [0] for _ in range(8)] + [[0] * 10]


def _problem(domain, u, f=None, kind="poisson"):
    return Problem("t", kind, domain, f=f, g=u, exact=u)


def test_rectangle_mask_reproduces_the_rectangle_solvers():
    # The same 5-point system on the same nodes (common practice: the mask's boundary edges are
    # grid lines and no arm is cut), so fd5 and fst5 on the rectangle agree to rounding.
    mask = make_domain({"kind": "mask", "data": BOX})
    a, b = 2 / 12, 10 / 12
    assert mask.bbox == pytest.approx((a, b, a, b))
    rect = Rectangle(x0=a, x1=b, y0=a, y1=b)
    u = Field(lambda x, y: np.sin(3 * x) * np.exp(y) + x * y)
    f = Field(lambda x, y: 8 * np.sin(3 * x) * np.exp(y))          # -Laplace(u) by hand
    for refine in (1, 3):
        n = 8 * refine
        pix = SOLVERS["pixel5"](params={"refine": refine}).solve(_problem(mask, u, f).public())
        for name in ("fd5", "fst5"):
            ref = SOLVERS[name](params={"n": n}).solve(_problem(rect, u, f).public())
            np.testing.assert_allclose(pix.values, ref.evaluate(pix.nodes), rtol=0, atol=1e-12)
        assert len(pix.values) == (n - 1) ** 2


@pytest.mark.parametrize("linear_solver", PIXEL_SOLVERS)
def test_harmonic_cubic_is_reproduced_to_rounding(linear_solver):
    # The 5-point stencil is exact for polynomials of degree <= 3 (its truncation error is
    # h^2/12 (u_xxxx + u_yyyy) + ...), so the discrete harmonic fill of a harmonic cubic is the
    # cubic itself [common practice; REFERENCES.md "Images"].
    mask = make_domain({"kind": "mask", "shape": "blobs", "pixels": 40, "seed": 3})
    u = Field(lambda x, y: x ** 3 - 3 * x * y ** 2 + 2 * x * y - y ** 2 + x ** 2 + 0.5)
    grid, U, info = pixel_solve(mask, None, u, 1, linear_solver, tol=1e-13)
    P = grid.points(grid.I, grid.J)
    assert info["dofs"] > 100
    assert np.max(np.abs(U[grid.I, grid.J] - u(P))) < 1e-11


def test_observed_order_two_on_a_smooth_solution():
    # Second-order convergence of the 5-point scheme for smooth solutions (LeVeque, Finite
    # Difference Methods, SIAM 2007, ch. 3); slope of log max nodal error against log h.
    prob = make_problem({"name": "mask_exact", "solution": "wave", "k": 1.0,
                         "domain": {"kind": "mask", "shape": "text", "pixels": 40}})
    errs, hs = [], []
    for refine in (1, 2, 4):
        sol = SOLVERS["pixel5"](params={"refine": refine}).solve(prob.public())
        errs.append(np.max(np.abs(sol.values - prob.exact(sol.nodes))))
        hs.append(sol.info["h"])
    slope = np.polyfit(np.log(hs), np.log(errs), 1)[0]
    assert abs(slope - 2.0) < 0.15, f"observed order {slope:.3f}, errors {errs}"


def test_psnr_equals_scikit_image():
    from skimage.metrics import peak_signal_noise_ratio

    rng = np.random.default_rng(0)
    truth = rng.uniform(0, 1, 500)
    est = np.clip(truth + rng.normal(0, 0.05, 500), 0, 1)
    assert psnr(est, truth) == pytest.approx(peak_signal_noise_ratio(truth, est, data_range=1.0), rel=1e-12)


def test_inpainting_record_metrics_against_scikit_image():
    from skimage.metrics import peak_signal_noise_ratio

    prob = make_problem({"name": "inpaint", "image": "camera",
                         "domain": {"kind": "mask", "shape": "scratches", "pixels": 40}})
    sol = SOLVERS["fem_p1"](params={"level": 1}).solve(prob.public())
    m = measure(prob, sol, prob.eval_set(0))
    vals = sol.evaluate(prob.hole_points)
    assert m["reference"] == "discrete" and "discrete 5-point" in prob.source
    assert m["psnr_original"] == pytest.approx(peak_signal_noise_ratio(prob.truth, vals, data_range=1.0))
    assert m["psnr_reference"] == pytest.approx(
        peak_signal_noise_ratio(prob.reference_values, vals, data_range=1.0))
    assert len(m["image"]["hole_values"]) == len(prob.truth)
    # the direct pixel solve is the discrete reference itself
    ref = SOLVERS["pixel5"]().solve(prob.public())
    m = measure(prob, ref, prob.eval_set(0))
    assert m["nodal_max"] < 1e-12 and m["rel_l2"] < 1e-12


def test_public_view_hides_the_photograph():
    prob = make_problem({"name": "inpaint", "domain": {"kind": "mask", "shape": "box", "pixels": 16}})
    pub = prob.public()
    assert pub.exact is None and pub.image is None and pub.truth is None and pub.reference_values is None
    hole = prob.hole_points[:3]
    with pytest.raises(Exception, match="off the boundary"):
        pub.g(hole)


@pytest.mark.parametrize("channel", ["grey", "red", "blue"])
def test_clone_runs_per_channel(channel):
    prob = make_problem({"name": "clone", "channel": channel,
                         "domain": {"kind": "mask", "shape": "blobs", "pixels": 24}})
    assert prob.kind == "poisson"
    sol = SOLVERS["pixel5"](params={"linear_solver": "amg", "tol": 1e-12}).solve(prob.public())
    assert measure(prob, sol, prob.eval_set(0))["nodal_max"] < 1e-9


@pytest.mark.parametrize("data, rule", [
    ([[0, 0, 0], [0, 0, 0]], "is empty"),
    ([[1, 1], [1, 1]], "all True"),
    ([1, 0, 1], "2-D array"),
    ([[0, 1], [1]], "2-D array"),
    ([[0, 2], [1, 1]], "must be boolean"),
    ([[0.5, 1], [1, 0]], "must be boolean"),
    ([[0, 1, 0], [0, 1, 0], [0, 1, 0]], "no pixel corner inside"),
])
def test_bad_masks_are_refused_with_one_line(data, rule):
    with pytest.raises(ConfigError, match=rule) as exc:
        make_problem({"name": "mask_exact", "domain": {"kind": "mask", "data": data}})
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith("`problem.domain.data`"), msg


def test_bad_mask_files_are_refused(tmp_path):
    np.save(tmp_path / "grey.npy", np.full((8, 8), 0.5))
    with pytest.raises(ConfigError, match="`problem.domain.path` must be boolean"):
        make_domain({"kind": "mask", "path": str(tmp_path / "grey.npy")})
    with pytest.raises(ConfigError, match="`problem.domain.path` must name an existing"):
        make_domain({"kind": "mask", "path": str(tmp_path / "missing.npy")})
    m = np.zeros((8, 8), dtype=bool)
    m[2:6, 2:7] = True
    np.save(tmp_path / "ok.npy", m)
    d = make_domain({"kind": "mask", "path": str(tmp_path / "ok.npy")})
    assert d.area == pytest.approx(20 * d.h ** 2)
    from skimage.io import imsave

    imsave(tmp_path / "ok.png", (m * 255).astype(np.uint8), check_contrast=False)
    assert np.array_equal(make_domain({"kind": "mask", "path": str(tmp_path / "ok.png")}).cells, d.cells)
    imsave(tmp_path / "grey.png", np.arange(64, dtype=np.uint8).reshape(8, 8), check_contrast=False)
    with pytest.raises(ConfigError, match="`problem.domain.path` .* must be a two-level"):
        make_domain({"kind": "mask", "path": str(tmp_path / "grey.png")})
    imsave(tmp_path / "white.png", np.full((8, 8), 255, dtype=np.uint8), check_contrast=False)
    with pytest.raises(ConfigError, match="all True"):
        make_domain({"kind": "mask", "path": str(tmp_path / "white.png")})
    with pytest.raises(ConfigError, match="`problem.domain.shape` must be one of"):
        make_domain({"kind": "mask", "shape": "stars"})


def test_mask_geometry_against_closed_forms():
    mask = make_domain({"kind": "mask", "data": BOX})
    rect = Rectangle(x0=2 / 12, x1=10 / 12, y0=2 / 12, y1=10 / 12)
    rng = np.random.default_rng(0)
    pts = rng.uniform(0, 1, (2000, 2))
    # the signed distance to an axis-aligned square in closed form (Rectangle.distance)
    np.testing.assert_allclose(mask.distance(pts), rect.distance(pts), atol=1e-14)
    assert mask.area == pytest.approx((8 / 12) ** 2)
    bp, nrm = mask.sample_boundary(400, rng)
    assert mask.on_boundary(bp).all() and np.allclose(np.linalg.norm(nrm, axis=1), 1.0)
    assert not mask.contains(bp + 1e-6 * nrm).any() and mask.contains(bp - 1e-6 * nrm).all()
    assert np.abs(mask.phi(bp)).max() == 0.0
    ip = mask.sample_interior(500, rng)
    assert (mask.phi(ip) > 0).all() and mask.phi(ip).max() <= 1.05
    # inradius of the square is half its side (closed form), to the EDT's eighth of a pixel
    assert abs(mask.inradius - 4 / 12) <= (1 / 12) / 8 + 1e-12
    q, w = mask.quadrature(48)
    assert w.sum() == pytest.approx(mask.area, rel=1e-13)
    # the quadrature integrates x^3 y^2 exactly (Gauss-Legendre, degree <= 3 per direction)
    exact = ((b := 10 / 12) ** 4 - (a := 2 / 12) ** 4) / 4 * (b ** 3 - a ** 3) / 3
    assert np.sum(w * q[:, 0] ** 3 * q[:, 1] ** 2) == pytest.approx(exact, rel=1e-12)


def test_boundary_extension_matches_data_on_the_boundary():
    mask = make_domain({"kind": "mask", "shape": "text", "pixels": 32})
    u = Field(lambda x, y: np.cos(2 * x) + y ** 2)
    bp, _ = mask.sample_boundary(300, np.random.default_rng(1))
    np.testing.assert_allclose(mask.extend_boundary_data(u, bp), u(bp), atol=1e-12)
    # not a solution of the PDE: the harmonic data's extension differs from it inside
    v = Field(lambda x, y: np.exp(3 * x) * np.sin(3 * y))
    ip = mask.sample_interior(300, np.random.default_rng(2))
    assert np.max(np.abs(mask.extend_boundary_data(v, ip) - v(ip))) > 1e-3


@pytest.mark.parametrize("shape", ["blobs", "text", "scratches", "box"])
def test_generated_masks_are_seeded_and_valid(shape):
    a = Mask(shape=shape, pixels=32, seed=5)
    b = Mask(shape=shape, pixels=32, seed=5)
    assert np.array_equal(a.cells, b.cells) and a.interior_corners.any()
    assert not a.cells[0].any() and not a.cells[-1].any()       # the False frame


@pytest.mark.parametrize("cfg", [{"solution": "cubic"}, {"solution": "exp_sin"}, {"solution": "wave", "k": 2.0}])
def test_mask_exact_solutions_satisfy_pde_and_boundary(cfg):
    from lapbench.numerics import fd_laplacian  # fourth-order central differences (common practice)

    p = make_problem({"name": "mask_exact", **cfg})
    pts = p.domain.sample_interior(200, np.random.default_rng(0))
    f = p.f_or_zero(pts)
    # FD truncation error at h = 1e-3 is ~1e-12 u^(6): 2e-5 relative is ample and still fails
    # on a wrong sign or factor
    assert np.max(np.abs(-fd_laplacian(p.exact, pts, 1e-3) - f)) <= 2e-5 * max(1.0, np.abs(f).max())
    bp, _ = p.domain.sample_boundary(100, np.random.default_rng(1))
    np.testing.assert_allclose(p.public().g(bp), p.exact(bp), atol=1e-14)


def test_imaging_run_and_report_end_to_end(tmp_path):
    """Status-only: `lapbench run` writes imaging records with the PSNRs and the hole's values,
    `lapbench report` draws the images figure beside the tables."""
    import json
    import subprocess

    from tests.conftest import LAPBENCH

    common = [f"results_dir={tmp_path}", "timing.repeats=1", "timing.min_time=0", "timing.warmup=0",
              "problem.domain.pixels=24"]
    p = subprocess.run([LAPBENCH, "run", "--multirun", "problem=inpaint", "solver=pixel5,fem_p1", *common],
                       cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    recs = [json.loads(r.read_text()) for r in sorted((tmp_path / "runs").glob("*.json"))]
    assert len(recs) == 2 and all(r["status"] == "ok" for r in recs)
    for r in recs:
        m = r["metrics"]
        assert m["reference"] == "discrete" and np.isfinite(m["psnr_original"]) and m["image"]["hole_values"]
    p = subprocess.run([LAPBENCH, "report", f"results_dir={tmp_path}", "report.name=img",
                        "report.figures.kinds=[images]", "report.figures.formats=[png]"],
                       cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    figs = list((tmp_path / "reports" / "img" / "figures").glob("images__*.png"))
    assert len(figs) == 1
    assert f"figures/{figs[0].name}" in (tmp_path / "reports" / "img" / "report.md").read_text()


def test_p1_on_triangulated_pixels_is_the_five_point_scheme():
    # P1 stiffness on a uniform right-triangle mesh is the 5-point stencil [common practice;
    # e.g. Strang & Fix, An Analysis of the Finite Element Method, 1973, from memory]: for
    # Laplace data the nodal values of fem_p1 at level 0 equal pixel5's at refine 1.
    prob = make_problem({"name": "inpaint", "domain": {"kind": "mask", "shape": "text", "pixels": 32}})
    fem = SOLVERS["fem_p1"](params={"level": 0}).solve(prob.public())
    pix = SOLVERS["pixel5"]().solve(prob.public())
    np.testing.assert_allclose(fem.evaluate(pix.nodes), pix.values, atol=1e-12)


def test_hard_boundary_pinn_meets_the_data_on_pixel_edges():
    # u = g_ext + phi N with phi = 0 and g_ext = g on every boundary segment: the network's
    # output satisfies the data on the boundary whatever it learned (float32 rounding).
    prob = make_problem({"name": "mask_exact", "solution": "exp_sin",
                         "domain": {"kind": "mask", "shape": "text", "pixels": 24}})
    s = SOLVERS["pinn_hard"](params={"width": 8, "depth": 2, "n_interior": 64, "adam_steps": 20, "lbfgs_steps": 0})
    sol = s.solve(prob.public())
    bp, _ = prob.domain.sample_boundary(200, np.random.default_rng(4))
    assert np.max(np.abs(sol.evaluate(bp) - prob.exact(bp))) < 1e-5


@pytest.mark.parametrize("cfg, rule", [
    ({"name": "inpaint", "image": "camera", "channel": "red"}, "`problem.channel` must be 'grey' for the grey image"),
    ({"name": "inpaint", "image": "mona"}, "`problem.image` must be one of"),
    ({"name": "clone", "source": "coffee", "target": "coffee"}, "`problem.source` must differ"),
    ({"name": "inpaint", "domain": {"kind": "disk"}}, "`problem.domain.kind` must be 'mask'"),
])
def test_bad_image_problem_configs(cfg, rule):
    with pytest.raises(ConfigError, match=rule):
        make_problem(cfg)


def test_colour_composite_finds_the_three_channel_runs():
    from lapbench.report.images import _channel_siblings, _composite

    def rec(channel, solver="pixel5"):
        return {"status": "ok", "metrics": {"image": {"hole_values": [0.5]}},
                "problem": {"config": {"name": "inpaint", "image": "astronaut", "channel": channel}},
                "solver": {"name": solver, "resolution_label": "refine=1", "config": {"name": solver}}}

    recs = [rec("red"), rec("green"), rec("blue", "fem_p1"), rec("blue"), rec("grey")]
    assert _channel_siblings(recs, 0) == {"red": 0, "green": 1, "blue": 3}
    assert _channel_siblings(recs, 1) is None                      # only red records lead
    assert _channel_siblings(recs[:3], 0) is None                  # no pixel5 blue run
    rgb = _composite([np.array([[0.2, np.nan]]), np.array([[0.4, 0.1]]), np.array([[0.6, 0.1]])])
    np.testing.assert_allclose(rgb, [[[0.2, 0.4, 0.6], [1.0, 0.0, 1.0]]])


@pytest.mark.parametrize("preset", ["pinn_soft", "pinn_hard", "pinn_ritz", "pinn_fourier", "pinn_rar"])
def test_every_pinn_variant_learns_on_a_mask(preset):
    """Every PINN preset runs on a pixel-mask region through the mask's distance function and
    boundary sampling, and training lowers its error against the closed form (mask_exact's
    e^x sin y, harmonic [closed form]): 300 Adam steps beat 2 steps from the same seed."""
    prob = make_problem({"name": "mask_exact", "solution": "exp_sin",
                         "domain": {"kind": "mask", "shape": "blobs", "pixels": 24}})
    pts, _ = prob.domain.quadrature(3)
    exact = prob.exact(pts)

    def error(steps):
        small = {"width": 16, "depth": 2, "n_interior": 256, "n_boundary": 128, "adam_steps": steps,
                 "lbfgs_steps": 0, "lr": 0.01, "lr_decay": 1.0, "rar_every": 50, "rar_candidates": 500,
                 "rar_add": 20, "patience": 0}
        sol = SOLVERS[preset](params=small).solve(prob.public())
        u = sol.evaluate(pts)
        assert np.all(np.isfinite(u))
        return np.linalg.norm(u - exact) / np.linalg.norm(exact)

    before, after = error(2), error(300)
    assert after < 0.5 * before, (before, after)
