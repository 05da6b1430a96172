"""Finite-element performance: `python -m lapbench.perf.fem_scaling [--quick] [--max-level L]`.

Measures, on this machine, 1 thread, best of 3 runs up to level 8, the `fem_p1` solver on the L-shape corner problem under
uniform refinement (levels 4 .. 10: about 500 to 2 million unknowns), through the solver's own
phase timings (`setup` = mesh, basis, vectorised scikit-fem assembly, boundary condensation;
`solve` = smoothed-aggregation AMG + CG to relative residual 1e-10):
1. time against dofs and the fitted exponent of (setup + solve) against dofs over the levels
   with at least 1e4 dofs (target: at most 1.2 with AMG);
2. the same for the sparse direct solve (SuperLU, minimum-degree ordering) up to level 8,
   for comparison;
3. the relative L2 error at each level (the r^(2/3) corner limits it to order 4/3).
Writes results/perf/fem_scaling.json.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

FIT_MIN_DOFS = 1e4   # below this, fixed per-call overheads dominate and bend the fit


def run_level(problem, eval_set, level: int, method: str) -> dict:
    from lapbench.metrics import solution_errors
    from lapbench.solvers.base import RunContext
    from lapbench.solvers.fem import FEMP1

    ctx = RunContext()
    t0 = time.perf_counter()
    sol = FEMP1(level=level, linear_solver=method).solve(problem.public(), ctx=ctx)
    wall = time.perf_counter() - t0
    err = solution_errors(problem, sol, eval_set)["rel_l2"]
    return {"level": level, "method": method, "dofs": sol.info["dofs"], "elements": sol.info["elements"],
            "setup_s": ctx.timings["setup"], "solve_s": ctx.timings["solve"],
            "total_s": ctx.timings["setup"] + ctx.timings["solve"], "wall_s": wall,
            "iterations": sol.info.get("iterations"), "rel_l2": err}


def fit(rows, key) -> float | None:
    big = [r for r in rows if r["dofs"] >= FIT_MIN_DOFS]
    if len(big) < 2:
        return None
    return float(np.polyfit(np.log([r["dofs"] for r in big]), np.log([r[key] for r in big]), 1)[0])


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="levels 3..7 only (smoke run)")
    ap.add_argument("--max-level", type=int, default=10, help="finest level (10: ~2.1e6 dofs)")
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits
    from tqdm import tqdm

    from lapbench.problems import make_problem

    problem = make_problem({"name": "lshape", "eval_level": 24})
    eval_set = problem.eval_set(0)
    top = 7 if args.quick else args.max_level
    levels = list(range(3 if args.quick else 4, top + 1))
    out: dict = {"threads": args.threads, "cpu_count": os.cpu_count(), "problem": "lshape",
                 "load_average_start": os.getloadavg()}
    with threadpool_limits(args.threads):
        for method in ("amg", "direct"):   # warm-up: imports (pyamg, scikit-fem) out of the timings
            run_level(problem, eval_set, 2, method)
        for method, last in (("amg", top), ("direct", min(top, 8))):
            rows = []
            bar = tqdm([lv for lv in levels if lv <= last], desc=f"fem_p1 {method}", file=sys.stderr,
                       disable=not sys.stderr.isatty())
            for level in bar:
                # best of 3 below ~2e5 dofs: short runs are the ones other processes distort most
                reps = 3 if level <= 8 else 1
                r = min((run_level(problem, eval_set, level, method) for _ in range(reps)),
                        key=lambda row: row["total_s"])
                rows.append(r)
                print(f"  fem_p1 {method:6s} level {level:2d}: {r['dofs']:9d} dofs  setup {r['setup_s']:7.3f} s"
                      f"  solve {r['solve_s']:7.3f} s  ({r['iterations']} it)  rel_l2 {r['rel_l2']:.3e}",
                      flush=True)
            out[method] = {"rows": rows, "exponent_total": fit(rows, "total_s"),
                           "exponent_setup": fit(rows, "setup_s"), "exponent_solve": fit(rows, "solve_s")}
            e = out[method]
            fmt = lambda v: "n/a" if v is None else f"{v:.3f}"  # noqa: E731
            print(f"fem_p1 {method}: fitted exponent of setup+solve time against dofs "
                  f"{fmt(e['exponent_total'])} (setup {fmt(e['exponent_setup'])}, solve "
                  f"{fmt(e['exponent_solve'])}; dofs >= {FIT_MIN_DOFS:g}; target <= 1.2 with AMG)", flush=True)
    out["load_average_end"] = os.getloadavg()
    path = Path("results/perf/fem_scaling.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
