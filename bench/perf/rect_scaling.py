"""Rectangle solver performance: `python -m lapbench.perf.rect_scaling [--quick]`.

Measures, in one run on this machine (medians of repeats, 1 thread unless --threads), the
fitted exponent of AMG-CG (fd5, linear_solver=amg) solve time against N from 256^2 to 2048^2
(target: at most 1.15), next to SuperLU with minimum-degree ordering. The sine-transform solver
against bare DSTs and the harness's cost per case: `python -m lapbench.perf.harness`.
Writes results/perf/rect_scaling.json.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
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


def amg_scaling(ns, repeats: int) -> dict:
    from lapbench.problems import make_problem
    from lapbench.solvers import SOLVERS
    from lapbench.solvers.base import RunContext

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


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes (smoke run)")
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    out: dict = {"threads": args.threads, "cpu_count": os.cpu_count()}
    with threadpool_limits(args.threads):
        ns = [64, 128, 256] if args.quick else [256, 512, 1024, 2048]
        out["amg"] = amg_scaling(ns, 3)
        print(f"AMG-CG fitted exponent of solve time against N: {out['amg']['amg_exponent']:.3f} "
              f"(target <= 1.15)", flush=True)
    path = Path("results/perf/rect_scaling.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
