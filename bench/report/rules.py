"""The comparison rules, each one pure function of the records and their DataFrame.

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
* How times were measured: a deterministic method runs a warm-up, then N timed repeats
  (``timing`` in conf/config.yaml: at least ``timing.repeats`` runs and ``timing.min_time``
  seconds); its time is the median repeat (the upper median for even N), and the record keeps
  every repeat. The all-runs table shows N (``repeats``) and the spread of the repeats,
  ``t_spread`` = (slowest - fastest repeat) / median. Learned and non-deterministic methods run
  once (statistic ``single``): their training history is the measurement.
* A run's *points* are its training checkpoints (``history``: time, error) and its final solution
  (``timings.total``, final error). Only runs with status ``ok`` have points.
* Time-to-tolerance of a run: the time of the first point, in time order, whose error is at or
  below the tolerance (no interpolation between checkpoints); infinite (``not reached``) if there
  is none or the run did not end ``ok``.
* Accuracy-at-budget of a run: the least error among its points taken at or before the budget;
  infinite if there is none. This is the exact dual of time-to-tolerance: a run reaches ``tol``
  within ``B`` if and only if its accuracy at ``B`` is at most ``tol``.
* A problem is one problem config (``problem_config``, a hash of every knob and the domain):
  records whose ids coincide but whose configs differ are kept apart (``#<hash>`` after the id).
* A configuration (solver with all its options and budget, seed excluded) aggregates its seeds
  by the upper median (the middle value, the worse of the two middle values for an even count);
  failed seeds count as infinite, so they are never dropped. A method's entry is its best
  configuration, shown with that configuration and how many of its seeds got there.
* Expected against observed order: each classical method's order for smooth solutions (`EXPECTED_ORDER`,
  with its source) beside the fitted one; a corner singularity or a sharp feature lowers the observed
  order until the mesh resolves it, so a lower observed order is flagged, not hidden.
* Reference accuracy: an error below the accuracy of a computed reference (`reference_floor`) is not a
  measurement of the method; it is shown as ``< floor (reference accuracy)``, never as a number.
* Picking the first checkpoint below the tolerance uses hindsight (the harness knows the error,
  a user training a network does not), so it favours checkpointed methods; the report says so.
"""
from __future__ import annotations

import math

import numpy as np

from lapbench.report.frame import _finite, metric_key, natural_key
from lapbench.report.options import FAIL_STATUSES, ReportConfig, _is_learned

__all__ = ["run_points", "pareto_front", "time_to_tolerance", "accuracy_at_budget", "speedup_table", "order_fits",
           "seed_summary", "status_counts", "upper_median", "best_errors", "EXPECTED_ORDER", "expected_order",
           "order_check", "reference_floor", "problem_floors", "floored"]

# Orders of convergence for smooth solutions, (error of the solution in L2-type norms, eigenvalue
# error); None: spectral (exponential for analytic data, no algebraic order).
# fd5/fst5/pixel5: LeVeque, Finite Difference Methods for ODEs and PDEs, SIAM 2007, ch. 3 (order 2,
# eigenvalues too). fd9/fst9: compact 9-point scheme with corrected source, order 4 (Collatz 1960;
# LeVeque 2007, sec. 3.5), eigenvalues order 4 (solvers/fd.py). fem_p1/fem_p2: L2 error h^(p+1),
# eigenvalues h^(2p) (Strang & Fix, An Analysis of the Finite Element Method, 1973, ch. 3 and 6).
# cheb/disk_cheb: Trefethen, Spectral Methods in MATLAB, SIAM 2000 (spectral accuracy).
EXPECTED_ORDER = {
    "fd5": (2, 2), "fst5": (2, 2), "pixel5": (2, 2), "fd9": (4, 4), "fst9": (4, 4),
    "fem_p1": (2, 2), "fem_p2": (3, 4), "cheb": (None, None), "disk_cheb": (None, None),
}
ORDER_SLACK = 0.5     # observed within this of the expected order counts as "as expected" [common practice]


def expected_order(solver: str, kind: str):
    """The expected order of `solver` for a smooth problem of `kind` (None: spectral or unknown)."""
    pair = EXPECTED_ORDER.get(solver)
    if pair is None:
        return None
    return pair[1] if kind == "eigen" else pair[0]


def order_check(fits, frame):
    """`order_fits` with ``expected`` and ``verdict`` columns: ``as expected``, ``lower`` or ``higher``
    (beyond ORDER_SLACK), ``spectral`` (no algebraic order) or ``no fit``."""
    fits = fits.copy()
    kinds = dict(zip(frame["problem_id"], frame["kind"])) if "kind" in frame else {}
    exp, verdict = [], []
    for pid, solver, obs in zip(fits["problem_id"], fits["solver"], fits["order"]):
        e = expected_order(solver, kinds.get(pid, ""))
        exp.append(float("nan") if e is None else float(e))
        if solver in EXPECTED_ORDER and e is None:
            verdict.append("spectral")
        elif e is None or not _finite(obs):
            verdict.append("no fit" if e is not None else "unknown")
        elif obs < e - ORDER_SLACK:
            verdict.append("lower")
        elif obs > e + ORDER_SLACK:
            verdict.append("higher")
        else:
            verdict.append("as expected")
    fits["expected"] = exp
    fits["verdict"] = verdict
    return fits


def reference_floor(rec: dict, metric: str) -> float | None:
    """The accuracy of a record's reference in `metric`, when the reference is computed (None: exact).

    Eigen problems: the largest estimated relative error of the reference eigenvalues
    (``problem.reference.rel_estimate``) for the ``eig_rel_*`` metrics. Other problems: the
    estimated max error ``reference_error`` of a computed reference; for relative metrics divided
    by max |u| (``max_abs / rel_max`` of the record), an estimate of the same order.
    """
    prob = rec.get("problem") or {}
    if prob.get("kind") == "eigen":
        if not metric.startswith("eig_rel"):
            return None
        ref = prob.get("reference") or {}
        if ref.get("kind") != "computed":
            return None
        est = [float(v) for v in (ref.get("rel_estimate") or []) if _finite(v)]
        k = int(prob.get("n_eigs") or len(est) or 1)
        est = est[:k] if metric == "eig_rel_max" else est[:1]
        return max(est) if est and max(est) > 0 else None
    err = (prob.get("params") or {}).get("reference_error")
    if not _finite(err) or err <= 0:
        return None
    if metric in ("rel_l2", "rel_max"):
        m = rec.get("metrics") or {}
        scale = m.get("max_abs") / m.get("rel_max") if _finite(m.get("max_abs")) and _finite(m.get("rel_max")) \
            and m.get("rel_max") > 0 else None
        return float(err) / scale if scale else None
    return float(err)


def problem_floors(recs, frame, metric: str = "rel_l2", eigen_metric: str | None = None) -> dict:
    """{problem_id: the largest reference floor of its records} (problems with exact references absent)."""
    out: dict = {}
    for i, r in enumerate(recs):
        f = reference_floor(r, metric_key(r, metric, eigen_metric))
        if f is not None:
            pid = frame.at[i, "problem_id"]
            out[pid] = max(out.get(pid, 0.0), f)
    return out


def floored(error: float, floor: float | None, spec: str = ".2e") -> str:
    """An error as text; below the reference's accuracy ``< floor (reference accuracy)``."""
    if not _finite(error):
        return ""
    if floor is not None and error < floor:
        return f"< {floor:.2g} (reference accuracy)"
    return format(error, spec)


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


def _best_per_level(recs, frame, levels, metric, points, run_value):
    """[(level, best configuration of a method), ...]: each run's value is
    ``run_value(level, times, errors)``, aggregated by `_best_configs`."""
    pts = run_points(recs, frame, metric) if points is None else points
    return [(lv, b) for lv in levels
            for b in _best_configs(frame, _run_level(frame, pts, lambda t, e, lv=lv: run_value(lv, t, e)))]


def _first_at_or_below(tol, t, e) -> float:
    hit = t[e <= tol]
    return float(hit.min()) if len(hit) else math.inf


def _best_within(B, t, e) -> float:
    within = e[t <= B]
    return float(within.min()) if len(within) else math.inf


def time_to_tolerance(recs, frame, tolerances, metric: str = "rel_l2", points=None):
    """Long table: per problem, method and tolerance, the least time at which the method reached
    the tolerance (see the module docstring for the exact rule). ``time_s`` is inf when not
    reached."""
    import pandas as pd

    rows = [{"problem_id": b["problem_id"], "solver": b["solver"], "family": b["family"],
             "tolerance": float(tol), "time_s": b["value"], "reached": math.isfinite(b["value"]),
             "config": b["label"], "seeds_reached": b["seeds_at"], "seeds": b["seeds"],
             "mem_mb": b["mem_mb"], "unsupported": b["all_unsupported"]}
            for tol, b in _best_per_level(recs, frame, tolerances, metric, points, _first_at_or_below)]
    cols = ["problem_id", "solver", "family", "tolerance", "time_s", "reached", "config", "seeds_reached",
            "seeds", "mem_mb", "unsupported"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def accuracy_at_budget(recs, frame, budgets, metric: str = "rel_l2", points=None):
    """Long table: per problem, method and time budget, the least error the method reached at or
    before the budget (``error`` inf when nothing finished within it)."""
    import pandas as pd

    rows = [{"problem_id": b["problem_id"], "solver": b["solver"], "family": b["family"],
             "budget_s": float(B), "error": b["value"], "within": math.isfinite(b["value"]),
             "config": b["label"], "seeds_within": b["seeds_at"], "seeds": b["seeds"],
             "unsupported": b["all_unsupported"]}
            for B, b in _best_per_level(recs, frame, budgets, metric, points, _best_within)]
    cols = ["problem_id", "solver", "family", "budget_s", "error", "within", "config", "seeds_within",
            "seeds", "unsupported"]
    return _by_problem(pd.DataFrame(rows, columns=cols))


def best_errors(recs, frame, cfg: ReportConfig, points=None):
    """Per problem and method: accuracy-at-budget with an unlimited budget (the best any
    configuration reached, upper median over its seeds)."""
    pts = run_points(recs, frame, cfg.metric, cfg.eigen_metric) if points is None else points
    out = accuracy_at_budget(recs, frame, [math.inf], cfg.metric, points=pts)
    return out.drop(columns=["budget_s"])


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

