"""The report's tables: the all-runs table and every comparison table as a `Table` (numeric data
for CSV, a string display for md/tex/html), built from the rules in reading order."""
from __future__ import annotations

import dataclasses
import math

from lapbench.report.frame import _finite, _metric_name, _slug, natural_key
from lapbench.report.options import FAIL_STATUSES, FAMILY_ORDER, NOT_REACHED, ReportConfig
from lapbench.report.rules import (accuracy_at_budget, best_errors, floored, order_fits, problem_floors, run_points,
                                seed_summary, speedup_table, status_counts, time_to_tolerance)
from lapbench.report.summary import build_summary

__all__ = ["Table", "results_table", "runs_table", "build_tables"]


def results_table(df):
    """Problem x solver x resolution: status, errors, timings (s), dofs; sorted for reading.

    ``repeats`` is the number of timed repeats of an ``ok`` run (1: timed once) and ``t_spread``
    = (t_max - t_min) / t_total over those repeats (empty for a single run)."""
    import pandas as pd

    cols = ["problem_id", "solver", "resolution", "seed", "status", "rel_l2", "max_abs", "nodal_max",
            "t_setup", "t_solve", "t_total", "repeats", "t_spread", "t_evaluate", "dofs", "n_params",
            "peak_rss_mb", "reason"]
    if df.empty:
        return pd.DataFrame(columns=cols)
    df = df.copy()
    for c in cols + ["t_min", "t_max"]:
        if c not in df:
            df[c] = None
    ok = df["status"] == "ok"
    # how the time was measured: timed repeats of an ok run, and their spread relative to the median
    df["repeats"] = pd.Series([int(n) if k and _finite(n) else None for k, n in zip(ok, df["repeats"])],
                              index=df.index, dtype=object)
    df["t_spread"] = [(hi - lo) / t if k and _finite(lo) and _finite(hi) and _finite(t) and t > 0 else float("nan")
                      for k, lo, hi, t in zip(ok, df["t_min"], df["t_max"], df["t_total"])]
    out = df[cols].copy()
    out["_dofs"] = pd.to_numeric(out["dofs"], errors="coerce").fillna(0)
    out = out.sort_values(["problem_id", "solver", "_dofs", "resolution", "seed"]).drop(columns="_dofs")
    return out.reset_index(drop=True)


@dataclasses.dataclass
class Table:
    """One table of the report: `data` is written to CSV as is, `display` (strings) to md/tex/html."""

    key: str            # file name stem, e.g. time_to_tolerance__sine_k-1_l-1
    title: str
    caption: str
    data: object        # pandas DataFrame, numeric
    display: object     # pandas DataFrame of strings
    problem: str | None = None
    summary: object = None   # the report's summary (lapbench.report.summary.Summary) on the `summary` table


def _fmt(v, spec=".3g"):
    if v is None or (isinstance(v, float) and v != v):
        return ""
    if isinstance(v, float):
        return format(v, spec)
    return str(v)


def _cell_spec(column) -> str:
    """Number format of an all-runs column: times and memory to 3 digits, errors in e-notation."""
    return ".3g" if str(column).startswith("t_") or column == "peak_rss_mb" else ".3e"


def runs_table(runs) -> Table:
    """The all-runs table (`results_table`) as a `Table`, cells shown as in results.md."""
    import pandas as pd

    shown = pd.DataFrame({c: [_fmt(v, _cell_spec(c)) for v in runs[c]] for c in runs.columns})
    return Table("results", "Every run",
                 f"{len(runs)} cases, one row each; errors relative L2 (quadrature) and max abs; times in "
                 "seconds (t_total: the median of `repeats` timed runs for deterministic methods; "
                 "t_spread: (slowest - fastest) / median).", runs, shown)


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


def _cell_err(r, floor=None) -> str:
    """An accuracy cell; below the reference's own accuracy `floor`, that bound instead of a number."""
    if r["unsupported"]:
        return "unsupported"
    if not r["within"]:
        return "none within budget"
    return f"{floored(r['error'], floor)} ({r['config']}{_seed_note(r['seeds_within'], r['seeds'])})"


def _method_rank(df, solver) -> tuple:
    fam = df.loc[df["solver"] == solver, "family"].iloc[0]
    return (FAMILY_ORDER.index(fam) if fam in FAMILY_ORDER else len(FAMILY_ORDER), str(fam), solver)


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
    floors = problem_floors(recs, frame, cfg.metric, cfg.eigen_metric)   # computed references' accuracy
    summ = build_summary(recs, frame, cfg, tt, ab, sp)      # the answers first (lapbench.report.summary)
    tables.append(Table("summary", "Summary", "Per problem the fastest method to each tolerance and the most "
                        f"accurate within each time budget ({summ.metric}; method time).", summ.table, summ.table,
                        summary=summ))
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
                            **{f"{B:g} s": _cell_err(r, floors.get(pid)) for B, (_, r) in
                               zip(g["budget_s"], g.iterrows())}}
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
            rows.append({"problem": pid, **{m: (_cell_err(g.loc[m], floors.get(pid)) if m in g.index else "")
                                            for m in methods}})
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

