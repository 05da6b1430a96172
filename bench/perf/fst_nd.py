"""Sine-transform solvers in d dimensions: `python -m lapbench.perf.fst_nd [--quick]`.

Measures, in one run on this machine (1 thread, medians of alternating blocks):
1. fst5 and fst9 setup + solve in d = 3 at 255^3 unknowns (data on the grid, boundary folded on
   the face slabs, eigenvalues, dstn, division, idstn) against two bare ``scipy.fft.dstn`` calls
   of that size, on nd_harmonic (Laplace: boundary data only) and nd_waves (Poisson: a source of
   four plane waves evaluated at every node);
2. fst5 on nd_waves at about 2^21 unknowns in d = 2 .. 6 (m^d unknowns, m per side): time per
   unknown and the same ratio to two dstn calls.
Writes results/perf/fst_nd.json.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import time
from pathlib import Path

import numpy as np

__all__ = ["fst_against_dst"]


def fst_against_dst(solver_name: str, problem_name: str, dim: int, m: int, blocks: int) -> dict:
    """Median setup + solve of `solver_name` with m unknowns per side on the d-dimensional
    `problem_name`, and the median of two bare dstn calls on an m^d array (alternating blocks)."""
    import scipy.fft

    from lapbench.problems import make_problem
    from lapbench.solvers import SOLVERS
    from lapbench.solvers.base import RunContext

    prob = make_problem({"name": problem_name, "dim": dim}).public()
    solver = SOLVERS[solver_name](n=m + 1)
    x = np.random.default_rng(0).standard_normal((m,) * dim)
    solver.solve(prob, ctx=RunContext())        # warm-up: FFT plans, first-touch pages
    setup, solve, dst = [], [], []
    for _ in range(blocks):
        ctx = RunContext()
        solver.solve(prob, ctx=ctx)
        setup.append(ctx.timings["setup"])
        solve.append(ctx.timings["solve"])
        t0 = time.perf_counter()
        y = scipy.fft.dstn(x, type=1)
        scipy.fft.idstn(y, type=1, overwrite_x=True)
        dst.append(time.perf_counter() - t0)
    total = statistics.median([a + b for a, b in zip(setup, solve)])
    t_dst = statistics.median(dst)
    return {"solver": solver_name, "problem": problem_name, "dim": dim, "unknowns_per_side": m,
            "unknowns": m ** dim, "setup_s": statistics.median(setup), "solve_s": statistics.median(solve),
            "setup_plus_solve_s": total, "two_dstn_s": t_dst, "ratio": total / t_dst,
            "ns_per_unknown": 1e9 * total / m ** dim, "blocks": blocks}


def _line(r: dict) -> str:
    return (f"{r['solver']} {r['problem']} d={r['dim']} {r['unknowns_per_side']}^{r['dim']}: setup "
            f"{r['setup_s']:.3f} s + solve {r['solve_s']:.3f} s = {r['setup_plus_solve_s']:.3f} s "
            f"({r['ns_per_unknown']:.0f} ns/unknown); two dstn {r['two_dstn_s']:.3f} s; ratio {r['ratio']:.2f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes (smoke run)")
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    out: dict = {"cpu_count": os.cpu_count(), "threads": 1, "d3": [], "per_dimension": []}
    m3 = 63 if args.quick else 255
    blocks = 3 if args.quick else 5
    total = 1 << (15 if args.quick else 21)
    with threadpool_limits(1):
        import scipy.fft

        with scipy.fft.set_workers(1):
            for solver in ("fst5", "fst9"):
                for problem in ("nd_harmonic", "nd_waves"):
                    out["d3"].append(fst_against_dst(solver, problem, 3, m3, blocks))
                    print(_line(out["d3"][-1]), flush=True)
            for dim in range(2, 7):
                m = int(round(total ** (1.0 / dim)))
                out["per_dimension"].append(fst_against_dst("fst5", "nd_waves", dim, m, blocks))
                print(_line(out["per_dimension"][-1]), flush=True)
    path = Path("results/perf/fst_nd.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
