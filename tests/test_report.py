"""The report stage: exact checks of its rules on synthetic record sets, well-formed output
files, failures counted, and the CI study end to end from the command line.

Every expected number below is derived by hand from the synthetic records written in the test
(the rule is stated in bench/report/rules.py's module docstring); none is a measured value.
"""
from __future__ import annotations

import html.parser
import math
import re
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lapbench.config import ConfigError, build_params
from lapbench.records import SCHEMA_VERSION, problem_config_hash, write_record
from lapbench.report import (ReportConfig, _load, accuracy_at_budget, best_errors, natural_key, order_fits,
                          pareto_front, results_table, run_points, seed_summary, speedup_table, status_counts,
                          time_to_tolerance, upper_median, write_report)
from lapbench.report import rules as report_rules

INF = math.inf
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"   # PNG specification (ISO/IEC 15948), file signature


# ------------------------------------------------------------------------------------------------
# Synthetic records with the structure bench/run.py writes
# ------------------------------------------------------------------------------------------------
def make_record(problem="sine", pparams=None, solver="fd5", family="fd", status="ok", err=None, total=None,
                seed=0, config=None, history=None, dofs=None, h=None, params=None, kind="poisson",
                train_time=None, field=None, suite="synthetic", rss=50.0, domain=None, timing=None):
    pparams = {"k": 1, "l": 1} if pparams is None else pparams
    config = {"name": solver, **(config or {})}
    res = {k: v for k, v in config.items() if k in ("n", "width")}
    pid = problem + "(" + ",".join(f"{k}={v}" for k, v in sorted(pparams.items())) + ")" if pparams else problem
    timings = {}
    if total is not None:
        if family == "pinn":
            timings = {"setup": 0.0, "train": total}
        else:
            timings = {"setup": total / 2, "solve": total / 2}
    timings.update(total=sum(timings.values()), evaluate=0.01 if status == "ok" else None, monitor=0.0,
                   wall=(total or 0.0) + 0.1)
    rec = {
        "schema_version": SCHEMA_VERSION, "case_id": "x", "config_hash": "x", "created": "2026-12-01T00:00:00",
        "suite": suite,
        "problem": {"name": problem, "kind": kind, "domain": domain or {"kind": "rectangle"}, "params": pparams,
                    "source": "synthetic", "label": problem, "id": pid,
                    "config": {"name": problem, **pparams, **({"domain": domain} if domain else {})}},
        "solver": {"name": solver, "family": family, "config": config, "resolution": res,
                   "resolution_label": ",".join(f"{k}={v}" for k, v in res.items()),
                   "deterministic": family != "pinn"},
        "seed": seed, "threads": 1, "threads_requested": 1, "cores_available": 2,
        "budget": {"time_limit": 600.0, "train_time": train_time, "memory_limit_mb": 8192.0},
        "status": status, "reason": "" if status == "ok" else f"synthetic {status}",
        "metrics": {"rel_l2": err, "max_abs": err} if err is not None else {},
        "timings": timings,
        "cost": {"dofs": dofs, "params": params, "iterations": None, "h": h, "peak_rss_mb": rss},
        "info": {}, "history": history or [],
        "environment": {"cpu": "synthetic CPU", "foreign_load": 0.0},
    }
    if field is not None:
        rec["field"] = field
    if timing is not None:
        rec["timing"] = timing
    return rec


def write_all(folder: Path, records) -> Path:
    for i, r in enumerate(records):
        write_record(folder / "runs" / f"r{i:03d}.json", r)
    return folder


def hist(*pairs):
    """History checkpoints [(time, rel_l2), ...] as bench/run.py records them."""
    return [{"step": 100 * (i + 1), "time": t, "loss": 1.0, "rel_l2": e, "max_abs": e} for i, (t, e) in enumerate(pairs)]


def classical_ladder(problem="sine", pparams=None, solver="fd5"):
    """fd5 on three resolutions: (time, error) = (0.01, 4e-3), (0.02, 1e-3), (0.05, 2.5e-4)."""
    return [make_record(problem, pparams, solver, "fd", err=e, total=t, config={"n": n}, dofs=n * n, h=1 / n)
            for n, t, e in ((16, 0.01, 4e-3), (32, 0.02, 1e-3), (64, 0.05, 2.5e-4))]


def pinn_seeds(problem="sine", pparams=None):
    """One learned configuration, three seeds; seed 2 diverged after a checkpoint at 1e-3."""
    cfg = {"width": 32, "steps": 1000}
    return [
        make_record(problem, pparams, "pinn_x", "pinn", err=8e-3, total=3.5, seed=0, config=cfg, params=1000,
                    history=hist((1, 1e-1), (2, 5e-3), (3, 8e-3))),
        make_record(problem, pparams, "pinn_x", "pinn", err=4e-3, total=3.2, seed=1, config=cfg, params=1000,
                    history=hist((1, 2e-2), (2, 1e-2), (3, 4e-3))),
        make_record(problem, pparams, "pinn_x", "pinn", status="diverged", seed=2, config=cfg, params=1000,
                    total=1.5, history=hist((1, 1e-3))),
    ]


@pytest.fixture
def synthetic(tmp_path):
    recs = classical_ladder() + pinn_seeds()
    write_all(tmp_path, recs)
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)], "formats": ["md"]}, prefix="report")
    return _load(cfg)


def cell(df, solver, col, value):
    rows = df[(df["solver"] == solver) & (df[col] == value)]
    assert len(rows) == 1, rows
    return rows.iloc[0]


# ------------------------------------------------------------------------------------------------
# The rules, exactly
# ------------------------------------------------------------------------------------------------
def test_pareto_front_keeps_exactly_the_non_dominated_points():
    pts = pd.DataFrame({"time": [1, 2, 2, 3, 0.5, 4, 4, 5], "error": [1e-1, 1e-2, 5e-3, 1e-2, 1.0, 1e-4, 1e-4, 1e-3]})
    front = pareto_front(pts)
    # by hand: (0.5, 1) fastest; (1, 1e-1); at t=2 the better of the tie (5e-3); (3, 1e-2) and
    # (5, 1e-3) are dominated; (4, 1e-4) once
    assert list(zip(front["time"], front["error"])) == [(0.5, 1.0), (1, 1e-1), (2, 5e-3), (4, 1e-4)]
    assert pareto_front(pts.iloc[0:0]).empty


def test_natural_order_of_problems():
    ids = ["sine(k=16,l=16)", "peak(alpha=1e4)", "sine(k=2,l=2)", "peak(alpha=1000.0)", "sine(k=8,l=8)"]
    assert sorted(ids, key=natural_key) == ["peak(alpha=1000.0)", "peak(alpha=1e4)", "sine(k=2,l=2)",
                                            "sine(k=8,l=8)", "sine(k=16,l=16)"]


def test_upper_median_is_the_worse_middle_value():
    assert upper_median([3.0, 1.0, 2.0]) == 2.0
    assert upper_median([1.0, 2.0]) == 2.0            # even count: the worse (larger) middle value
    assert upper_median([1.0, INF, 2.0]) == 2.0       # one failed seed of three: still reached
    assert upper_median([1.0, INF]) == INF            # one failed seed of two: not reached


def test_time_to_tolerance_first_checkpoint_at_or_below_no_interpolation(synthetic):
    recs, frame = synthetic
    tt = time_to_tolerance(recs, frame, [1e-2, 5e-3, 1e-3, 1e-4])
    # classical: the least time of a run whose error is <= tol (1e-3 is met exactly by n=32)
    assert cell(tt, "fd5", "tolerance", 1e-2)[["time_s", "config"]].tolist() == [0.01, "n=16"]
    assert cell(tt, "fd5", "tolerance", 1e-3)[["time_s", "config"]].tolist() == [0.02, "n=32"]
    assert cell(tt, "fd5", "tolerance", 1e-4)["time_s"] == INF
    assert not cell(tt, "fd5", "tolerance", 1e-4)["reached"]
    # learned, seeds 0/1/2 reach 1e-2 at t = 2 (5e-3), 2 (exactly 1e-2), never (diverged): median 2
    r = cell(tt, "pinn_x", "tolerance", 1e-2)
    assert (r["time_s"], r["seeds_reached"], r["seeds"]) == (2.0, 2, 3)
    # 5e-3: seed 0 at t=2 (exactly), seed 1 first at t=3 (4e-3); interpolating between (2, 1e-2)
    # and (3, 4e-3) would give a time below 3, the rule says 3
    assert cell(tt, "pinn_x", "tolerance", 5e-3)["time_s"] == 3.0
    # 1e-3: only the diverged seed had a checkpoint there; a run that did not end ok has no points
    assert cell(tt, "pinn_x", "tolerance", 1e-3)["time_s"] == INF


def test_accuracy_at_budget_best_error_within_budget(synthetic):
    recs, frame = synthetic
    ab = accuracy_at_budget(recs, frame, [0.001, 0.015, 1.5, 2.5, 100.0])
    assert cell(ab, "fd5", "budget_s", 0.001)["error"] == INF            # nothing finishes in 1 ms
    assert cell(ab, "fd5", "budget_s", 0.015)[["error", "config"]].tolist() == [4e-3, "n=16"]
    assert cell(ab, "fd5", "budget_s", 1.5)[["error", "config"]].tolist() == [2.5e-4, "n=64"]
    # learned seeds: least checkpoint error at or before B; seed 2 (diverged) is infinite
    assert cell(ab, "pinn_x", "budget_s", 1.5)["error"] == 1e-1       # sorted [2e-2, 1e-1, inf]
    assert cell(ab, "pinn_x", "budget_s", 2.5)["error"] == 1e-2       # sorted [5e-3, 1e-2, inf]
    assert cell(ab, "pinn_x", "budget_s", 100.0)["error"] == 5e-3     # sorted [4e-3, 5e-3, inf]


def test_time_to_tolerance_and_accuracy_at_budget_are_dual(tmp_path):
    """A method reaches tol within B exactly when its accuracy at B is <= tol (random run sets)."""
    rng = np.random.default_rng(7)
    recs = []
    for seed in range(4):
        for n in (8, 16):
            pairs = sorted(zip(np.round(rng.uniform(0.1, 10, 5), 2), 10.0 ** -rng.uniform(0, 5, 5)))
            status = "ok" if rng.uniform() < 0.8 else "timeout"
            recs.append(make_record(solver="pinn_x", family="pinn", err=float(10 ** -rng.uniform(0, 5)),
                                    total=10.5, seed=seed, config={"width": n}, status=status,
                                    history=hist(*pairs)))
    write_all(tmp_path, recs)
    recs, frame = _load(build_params(ReportConfig, {"results": [str(tmp_path)]}))
    tols = [1e-1, 1e-2, 1e-3, 1e-4]
    budgets = [0.5, 1.0, 3.0, 6.0, 10.0, 20.0]
    tt = time_to_tolerance(recs, frame, tols)
    ab = accuracy_at_budget(recs, frame, budgets)
    checked = 0
    for tol in tols:
        for B in budgets:
            t = tt[tt["tolerance"] == tol]["time_s"].iloc[0]
            e = ab[ab["budget_s"] == B]["error"].iloc[0]
            assert (t <= B) == (e <= tol), (tol, B, t, e)
            checked += t <= B
    assert 0 < checked < len(tols) * len(budgets)      # both outcomes occur: the test can fail


def test_speedup_names_the_faster_side(tmp_path):
    p2 = {"k": 8, "l": 8}
    recs = classical_ladder() + pinn_seeds()
    # second problem: classical is slow, the learned method wins at 1e-2
    recs += [make_record("sine", p2, "fd5", "fd", err=1e-1, total=10.0, config={"n": 16}, dofs=256, h=1 / 16),
             make_record("sine", p2, "fd5", "fd", err=1e-3, total=100.0, config={"n": 32}, dofs=1024, h=1 / 32)]
    recs += pinn_seeds("sine", p2)
    write_all(tmp_path, recs)
    recs, frame = _load(build_params(ReportConfig, {"results": [str(tmp_path)]}))
    sp = speedup_table(recs, frame, [1e-2])
    a = sp[(sp["problem_id"] == "sine(k=1,l=1)") & (sp["level"] == "tolerance")].iloc[0]
    assert (a["winner"], a["classical_time_s"], a["learned_time_s"]) == ("classical", 0.01, 2.0)
    assert a["speedup"] == pytest.approx(200.0, rel=1e-12)           # 2 / 0.01
    # best learned error: min over configurations of the seed median with unlimited budget = 5e-3;
    # classical reaches 5e-3 with n=16 (4e-3) at 0.01 s, learned first at 3 s
    b = sp[(sp["problem_id"] == "sine(k=1,l=1)") & (sp["level"] == "best learned error")].iloc[0]
    assert (b["error"], b["classical_time_s"], b["learned_time_s"]) == (5e-3, 0.01, 3.0)
    # best error per problem (unlimited budget), problems in natural order: k=1 before k=8
    best = best_errors(recs, frame, build_params(ReportConfig, {"results": [str(tmp_path)]}))
    assert list(best[best["solver"] == "fd5"]["error"]) == [2.5e-4, 1e-3]
    assert list(best[best["solver"] == "pinn_x"]["error"]) == [5e-3, 5e-3]
    c = sp[(sp["problem_id"] == "sine(k=8,l=8)") & (sp["level"] == "tolerance")].iloc[0]
    assert (c["winner"], c["classical_time_s"], c["learned_time_s"]) == ("learned", 100.0, 2.0)
    assert c["speedup"] == pytest.approx(50.0, rel=1e-12)            # 100 / 2


def test_order_fit_exact_power_law(tmp_path):
    # e = 3 h^2 with dofs = n^2: slope 2 against h and -1 against dofs, exactly (closed form)
    recs = [make_record(err=3.0 / n ** 2, total=0.01 * n, config={"n": n}, dofs=n * n, h=1.0 / n)
            for n in (8, 16, 32, 64, 128)]
    write_all(tmp_path, recs)
    _, frame = _load(build_params(ReportConfig, {"results": [str(tmp_path)]}))
    f = order_fits(frame, floor=1e-11, points=0).iloc[0]
    assert f["order"] == pytest.approx(2.0, abs=1e-12)
    assert f["slope_dofs"] == pytest.approx(-1.0, abs=1e-12)
    assert f["intercept_dofs"] == pytest.approx(math.log(3.0), abs=1e-12)
    assert (f["points"], f["h_max"], f["h_min"]) == (5, 1 / 8, 1 / 128)


def test_order_fit_range_excludes_bump_plateau_and_floor(tmp_path):
    # e = 3 h^4 on n = 8..64 (closed form), a coarse-grid bump at n=4 (lower than n=8), a rising
    # round-off plateau at n=128 and a value below the floor at n=256
    ladder = {4: 1e-4, 8: 3 / 8 ** 4, 16: 3 / 16 ** 4, 32: 3 / 32 ** 4, 64: 3 / 64 ** 4, 128: 5e-7, 256: 1e-13}
    recs = [make_record(solver="fd9", err=e, total=0.001 * n, config={"n": n}, dofs=n * n, h=1.0 / n)
            for n, e in ladder.items()]
    write_all(tmp_path, recs)
    _, frame = _load(build_params(ReportConfig, {"results": [str(tmp_path)]}))
    f = order_fits(frame, floor=1e-11, points=0).iloc[0]
    assert f["order"] == pytest.approx(4.0, abs=1e-10)
    assert (f["points"], f["h_max"], f["h_min"]) == (4, 1 / 8, 1 / 64)
    for phrase in ("floor", "stopped decreasing", "pre-asymptotic"):
        assert phrase in f["note"]
    f3 = order_fits(frame, floor=1e-11, points=3).iloc[0]            # the finest three of the range
    assert (f3["points"], f3["h_max"], f3["h_min"]) == (3, 1 / 16, 1 / 64)
    assert f3["order"] == pytest.approx(4.0, abs=1e-10)


def test_failures_are_counted_never_dropped(tmp_path):
    recs = classical_ladder() + pinn_seeds()
    recs += [make_record(solver="fd5", status=s, config={"n": 4096}, seed=0) for s in
             ("timeout", "out_of_memory", "crashed", "failed")]
    recs += [make_record(solver="cheb", family="spectral", status="unsupported", config={"n": 32})]
    write_all(tmp_path, recs)
    recs, frame = _load(build_params(ReportConfig, {"results": [str(tmp_path)]}))
    counts = status_counts(frame).set_index("solver")
    assert counts.loc["fd5", ["runs", "ok", "timeout", "out_of_memory", "crashed", "failed"]].tolist() == \
        [7, 3, 1, 1, 1, 1]
    assert counts.loc["pinn_x", ["runs", "ok", "diverged"]].tolist() == [3, 2, 1]
    assert counts.loc["cheb", ["runs", "unsupported"]].tolist() == [1, 1]
    assert counts.loc["all", "runs"] == len(recs) == 11          # 3 fd5 ok + 4 failed, 3 learned, 1 cheb
    seeds = seed_summary(frame).iloc[0]
    assert (seeds["seeds"], seeds["ok"], seeds["diverged"]) == (3, 2, 1)
    assert (seeds["error_min"], seeds["error_max"]) == (4e-3, 8e-3)
    # the failed fd5 configuration (n=4096) is not reached; the others still are
    tt = time_to_tolerance(recs, frame, [1e-2])
    assert cell(tt, "fd5", "tolerance", 1e-2)["time_s"] == 0.01
    assert bool(cell(tt, "cheb", "tolerance", 1e-2)["unsupported"])
    assert run_points(recs, frame)["row"].map(lambda i: recs[i]["status"]).eq("ok").all()


def test_eigen_records_are_judged_by_the_eigen_metric(tmp_path):
    recs = [make_record("square_eigs", {}, "fd5", "fd", kind="eigen", total=t, config={"n": n}, dofs=n * n)
            for n, t in ((16, 0.1), (32, 0.4))]
    recs[0]["metrics"] = {"eig_rel_max": 3e-3, "eig_rel_1": 1e-3}
    recs[1]["metrics"] = {"eig_rel_max": 8e-4, "eig_rel_1": 2e-4}
    write_all(tmp_path, recs)
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)]})       # eigen_metric: eig_rel_max
    recs, frame = _load(cfg)
    assert list(frame["error"]) == [3e-3, 8e-4]
    assert cell(time_to_tolerance(recs, frame, [1e-3]), "fd5", "tolerance", 1e-3)["time_s"] == 0.4
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)], "eigen_metric": "eig_rel_1"})
    assert list(_load(cfg)[1]["error"]) == [1e-3, 2e-4]


def test_one_id_with_two_problem_configs_is_two_problems(tmp_path):
    # the same expression on a disk and on the unit square: one id string, two problems
    disk = {"kind": "disk", "cx": 0.0, "cy": 0.0, "radius": 1.0}
    recs = [make_record("expr", {"u": "x*y"}, err=1e-2, total=0.01, config={"n": 16}, dofs=256, h=1 / 16,
                        domain=disk),
            make_record("expr", {"u": "x*y"}, err=1e-4, total=0.01, config={"n": 16}, dofs=256, h=1 / 16)]
    assert recs[0]["problem"]["id"] == recs[1]["problem"]["id"] == "expr(u=x*y)"
    write_all(tmp_path / "res", recs)
    cfg = build_params(ReportConfig, {"results": [str(tmp_path / "res")], "name": "t", "formats": ["md", "csv"],
                                      "figures": {"kinds": []}}, prefix="report")
    recs, frame = _load(cfg)
    # the id of each problem: its id string, then " #" and the first 6 digits of its config's hash
    # (lapbench.records.to_frame's rule for ids shared by different configs)
    pid = {r["problem"]["domain"]["kind"]: "expr(u=x*y) #" + problem_config_hash(r["problem"]["config"])[:6]
           for r in recs}
    assert pid["disk"] != pid["rectangle"]
    best = best_errors(recs, frame, cfg).set_index("problem_id")["error"]
    # each problem keeps its own error (by construction: 1e-2 on the disk, 1e-4 on the square); one
    # median over both would be a single row holding the upper median 1e-2
    assert best.to_dict() == {pid["disk"]: 1e-2, pid["rectangle"]: 1e-4}
    counts = status_counts(frame)
    assert sorted(counts["problem_id"]) == sorted([pid["disk"], pid["rectangle"], "all"])
    out, _ = write_report(cfg, tmp_path / "reports")
    md = (out / "report.md").read_text()
    assert md.count("## Problem expr(u=x*y) #") == 2
    assert len(list((out / "csv").glob("time_to_tolerance__*.csv"))) == 2


# every timed repeat of a deterministic run (setup + solve, seconds), made up for the test
REPEATS = [0.010, 0.012, 0.011, 0.013, 0.020]
TIMING = {"repeats": REPEATS, "min": 0.010, "median": 0.012, "max": 0.020, "statistic": "median"}


def timed_records():
    """fd5 timed by five repeats (median 0.012 s), a learned run timed once, a failed fd5 run."""
    return [make_record(err=1e-3, total=0.012, config={"n": 32}, dofs=1024, h=1 / 32, timing=TIMING),
            make_record(solver="pinn_x", family="pinn", err=4e-3, total=3.2, config={"width": 32}, params=1000,
                        history=hist((1, 1e-2), (3.2, 4e-3)),
                        timing={"repeats": [3.2], "statistic": "single"}),
            make_record(status="failed", total=0.5, config={"n": 64})]


def test_results_table_holds_repeats_and_spread(tmp_path):
    write_all(tmp_path / "res", timed_records())
    cfg = build_params(ReportConfig, {"results": [str(tmp_path / "res")], "name": "t",
                                      "formats": ["md", "csv", "tex", "html"], "figures": {"kinds": []}},
                       prefix="report")
    _, frame = _load(cfg)
    runs = results_table(frame).set_index(["solver", "status"])
    fd5 = runs.loc[("fd5", "ok")]
    assert fd5["t_total"] == 0.012                      # the median repeat (by construction)
    assert fd5["repeats"] == 5                          # len(REPEATS)
    assert fd5["t_spread"] == pytest.approx((0.020 - 0.010) / 0.012, rel=1e-12)   # (max - min) / median = 0.8333
    pinn = runs.loc[("pinn_x", "ok")]
    assert pinn["repeats"] == 1 and math.isnan(pinn["t_spread"])   # timed once: no spread
    failed = runs.loc[("fd5", "failed")]
    assert failed["repeats"] is None and math.isnan(failed["t_spread"])   # no measured time
    out, _ = write_report(cfg, tmp_path / "reports")
    csv = pd.read_csv(out / "results.csv").set_index(["solver", "status"])
    assert csv.loc[("fd5", "ok"), "repeats"] == 5
    assert csv.loc[("fd5", "ok"), "t_spread"] == pytest.approx(10 / 12, rel=1e-12)
    assert math.isnan(csv.loc[("fd5", "failed"), "repeats"])
    lines = [[c.strip() for c in ln.strip("|").split("|")]
             for ln in (out / "results.md").read_text().splitlines() if ln.startswith("| ")]
    header, rows = lines[0], lines[2:]           # lines[1] is the |---| rule
    row = [r for r in rows if r[1] == "fd5" and r[4] == "ok"][0]
    assert (row[header.index("repeats")], row[header.index("t_spread")]) == ("5", "0.833")   # 10/12 to 3 digits
    [(ncol, theader, body)] = parse_tabulars((out / "results.tex").read_text())
    trow = [r for r in body if r[1] == "fd5" and r[4] == "ok"][0]
    assert (trow[theader.index("repeats")], trow[theader.index("t\\_spread")]) == ("5", "0.833")
    page = (out / "results.html").read_text()
    assert "<th>repeats</th><th>t_spread</th>" in page and "<td>5</td><td>0.833</td>" in page


def test_rules_text_names_the_timing_statistic(tmp_path):
    doc = " ".join(report_rules.__doc__.split())
    assert "a warm-up, then N timed repeats" in doc and "its time is the median repeat" in doc and "t_spread" in doc
    write_all(tmp_path / "res", timed_records())
    cfg = build_params(ReportConfig, {"results": [str(tmp_path / "res")], "name": "t", "formats": ["md", "html"],
                                      "figures": {"kinds": []}}, prefix="report")
    out, _ = write_report(cfg, tmp_path / "reports")
    # the only repeated run has len(REPEATS) = 5 repeats
    said = "the median of N timed repeats after a warm-up (5 repeats in these runs)"
    md = (out / "report.md").read_text()
    rules = md.split("## How to read this report", 1)[1].split("\n## ", 1)[0]
    assert said in rules
    assert said in (out / "report.html").read_text()


# ------------------------------------------------------------------------------------------------
# Output files
# ------------------------------------------------------------------------------------------------
def parse_tabulars(tex: str):
    """Structural parse: every tabular's column count, header and body rows (cells split on '&'
    not preceded by a backslash); asserts booktabs rules in order and cell counts per row."""
    out = []
    for spec, body in re.findall(r"\\begin\{tabular\}\{([^}]*)\}(.*?)\\end\{tabular\}", tex, re.S):
        ncol = len(re.findall(r"[lcrp]", spec))
        lines = [ln.strip() for ln in body.strip().splitlines() if ln.strip()]
        assert lines[0] == r"\toprule" and lines[2] == r"\midrule" and lines[-1] == r"\bottomrule", lines
        rows = []
        for ln in [lines[1]] + lines[3:-1]:
            assert ln.endswith(r"\\"), ln
            cells = re.split(r"(?<!\\)&", ln[:-2])
            assert len(cells) == ncol, (ln, ncol)
            rows.append([c.strip() for c in cells])
        assert tex.count("{") - tex.count(r"\{") == tex.count("}") - tex.count(r"\}")
        out.append((ncol, rows[0], rows[1:]))
    return out


class _Refs(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs, self.imgs, self.ids = [], 0, set()

    def handle_starttag(self, tag, attrs):
        for k, v in attrs:
            if k in ("src", "href") and v is not None:
                self.refs.append(v)
            if k == "id":
                self.ids.add(v)
        self.imgs += tag == "img"

    def resolves(self, ref, folder):
        """Embedded, a link into the page (an existing id), or an existing file beside it."""
        return (ref.startswith("data:image/") or (ref.startswith("#") and ref[1:] in self.ids)
                or (folder / ref).is_file())


def field_of(n=41):
    x = np.linspace(0, 1, n)
    X, Y = np.meshgrid(x, x, indexing="ij")
    e = (1e-4 * np.sin(np.pi * X) * np.sin(2 * np.pi * Y)).ravel().tolist()
    e[0] = None                                     # a point outside the domain
    return {"x": x.tolist(), "y": x.tolist(), "error": e}


def test_report_files_are_produced_and_well_formed(tmp_path):
    recs = classical_ladder() + pinn_seeds()
    recs[1]["field"] = field_of()
    recs += [make_record(solver="fd5", status="timeout", config={"n": 4096})]
    write_all(tmp_path / "res", recs)
    cfg = build_params(ReportConfig, {"results": [str(tmp_path / "res")], "name": "t",
                                      "formats": ["md", "csv", "tex", "html"],
                                      "tolerances": [1e-2, 1e-3, 1e-4], "budgets": [0.015, 1.5]}, prefix="report")
    out, runs = write_report(cfg, tmp_path / "reports")
    assert out == tmp_path / "reports" / "t" and len(runs) == len(recs)
    # LaTeX: every table file holds one tabular; time-to-tolerance has a header and one row per method
    tts = parse_tabulars((out / "tables" / "time_to_tolerance__sine-k-1-l-1.tex").read_text())
    assert len(tts) == 1
    ncol, header, body = tts[0]
    assert header == ["method", "family", "tol 1e-02", "tol 1e-03", "tol 1e-04"]
    assert [r[0] for r in body] == ["fd5", "pinn\\_x"]
    assert body[0][3].startswith("0.02 (n=32") and body[0][4] == "not reached"
    full = parse_tabulars((out / "tables.tex").read_text())
    assert len(full) == len(list((out / "tables").glob("*.tex")))
    assert "\\usepackage{booktabs}" in (out / "tables.tex").read_text()
    status = [t for t in full if t[1][:3] == ["problem", "method", "runs"]][0]
    fd5 = [r for r in status[2] if r[1] == "fd5"][0]
    assert fd5[2:5] == ["4", "3", "0"] and fd5[status[1].index("timeout")] == "1"
    # CSV: every table, readable, numbers intact
    csvs = {p.stem: pd.read_csv(p) for p in (out / "csv").glob("*.csv")}
    assert set(csvs) == {p.stem for p in (out / "tables").glob("*.tex")}
    t = csvs["time_to_tolerance__sine-k-1-l-1"]
    assert t[(t["solver"] == "fd5") & (t["tolerance"] == 1e-3)]["time_s"].item() == 0.02
    assert pd.read_csv(out / "results.csv").shape[0] == len(recs)
    # figures: non-empty PNG and well-formed SVG for each kind, including the error field
    pngs = sorted((out / "figures").glob("*.png"))
    stems = {p.stem.split("__")[0] for p in pngs}
    assert stems == {"error_vs_time", "error_vs_size", "training", "error_field"}
    for p in pngs:
        data = p.read_bytes()
        assert data[:8] == PNG_MAGIC and len(data) > 5000
        ET.parse(p.with_suffix(".svg"))
    # HTML: self-contained, every reference is embedded or an existing file
    page = (out / "report.html").read_text()
    refs = _Refs()
    refs.feed(page)
    assert refs.imgs == len(pngs)
    for ref in refs.refs:
        assert refs.resolves(ref, out), ref
    # Markdown: the images it links exist, the failure is visible
    md = (out / "report.md").read_text()
    for ref in re.findall(r"!\[[^\]]*\]\(([^)]+)\)", md):
        assert (out / ref).is_file(), ref
    assert "| sine(k=1,l=1) | fd5 | 4 | 3 | 0 | 1 | 0 | 0 | 0 | 0 | 0 |" in md   # runs, ok, failed, timeout...


def test_report_config_errors_name_the_field():
    with pytest.raises(ConfigError, match=r"^`report.formats\[0\]` must be one of md, csv, tex, html; got 'pdf'"):
        build_params(ReportConfig, {"formats": ["pdf"]}, prefix="report")
    with pytest.raises(ConfigError, match=r"^`report.tolerances\[1\]` must be positive, got -1"):
        build_params(ReportConfig, {"tolerances": [1e-2, -1]}, prefix="report")
    with pytest.raises(ConfigError, match=r"^`report.figures.kinds\[0\]` must be one of pareto, order"):
        build_params(ReportConfig, {"figures": {"kinds": ["pie"]}}, prefix="report")
    with pytest.raises(ConfigError, match=r"^`report.fit.points` must be 0 \(all\) or at least 2, got 1"):
        build_params(ReportConfig, {"fit": {"points": 1}}, prefix="report")
    with pytest.raises(ConfigError, match=r"^`report.metric` must be one of rel_l2"):
        build_params(ReportConfig, {"metric": "l3"}, prefix="report")


# ------------------------------------------------------------------------------------------------
# Command line
# ------------------------------------------------------------------------------------------------
def _cli(lapbench_cmd, *args, cwd=None):
    return subprocess.run(lapbench_cmd + list(args), capture_output=True, text=True, cwd=cwd, timeout=900)


def test_cli_bad_report_option_exits_2_and_writes_nothing(lapbench_cmd, tmp_path):
    r = _cli(lapbench_cmd, "report", f"results_dir={tmp_path}", "report.formats=[md,pdf]")
    assert r.returncode == 2
    assert r.stderr.strip().splitlines()[-1] == \
        "lapbench: error: `report.formats[1]` must be one of md, csv, tex, html; got 'pdf'"
    assert not (tmp_path / "reports").exists()
    r = _cli(lapbench_cmd, "report", f"results_dir={tmp_path}", f"report.results=[{tmp_path / 'nowhere'}]")
    assert r.returncode == 2
    assert r.stderr.strip().splitlines()[-1].startswith(
        f"lapbench: error: `report.results[0]` must be an existing results folder, got '{tmp_path / 'nowhere'}'")
    assert not (tmp_path / "reports").exists()


def test_cli_study_ci_end_to_end(lapbench_cmd, tmp_path):
    r = _cli(lapbench_cmd, "run", "suite=study_ci", f"results_dir={tmp_path}")
    assert r.returncode == 0, r.stderr[-2000:]
    runs = list((tmp_path / "runs").glob("*.json"))
    assert runs
    r = _cli(lapbench_cmd, "report", f"results_dir={tmp_path}", "report.suite=study_ci",
             "report.formats=[md,csv,tex,html]", "report.figures.formats=[png]")
    assert r.returncode == 0, r.stderr[-2000:]
    out = tmp_path / "reports" / "study_ci"
    for name in ("report.md", "report.html", "tables.tex", "results.csv", "csv/status_counts.csv"):
        assert (out / name).is_file(), name
    counts = pd.read_csv(out / "csv" / "status_counts.csv")
    assert counts[counts["solver"] == "all"]["runs"].item() == len(runs)
    for ncol, header, body in parse_tabulars((out / "tables.tex").read_text()):
        assert body and ncol == len(header)
    assert list((out / "figures").glob("error_vs_time__*.png"))
    assert list((out / "figures").glob("error_field*.png"))
    refs = _Refs()
    refs.feed((out / "report.html").read_text())
    assert all(refs.resolves(ref, out) for ref in refs.refs)
