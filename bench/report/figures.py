"""Report figures (matplotlib, Agg backend; seaborn styling), written as PNG and/or SVG.

Per problem: error against method time with each family's Pareto front; error against degrees
of freedom (classical) or trainable parameters (learned) with the fitted convergence slopes;
learned methods' training curves with the time at which the best classical run reached the same
error. For chosen cases: the pointwise error field. Colours come from seaborn's colour-blind-safe
palette: each method its own colour (methods of one family side by side in the palette) and its own
marker; the diverging field map is red-blue, which stays readable under the common colour-vision
deficiencies. Points of a method that coincide with an earlier method's (identical results, such
as fd5 and fst5, which solve the same linear system) are drawn as larger hollow rings around the
earlier filled marker, so that neither hides the other.
"""
from __future__ import annotations

import dataclasses
import math
import sys
from pathlib import Path

import numpy as np

from lapbench.report.frame import _finite, _slug, metric_key, natural_key
from lapbench.report.dimensions import fig_dimensions
from lapbench.report.images import fig_images
from lapbench.report.options import FAIL_STATUSES, _is_learned
from lapbench.report.rules import best_errors, order_fits, pareto_front, run_points
from lapbench.report.style import (_FRONT_STYLES, _RING_NOTE, MARKERS, _decade_label, _error_label,  # noqa: F401
                                _legend, _loglog, _markers, _Overlap, _save, _scatter_methods, _staircase,
                                _style, family_colours, method_colours)

__all__ = ["Figure", "make_figures", "family_colours", "method_colours"]


TIME_LABEL = "method time (s): setup + solve, or setup + training"
LEARNED_TIME_LABEL = "method time (s): setup + training"
FIELD_CMAP = "RdBu_r"


@dataclasses.dataclass
class Figure:
    """One written figure: its files by format, and the text that goes with it."""

    key: str
    title: str
    caption: str
    paths: dict
    problem: str | None = None


def fig_pareto(pid, frame, pts, cfg, folder) -> Figure | None:
    """Error against method time, every run's final point (and training checkpoints, faint), each
    family's Pareto front as a staircase."""
    import matplotlib.pyplot as plt

    g = frame[frame["problem_id"] == pid]
    p = pts[pts["problem_id"] == pid]
    if p.empty:
        return None
    colours, markers = method_colours(frame), _markers(frame)
    fig, ax = plt.subplots(figsize=(cfg.figures.width, cfg.figures.height), layout="constrained")
    for tol in cfg.tolerances:
        ax.axhline(tol, color="#9a9a9a", lw=0.8, ls=":", zorder=0)
    groups = []
    for (fam, solver), q in p.groupby(["family", "solver"], sort=True):
        fin = q[q["final"]]
        groups.append((solver, fin["time"], fin["error"]))
        ck = q[~q["final"]]
        if len(ck):
            ax.scatter(ck["time"], ck["error"], color=colours[solver], marker=".", s=6, alpha=0.35,
                       linewidth=0, zorder=2)
    ringed = _scatter_methods(ax, groups, colours, markers, _Overlap())
    _loglog(ax)
    for k, (fam, q) in enumerate(p.groupby("family", sort=True)):
        _staircase(ax, pareto_front(q), color="#333333", lw=1.3, alpha=0.8, ls=_FRONT_STYLES[k % 4],
                   label=f"{fam} Pareto front", zorder=4)
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel(_error_label(cfg, frame, pid))
    ax.set_title(pid)
    failed = g[g["status"].isin(FAIL_STATUSES)]
    if len(failed):
        counts = failed["status"].value_counts()
        ax.text(0.01, 0.01, "not shown: " + ", ".join(f"{n} {s}" for s, n in counts.items()),
                transform=ax.transAxes, fontsize="small", color="#444", va="bottom")
    _legend(fig, ax)
    key = f"error_vs_time__{_slug(pid)}"
    return Figure(key, f"Error against runtime: {pid}",
                  "Each marker is one run's final solution (faint dots: training checkpoints of learned "
                  "runs), one colour per method; grey staircases, one line style per family, are each "
                  "family's Pareto front over individual runs (no other run is both faster and more "
                  "accurate). Dotted lines: the report's tolerances." + (_RING_NOTE if ringed else ""),
                  _save(fig, folder, key, cfg), pid)


def fig_order(pid, frame, fits, cfg, folder) -> Figure | None:
    """Error against dofs (classical) or parameters (learned), with the fitted slopes."""
    import matplotlib.pyplot as plt

    g = frame[(frame["problem_id"] == pid) & (frame["status"] == "ok") & frame["error"].map(_finite)]
    if g.empty:
        return None
    size = np.where(g["family"].map(_is_learned), g["n_params"].astype(float), g["dofs"].astype(float))
    g = g.assign(size=size)
    g = g[np.isfinite(g["size"]) & (g["size"] > 0)]
    if g.empty:
        return None
    colours, markers = method_colours(frame), _markers(frame)
    fig, ax = plt.subplots(figsize=(cfg.figures.width, cfg.figures.height), layout="constrained")
    ringed = _scatter_methods(ax, [(solver, q["size"], q["error"])
                                   for (fam, solver), q in g.groupby(["family", "solver"], sort=True)],
                              colours, markers, _Overlap())
    f = fits[(fits["problem_id"] == pid) & fits["slope_dofs"].map(_finite)]
    styles = ["-", "--", "-.", ":"]
    for k, (_, r) in enumerate(f.iterrows()):
        x = np.array([r["dofs_min"], r["dofs_max"]])
        y = np.exp(r["intercept_dofs"]) * x ** r["slope_dofs"]
        name = r["solver"] + (f" ({r['variant']})" if r["variant"] else "")
        ax.plot(x, y, color=colours.get(r["solver"], "k"), ls=styles[k % len(styles)], lw=1.3, zorder=4,
                label=f"{name}: slope {r['slope_dofs']:.2f}")
    _loglog(ax)
    ax.set_xlabel("size, count: degrees of freedom (classical)\nor trainable parameters (learned)")
    ax.set_ylabel(_error_label(cfg, frame, pid))
    ax.set_title(pid)
    _legend(fig, ax)
    key = f"error_vs_size__{_slug(pid)}"
    return Figure(key, f"Error against problem size: {pid}",
                  "Final error of every successful run against its degrees of freedom (classical) or "
                  "trainable parameters (learned); lines are least-squares fits of log error against log "
                  "dofs over the range used for the convergence-order table (a slope of -p/2 is order p "
                  "in h in two dimensions)." + (_RING_NOTE if ringed else ""), _save(fig, folder, key, cfg),
                  pid)


def fig_training(pid, frame, pts, recs, cfg, folder) -> Figure | None:
    """Learned runs' error against training time; the best classical runs' staircase; for each run
    the time at which a classical run reached the same error."""
    import matplotlib.pyplot as plt
    import seaborn as sns

    g = frame[(frame["problem_id"] == pid) & frame["family"].map(_is_learned)]
    curves = []
    for i in g.index:
        key = metric_key(recs[i], cfg.metric, cfg.eigen_metric)
        h = [(c.get("time"), c.get(key)) for c in (recs[i].get("history") or [])]
        h = [(t, e) for t, e in h if t is not None and e is not None and np.isfinite(t) and np.isfinite(e)
             and e > 0]
        if h:
            curves.append((i, sorted(h)))
    if not curves:
        return None
    p = pts[pts["problem_id"] == pid]
    classical = p[~p["family"].map(_is_learned)]
    front = pareto_front(classical)
    configs = sorted({(frame.at[i, "solver"], frame.at[i, "label"]) for i, _ in curves})
    pal = sns.color_palette("colorblind", 10)
    order = [3, 0, 2, 4, 1, 5, 6, 8, 9, 7]   # vermilion first: the learned family's colour
    colour = {c: pal[order[k % len(order)]] for k, c in enumerate(configs)}
    fig, ax = plt.subplots(figsize=(cfg.figures.width, cfg.figures.height), layout="constrained")
    for tol in cfg.tolerances:
        ax.axhline(tol, color="#9a9a9a", lw=0.8, ls=":", zorder=0)
    marked = False
    for i, h in curves:
        t, e = (np.array(v) for v in zip(*h))
        c = colour[(frame.at[i, "solver"], frame.at[i, "label"])]
        ok = frame.at[i, "status"] == "ok"
        ax.plot(t, e, color=c, lw=1.1, alpha=0.85, ls="-" if ok else "--",
                label=f"{frame.at[i, 'solver']} ({frame.at[i, 'label']})")
        if not ok:
            ax.plot(t[-1:], e[-1:], marker="x", color=c, ms=7, ls="none")
            continue
        k = int(np.argmin(e))
        hit = classical.loc[classical["error"] <= e[k], "time"] if len(classical) else []
        if len(hit):
            tc = float(np.min(hit))
            ax.plot([tc, t[k]], [e[k], e[k]], color=c, lw=0.8, ls=":", zorder=3)
            ax.plot([tc], [e[k]], marker="v", color="black", ms=6, ls="none", zorder=5,
                    label=None if marked else "classical time to the run's best error")
            marked = True
    if len(front):   # the staircase from its first point on; its steps below 1e-3 x the runs' least error are cut
        ax.plot(front["time"].iloc[:1], front["error"].iloc[:1], ls="none")
    lo = min(float(np.min([e for _, e in h])) for _, h in curves)
    _loglog(ax)
    y0, y1 = ax.get_ylim()
    ax.set_ylim(max(y0, lo * 1e-3), y1)
    _loglog(ax)
    _staircase(ax, front, color="black", lw=1.6, label="best classical (Pareto front)", zorder=4)
    ax.set_ylim(*ax.get_ylim())
    ax.set_xlabel(LEARNED_TIME_LABEL)
    ax.set_ylabel(_error_label(cfg, frame, pid))
    ax.set_title(pid)
    _legend(fig, ax)
    key = f"training__{_slug(pid)}"
    return Figure(key, f"Training curves: {pid}",
                  "Error of each learned run at its training checkpoints against method time (one line per "
                  "seed; dashed with a cross: the run ended diverged or failed). Black staircase: the best "
                  "classical runs (cut three decades below the learned runs' least error); black triangles: "
                  "the time at which a classical run first reached each learned run's best error, joined to "
                  "the learned run by a dotted line.",
                  _save(fig, folder, key, cfg), pid)


def _field_records(recs, frame, cfg):
    o = cfg.field
    chosen = []
    for i in frame.index:
        f = recs[i].get("field")
        if not isinstance(f, dict) or not f.get("error"):
            continue
        r = recs[i]
        if o.problem is not None and o.problem not in (r["problem"].get("label"), r["problem"].get("id"),
                                                       frame.at[i, "problem_id"]):
            continue
        if o.solver is not None and r["solver"].get("name") != o.solver:
            continue
        if o.resolution is not None and r["solver"].get("resolution_label") != o.resolution:
            continue
        if o.seed is not None and r.get("seed") != o.seed:
            continue
        chosen.append(i)
    # one panel per problem and method: its most accurate run (failed runs carry no field)
    best = {}
    for i in chosen:
        key = (frame.at[i, "problem_id"], frame.at[i, "solver"])
        e = frame.at[i, "error"]
        e = e if np.isfinite(e) else math.inf
        if key not in best or e < best[key][0]:
            best[key] = (e, i)
    return [best[k][1] for k in sorted(best)][: o.max_panels]


def fig_field(recs, frame, cfg, folder) -> Figure | None:
    """Pointwise error u_h - u on the 41 x 41 grid the harness stored, one panel per chosen run."""
    import matplotlib.pyplot as plt
    from matplotlib.colors import TwoSlopeNorm

    chosen = _field_records(recs, frame, cfg)
    if not chosen:
        return None
    n = len(chosen)
    ncols = min(n, 2)
    nrows = math.ceil(n / ncols)
    w = cfg.figures.width
    fig, axes = plt.subplots(nrows, ncols, figsize=(w, w / ncols * 0.9 * nrows), layout="constrained",
                             squeeze=False)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    for ax, i in zip(axes.ravel(), chosen):
        f = recs[i]["field"]
        x, y = np.asarray(f["x"], float), np.asarray(f["y"], float)
        E = np.array([np.nan if v is None else v for v in f["error"]], float).reshape(len(x), len(y))
        lim = float(np.nanmax(np.abs(E))) if np.isfinite(E).any() else 1.0
        lim = lim if lim > 0 else 1.0
        mesh = ax.pcolormesh(x, y, np.ma.masked_invalid(E.T), cmap=FIELD_CMAP, shading="nearest",
                             norm=TwoSlopeNorm(0.0, -lim, lim))
        ax.set_aspect("equal")
        ax.set_xlabel("x (dimensionless)")
        ax.set_ylabel("y (dimensionless)")
        r = recs[i]
        err = frame.at[i, "error"]
        ax.set_title(f"{r['solver']['name']} {r['solver'].get('resolution_label', '')}\n"
                     f"{frame.at[i, 'problem_id']}" + (f", {cfg.metric} {err:.2e}" if np.isfinite(err) else ""),
                     fontsize="small")
        cb = fig.colorbar(mesh, ax=ax, shrink=0.85)
        cb.set_label("error $u_h - u$ (units of u)")
        cb.formatter.set_powerlimits((-2, 3))
    problems = {frame.at[i, "problem_id"] for i in chosen}   # the report's id: distinct configs stay apart
    pid = next(iter(problems)) if len(problems) == 1 else None
    key = "error_field" + (f"__{_slug(pid)}" if pid else "")
    return Figure(key, "Pointwise error field" + (f": {pid}" if pid else ""),
                  "Error of the computed solution minus the exact one on a 41 x 41 grid over the domain's "
                  "bounding box (white: outside the domain or excluded), diverging colour map centred at "
                  "zero, one colour scale per panel. Per problem and method the most accurate run among those "
                  "recorded with save_field=true that match the report's `field` options.",
                  _save(fig, folder, key, cfg), pid)


def _tick_label(problem: str, width: int = 18) -> str:
    """A problem id for a tick: its knobs wrapped at commas onto lines of about `width` characters."""
    if len(problem) <= width or "(" not in problem:
        return problem
    name, knobs = problem.split("(", 1)
    lines, line = [name + "("], ""
    for part in knobs.split(","):
        if line and len(line) + len(part) + 1 > width:
            lines.append(line + ",")
            line = part
        else:
            line = f"{line},{part}" if line else part
    lines.append(line)
    return "\n".join(lines)


def fig_overview(recs, frame, pts, cfg, folder) -> Figure | None:
    """Best error of each method on each problem, problems in natural order (frequency or
    sharpness growing to the right)."""
    import matplotlib.pyplot as plt

    best = best_errors(recs, frame, cfg, points=pts)
    problems = sorted(best["problem_id"].unique(), key=natural_key)
    if len(problems) < 2:
        return None
    # problems of one family (same name) are joined by lines; a gap separates families
    name = {p: str(p).split("(", 1)[0] for p in problems}
    pos, x = {}, 0.0
    for k, p in enumerate(problems):
        if k and name[p] != name[problems[k - 1]]:
            x += 0.6
        pos[p] = x
        x += 1.0
    colours, markers = method_colours(frame), _markers(frame)
    # taller than the other figures: the slanted problem ids and the legend share the height
    fig, ax = plt.subplots(figsize=(cfg.figures.width, cfg.figures.height * 1.35), layout="constrained")
    for tol in cfg.tolerances:
        ax.axhline(tol, color="#9a9a9a", lw=0.8, ls=":", zorder=0)
    drawn = ringed = False
    seen = {}   # rounded (x, log error) -> drawn already: a method whose points all coincide is a ring
    for (fam, solver), g in best.groupby(["family", "solver"], sort=True):
        g = g[np.isfinite(g["error"].astype(float)) & (g["error"].astype(float) > 0)]
        if g.empty:
            continue
        g = g.assign(x=g["problem_id"].map(pos), name=g["problem_id"].map(name)).sort_values("x")
        keys = [(x, round(math.log10(e), 3)) for x, e in zip(g["x"], g["error"].astype(float))]
        same = all(k in seen for k in keys)
        seen.update(dict.fromkeys(keys))
        ringed |= same
        for _, seg in g.groupby("name", sort=False):
            style = dict(mfc="none", mew=1.4, ms=10, lw=1.0, ls=(0, (2, 2))) if same else \
                dict(ms=5, lw=1.2, ls="--" if _is_learned(fam) else "-")
            ax.plot(seg["x"], seg["error"], color=colours[solver], marker=markers[solver], label=solver,
                    zorder=3.5 if same else 3, **style)
        drawn = True
    if not drawn:
        plt.close(fig)
        return None
    ax.set_yscale("log")
    from matplotlib.ticker import FuncFormatter

    ax.yaxis.set_major_formatter(FuncFormatter(_decade_label))
    ax.set_xticks([pos[p] for p in problems], [_tick_label(p) for p in problems], rotation=30, ha="right",
                  rotation_mode="anchor", fontsize="small")
    ax.set_xlim(min(pos.values()) - 0.5, max(pos.values()) + 0.5)
    ax.set_xlabel("problem (knobs in brackets)")
    ax.set_ylabel(_error_label(cfg).replace(" (", "\n("))   # two lines: the tick labels take height
    _legend(fig, ax)
    key = "best_error_by_problem"
    return Figure(key, "Best error per problem",
                  "Least error each method reached on each problem with any configuration and no time limit "
                  "(upper median over seeds); learned methods dashed. Problems are ordered by their knobs, so "
                  "frequency or sharpness grows to the right within a problem family."
                  + (" Hollow, larger markers on dotted lines: a method whose best errors all coincide with "
                     "an earlier method's (identical results), drawn around it." if ringed else ""),
                  _save(fig, folder, key, cfg), None)


def make_figures(recs, frame, cfg, folder: Path) -> list[Figure]:
    """Every requested figure for the records; progress on stderr when it is a terminal."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from tqdm import tqdm

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    kinds = cfg.figures.kinds
    pts = run_points(recs, frame, cfg.metric, cfg.eigen_metric)
    fits = order_fits(frame, cfg.fit.floor, cfg.fit.points) if "order" in kinds else None
    jobs = []
    for pid in sorted(frame["problem_id"].unique(), key=natural_key):
        if "pareto" in kinds:
            jobs.append(lambda pid=pid: fig_pareto(pid, frame, pts, cfg, folder))
        if "order" in kinds:
            jobs.append(lambda pid=pid: fig_order(pid, frame, fits, cfg, folder))
        if "training" in kinds:
            jobs.append(lambda pid=pid: fig_training(pid, frame, pts, recs, cfg, folder))
        if "images" in kinds:   # imaging problems: reconstructed and error images (bench/report/images.py)
            jobs.append(lambda pid=pid: fig_images(pid, recs, frame, cfg, folder, Figure, _save))
    if "overview" in kinds:
        jobs.append(lambda: fig_overview(recs, frame, pts, cfg, folder))
    if "field" in kinds:
        jobs.append(lambda: fig_field(recs, frame, cfg, folder))
    if "dimensions" in kinds:   # time-to-tolerance against d (bench/report/dimensions.py)
        jobs.append(lambda: fig_dimensions(recs, frame, cfg, folder, Figure, _save))
    out = []
    with plt.rc_context(_style(cfg)):
        for job in tqdm(jobs, desc="figures", unit="fig", file=sys.stderr, disable=not sys.stderr.isatty()):
            f = job()
            if f is not None:
                out.append(f)
    return out

