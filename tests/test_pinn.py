"""PINN family (solvers/pinn/): derivatives, boundary treatment, accuracy, reproducibility, budgets,
the shared training driver.

Every run here uses a tiny network (2 hidden layers of 16) and a few hundred steps, so that each
test stays within a few seconds on one core. Accuracy thresholds were measured on the
development machine (2 cores, torch 2.13 CPU, 1 thread) over seeds 0-4 with exactly these
settings; each threshold is about three times the worst of the five, and the test runs seed 0.
"""
from __future__ import annotations

import dataclasses
import math
import subprocess
import sys

import numpy as np
import pytest

from lapbench.config import ConfigError
from lapbench.metrics import solution_errors
from lapbench.problems import make_problem
from lapbench.solvers import SOLVERS
from lapbench.solvers.base import Budget, RunContext
from lapbench.solvers.pinn import PRESETS

torch = pytest.importorskip("torch")

from lapbench.solvers.pinn.model import Network  # noqa: E402  (after the torch check)
from lapbench.solvers.pinn.sampling import fd_derivatives, point_data  # noqa: E402

TINY = {"width": 16, "depth": 2, "n_interior": 256, "n_boundary": 128, "adam_steps": 300,
        "lbfgs_steps": 150}


@pytest.fixture(scope="module", autouse=True)
def _one_thread():
    old = torch.get_num_threads()
    torch.set_num_threads(1)
    SOLVERS["pinn_hard"].preload()
    yield
    torch.set_num_threads(old)


def _run(name, problem="sine", seed=0, train_time=100.0, **over):
    prob = make_problem({"name": problem})
    ctx = RunContext(seed=seed)
    sol = SOLVERS[name](params={**TINY, **over}).solve(prob.public(), Budget(train_time=train_time), ctx)
    return prob, sol, ctx


# -- registry, configs, import cost ------------------------------------------------------------
def test_import_does_not_load_torch():
    """`lapbench list` must stay fast: importing the registry never imports torch."""
    code = "import sys, solvers; assert 'torch' not in sys.modules, 'torch imported'"
    subprocess.run([sys.executable, "-c", code], check=True)


@pytest.mark.parametrize("name", sorted(PRESETS))
def test_preset_config_lists_every_option(name):
    """conf/solver/<preset>.yaml lists every option with the preset's defaults."""
    from omegaconf import OmegaConf

    from lapbench.cli import conf_dir

    cfg = OmegaConf.to_container(OmegaConf.load(conf_dir() / "solver" / f"{name}.yaml"))
    assert cfg.pop("name") == name
    defaults = dataclasses.asdict(PRESETS[name].Params())
    assert cfg == defaults
    assert SOLVERS[name] is PRESETS[name]


@pytest.mark.parametrize("field,value,match", [
    ("activation", "relu", r"^`solver\.activation` must be one of tanh, sin, silu; got 'relu'"),
    ("boundary", "weak", r"^`solver\.boundary` must be one of soft, hard"),
    ("lr_decay", 2.0, r"^`solver\.lr_decay` must lie in \(0, 1\]"),
    ("adam_steps", -1, r"^`solver\.adam_steps` must be a non-negative integer"),
])
def test_bad_options_name_the_field(field, value, match):
    from lapbench.run import make_solver

    with pytest.raises(ConfigError, match=match):
        make_solver({"name": "pinn_hard", field: value})


# -- derivatives ---------------------------------------------------------------------------------
def _numpy_forward(net, x):
    """The network's forward pass re-implemented in numpy float64 from its weights."""
    act = {"tanh": np.tanh, "sin": np.sin, "silu": lambda z: z / (1 + np.exp(-z))}[net.activation]
    a = (x - net.center.double().numpy()) * net.scale.double().numpy()
    if net.fourier is not None:
        z = a @ net.fourier.double().numpy().T
        a = np.concatenate([np.cos(z), np.sin(z)], axis=1)
    for i, lin in enumerate(net.layers):
        a = a @ lin.weight.detach().double().numpy().T + lin.bias.detach().double().numpy()
        if i < len(net.layers) - 1:
            a = act(a)
    return a[:, 0]


@pytest.mark.parametrize("activation", ["tanh", "sin", "silu"])
@pytest.mark.parametrize("fourier", [0, 6])
def test_network_laplacian_matches_finite_differences(activation, fourier):
    """All three Laplacian routes agree with 4th-order central differences of an independent
    numpy forward pass (float64). Step h = 1e-3: truncation h^4/90 |u^(6)| and rounding
    eps |u| / h^2 are both below 1e-8 for these networks (fourier_scale 0.5)."""
    gen = torch.Generator().manual_seed(7)
    net = Network((0.0, 2.0, -1.0, 0.5), 12, 3, activation, fourier, 0.5, torch.float64, gen)
    x = np.random.default_rng(3).uniform([0.1, -0.9], [1.9, 0.4], size=(40, 2))
    h = 1e-3
    lap_fd = np.zeros(len(x))
    grad_fd = np.zeros_like(x)
    for i in range(2):
        e = np.zeros(2)
        e[i] = h
        f = {k: _numpy_forward(net, x + k * e) for k in (-2, -1, 0, 1, 2)}
        # 4th-order central stencils [common practice]
        lap_fd += (-f[2] + 16 * f[1] - 30 * f[0] + 16 * f[-1] - f[-2]) / (12 * h * h)
        grad_fd[:, i] = (-f[2] + 8 * f[1] - 8 * f[-1] + f[-2]) / (12 * h)
    scale = max(1.0, np.abs(lap_fd).max())
    for method in ("forward", "autograd", "func"):
        u, g, lap = net.derivatives(torch.as_tensor(x), 2, method)
        np.testing.assert_allclose(u.detach().numpy(), _numpy_forward(net, x), rtol=0, atol=1e-12)
        np.testing.assert_allclose(g.detach().numpy(), grad_fd, rtol=0, atol=1e-7 * scale, err_msg=method)
        np.testing.assert_allclose(lap.detach().numpy(), lap_fd, rtol=0, atol=1e-6 * scale, err_msg=method)


@pytest.mark.parametrize("activation", ["tanh", "sin", "silu"])
@pytest.mark.parametrize("order", [1, 2])
def test_stream_activation_backward_passes_gradcheck(activation, order):
    """The hand-written backward of solvers/pinn/streams.py against central differences of its
    own forward (torch.autograd.gradcheck, float64, its default eps 1e-6 and tolerances), for the
    stacked layer and the first layer (gradient rows shared by all points)."""
    from lapbench.solvers.pinn.streams import activate_first, activate_stacked

    gen = torch.Generator().manual_seed(11)
    k = 2 + order
    Z = torch.randn(k, 6, 4, dtype=torch.float64, generator=gen, requires_grad=True)
    b = torch.randn(4, dtype=torch.float64, generator=gen, requires_grad=True)
    assert torch.autograd.gradcheck(lambda Z, b: activate_stacked(activation, Z, b, order), (Z, b))
    z = torch.randn(6, 4, dtype=torch.float64, generator=gen, requires_grad=True)
    gz = torch.randn(2, 1, 4, dtype=torch.float64, generator=gen, requires_grad=True)
    assert torch.autograd.gradcheck(lambda z, gz: activate_first(activation, z, gz, order), (z, gz))


@pytest.mark.parametrize("activation", ["tanh", "sin", "silu"])
@pytest.mark.parametrize("fourier", [0, 4])
def test_weight_gradients_of_forward_laplacian_match_nested_autograd(activation, fourier):
    """d/dtheta of a strong-form loss through the forward Laplacian (custom backward) equals the
    same derivative through nested torch.autograd.grad (an independent route: torch's own
    second derivatives), float64, to rounding; likewise for the first-order (Ritz) streams."""
    gen = torch.Generator().manual_seed(5)
    net = Network((0.0, 1.0, 0.0, 2.0), 10, 3, activation, fourier, 0.5, torch.float64, gen)
    x = torch.rand(50, 2, dtype=torch.float64, generator=gen) * torch.tensor([1.0, 2.0], dtype=torch.float64)
    f = torch.sin(x[:, 0]) * x[:, 1]
    grads = {}
    for method in ("forward", "autograd"):
        net.zero_grad()
        u, g, lap = net.derivatives(x, 2, method)
        ((lap + f) ** 2 + u * g[:, 0] - g[:, 1] ** 2).mean().backward()
        grads[method] = [p.grad.clone() for p in net.parameters()]
    for a, r in zip(grads["forward"], grads["autograd"]):
        np.testing.assert_allclose(a.numpy(), r.numpy(), rtol=1e-10, atol=1e-12)
    for method in ("forward", "autograd"):
        net.zero_grad()
        u, g, _ = net.derivatives(x, 1, method)
        (0.5 * (g * g).sum(1) - f * u).mean().backward()
        grads[method] = [p.grad.clone() for p in net.parameters()]
    for a, r in zip(grads["forward"], grads["autograd"]):
        np.testing.assert_allclose(a.numpy(), r.numpy(), rtol=1e-10, atol=1e-12)


def test_boundary_function_derivatives_closed_form():
    """FD derivatives of phi on the unit square, also with one-sided stencils at the edges:
    phi = 16 x(1-x) y(1-y) (lapbench.domains.Rectangle.phi), grad and Laplacian in closed form,
    Lap phi = -32 (x(1-x) + y(1-y)). Quadratic in each variable, so the second-order formulas
    are exact up to rounding (eps / h^2 ~ 1e-8)."""
    prob = make_problem({"name": "sine"})
    x = np.array([[0.3, 0.6], [1e-6, 0.5], [0.5, 1 - 1e-6], [0.99999, 2e-5], [0.5, 0.5]])
    phi, grad, lap = fd_derivatives(prob.domain.phi, x, prob.domain)
    X, Y = x[:, 0], x[:, 1]
    np.testing.assert_allclose(phi, 16 * X * (1 - X) * Y * (1 - Y), atol=1e-15)
    np.testing.assert_allclose(grad[:, 0], 16 * (1 - 2 * X) * Y * (1 - Y), atol=1e-7)
    np.testing.assert_allclose(grad[:, 1], 16 * (1 - 2 * Y) * X * (1 - X), atol=1e-7)
    np.testing.assert_allclose(lap, -32 * (X * (1 - X) + Y * (1 - Y)), atol=1e-5)


def test_boundary_extension_laplacian_on_the_disk():
    """Finite-difference derivatives of the disk's extension (lapbench.domains.Disk) against closed
    forms. On the unit disk g = x^2 - y^2 is cos 2 theta on the circle (mean 0), so
    g_ext = s(t) cos 2 theta with t = (rho - rho0) / (1 - rho0) and s(t) = 10 t^3 - 15 t^4 + 6 t^5;
    in polar coordinates Lap g_ext = (s_rr + s_r / rho - 4 s / rho^2) cos 2 theta; and
    phi = 1 - r^2 has Lap phi = -4."""
    from lapbench.domains.round import DISK_BLEND_INNER as r0

    prob = make_problem({"name": "disk_harmonic"}).public()
    g = lambda p: p[:, 0] ** 2 - p[:, 1] ** 2  # noqa: E731
    prob = dataclasses.replace(prob, g=g)
    x = prob.domain.sample_interior(200, np.random.default_rng(0))
    data = point_data(prob, x, hard=True)
    rho, th = np.hypot(x[:, 0], x[:, 1]), np.arctan2(x[:, 1], x[:, 0])
    t = np.clip((rho - r0) / (1 - r0), 0, 1)
    s = 10 * t ** 3 - 15 * t ** 4 + 6 * t ** 5
    s_r = (30 * t ** 2 - 60 * t ** 3 + 30 * t ** 4) / (1 - r0)
    s_rr = (60 * t - 180 * t ** 2 + 120 * t ** 3) / (1 - r0) ** 2
    np.testing.assert_allclose(data.g, s * np.cos(2 * th), atol=1e-10)
    np.testing.assert_allclose(data.lap_g, (s_rr + s_r / rho - 4 * s / rho ** 2) * np.cos(2 * th), atol=1e-4)
    np.testing.assert_allclose(data.lap_phi, -4.0, atol=1e-5)


# -- boundary treatment --------------------------------------------------------------------------
@pytest.mark.parametrize("problem", ["harmonic", "disk_harmonic", "annulus_poisson", "lshape"])
def test_hard_boundary_equals_data(problem):
    """u = g_ext + phi N equals the boundary data to rounding, whatever the network does."""
    prob = make_problem({"name": problem})
    ctx = RunContext(seed=0)
    sol = SOLVERS["pinn_hard"](params={**TINY, "adam_steps": 5, "lbfgs_steps": 0}).solve(
        prob.public(), Budget(train_time=60), ctx)
    pts, _ = prob.domain.sample_boundary(300, np.random.default_rng(1))
    exact = prob.g(pts)
    np.testing.assert_allclose(sol.evaluate(pts), exact, rtol=0, atol=1e-12 * max(1.0, np.abs(exact).max()))


# -- accuracy on the smooth problem u = sin(pi x) sin(pi y) (closed form) ------------------------
@pytest.mark.parametrize("name,threshold", [
    # measured rel_l2, seeds 0-4: 1.7e-5 6.3e-5 1.0e-4 3.6e-5 5.7e-5 (max 1.0e-4)
    ("pinn_hard", 3e-4),
    # measured rel_l2, seeds 0-4: 5.6e-3 4.3e-3 7.5e-3 4.7e-3 4.5e-3 (max 7.5e-3)
    ("pinn_soft", 2e-2),
])
def test_strong_form_accuracy(name, threshold):
    prob, sol, _ = _run(name)
    err = solution_errors(prob, sol, prob.eval_set(0))["rel_l2"]
    assert err < threshold, f"{name}: relative L2 error {err:.3e} >= {threshold:.1e}"


def test_deep_ritz_accuracy():
    """Deep Ritz is limited by its quasi-Monte Carlo energy quadrature, hence 1024 points.
    measured rel_l2, seeds 0-4: 1.8e-3 5.3e-3 2.8e-3 1.3e-3 2.7e-3 (max 5.3e-3)."""
    prob, sol, _ = _run("pinn_ritz", n_interior=1024)
    err = solution_errors(prob, sol, prob.eval_set(0))["rel_l2"]
    assert err < 1.5e-2, f"pinn_ritz: relative L2 error {err:.3e} >= 1.5e-2"


# -- reproducibility -----------------------------------------------------------------------------
def test_same_seed_same_result_and_seeds_differ():
    pts = np.random.default_rng(5).uniform(0, 1, (200, 2))
    small = {"adam_steps": 100, "lbfgs_steps": 30}
    a = _run("pinn_rar", seed=3, rar_every=40, rar_add=20, rar_candidates=500, **small)[1].evaluate(pts)
    b = _run("pinn_rar", seed=3, rar_every=40, rar_add=20, rar_candidates=500, **small)[1].evaluate(pts)
    c = _run("pinn_rar", seed=4, rar_every=40, rar_add=20, rar_candidates=500, **small)[1].evaluate(pts)
    np.testing.assert_array_equal(a, b)
    assert np.max(np.abs(a - c)) > 1e-6, "seeds 3 and 4 gave the same network"


def test_rar_adds_points():
    _, sol, _ = _run("pinn_rar", adam_steps=100, lbfgs_steps=0, rar_every=40, rar_add=20,
                     rar_candidates=500)
    # refinements after steps 40 and 80 (none after the last step)
    assert sol.info["n_interior"] == TINY["n_interior"] + 2 * 20


# -- failures and budgets ------------------------------------------------------------------------
@pytest.mark.parametrize("activation,why", [
    ("silu", "loss became nan"),   # unbounded activation: the loss overflows to NaN
    ("tanh", "loss grew from"),    # saturating activation: finite but astronomically large loss
])
def test_absurd_learning_rate_is_diverged(tmp_path, activation, why):
    from lapbench.run import Case, run_case

    case = Case(problem={"name": "sine"}, solver={"name": "pinn_soft", **TINY, "lr": 1e12,
                                                   "lbfgs_steps": 0, "activation": activation},
                seed=0, budget={"time_limit": 60})
    rec, _ = run_case(case, results_dir=tmp_path)
    assert rec["status"] == "diverged", rec["reason"]
    assert rec.get("step") is not None and why in rec["reason"]


def test_wall_clock_cap_stops_training():
    """With a 1.5 s cap and a step budget far beyond it, training stops on the cap; the time it
    overran by is compared with the run's own mean step time, not with a fixed limit."""
    _, sol, ctx = _run("pinn_hard", train_time=1.5, adam_steps=10 ** 6, lbfgs_steps=10 ** 6)
    info = sol.info
    assert info["stopped"] == "time_cap"
    assert info["steps"] < 10 ** 6
    step_time = ctx.timings["train"] / max(info["steps"], 1)
    assert ctx.timings["train"] < 1.5 + 10 * step_time + 0.5


class _TickClock(RunContext):
    """A deterministic clock: every reading of the method's time advances it by 10 ms, so the
    cap falls inside L-BFGS whatever the machine's speed (a wall-clock cap of 1.5 s let a fast,
    idle machine finish L-BFGS by its own tolerance first)."""

    def __init__(self, *a, **k):
        super().__init__(*a, **k)
        self.ticks = 0

    def elapsed(self):
        self.ticks += 1
        return 0.01 * self.ticks


def test_cap_during_lbfgs_keeps_best_parameters():
    prob = make_problem({"name": "sine"})
    ctx = _TickClock(seed=0)
    # float64: L-BFGS's change tolerance (1e-15) cannot be met in the ~100 evaluations before the cap
    params = {**TINY, "adam_steps": 20, "lbfgs_steps": 10 ** 6, "precision": "float64"}
    sol = SOLVERS["pinn_hard"](params=params).solve(prob.public(), Budget(train_time=1.5), ctx)
    assert sol.info["stopped"] == "time_cap" and sol.info["lbfgs_iterations"] > 0
    assert math.isfinite(sol.info["final_loss"])


def test_history_is_geometric_in_time(tmp_path):
    """Through the harness: checkpoints carry the loss terms and the harness-side error."""
    from lapbench.run import Case, run_case
    from lapbench.solvers.pinn.train import CHECKPOINT_FIRST, CHECKPOINT_GROWTH

    case = Case(problem={"name": "sine"}, solver={"name": "pinn_hard", **TINY}, seed=0,
                budget={"time_limit": 120})
    rec, _ = run_case(case, results_dir=tmp_path)
    assert rec["status"] == "ok", rec["reason"]
    hist = rec["history"]
    assert hist[0]["step"] == 0 and hist[-1]["step"] == rec["cost"]["iterations"]
    assert all({"loss", "loss_pde", "rel_l2", "time"} <= set(h) for h in hist)
    t = np.array([h["time"] for h in hist])
    assert np.all(np.diff(t) > 0)
    # training time of the checkpoints between the first step and the end; each must fall in its
    # own interval [FIRST G^k, FIRST G^(k+1)) of the geometric grid
    tau = t[1:-1] - rec["timings"]["setup"]
    k = np.floor(np.log(tau / CHECKPOINT_FIRST) / np.log(CHECKPOINT_GROWTH))
    assert np.all(tau >= CHECKPOINT_FIRST) and np.all(np.diff(k) >= 1), (tau, k)
    assert hist[-1]["rel_l2"] == pytest.approx(rec["metrics"]["rel_l2"], rel=1e-9)


# -- the training driver (solvers/pinn/train.py) on objectives with known minimisers ----------
def _objective(fn, theta0):
    """A `train.Objective` over one float64 parameter vector starting at `theta0`."""
    from lapbench.solvers.pinn.train import Objective

    theta = torch.nn.Parameter(torch.tensor(theta0, dtype=torch.float64))
    return Objective(lambda step: (fn(theta), {"norm": theta.detach().norm()}), [theta]), theta


def test_driver_lbfgs_reaches_the_minimiser_of_a_quadratic():
    """0.5 t'At - b't has its minimiser at A^-1 b (numpy.linalg.solve); L-BFGS from 0 reaches it
    and stops by its own tolerance; every history entry carries the objective's logs and tags."""
    from lapbench.solvers.pinn.train import Schedule, train

    rng = np.random.default_rng(0)
    M = rng.standard_normal((6, 6))
    A, b = M @ M.T + 6 * np.eye(6), rng.standard_normal(6)
    At, bt = torch.as_tensor(A), torch.as_tensor(b)
    obj, theta = _objective(lambda t: 0.5 * t @ At @ t - bt @ t, np.zeros(6))
    ctx = RunContext(seed=0)
    with ctx.phase("train"):
        res = train(obj, Schedule(adam_steps=10, lbfgs_steps=200), 60.0, ctx, mode=3)
    np.testing.assert_allclose(theta.detach().numpy(), np.linalg.solve(A, b), rtol=0, atol=1e-8)
    assert res.stopped == "converged" and res.adam_steps == 10 and res.steps == 10 + res.lbfgs_iterations
    assert all(h["mode"] == 3 and {"loss", "norm"} <= set(h) for h in ctx.history)
    assert ctx.history[-1]["step"] == res.steps


def test_driver_chunk_cut_by_its_evaluation_allowance_is_not_convergence(monkeypatch):
    """With an allowance of 6 evaluations per L-BFGS chunk every chunk ends after a few
    iterations; training must go on to the minimum (1, 1) of Rosenbrock's function (closed form)
    instead of calling the first short chunk converged."""
    import lapbench.solvers.pinn.train as tr

    monkeypatch.setattr(tr, "LBFGS_EVALS", 6)
    obj, theta = _objective(lambda t: (1 - t[0]) ** 2 + 100 * (t[1] - t[0] ** 2) ** 2, [-1.2, 1.0])
    ctx = RunContext(seed=0)
    with ctx.phase("train"):
        res = tr.train(obj, tr.Schedule(adam_steps=0, lbfgs_steps=500, patience=0), 60.0, ctx)
    np.testing.assert_allclose(theta.detach().numpy(), [1.0, 1.0], atol=1e-6)
    assert res.lbfgs_iterations > 6 and res.stopped == "converged"


def test_driver_restarts_only_while_they_gain():
    """At a stationary point L-BFGS stops at once; the first restart is tried (nothing to compare
    with yet), the second would gain nothing and is not: one restart whatever the allowance."""
    from lapbench.solvers.pinn.train import Schedule, train

    obj, theta = _objective(lambda t: (t * t).sum(), np.zeros(3))
    ctx = RunContext(seed=0)
    with ctx.phase("train"):
        res = train(obj, Schedule(adam_steps=0, lbfgs_steps=100, lbfgs_restarts=10), 60.0, ctx)
    assert res.lbfgs_restarts == 1 and res.stopped == "converged" and res.lbfgs_iterations == 0


def test_driver_nan_is_diverged_with_step_and_tags():
    from lapbench.solvers.base import Diverged
    from lapbench.solvers.pinn.train import Schedule, train

    obj, _ = _objective(lambda t: t.sum() / 0.0 * 0.0, np.ones(2))   # 0 * inf = NaN
    ctx = RunContext(seed=0)
    with ctx.phase("train"), pytest.raises(Diverged, match=r"loss became nan at step 4 \(mode 2, adam\)"):
        train(obj, Schedule(adam_steps=5, lbfgs_steps=0), 60.0, ctx, step=4, mode=2)


# -- the package's shape ------------------------------------------------------------------------
def test_modules_import_downwards_only():
    """No module of solvers/pinn imports lapbench.solvers.pinn.solver (the presets sit on top), and the
    imports between the family's modules form no circle (read from the source with ast)."""
    import ast
    import pathlib

    import lapbench.solvers.pinn

    root = pathlib.Path(lapbench.solvers.pinn.__file__).parent
    graph = {}
    for f in root.glob("*.py"):
        deps = set()
        for node in ast.walk(ast.parse(f.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("lapbench.solvers.pinn."):
                deps.add(node.module.split(".")[3])
            elif isinstance(node, ast.Import):
                deps |= {a.name.split(".")[3] for a in node.names if a.name.startswith("lapbench.solvers.pinn.")}
        graph[f.stem] = deps
    assert {m for m, deps in graph.items() if "solver" in deps} == {"__init__"}, graph
    seen, done = set(), set()

    def visit(m, path):
        assert m not in seen - done, f"import circle: {' -> '.join(path + [m])}"
        if m in done:
            return
        seen.add(m)
        for d in graph.get(m, ()):
            visit(d, path + [m])
        done.add(m)

    for m in graph:
        visit(m, [])


def test_every_option_name_has_an_implementation():
    """The validated spellings (options.py) and the tables that implement them agree."""
    from lapbench.solvers.pinn.model import torch_dtype
    from lapbench.solvers.pinn.options import ACTIVATIONS, LAPLACIAN_METHODS, PRECISIONS, SAMPLINGS
    from lapbench.solvers.pinn.sampling import interior_points

    gen = torch.Generator().manual_seed(0)
    x = torch.rand(4, 2, dtype=torch.float64, generator=gen)
    for a in ACTIVATIONS:
        net = Network((0, 1, 0, 1), 4, 1, a, 0, 1.0, torch.float64, gen)
        for m in LAPLACIAN_METHODS:
            assert net.derivatives(x, 2, m)[2].shape == (4,)
    assert [torch_dtype(p).itemsize for p in PRECISIONS] == [4, 8]
    dom = make_problem({"name": "sine"}).domain
    for s in SAMPLINGS:
        assert interior_points(dom, 5, s, np.random.default_rng(0)).shape == (5, 2)


# -- the neural eigen-solver on the shared driver (accuracy: tests/test_eigen.py) --------------
def test_sequential_modes_share_one_step_counter_and_bound_from_above():
    """Sequential, k = 2 on the unit square: each mode's history entries carry its `mode` tag, the
    step counter runs on across modes and ends at `iterations`; the Ritz values lie above
    2 pi^2 and 5 pi^2 (closed form; min-max principle, up to quadrature error ~1e-12 at this
    level for these smooth functions). Measured relative errors, seeds 0-2: lambda_1 4.1e-5,
    3.0e-5, 1.7e-5; lambda_2 3.0e-4, 5.9e-4, 6.0e-4; thresholds about three times the worst."""
    p = make_problem({"name": "eigen_rect", "k": 2})
    ctx = RunContext(seed=0)
    sol = SOLVERS["pinn_eigen"](params={"strategy": "sequential", "width": 12, "depth": 2,
                                        "train_level": 10, "adam_steps": 100, "lbfgs_steps": 40,
                                        "quad_level": 24}).solve(p.public(), Budget(train_time=120), ctx)
    info = sol.info
    assert len(info["stopped"]) == 2
    assert info["iterations"] == info["adam_steps"] + info["lbfgs_iterations"]
    hist = ctx.history
    modes = [h["mode"] for h in hist]
    assert modes == sorted(modes) and set(modes) == {1, 2}
    steps = [h["step"] for h in hist]
    assert steps == sorted(steps) and steps[-1] == info["iterations"]
    assert all({"loss", "rayleigh", "ortho"} <= set(h) for h in hist)
    lam = np.asarray(sol.eigenvalues)
    assert np.all(lam >= np.array([2, 5]) * math.pi ** 2 * (1 - 1e-9)), lam
    rel = lam / (np.array([2, 5]) * math.pi ** 2) - 1
    assert rel[0] < 1.5e-4 and rel[1] < 2e-3, rel
