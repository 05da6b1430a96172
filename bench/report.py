"""The report stage: records -> fair comparison tables and figures under results/reports/<name>/.

What the report answers, per problem: which method reaches a required accuracy soonest
(time-to-tolerance), how accurate each method gets within a time budget (accuracy-at-budget),
how much faster the best classical method is than the best learned one at equal accuracy (or
the other way round), each classical method's observed convergence order, the spread of learned
methods over seeds, and how many runs failed and how.

Rules (also printed at the top of every report)
-----------------------------------------------
* Time is the method's own time: ``timings.total`` = setup + solve for classical methods, setup +
  training (+ inference) for learned ones; the harness's error evaluation is excluded. Training
  checkpoints carry the method time at which they were taken.
* A run's *points* are its training checkpoints (``history``: time, error) and its final solution
  (``timings.total``, final error). Only runs with status ``ok`` have points.
* Time-to-tolerance of a run: the time of the first point, in time order, whose error is at or
  below the tolerance (no interpolation between checkpoints); infinite (``not reached``) if there
  is none or the run did not end ``ok``.
* Accuracy-at-budget of a run: the least error among its points taken at or before the budget;
  infinite if there is none. This is the exact dual of time-to-tolerance: a run reaches ``tol``
  within ``B`` if and only if its accuracy at ``B`` is at most ``tol``.
* A configuration (solver with all its options and budget, seed excluded) aggregates its seeds
  by the upper median (the middle value, the worse of the two middle values for an even count);
  failed seeds count as infinite, so they are never dropped. A method's entry is its best
  configuration, shown with that configuration and how many of its seeds got there.
* Picking the first checkpoint below the tolerance uses hindsight (the harness knows the error,
  a user training a network does not), so it favours checkpointed methods; the report says so.
"""
from __future__ import annotations

import base64
import dataclasses
import html
import json
import math
import numbers
import re
from pathlib import Path

import numpy as np

from bench.config import ConfigError, in_range, one_of, positive

__all__ = ["ReportConfig", "FigureOptions", "FitOptions", "FieldOptions", "Table", "results_table",
           "to_markdown", "run_points", "pareto_front", "time_to_tolerance", "accuracy_at_budget",
           "speedup_table", "order_fits", "seed_summary", "status_counts", "build_tables", "metric_key",
           "upper_median", "best_errors", "natural_key",
           "latex_tabular", "write_report", "LEARNED_FAMILIES"]

FORMATS = ("md", "csv", "tex", "html")
METRICS = ("rel_l2", "abs_l2", "max_abs", "rel_max", "nodal_max")
FIGURE_KINDS = ("pareto", "order", "training", "field", "overview")
IMAGE_FORMATS = ("png", "svg")
LEARNED_FAMILIES = ("pinn",)       # everything else is a classical method
FAIL_STATUSES = ("failed", "timeout", "diverged", "crashed", "out_of_memory", "unsupported")
NOT_REACHED = "not reached"


# ------------------------------------------------------------------------------------------------
# Options (conf/report/default.yaml)
# ------------------------------------------------------------------------------------------------
@dataclasses.dataclass
class FigureOptions:
    """Which figures, in which image formats, at which size."""

    kinds: list[str] = dataclasses.field(default_factory=lambda: list(FIGURE_KINDS))
    formats: list[str] = dataclasses.field(default_factory=lambda: list(IMAGE_FORMATS))
    dpi: int = 150
    width: float = 6.4          # inches; a report column
    height: float = 4.4
    font_scale: float = 1.0

    def __post_init__(self):
        for i, k in enumerate(self.kinds):
            one_of(f"kinds[{i}]", k, FIGURE_KINDS)
        if not self.formats:
            raise ConfigError("`formats` must name at least one image format: png, svg")
        for i, f in enumerate(self.formats):
            one_of(f"formats[{i}]", f, IMAGE_FORMATS)
        positive("dpi", self.dpi, integer=True, maximum=1200)
        positive("width", self.width, maximum=40)
        positive("height", self.height, maximum=40)
        positive("font_scale", self.font_scale, maximum=5)


@dataclasses.dataclass
class FitOptions:
    """Which points of a resolution ladder enter the convergence-order fit."""

    floor: float = 1e-11   # errors at or below this are round-off, not discretisation error
    points: int = 4        # fit the finest this many points (0: all kept points)

    def __post_init__(self):
        if self.floor < 0:
            raise ConfigError(f"`floor` must be non-negative, got {self.floor!r}")
        if self.points < 0 or self.points == 1:
            raise ConfigError(f"`points` must be 0 (all) or at least 2, got {self.points!r}")


@dataclasses.dataclass
class FieldOptions:
    """The case(s) whose pointwise error field is drawn (records run with save_field=true)."""

    problem: str | None = None      # problem label or id; null: any
    solver: str | None = None
    resolution: str | None = None   # e.g. "n=64"
    seed: int | None = None
    max_panels: int = 4

    def __post_init__(self):
        positive("max_panels", self.max_panels, integer=True, maximum=16)


@dataclasses.dataclass
class ReportConfig:
    """`lapbench report` options (override as ``report.<key>=...``)."""

    name: str | None = None
    results: list[str] = dataclasses.field(default_factory=lambda: ["results"])
    suite: str | None = None
    problem: list[str] | str | None = None
    solver: list[str] | str | None = None
    metric: str = "rel_l2"
    eigen_metric: str | None = "eig_rel_max"
    tolerances: list[float] = dataclasses.field(default_factory=lambda: [1e-2, 1e-4, 1e-6])
    budgets: list[float] = dataclasses.field(default_factory=lambda: [0.01, 0.1, 1.0, 10.0, 100.0])
    formats: list[str] = dataclasses.field(default_factory=lambda: ["md", "csv"])
    runs_table: bool = True
    figures: FigureOptions = dataclasses.field(default_factory=FigureOptions)
    fit: FitOptions = dataclasses.field(default_factory=FitOptions)
    field: FieldOptions = dataclasses.field(default_factory=FieldOptions)

    def __post_init__(self):
        if self.name is None:
            self.name = self.suite or "latest"
        if not self.name or "/" in self.name or self.name.startswith(".") or "\\" in self.name:
            raise ConfigError(f"`name` must be a plain folder name, got {self.name!r}")
        if not self.results:
            raise ConfigError("`results` must list at least one results folder")
        for i, f in enumerate(self.formats):
            one_of(f"formats[{i}]", f, FORMATS)
        one_of("metric", self.metric, METRICS)
        if not self.tolerances:
            raise ConfigError("`tolerances` must list at least one tolerance, e.g. [1e-2, 1e-4]")
        for i, t in enumerate(self.tolerances):
            positive(f"tolerances[{i}]", t)
            in_range(f"tolerances[{i}]", t, 0, 1e6)
        if not self.budgets:
            raise ConfigError("`budgets` must list at least one time budget in seconds, e.g. [1, 10]")
        for i, b in enumerate(self.budgets):
            positive(f"budgets[{i}]", b)
        self.tolerances = sorted(set(self.tolerances), reverse=True)
        self.budgets = sorted(set(self.budgets))
        if isinstance(self.problem, str):
            self.problem = [self.problem]
        if isinstance(self.solver, str):
            self.solver = [self.solver]


# ------------------------------------------------------------------------------------------------
# Loading
# ------------------------------------------------------------------------------------------------
def _load(cfg: ReportConfig):
    """Records matching the filters, and their DataFrame (row i = record i)."""
    from bench.records import load_records, to_frame

    for i, d in enumerate(cfg.results):
        if not Path(d).is_dir():
            raise ConfigError(f"`report.results[{i}]` must be an existing results folder, got {d!r} "
                              "(run `lapbench run ...` first, or point it at a folder that holds runs/)")
    recs = load_records(cfg.results, suite=cfg.suite)
    if cfg.problem:
        want = set(cfg.problem)
        recs = [r for r in recs if want & {r["problem"].get("label"), r["problem"].get("id"),
                                           r["problem"].get("name")}]
    if cfg.solver:
        recs = [r for r in recs if r["solver"].get("name") in cfg.solver]
    frame = to_frame(recs)
    if len(frame):
        frame = _with_labels(frame, recs)
        frame["error"] = [_error_of(r, cfg) for r in recs]
        # the case's own memory: peak resident set above the forked harness it started from
        # (which holds numpy/scipy and, for learned methods, torch: shared, not the method's)
        delta = frame["peak_rss_delta_mb"]
        frame["mem_mb"] = delta.where(delta.notna(), frame["peak_rss_mb"])
    return recs, frame


def metric_key(rec: dict, metric: str = "rel_l2", eigen_metric: str | None = None) -> str:
    """The metric a record is judged by: `eigen_metric` for eigenvalue problems, else `metric`."""
    if rec["problem"].get("kind") == "eigen" and eigen_metric:
        return eigen_metric
    return metric


def _error_of(rec: dict, cfg: ReportConfig) -> float:
    """The report's error of a record (NaN when not measured)."""
    v = (rec.get("metrics") or {}).get(metric_key(rec, cfg.metric, cfg.eigen_metric))
    return float(v) if _finite(v) else float("nan")


def _flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in (d or {}).items():
        if isinstance(v, dict):
            out.update(_flatten(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = json.dumps(v, sort_keys=True) if isinstance(v, list) else v
    return out


def _with_labels(frame, recs):
    """Add `label` (readable configuration name: resolution plus whatever else varies among the
    configurations of the same problem and solver) and `variant` (the same without resolution)."""
    frame = frame.copy()
    flat = []
    for r in recs:
        f = {f"{k}": v for k, v in _flatten(r["solver"].get("config") or {}).items() if k not in ("name",)}
        b = r.get("budget") or {}
        f["train"] = b.get("train_time")
        f["limit"] = b.get("time_limit")
        f["threads"] = r.get("threads_requested", r.get("threads"))
        flat.append(f)
    labels, variants = [""] * len(recs), [""] * len(recs)
    for _, idx in frame.groupby(["problem_id", "solver"], dropna=False).groups.items():
        idx = list(idx)
        keys = sorted({k for i in idx for k in flat[i]})
        varying = [k for k in keys if len({repr(flat[i].get(k)) for i in idx}) > 1]
        for i in idx:
            res = recs[i]["solver"].get("resolution") or {}
            parts = [f"{k}={v}" for k, v in res.items()]
            extra = [k for k in varying if k not in res]
            vparts = [_kv(k, flat[i].get(k)) for k in extra]
            labels[i] = ", ".join(parts + vparts) or "default"
            variants[i] = ", ".join(vparts)
    frame["label"] = labels
    frame["variant"] = variants
    return frame


def _kv(k, v) -> str:
    if k in ("train", "limit"):
        return f"{k}={_g(v)}s" if v is not None else f"{k}=default"
    return f"{k}={v}"


def _g(v, spec=".3g") -> str:
    return format(float(v), spec) if v is not None else ""


# ------------------------------------------------------------------------------------------------
# The analysis (pure functions on DataFrames; tested on synthetic records)
# ------------------------------------------------------------------------------------------------
def run_points(recs, frame, metric: str = "rel_l2", eigen_metric: str | None = None):
    """Every measured (time, error) state of every ``ok`` run: training checkpoints and the final
    solution (its error is ``frame.error``). Columns: row (record index), problem_id, solver,
    family, config_key, label, seed, time, error, final."""
    import pandas as pd

    rows = []
    for i, r in enumerate(recs):
        if r.get("status") != "ok":
            continue
        base = {"row": i, "problem_id": frame.at[i, "problem_id"], "solver": frame.at[i, "solver"],
                "family": frame.at[i, "family"], "config_key": frame.at[i, "config_key"],
                "label": frame.at[i, "label"], "seed": frame.at[i, "seed"]}
        key = metric_key(r, metric, eigen_metric)
        for h in r.get("history") or []:
            t, e = h.get("time"), h.get(key)
            if _finite(t) and _finite(e):
                rows.append({**base, "time": float(t), "error": float(e), "final": False})
        t, e = (r.get("timings") or {}).get("total"), frame.at[i, "error"]
        if _finite(t) and _finite(e):
            rows.append({**base, "time": float(t), "error": float(e), "final": True})
    cols = ["row", "problem_id", "solver", "family", "config_key", "label", "seed", "time", "error", "final"]
    return pd.DataFrame(rows, columns=cols)


def _finite(v) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_)) and math.isfinite(v)


def pareto_front(points, x: str = "time", y: str = "error"):
    """The non-dominated points (no other point is at most as slow and strictly more accurate,
    or strictly faster and at most as inaccurate), sorted by `x`; ties in `x` keep the least `y`,
    repeated identical points are kept once."""
    if len(points) == 0:
        return points.iloc[0:0]
    p = points.sort_values([x, y], kind="mergesort")
    keep, best = [], math.inf
    for idx, yv in zip(p.index, p[y]):
        if yv < best:
            keep.append(idx)
            best = yv
    return p.loc[keep]


def upper_median(values) -> float:
    """The middle value; for an even count the larger of the two middle values (conservative,
    and it commutes with monotone maps, so time-to-tolerance and accuracy-at-budget stay dual)."""
    v = np.sort(np.asarray(list(values), dtype=float))
    return float(v[len(v) // 2]) if len(v) else math.inf


def natural_key(text) -> tuple:
    """Sort key that orders embedded numbers by value: sine(k=2) before sine(k=16)."""
    parts = re.split(r"(\d+(?:\.\d+)?(?:e[-+]?\d+)?)", str(text))
    return tuple(float(p) if i % 2 else p for i, p in enumerate(parts))


def _by_problem(df):
    """Rows in natural problem order (stable: the order within a problem is kept)."""
    if len(df) == 0:
        return df
    order = sorted(range(len(df)), key=lambda i: natural_key(df["problem_id"].iloc[i]))
    return df.iloc[order].reset_index(drop=True)


def _run_level(frame, points, value_fn):
    """value_fn(times, errors) -> float per record of `frame` (inf for records without points)."""
    by_row = {}
    if len(points):
        rows = points["row"].to_numpy()
        order = np.argsort(rows, kind="stable")
        rows = rows[order]
        t = points["time"].to_numpy(float)[order]
        e = points["error"].to_numpy(float)[order]
        uniq, start = np.unique(rows, return_index=True)
        stop = np.append(start[1:], len(rows))
        by_row = {int(r): (t[a:b], e[a:b]) for r, a, b in zip(uniq, start, stop)}
    return {i: (value_fn(*by_row[i]) if i in by_row else math.inf) for i in frame.index}


def _config_groups(frame) -> list:
    """[(problem_id, solver, family, statuses, {config_key: (label, [row, ...])}), ...] sorted."""
    groups: dict = {}
    cols = zip(frame.index, frame["problem_id"], frame["solver"], frame["family"], frame["status"],
               frame["config_key"], frame["label"])
    for i, pid, solver, fam, status, ck, label in cols:
        g = groups.setdefault((pid, solver), [fam, set(), {}])
        g[1].add(status)
        g[2].setdefault(ck, (label, []))[1].append(i)
    return [(pid, solver, fam, st, cfgs) for (pid, solver), (fam, st, cfgs) in sorted(groups.items())]


def _best_configs(frame, per_run: dict):
    """Aggregate runs -> configurations (upper median over seeds) -> method (best configuration;
    ties go to the configuration whose label sorts first).

    Returns rows (problem_id, solver, family, value, label, seeds_at, seeds, mem_mb,
    all_unsupported)."""
    mem = frame["mem_mb"] if "mem_mb" in frame else None
    out = []
    for pid, solver, fam, statuses, cfgs in _config_groups(frame):
        best = None
        for ck in sorted(cfgs):
            label, rows = cfgs[ck]
            vals = [per_run[i] for i in rows]
            agg = upper_median(vals)
            if best is None or (agg, label) < (best[0], best[1]):
                best = (agg, label, rows, vals)
        agg, label, rows, vals = best
        reached = math.isfinite(agg)
        rss = [mem[i] for i, v in zip(rows, vals) if v <= agg] if reached and mem is not None else []
        rss = [float(x) for x in rss if _finite(x)]
        out.append({"problem_id": pid, "solver": solver, "family": fam, "value": agg,
                    "label": label if reached else "", "seeds_at": sum(v <= agg for v in vals) if reached else 0,
                    "seeds": len(vals), "mem_mb": max(rss) if rss else float("nan"),
                    "all_unsupported": statuses == {"unsupported"}})
    return out


def time_to_tolerance(recs, frame, tolerances, metric: str = "rel_l2", points=None):
    """Long table: per problem, method and tolerance, the least time at which the method reached
    the tolerance (see the module docstring for the exact rule). ``time_s`` is inf when not
    reached."""
    import pandas as pd

    pts = run_points(recs, frame, metric) if points is None else points
    rows = []
    for tol in tolerances:
        def first_at_or_below(t, e, tol=tol):
            hit = t[e <= tol]
            return float(hit.min()) if len(hit) else math.inf

        per_run = _run_level(frame, pts, first_at_or_below)
        for b in _best_configs(frame, per_run):
            rows.append({"problem_id": b["problem_id"], "solver": b["solver"], "family": b["family"],
                         "tolerance": float(tol), "time_s": b["value"], "reached": math.isfinite(b["value"]),
                         "config": b["label"], "seeds_reached": b["seeds_at"], "seeds": b["seeds"],
                         "mem_mb": b["mem_mb"], "unsupported": b["all_unsupported"]})
    cols = ["problem_id", "solver", "family", "tolerance", "time_s", "reached", "config", "seeds_reached",
            "seeds", "mem_mb", "unsupported"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def accuracy_at_budget(recs, frame, budgets, metric: str = "rel_l2", points=None):
    """Long table: per problem, method and time budget, the least error the method reached at or
    before the budget (``error`` inf when nothing finished within it)."""
    import pandas as pd

    pts = run_points(recs, frame, metric) if points is None else points
    rows = []
    for B in budgets:
        def best_within(t, e, B=B):
            within = e[t <= B]
            return float(within.min()) if len(within) else math.inf

        per_run = _run_level(frame, pts, best_within)
        for b in _best_configs(frame, per_run):
            rows.append({"problem_id": b["problem_id"], "solver": b["solver"], "family": b["family"],
                         "budget_s": float(B), "error": b["value"], "within": math.isfinite(b["value"]),
                         "config": b["label"], "seeds_within": b["seeds_at"], "seeds": b["seeds"],
                         "unsupported": b["all_unsupported"]})
    cols = ["problem_id", "solver", "family", "budget_s", "error", "within", "config", "seeds_within",
            "seeds", "unsupported"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def best_errors(recs, frame, cfg: ReportConfig, points=None):
    """Per problem and method: accuracy-at-budget with an unlimited budget (the best any
    configuration reached, upper median over its seeds)."""
    pts = run_points(recs, frame, cfg.metric, cfg.eigen_metric) if points is None else points
    out = accuracy_at_budget(recs, frame, [math.inf], cfg.metric, points=pts)
    return out.drop(columns=["budget_s"])


FAMILY_ORDER = ("fd", "spectral", "fem", "pinn")   # reading order of method columns


def _method_rank(df, solver) -> tuple:
    fam = df.loc[df["solver"] == solver, "family"].iloc[0]
    return (FAMILY_ORDER.index(fam) if fam in FAMILY_ORDER else len(FAMILY_ORDER), str(fam), solver)


def _is_learned(family) -> bool:
    return family in LEARNED_FAMILIES


def speedup_table(recs, frame, tolerances, metric: str = "rel_l2", points=None):
    """Per problem and accuracy level: best classical method against best learned method.

    Accuracy levels are the configured tolerances plus the best accuracy the learned methods
    reached on that problem (their accuracy-at-budget with an unlimited budget), so that a
    comparison exists even when no tolerance was met. ``speedup`` = slower time / faster time;
    ``winner`` names the faster side. Problems without learned or classical runs are omitted.
    """
    import pandas as pd

    pts = run_points(recs, frame, metric) if points is None else points
    rows = []
    for pid, g in frame.groupby("problem_id", sort=True):
        learned = g[g["family"].map(_is_learned)]
        classical = g[~g["family"].map(_is_learned)]
        if learned.empty or classical.empty:
            continue
        sub_recs_idx = list(g.index)
        gpts = pts[pts["row"].isin(sub_recs_idx)] if len(pts) else pts
        best_learned = accuracy_at_budget(recs, learned, [math.inf], metric, points=gpts)
        e_star = float(best_learned["error"].min()) if len(best_learned) else math.inf
        levels = [(float(t), "tolerance") for t in tolerances]
        if math.isfinite(e_star):
            levels.append((e_star, "best learned error"))
        tt = time_to_tolerance(recs, g, [lv for lv, _ in levels], metric, points=gpts)
        for level, what in levels:
            sub = tt[tt["tolerance"] == level]
            c = sub[~sub["family"].map(_is_learned)].sort_values(["time_s", "solver"]).iloc[0]
            p = sub[sub["family"].map(_is_learned)].sort_values(["time_s", "solver"]).iloc[0]
            tc, tp = c["time_s"], p["time_s"]
            if math.isfinite(tc) and math.isfinite(tp):
                winner = "classical" if tc <= tp else "learned"
                speedup = max(tc, tp) / min(tc, tp) if min(tc, tp) > 0 else math.inf
            else:
                winner = "classical" if math.isfinite(tc) else "learned" if math.isfinite(tp) else "neither"
                speedup = math.inf if winner != "neither" else float("nan")
            rows.append({"problem_id": pid, "level": what, "error": level,
                         "classical": c["solver"] if math.isfinite(tc) else "",
                         "classical_config": c["config"], "classical_time_s": tc,
                         "learned": p["solver"] if math.isfinite(tp) else "",
                         "learned_config": p["config"], "learned_time_s": tp,
                         "winner": winner, "speedup": speedup})
    cols = ["problem_id", "level", "error", "classical", "classical_config", "classical_time_s", "learned",
            "learned_config", "learned_time_s", "winner", "speedup"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def _fit_line(x, y) -> tuple[float, float]:
    """Least-squares (slope, intercept) of log y against log x."""
    slope, icpt = np.polyfit(np.log(np.asarray(x, float)), np.log(np.asarray(y, float)), 1)
    return float(slope), float(icpt)


def order_fits(frame, floor: float = 1e-11, points: int = 4):
    """Observed convergence order of each classical method on each problem.

    Per (problem, solver, variant) the ``ok`` runs are ordered coarse to fine (by dofs); the
    error per resolution is the upper median over seeds. The fit range: resolutions finer than
    the first error at or below `floor` are dropped, and so are those finer than the least error
    (the round-off plateau); from the least error the range extends coarser while the error keeps
    rising (a pre-asymptotic bump ends it); of that range the finest `points` are fitted (0: all).
    ``order`` is the least-squares slope of log error against log h (when every run reports h);
    ``slope_dofs`` and ``intercept_dofs`` are the least-squares line of log error against
    log dofs (slope about -order/2 in two dimensions). Fewer than two points give NaN and say why.
    """
    import pandas as pd

    rows = []
    ok = frame[(frame["status"] == "ok") & ~frame["family"].map(_is_learned)]
    for (pid, solver, variant), g in ok.groupby(["problem_id", "solver", "variant"], sort=True):
        g = g[g["error"].map(_finite) & g["dofs"].map(_finite)]
        agg = g.groupby("dofs").agg(error=("error", upper_median), h=("h", "first")).sort_index()
        ladder = [(float(d), float(r["h"]) if _finite(r["h"]) else float("nan"), float(r["error"]))
                  for d, r in agg.iterrows()]
        notes = []
        below = [i for i, (_, _, e) in enumerate(ladder) if not e > floor]
        if below:
            ladder = ladder[:below[0]]
            notes.append(f"finer runs at or below the floor {floor:g} excluded")
        kept = []
        if ladder:
            errs = [e for _, _, e in ladder]
            m = int(np.argmin(errs))
            if m < len(ladder) - 1:
                notes.append("finer runs where the error stopped decreasing excluded")
            j = m
            while j > 0 and errs[j - 1] > errs[j]:
                j -= 1
            if j > 0:
                notes.append("coarser pre-asymptotic runs excluded")
            kept = ladder[j:m + 1]
        note = "; ".join(notes)
        if points and len(kept) > points:
            kept = kept[-points:]
        row = {"problem_id": pid, "solver": solver, "family": g["family"].iloc[0] if len(g) else "",
               "variant": variant, "order": float("nan"), "slope_dofs": float("nan"),
               "intercept_dofs": float("nan"), "points": len(kept),
               "h_max": float("nan"), "h_min": float("nan"), "dofs_min": float("nan"),
               "dofs_max": float("nan"), "error_max": float("nan"), "error_min": float("nan"),
               "note": note}
        if len(kept) >= 2:
            d, h, e = (np.array(v) for v in zip(*kept))
            slope, icpt = _fit_line(d, e)
            row.update(slope_dofs=slope, intercept_dofs=icpt, dofs_min=d.min(), dofs_max=d.max(),
                       error_max=e.max(), error_min=e.min())
            if np.all(np.isfinite(h)) and np.all(h > 0) and len(set(h)) >= 2:
                row.update(order=_fit_line(h, e)[0], h_max=h.max(), h_min=h.min())
        else:
            row["note"] = (note + "; " if note else "") + "fewer than two usable resolutions"
        rows.append(row)
    cols = ["problem_id", "solver", "family", "variant", "order", "slope_dofs", "intercept_dofs", "points",
            "h_max", "h_min",
            "dofs_min", "dofs_max", "error_max", "error_min", "note"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def seed_summary(frame):
    """Learned runs per configuration: seeds, status counts, median and spread of the final error
    over the ``ok`` seeds, median method time."""
    import pandas as pd

    rows = []
    learned = frame[frame["family"].map(_is_learned)]
    for (pid, solver, ck), g in learned.groupby(["problem_id", "solver", "config_key"], sort=True):
        ok = g[(g["status"] == "ok") & g["error"].map(_finite)]
        e = ok["error"].astype(float)
        row = {"problem_id": pid, "solver": solver, "config": g["label"].iloc[0], "seeds": len(g),
               "ok": int((g["status"] == "ok").sum()),
               "error_median": float(np.median(e)) if len(e) else float("nan"),
               "error_min": float(e.min()) if len(e) else float("nan"),
               "error_max": float(e.max()) if len(e) else float("nan"),
               "time_median_s": float(np.median(ok["t_total"].astype(float))) if len(ok) else float("nan")}
        for s in FAIL_STATUSES:
            row[s] = int((g["status"] == s).sum())
        rows.append(row)
    cols = ["problem_id", "solver", "config", "seeds", "ok", "error_median", "error_min", "error_max",
            "time_median_s", *FAIL_STATUSES]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def status_counts(frame):
    """Runs per problem and method by status, with a total row: nothing is dropped."""
    import pandas as pd

    statuses = ["ok", *FAIL_STATUSES]
    rows = []
    for (pid, solver), g in frame.groupby(["problem_id", "solver"], sort=True):
        row = {"problem_id": pid, "solver": solver, "runs": len(g)}
        for s in statuses:
            row[s] = int((g["status"] == s).sum())
        row["other"] = len(g) - sum(row[s] for s in statuses)
        rows.append(row)
    out = _by_problem(pd.DataFrame(rows, columns=["problem_id", "solver", "runs", *statuses, "other"]))
    if len(out):
        total = {"problem_id": "all", "solver": "all", **{c: int(out[c].sum()) for c in out.columns[2:]}}
        out = pd.concat([out, pd.DataFrame([total])], ignore_index=True)
    return out


def results_table(df):
    """Problem x solver x resolution: status, errors, timings (s), dofs; sorted for reading."""
    import pandas as pd

    cols = ["problem_id", "solver", "resolution", "seed", "status", "rel_l2", "max_abs", "nodal_max",
            "t_setup", "t_solve", "t_total", "t_evaluate", "dofs", "n_params", "peak_rss_mb", "reason"]
    if df.empty:
        return pd.DataFrame(columns=cols)
    df = df.copy()
    for c in cols:
        if c not in df:
            df[c] = None
    out = df[cols].copy()
    out["_dofs"] = pd.to_numeric(out["dofs"], errors="coerce").fillna(0)
    out = out.sort_values(["problem_id", "solver", "_dofs", "resolution", "seed"]).drop(columns="_dofs")
    return out.reset_index(drop=True)


# ------------------------------------------------------------------------------------------------
# Tables: numeric (CSV) and display (Markdown, LaTeX, HTML)
# ------------------------------------------------------------------------------------------------
@dataclasses.dataclass
class Table:
    """One table of the report: `data` is written to CSV as is, `display` (strings) to md/tex/html."""

    key: str            # file name stem, e.g. time_to_tolerance__sine_k-1_l-1
    title: str
    caption: str
    data: object        # pandas DataFrame, numeric
    display: object     # pandas DataFrame of strings
    problem: str | None = None


def _fmt_time(t) -> str:
    return format(t, ".3g") if _finite(t) else NOT_REACHED


def _fmt_err(e) -> str:
    return format(e, ".2e") if _finite(e) else ""


def _seed_note(k, n) -> str:
    return f", {k}/{n} seeds" if n > 1 else ""


def _cell_time(r) -> str:
    if r["unsupported"]:
        return "unsupported"
    if not r["reached"]:
        return NOT_REACHED
    mem = f", {r['mem_mb']:.3g} MiB" if _finite(r["mem_mb"]) else ""
    return f"{_fmt_time(r['time_s'])} ({r['config']}{mem}{_seed_note(r['seeds_reached'], r['seeds'])})"


def _cell_err(r) -> str:
    if r["unsupported"]:
        return "unsupported"
    if not r["within"]:
        return "none within budget"
    return f"{_fmt_err(r['error'])} ({r['config']}{_seed_note(r['seeds_within'], r['seeds'])})"


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9.]+", "-", str(text).replace("=", "-")).strip("-")
    return s[:60] or "problem"


def _metric_name(cfg: ReportConfig) -> str:
    return {"rel_l2": "relative L2 error", "abs_l2": "absolute L2 error", "max_abs": "max abs error",
            "rel_max": "relative max error", "nodal_max": "nodal max error"}[cfg.metric]


def build_tables(recs, frame, cfg: ReportConfig) -> list[Table]:
    """Every table of the report, in reading order."""
    import pandas as pd

    tables: list[Table] = []
    if frame.empty:
        return tables
    pts = run_points(recs, frame, cfg.metric, cfg.eigen_metric)
    tt = time_to_tolerance(recs, frame, cfg.tolerances, cfg.metric, points=pts)
    ab = accuracy_at_budget(recs, frame, cfg.budgets, cfg.metric, points=pts)
    sp = speedup_table(recs, frame, cfg.tolerances, cfg.metric, points=pts)
    metric = _metric_name(cfg)
    for pid in sorted(frame["problem_id"].unique(), key=natural_key):
        slug = _slug(pid)
        t = tt[tt["problem_id"] == pid]
        disp = {}
        for solver, g in t.groupby("solver", sort=False):
            disp[solver] = {"method": solver, "family": g["family"].iloc[0],
                            **{f"tol {tol:.0e}": _cell_time(r) for tol, (_, r) in
                               zip(g["tolerance"], g.iterrows())}}
        tables.append(Table(f"time_to_tolerance__{slug}", f"Time to tolerance: {pid}",
                            f"Least method time in seconds (setup + solve, or setup + training) at which "
                            f"each method's {metric} reached the tolerance; in brackets the configuration, "
                            f"its memory (peak resident set above the harness, MiB) and how many of its seeds "
                            f"got there "
                            f"(upper median over seeds). First checkpoint at or below the tolerance, "
                            f"no interpolation.", t.reset_index(drop=True),
                            pd.DataFrame(list(disp.values())), pid))
        a = ab[ab["problem_id"] == pid]
        disp = {}
        for solver, g in a.groupby("solver", sort=False):
            disp[solver] = {"method": solver, "family": g["family"].iloc[0],
                            **{f"{B:g} s": _cell_err(r) for B, (_, r) in zip(g["budget_s"], g.iterrows())}}
        tables.append(Table(f"accuracy_at_budget__{slug}", f"Accuracy at budget: {pid}",
                            f"Least {metric} each method reached within the time budget (seconds of method "
                            f"time); in brackets the configuration and how many of its seeds got there.",
                            a.reset_index(drop=True), pd.DataFrame(list(disp.values())), pid))
        s = sp[sp["problem_id"] == pid]
        if len(s):
            d = pd.DataFrame({
                "error level": [f"{_fmt_err(e)}" + (" (best learned)" if lv != "tolerance" else "")
                                for e, lv in zip(s["error"], s["level"])],
                "best classical": [f"{c} ({cc}): {_fmt_time(t)} s" if c else NOT_REACHED
                                   for c, cc, t in zip(s["classical"], s["classical_config"],
                                                       s["classical_time_s"])],
                "best learned": [f"{c} ({cc}): {_fmt_time(t)} s" if c else NOT_REACHED
                                 for c, cc, t in zip(s["learned"], s["learned_config"], s["learned_time_s"])],
                "faster": list(s["winner"]),
                "speed-up": [("" if w == "neither" else "only one reached" if not math.isfinite(x)
                              else f"{x:.3g}x") for w, x in zip(s["winner"], s["speedup"])],
            })
            tables.append(Table(f"speedup__{slug}", f"Speed-up at equal accuracy: {pid}",
                                "Time-to-tolerance of the best classical method against the best learned "
                                "method; speed-up = slower time / faster time.", s.reset_index(drop=True), d, pid))
    best = best_errors(recs, frame, cfg, points=pts)
    if len(best):
        methods = sorted(set(best["solver"]), key=lambda m: _method_rank(best, m))
        rows = []
        for pid in sorted(best["problem_id"].unique(), key=natural_key):
            g = best[best["problem_id"] == pid].set_index("solver")
            rows.append({"problem": pid, **{m: (_cell_err(g.loc[m]) if m in g.index else "") for m in methods}})
        tables.append(Table("best_error", "Best error per problem",
                            f"Least {metric} each method reached on each problem with any of its "
                            "configurations and no time limit (upper median over seeds); read down a column "
                            "to see how a method's error grows with frequency or sharpness.",
                            best, pd.DataFrame(rows)))
    fits = order_fits(frame, cfg.fit.floor, cfg.fit.points)
    if len(fits):
        d = pd.DataFrame({
            "problem": fits["problem_id"],
            "method": [s + (f" ({v})" if v else "") for s, v in zip(fits["solver"], fits["variant"])],
            "order (h)": [f"{o:.2f}" if _finite(o) else "" for o in fits["order"]],
            "slope (dofs)": [f"{o:.2f}" if _finite(o) else "" for o in fits["slope_dofs"]],
            "points": fits["points"].astype(str),
            "h range": [f"{a:.3g} to {b:.3g}" if _finite(a) else "" for a, b in zip(fits["h_max"], fits["h_min"])],
            "error range": [f"{_fmt_err(a)} to {_fmt_err(b)}" if _finite(a) else ""
                            for a, b in zip(fits["error_max"], fits["error_min"])],
            "note": fits["note"],
        })
        finest = f"the finest {cfg.fit.points}" if cfg.fit.points else "all"
        tables.append(Table("convergence_order", "Observed convergence order of classical methods",
                            f"Least-squares slope of log {metric} against log h (the observed order) and "
                            f"against log dofs, fitted over {finest} resolutions of the range where refining "
                            f"lowered the error: runs at or below {cfg.fit.floor:g}, finer than the least "
                            "error (round-off plateau) or before a coarse-grid bump are excluded; the range "
                            "used is shown. Spectral methods converge exponentially, so their slope grows "
                            "with the range and is not an order.", fits, d))
    seeds = seed_summary(frame)
    if len(seeds):
        d = pd.DataFrame({
            "problem": seeds["problem_id"], "method": seeds["solver"], "config": seeds["config"],
            "seeds": seeds["seeds"].astype(str), "ok": seeds["ok"].astype(str),
            "median error": [_fmt_err(e) for e in seeds["error_median"]],
            "spread (min to max)": [f"{_fmt_err(a)} to {_fmt_err(b)}" if _finite(a) else ""
                                    for a, b in zip(seeds["error_min"], seeds["error_max"])],
            "median time (s)": [_fmt_time(t) if _finite(t) else "" for t in seeds["time_median_s"]],
            "failures": [", ".join(f"{s} {int(r[s])}" for s in FAIL_STATUSES if r[s]) or "none"
                         for _, r in seeds.iterrows()],
        })
        tables.append(Table("learned_seeds", "Learned methods over seeds",
                            f"Final {metric} of learned methods: median and spread over the seeds that "
                            "finished ok, median method time, and failures by status.", seeds, d))
    counts = status_counts(frame)
    d = counts.astype(str).rename(columns={"problem_id": "problem", "solver": "method"})
    tables.append(Table("status_counts", "Runs by status",
                        "Every run read for this report, by status; failed, timed-out, diverged, crashed, "
                        "out-of-memory and unsupported runs count as not reached in the tables above.",
                        counts, d))
    return tables


# -- Markdown ------------------------------------------------------------------------------------
def _fmt(v, spec=".3g"):
    if v is None or (isinstance(v, float) and v != v):
        return ""
    if isinstance(v, float):
        return format(v, spec)
    return str(v)


def to_markdown(table) -> str:
    """A GitHub-style Markdown table (no optional dependency)."""
    headers = list(table.columns)
    lines = ["| " + " | ".join(headers) + " |", "|" + "|".join("---" for _ in headers) + "|"]
    for _, row in table.iterrows():
        cells = []
        for h in headers:
            v = row[h]
            spec = ".3g" if str(h).startswith("t_") or h == "peak_rss_mb" else ".3e"
            cells.append(_fmt(v, spec).replace("|", "\\|").replace("\n", " "))
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


# -- LaTeX ---------------------------------------------------------------------------------------
_TEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
                "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}


def tex_escape(text) -> str:
    """Escape LaTeX's special characters in plain text."""
    return "".join(_TEX_SPECIAL.get(c, c) for c in str(text))


def latex_tabular(display) -> str:
    """A booktabs tabular of a display table (first column left, the rest left: cells hold text)."""
    cols = list(display.columns)
    spec = "l" * len(cols)
    lines = [rf"\begin{{tabular}}{{{spec}}}", r"\toprule",
             " & ".join(tex_escape(c) for c in cols) + r" \\", r"\midrule"]
    for _, row in display.iterrows():
        lines.append(" & ".join(tex_escape(_fmt(row[c])) for c in cols) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


def _inline_tex(text: str) -> str:
    """Escape text for LaTeX, rendering Markdown's `code` spans in typewriter type."""
    return re.sub(r"`([^`]+)`", r"\\texttt{\1}", tex_escape(text))


def latex_table(t: Table) -> str:
    """A floating table with caption and label, ready to \\input into a paper."""
    return ("\\begin{table}[htbp]\n\\centering\n\\small\n" + latex_tabular(t.display)
            + f"\\caption{{{tex_escape(t.title)}. {_inline_tex(t.caption)}}}\n"
            + f"\\label{{tab:{_slug(t.key)}}}\n\\end{{table}}\n")


# -- HTML ----------------------------------------------------------------------------------------
_CSS = """body{font-family:system-ui,-apple-system,Segoe UI,Roboto,sans-serif;max-width:72rem;margin:2rem auto;
padding:0 1rem;color:#222;line-height:1.45}table{border-collapse:collapse;margin:.5rem 0 1.5rem;font-size:.9rem}
th,td{padding:.25rem .6rem;text-align:left;vertical-align:top}thead th{border-top:2px solid #222;
border-bottom:1px solid #222}tbody tr:last-child td{border-bottom:2px solid #222}caption{caption-side:bottom;
text-align:left;font-size:.85rem;color:#555;padding-top:.3rem}figure{margin:1rem 0 2rem}img{max-width:100%}
figcaption{font-size:.85rem;color:#555}code{background:#f3f3f3;padding:0 .2rem}"""


def html_table(t: Table) -> str:
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in t.display.columns)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(_fmt(r[c]))}</td>" for c in t.display.columns) + "</tr>"
                   for _, r in t.display.iterrows())
    return (f"<table><caption>{_inline_html(t.caption)}</caption><thead><tr>{head}</tr></thead>"
            f"<tbody>{body}</tbody></table>\n")


def _inline_html(text: str) -> str:
    """Escape text for HTML, rendering Markdown's `code` spans as <code>."""
    return re.sub(r"`([^`]+)`", r"<code>\1</code>", html.escape(text))


def _data_uri(path: Path) -> str:
    mime = {"png": "image/png", "svg": "image/svg+xml"}[path.suffix[1:]]
    return f"data:{mime};base64," + base64.b64encode(path.read_bytes()).decode("ascii")


# ------------------------------------------------------------------------------------------------
# Writing
# ------------------------------------------------------------------------------------------------
def _rules_text(cfg: ReportConfig) -> list[str]:
    eig = (f" (eigenvalue problems: `{cfg.eigen_metric}`)" if cfg.eigen_metric else "")
    return [
        f"Error: {_metric_name(cfg)} (`{cfg.metric}`){eig}, measured by the harness on each problem's shared "
        "evaluation set. Time: the method's own time in seconds, setup + solve for classical methods and "
        "setup + training (+ inference) for learned methods; harness evaluation excluded.",
        "Time-to-tolerance of a run: the time of its first measured state (training checkpoint or final "
        "solution) with error at or below the tolerance; no interpolation between checkpoints. "
        "Accuracy-at-budget: the least error among the states measured at or before the budget. "
        "Choosing the best checkpoint uses hindsight that a user training a network does not have, "
        "so these numbers favour learned methods.",
        "Seeds of one configuration are combined by the upper median (the worse middle value for an even "
        "count); runs that failed, timed out, diverged, crashed, ran out of memory or were unsupported count "
        "as not reached, never dropped. Each method shows its best configuration.",
    ]


def _filters_text(cfg: ReportConfig, recs) -> str:
    parts = [f"results: {', '.join(cfg.results)}"]
    if cfg.suite:
        parts.append(f"suite: {cfg.suite}")
    if cfg.problem:
        parts.append(f"problems: {', '.join(cfg.problem)}")
    if cfg.solver:
        parts.append(f"solvers: {', '.join(cfg.solver)}")
    return f"{len(recs)} runs read ({'; '.join(parts)})."


def _environment_text(recs) -> str:
    envs = {(r.get("environment") or {}).get("cpu") for r in recs} - {None, ""}
    threads = sorted({r.get("threads") for r in recs if r.get("threads") is not None})
    loads = [(r.get("environment") or {}).get("foreign_load") for r in recs]
    loads = [v for v in loads if _finite(v)]
    txt = (f"Machine: {', '.join(sorted(envs)) or 'unknown CPU'}; threads per case: "
           f"{', '.join(map(str, threads)) or 'unknown'}.")
    if loads:
        txt += (f" CPU load by other processes during the runs: median {np.median(loads):.2f}, "
                f"max {max(loads):.2f} cores (timings under load are less trustworthy).")
    return txt


def _clear(folder: Path, patterns) -> None:
    """Remove files this stage wrote before (stale per-problem files of an earlier report)."""
    if folder.is_dir():
        for pat in patterns:
            for p in folder.glob(pat):
                if p.is_file():
                    p.unlink()


def write_report(cfg: ReportConfig, out_root: str | Path = "results/reports") -> tuple[Path, object]:
    """Load records, build tables and figures, write the requested formats.

    Returns (report folder, table of all runs). Files: ``report.md`` / ``report.html`` /
    ``tables.tex`` (+ ``tables/<key>.tex``) / ``csv/<key>.csv``, ``figures/*.png|svg``, and the
    all-runs table ``results.md`` / ``results.csv``.
    """
    recs, frame = _load(cfg)
    runs = results_table(frame)
    out = Path(out_root) / cfg.name
    out.mkdir(parents=True, exist_ok=True)
    tables = build_tables(recs, frame, cfg)

    figs = []
    if cfg.figures.kinds and len(frame):
        from bench import figures

        _clear(out / "figures", ["*.png", "*.svg"])
        figs = figures.make_figures(recs, frame, cfg, out / "figures")

    title = f"lapbench report{f': suite {cfg.suite}' if cfg.suite else ''}"
    written = []
    if "csv" in cfg.formats:
        _clear(out / "csv", ["*.csv"])
        (out / "csv").mkdir(exist_ok=True)
        for t in tables:
            t.data.to_csv(out / "csv" / f"{t.key}.csv", index=False)
            written.append(f"csv/{t.key}.csv")
        if cfg.runs_table:
            runs.to_csv(out / "results.csv", index=False)
    if "md" in cfg.formats:
        (out / "report.md").write_text(_markdown(title, cfg, recs, tables, figs, out))
        if cfg.runs_table:
            (out / "results.md").write_text(
                f"# lapbench results{f' (suite {cfg.suite})' if cfg.suite else ''}\n\n{len(runs)} cases; "
                "errors relative L2 (quadrature) and max abs; times in seconds.\n\n" + to_markdown(runs))
    if "tex" in cfg.formats:
        _clear(out / "tables", ["*.tex"])
        (out / "tables").mkdir(exist_ok=True)
        for t in tables:
            (out / "tables" / f"{t.key}.tex").write_text(latex_table(t))
        (out / "tables.tex").write_text(_latex_document(title, tables))
    if "html" in cfg.formats:
        (out / "report.html").write_text(_html(title, cfg, recs, tables, figs, out, written))
    return out, runs


def _sections(tables, figs):
    """Group tables and figures for reading: per problem, then the cross-problem ones."""
    problems = []
    for t in tables:
        if t.problem is not None and t.problem not in problems:
            problems.append(t.problem)
    for f in figs:
        if f.problem is not None and f.problem not in problems:
            problems.append(f.problem)
    sec = [(f"Problem {p}", [t for t in tables if t.problem == p], [f for f in figs if f.problem == p])
           for p in problems]
    sec.append(("All problems", [t for t in tables if t.problem is None], [f for f in figs if f.problem is None]))
    return sec


def _markdown(title, cfg, recs, tables, figs, out: Path) -> str:
    lines = [f"# {title}", "", _filters_text(cfg, recs), "", _environment_text(recs) if recs else "", ""]
    lines += ["## How to read this report", ""] + [f"- {t}" for t in _rules_text(cfg)] + [""]
    if not recs:
        lines += ["No records matched; nothing to compare.", ""]
    for name, ts, fs in _sections(tables, figs):
        if not ts and not fs:
            continue
        lines += [f"## {name}", ""]
        for t in ts:
            lines += [f"### {t.title}", "", t.caption, "", to_markdown(t.display)]
        for f in fs:
            rel = f.paths.get("png") or f.paths.get("svg")
            lines += [f"### {f.title}", "", f"![{f.title}]({rel.relative_to(out).as_posix()})", "", f.caption, ""]
    if cfg.runs_table and "md" in cfg.formats:
        lines += ["Every run, one row each: [results.md](results.md).", ""]
    return "\n".join(lines)


def _latex_document(title, tables) -> str:
    body = "\n".join(latex_table(t) for t in tables)
    return ("% Generated by `lapbench report`. Each table is also in tables/<key>.tex for \\input.\n"
            "\\documentclass{article}\n\\usepackage[margin=2cm,landscape]{geometry}\n\\usepackage{booktabs}\n"
            "\\begin{document}\n" + f"\\section*{{{tex_escape(title)}}}\n" + body + "\\end{document}\n")


def _html(title, cfg, recs, tables, figs, out: Path, csv_files) -> str:
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
             f"<title>{html.escape(title)}</title>"
             f"<style>{_CSS}</style></head><body>", f"<h1>{html.escape(title)}</h1>",
             f"<p>{html.escape(_filters_text(cfg, recs))}</p>"]
    if recs:
        parts.append(f"<p>{html.escape(_environment_text(recs))}</p>")
    parts.append("<h2>How to read this report</h2><ul>" + "".join(f"<li>{_inline_html(t)}</li>"
                                                                   for t in _rules_text(cfg)) + "</ul>")
    if not recs:
        parts.append("<p>No records matched; nothing to compare.</p>")
    csv_set = set(csv_files)
    for name, ts, fs in _sections(tables, figs):
        if not ts and not fs:
            continue
        parts.append(f"<h2>{html.escape(name)}</h2>")
        for t in ts:
            link = f" <a href=\"csv/{html.escape(t.key)}.csv\">(CSV)</a>" if f"csv/{t.key}.csv" in csv_set else ""
            parts.append(f"<h3>{html.escape(t.title)}{link}</h3>" + html_table(t))
        for f in fs:
            src = f.paths.get("png") or f.paths.get("svg")
            parts.append(f"<figure><img alt=\"{html.escape(f.title)}\" src=\"{_data_uri(src)}\">"
                         f"<figcaption><b>{html.escape(f.title)}.</b> {_inline_html(f.caption)}</figcaption>"
                         "</figure>")
    parts.append("</body></html>\n")
    return "\n".join(parts)

