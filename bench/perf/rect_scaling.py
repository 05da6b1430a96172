"""Rectangle solver performance: `python -m bench.perf.rect_scaling [--quick]`.

Measures, in one run on this machine (medians of repeats, 1 thread unless --threads):
1. the sine-transform solver (fst5) at 2048 x 2048 unknowns against the time of the two
   scipy.fft.dstn calls it needs (target: within 1.5x);
2. the fitted exponent of AMG-CG (fd5, linear_solver=amg) solve time against N from 256^2 to
   2048^2 (target: at most 1.15), next to SuperLU with minimum-degree ordering;
3. harness overhead per case (validation, fork isolation, record) for a tiny problem
   (target: under 0.5 s), in-process and through the command line.
Writes results/perf/rect_scaling.json.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def median_time(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def fast_vs_dst(m: int, repeats: int) -> dict:
    import scipy.fft

    from bench.problems import make_problem
    from solvers import SOLVERS
    from solvers.base import RunContext

    prob = make_problem({"name": "sine"}).public()
    n = m + 1  # m unknowns per direction
    solver = SOLVERS["fst5"](n=n)
    solve_times, setup_times = [], []
    for _ in range(repeats):
        ctx = RunContext()
        solver.solve(prob, ctx=ctx)
        solve_times.append(ctx.timings["solve"])
        setup_times.append(ctx.timings["setup"])
    x = np.random.default_rng(0).standard_normal((m, m))

    def two_dst():
        y = scipy.fft.dstn(x, type=1)
        scipy.fft.idstn(y, type=1, overwrite_x=True)

    t_dst = median_time(two_dst, repeats)
    t_solve = statistics.median(solve_times)
    return {"unknowns_per_side": m, "solve_s": t_solve, "setup_s": statistics.median(setup_times),
            "two_dstn_s": t_dst, "ratio": t_solve / t_dst}


def amg_scaling(ns, repeats: int) -> dict:
    from bench.problems import make_problem
    from solvers import SOLVERS
    from solvers.base import RunContext

    prob = make_problem({"name": "sine"}).public()
    rows = []
    for n in ns:
        for method in ("amg", "direct"):
            if method == "direct" and n > 1024:
                continue
            s = SOLVERS["fd5"](n=n, linear_solver=method)
            t = []
            for _ in range(repeats if n <= 1024 else 1):
                ctx = RunContext()
                sol = s.solve(prob, ctx=ctx)
                t.append(ctx.timings["solve"])
            rows.append({"n": n, "N": (n - 1) ** 2, "method": method, "solve_s": statistics.median(t),
                         "iterations": sol.info.get("iterations")})
            print(f"  fd5 {method:6s} n={n:5d}: {rows[-1]['solve_s']:.3f} s", flush=True)
    amg = [r for r in rows if r["method"] == "amg"]
    slope = float(np.polyfit(np.log([r["N"] for r in amg]), np.log([r["solve_s"] for r in amg]), 1)[0])
    return {"rows": rows, "amg_exponent": slope}


def harness_overhead(repeats: int) -> dict:
    from bench.run import Case, run_case

    with tempfile.TemporaryDirectory() as d:
        walls, inner = [], []
        for i in range(repeats):
            case = Case(problem={"name": "sine"}, solver={"name": "fst5", "n": 8}, problem_label="sine", seed=i)
            t0 = time.perf_counter()
            rec, _ = run_case(case, d)
            walls.append(time.perf_counter() - t0)
            inner.append(rec["timings"]["total"] + (rec["timings"]["evaluate"] or 0))
        cli = None
        exe = Path(sys.executable).with_name("lapbench")
        if exe.exists():
            k = 10
            t0 = time.perf_counter()
            subprocess.run([str(exe), "run", "--multirun", f"seed=range(0,{k})", "solver=fst5", "solver.n=8",
                            f"results_dir={d}/cli"], check=True, capture_output=True)
            cli_total = time.perf_counter() - t0
            t0 = time.perf_counter()
            subprocess.run([str(exe), "run", "--multirun", "seed=0", "solver=fst5", "solver.n=8",
                            f"results_dir={d}/cli1"], check=True, capture_output=True)
            cli_one = time.perf_counter() - t0
            cli = {"cases": k, "total_s": cli_total, "single_case_s": cli_one,
                   "per_extra_case_s": (cli_total - cli_one) / (k - 1)}
    over = [w - i for w, i in zip(walls, inner)]
    return {"in_process_median_s": statistics.median(over), "in_process_first_s": over[0], "cli": cli}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes (smoke run)")
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    out: dict = {"threads": args.threads, "cpu_count": os.cpu_count()}
    with threadpool_limits(args.threads):
        sizes = [511] if args.quick else [2047, 2048]
        out["fast_poisson"] = [fast_vs_dst(m, 3 if args.quick else 5) for m in sizes]
        for r in out["fast_poisson"]:
            print(f"fst5 {r['unknowns_per_side']}^2 unknowns: solve {r['solve_s']:.3f} s, two dstn "
                  f"{r['two_dstn_s']:.3f} s, ratio {r['ratio']:.2f} (target <= 1.5)", flush=True)
        ns = [64, 128, 256] if args.quick else [256, 512, 1024, 2048]
        out["amg"] = amg_scaling(ns, 3)
        print(f"AMG-CG fitted exponent of solve time against N: {out['amg']['amg_exponent']:.3f} "
              f"(target <= 1.15)", flush=True)
        out["overhead"] = harness_overhead(5)
        print(f"harness overhead per case: {out['overhead']['in_process_median_s']:.3f} s in-process; "
              f"CLI sweep {out['overhead']['cli']}", flush=True)
    path = Path("results/perf/rect_scaling.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
