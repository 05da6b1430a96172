"""What the harness costs: `python -m lapbench.perf.harness [--quick]`.

Measures, in one run on this machine:
1. fst5 setup + solve at 2047 x 2047 unknowns (the whole timed part of a case: data evaluated
   on the grid, boundary folded in, two DST-I and a division) against two bare
   ``scipy.fft.dstn`` calls of that size; alternating blocks, medians (target: within 1.5x);
2. the harness's cost per extra case of a sequential command-line sweep: a 10-case sweep
   against a 1-case one, each case solving once (``timing.warmup=0 timing.repeats=1
   timing.min_time=0``) so that the difference is composition, fork, measurement and record
   writing (target: at most 0.1 s per extra case).
Writes results/perf/harness.json.
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

__all__ = ["fst_against_dst", "sweep_overhead"]


def fst_against_dst(m: int, blocks: int) -> dict:
    """Median fst5 setup + solve and median of two bare dstn calls, measured in alternating blocks."""
    import scipy.fft

    from lapbench.problems import make_problem
    from lapbench.solvers import SOLVERS
    from lapbench.solvers.base import RunContext

    prob = make_problem({"name": "sine"}).public()
    solver = SOLVERS["fst5"](n=m + 1)   # m unknowns per direction
    x = np.random.default_rng(0).standard_normal((m, m))
    setup, solve, dst = [], [], []
    solver.solve(prob, ctx=RunContext())  # warm-up: FFT plans, first-touch pages
    for _ in range(blocks):
        ctx = RunContext()
        solver.solve(prob, ctx=ctx)
        setup.append(ctx.timings["setup"])
        solve.append(ctx.timings["solve"])
        t0 = time.perf_counter()
        y = scipy.fft.dstn(x, type=1)
        scipy.fft.idstn(y, type=1, overwrite_x=True)
        dst.append(time.perf_counter() - t0)
    total = [a + b for a, b in zip(setup, solve)]
    t_dst = statistics.median(dst)
    return {"unknowns_per_side": m, "setup_s": statistics.median(setup), "solve_s": statistics.median(solve),
            "setup_plus_solve_s": statistics.median(total), "two_dstn_s": t_dst,
            "ratio": statistics.median(total) / t_dst, "blocks": blocks}


def _sweep(exe: Path, k: int, folder: str) -> float:
    t0 = time.perf_counter()
    subprocess.run([str(exe), "run", "--multirun", f"seed=range(0,{k})", "problem=sine", "solver=fst5",
                    "solver.n=8", "timing.warmup=0", "timing.repeats=1", "timing.min_time=0",
                    f"results_dir={folder}"], check=True, capture_output=True)
    return time.perf_counter() - t0


def sweep_overhead(k: int = 10, rounds: int = 3) -> dict:
    """Wall time per extra case of a k-case sequential sweep over a 1-case one (medians of rounds)."""
    exe = Path(sys.executable).with_name("lapbench")
    many, one = [], []
    with tempfile.TemporaryDirectory() as d:
        for r in range(rounds):     # alternating, fresh folders: every case runs
            one.append(_sweep(exe, 1, f"{d}/one{r}"))
            many.append(_sweep(exe, k, f"{d}/many{r}"))
    per = (statistics.median(many) - statistics.median(one)) / (k - 1)
    return {"cases": k, "sweep_s": statistics.median(many), "single_case_s": statistics.median(one),
            "per_extra_case_s": per, "rounds": rounds}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes (smoke run)")
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    out: dict = {"cpu_count": os.cpu_count(), "threads": 1}
    with threadpool_limits(1):
        import scipy.fft

        with scipy.fft.set_workers(1):
            r = fst_against_dst(511 if args.quick else 2047, 3 if args.quick else 7)
    out["fst5_against_dst"] = r
    print(f"fst5 {r['unknowns_per_side']}^2 unknowns: setup {r['setup_s']:.3f} s + solve {r['solve_s']:.3f} s "
          f"= {r['setup_plus_solve_s']:.3f} s; two dstn {r['two_dstn_s']:.3f} s; ratio {r['ratio']:.2f} "
          f"(target <= 1.5)", flush=True)
    o = out["sweep_overhead"] = sweep_overhead(5 if args.quick else 10, 2 if args.quick else 3)
    print(f"sequential sweep: {o['cases']} cases {o['sweep_s']:.2f} s, 1 case {o['single_case_s']:.2f} s: "
          f"{o['per_extra_case_s']:.3f} s per extra case (target <= 0.1)", flush=True)
    path = Path("results/perf/harness.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
