"""Walk-on-spheres: pointwise Monte Carlo values of Laplace and Poisson problems in d-boxes and d-balls.

Method (Muller, "Some continuous Monte Carlo methods for the Dirichlet problem", Ann. Math.
Statist. 27 (1956) 569-589). For -Lap u = f in Omega, u = g on its boundary, and x inside, let
R = dist(x, boundary). The mean-value property over the ball B(x, R) with Green's function G_R,

    u(x) = mean of u over the sphere |y - x| = R  +  int_B G_R(x, y) f(y) dy,

turns into a walk: jump to a uniform point of that sphere, repeat, and stop once the walk is
within eps of the boundary, where u is replaced by g at the nearest boundary point (a bias of
order eps; the number of steps grows like log(1 / eps) in convex domains). The source integral is
estimated by one sample per step drawn from the density G_R(x, .) / int G_R:

    int_B G_R(x, y) f(y) dy  ~  (R^2 / (2 d)) f(y),   y = x + R t theta,

theta uniform on the unit sphere, t = |y - x| / R with density proportional to t^(d-1) G(t R):
G_R(x, y) = (r^(2-d) - R^(2-d)) / ((d - 2) |S^(d-1)|) for d >= 3, log(R / r) / (2 pi) for d = 2
and (R - r) / 2 for d = 1 (the Green's function of the ball with its pole at the centre, e.g.
Evans, "Partial Differential Equations", 2nd ed., AMS 2010, section 2.2 [from memory]), so

    d >= 3: p(t) ~ t (1 - t^(d-2)),   d = 2: p(t) ~ t log(1 / t),   d = 1: p(t) ~ 1 - t,

and int_B G_R = R^2 / (2 d) because v = (R^2 - |y - x|^2) / (2 d) solves -Lap v = 1, v = 0 on
the sphere (closed form). This Green's-function sampling of the source is the one of Sawhney &
Crane, "Monte Carlo geometry processing", ACM Trans. Graph. 39 (2020) [from memory]. t is drawn
by rejection: d >= 3 from the proposal 2t (t = sqrt(U)), accepted with probability 1 - t^(d-2);
d = 2 from the proposal -log t (t = U1 U2), accepted with probability t.

Vectorised: all walks from all points advance together in one (walkers, d) array, finished walks
are dropped each step; walkers are processed in blocks of MAX_WALKERS to bound memory. The
estimate at a point is the mean of `walks` independent walks; its statistical error is their
standard deviation / sqrt(walks), reported in Solution.info.

Where the harness's error comes from (a pointwise method has no interpolant): the timed solve
walks from every point of the case's own evaluation set (``problem.eval_set(seed=ctx.seed)``,
geometry only: the quadrature/QMC points plus the extra points of the max error), so the errors
the harness measures are those of values the timed solve computed, and the recorded time is the
time for that many points: about 3.5e4 points for d >= 3 (`lapbench.domains.base.sobol_eval_set`),
cost proportional to points x walks x steps. Other points given to ``evaluate`` get fresh walks
(untimed by the solve). ``info["stat_error_rel"]`` predicts the relative L2 error from the
statistical error alone.
"""
from __future__ import annotations

import dataclasses
import hashlib
import math

import numpy as np

from lapbench.config import ConfigError, positive
from lapbench.solvers.base import Solution, Solver, Tags

__all__ = ["WalkOnSpheres", "WalkParams", "walk_on_spheres", "sample_green_radius", "MAX_WALKERS"]

MAX_WALKERS = 1 << 18       # walkers advanced together (in d = 10 about 20 MB per coordinate array)
MAX_DIM = 32


@dataclasses.dataclass
class WalkParams:
    """Options of walk-on-spheres (conf/solver/wos.yaml lists each with a comment)."""

    walks: int = 256            # independent walks per point
    eps: float = 1e-4           # stopping shell, relative to the domain's inradius
    max_steps: int = 10000      # a walk still going after this many steps stops where it is

    def __post_init__(self):
        positive("walks", self.walks, integer=True, maximum=10 ** 7)
        positive("eps", self.eps)
        if not self.eps < 1:
            raise ConfigError(f"`eps` must be below 1 (a fraction of the inradius), got {self.eps!r}")
        positive("max_steps", self.max_steps, integer=True, maximum=10 ** 6)


def sample_green_radius(n: int, d: int, rng: np.random.Generator) -> np.ndarray:
    """n radii t in (0, 1) with density proportional to t^(d-1) G(t) (module docstring)."""
    out = np.empty(n)
    todo = np.arange(n)
    while len(todo):
        m = len(todo)
        if d == 1:
            t = 1.0 - np.sqrt(rng.uniform(0.0, 1.0, m))
            ok = np.ones(m, dtype=bool)
        elif d == 2:
            t = rng.uniform(0.0, 1.0, m) * rng.uniform(0.0, 1.0, m)
            ok = rng.uniform(0.0, 1.0, m) < t
        else:
            t = np.sqrt(rng.uniform(0.0, 1.0, m))
            ok = rng.uniform(0.0, 1.0, m) < 1.0 - t ** (d - 2)
        out[todo[ok]] = t[ok]
        todo = todo[~ok]
    return out


def _directions(n: int, d: int, rng: np.random.Generator) -> np.ndarray:
    """Uniform unit vectors of R^d: normalised Gaussians (Muller, Comm. ACM 2, 1959)."""
    z = rng.standard_normal((n, d))
    return z / np.linalg.norm(z, axis=1, keepdims=True)


def _geometry(domain):
    """``(distance, project)`` inside a box or ball: distance to the boundary (the domain's exact
    distance, cheaper inside: walkers never leave the closed domain except by rounding, which
    gives a negative distance and stops the walk) and the nearest boundary point, exactly on it."""
    if domain.kind == "ball":
        c, R = np.asarray(domain.center, dtype=float), float(domain.radius)

        def distance(x):
            return R - np.linalg.norm(x - c, axis=1)

        def project(x):
            v = x - c
            r = np.linalg.norm(v, axis=1, keepdims=True)
            return c + R * v / np.where(r > 0, r, 1.0)

        return distance, project
    lo, hi = np.asarray(domain.lo, dtype=float), np.asarray(domain.hi, dtype=float)
    d = len(lo)

    def distance(x):
        return np.minimum(x - lo, hi - x).min(axis=1)

    def project(x):
        gaps = np.concatenate([x - lo, hi - x], axis=1)       # (m, 2d): faces lo_0.., hi_0..
        f = np.argmin(gaps, axis=1)
        rows = np.arange(len(x))
        p = x.copy()
        p[rows, f % d] = np.where(f < d, lo[f % d], hi[f % d])
        return p

    return distance, project


def walk_on_spheres(points, distance, project, g, f, walks: int, eps: float, rng,
                    max_steps: int = 10000):
    """Per-walk estimates (m, walks) of u at `points` (m, d), and walk statistics.

    `distance(x)` (distance to the boundary, positive inside), `project(x)` (nearest boundary
    point), `g(y)` (boundary data, or None for zero) and `f(y)` (source, or None for Laplace)
    act on (n, d) arrays; `eps` is absolute. Returns (estimates, {"steps": mean steps per walk,
    "unfinished": walks stopped by max_steps}).
    """
    pts = np.asarray(points, dtype=float)
    m, d = pts.shape
    total = np.zeros(m * walks)
    steps_sum, unfinished = 0, 0
    per_block = max(1, MAX_WALKERS // walks)
    for b0 in range(0, m, per_block):
        block = pts[b0:b0 + per_block]
        x = np.repeat(block, walks, axis=0)
        wid = np.arange(b0 * walks, (b0 + len(block)) * walks)
        for _ in range(max_steps):
            r = distance(x)
            stop = r < eps
            if stop.any():
                if g is not None:
                    total[wid[stop]] += g(project(x[stop]))
                keep = ~stop
                x, wid, r = x[keep], wid[keep], r[keep]
            if len(x) == 0:
                break
            steps_sum += len(x)
            if f is not None:
                t = sample_green_radius(len(x), d, rng)
                y = x + (r * t)[:, None] * _directions(len(x), d, rng)
                total[wid] += r * r / (2 * d) * f(y)
            x = x + r[:, None] * _directions(len(x), d, rng)
        if len(x):
            unfinished += len(x)
            if g is not None:
                total[wid] += g(project(x))
    return total.reshape(m, walks), {"steps": steps_sum / (m * walks), "unfinished": unfinished}


class WalkOnSpheres(Solver):
    """Walk-on-spheres Monte Carlo (Muller 1956) for pointwise values in boxes and balls of any d.

    See the module docstring for the estimator, the Green's-function sampling of the source and
    how the harness's errors are computed for this pointwise method.
    """

    name = "wos"
    family = "monte_carlo"
    description = "walk-on-spheres Monte Carlo, pointwise at the evaluation points, any dimension"
    reference = "Muller, Ann. Math. Statist. 27 (1956) 569-589"
    Params = WalkParams
    # not deterministic in the conformance sense: values carry a statistical error (seeded, so a
    # rerun with the same seed reproduces them exactly)
    tags = Tags(kinds=frozenset({"laplace", "poisson"}), domains=frozenset({"box", "ball"}),
                deterministic=True, dims=frozenset(range(1, MAX_DIM + 1)))

    def resolution(self) -> dict:
        return {"walks": self.params.walks}

    def memory_estimate_mb(self) -> float:
        return 12 * MAX_WALKERS * 8 * 8 / 2 ** 20     # a block: ~8 arrays of (walkers, d <= 12)

    def _solve(self, problem, budget, ctx):
        p = self.params
        with ctx.phase("setup"):
            es = problem.eval_set(seed=ctx.seed)
            pts = np.vstack([es.points, es.extra])
        walker = _Walker(problem, p, ctx.seed)
        with ctx.phase("walks"):
            est, se, stats = walker.run(pts, stream=0)
        w = es.weights
        n = len(es.points)
        u2 = float(np.sum(w * est[:n] ** 2))
        info = {"dofs": None, "walks": p.walks, "points": int(len(pts)), "iterations": None,
                "eps": p.eps * float(problem.domain.inradius), "mean_steps": stats["steps"],
                "unfinished": stats["unfinished"],
                # the statistical error: standard errors of the pointwise means
                "stat_error_rms": float(np.sqrt(np.sum(w * se[:n] ** 2) / np.sum(w))),
                "stat_error_max": float(se.max()),
                "stat_error_rel": float(np.sqrt(np.sum(w * se[:n] ** 2) / u2)) if u2 > 0 else float("nan")}
        walker.remember(pts, est)
        return Solution(evaluate=walker, nodes=None, values=None, info=info)


class _Walker:
    """``points -> values``: the timed solve's values where it walked, fresh walks elsewhere.

    Fresh walks start from the new points in lexicographic order with a stream seeded by the
    points' bytes, so that evaluate is a function of the point set (not of its order)."""

    def __init__(self, problem, p: WalkParams, seed: int):
        dom = problem.domain
        self.d = int(dom.dim)
        self.distance, self.project = _geometry(dom)
        self.g = None if problem.g is None else (lambda y: np.asarray(problem.g(y), dtype=float))
        self.f = None if problem.f is None else (lambda y: np.asarray(problem.f(y), dtype=float))
        self.p, self.seed = p, int(seed)
        self.eps = p.eps * float(dom.inradius)
        self.known: dict[bytes, float] = {}

    def run(self, pts, stream: int):
        rng = np.random.default_rng(np.random.SeedSequence([self.seed, 1956, int(stream)]))
        W, stats = walk_on_spheres(pts, self.distance, self.project, self.g, self.f, self.p.walks,
                                   self.eps, rng, self.p.max_steps)
        est = W.mean(axis=1)
        se = W.std(axis=1, ddof=1) / math.sqrt(W.shape[1]) if W.shape[1] > 1 else np.full(len(est), np.nan)
        return est, se, stats

    def remember(self, pts, values) -> None:
        for row, v in zip(np.ascontiguousarray(pts), values):
            self.known[row.tobytes()] = float(v)

    def __call__(self, points) -> np.ndarray:
        pts = np.ascontiguousarray(np.asarray(points, dtype=float).reshape(-1, self.d))
        out = np.array([self.known.get(row.tobytes(), np.nan) for row in pts])
        new = np.isnan(out)
        if new.any():
            q = pts[new]
            order = np.lexsort(q.T[::-1])
            q = np.ascontiguousarray(q[order])
            stream = int.from_bytes(hashlib.blake2b(q.tobytes(), digest_size=8).digest(), "little")
            vals = np.empty(len(q))
            vals[order] = self.run(q, stream=stream)[0]
            out[new] = vals
        return out
