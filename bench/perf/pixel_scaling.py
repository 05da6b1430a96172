"""Pixel-mask solver performance: `python -m lapbench.perf.pixel_scaling [--quick]`.

A 1-megapixel mask (1024 x 1024 pixels; the region: scikit-image's seeded binary blobs at
volume fraction 0.85, so one large region with islands and bays) solved at pixel resolution by
each classical path of `pixel5` (SuperLU with the minimum-degree ordering, and with SuperLU's
default COLAMD ordering for comparison; AMG-CG; sine-transform-preconditioned CG) and by
fem_p1 (two triangles per pixel, AMG-CG), next to the rectangle fst5 with about as many
unknowns (n = 1024). Reports setup and solve seconds, time per unknown and iterations, and
the max nodal error on the harmonic cubic (exact for the 5-point scheme, so it measures the
linear solver only). Medians of repeats, 1 thread unless --threads.
Writes results/perf/pixel_scaling.json.
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
from pathlib import Path

import numpy as np


def _mask(pixels: int):
    from skimage.data import binary_blobs

    from lapbench.domains import Mask

    data = binary_blobs(length=pixels, blob_size_fraction=0.1, volume_fraction=0.85, rng=0)
    return Mask(data=data)


def _cubic():
    from lapbench.fields import Field

    return Field(lambda x, y: x ** 3 - 3 * x * y ** 2 + 0.5 * (x ** 2 - y ** 2) + x * y + y)


def run_case(solver, problem, exact, repeats: int) -> dict:
    from lapbench.solvers.base import RunContext

    t_setup, t_solve = [], []
    for _ in range(repeats):
        ctx = RunContext()
        sol = solver.solve(problem, ctx=ctx)
        t_setup.append(ctx.timings.get("setup", 0.0))
        t_solve.append(ctx.timings.get("solve", 0.0))
    N = int(sol.info.get("dofs", 0))
    err = float(np.max(np.abs(np.asarray(sol.values) - exact(sol.nodes))))
    setup, solve = statistics.median(t_setup), statistics.median(t_solve)
    return {"N": N, "setup_s": setup, "solve_s": solve, "total_s": setup + solve,
            "us_per_unknown": 1e6 * (setup + solve) / max(N, 1), "iterations": sol.info.get("iterations"),
            "nodal_max_error": err}


def colamd_direct(mask, u) -> dict:
    """pixel5's system solved by SuperLU with its default COLAMD ordering (for comparison)."""
    import time

    import scipy.sparse.linalg as spla

    from lapbench.solvers.pixel import PixelGrid, five_point

    grid = PixelGrid(mask, 1)
    A, (brow, bi, bj) = five_point(grid)
    b = np.zeros(grid.n_unknowns)
    np.add.at(b, brow, u(grid.points(bi, bj)) / grid.h ** 2)
    t0 = time.perf_counter()
    x = spla.splu(A.tocsc(), permc_spec="COLAMD", diag_pivot_thresh=0.0, options={"SymmetricMode": True}).solve(b)
    t = time.perf_counter() - t0
    err = float(np.max(np.abs(x - u(grid.points(grid.I, grid.J)))))
    return {"N": grid.n_unknowns, "solve_s": t, "us_per_unknown": 1e6 * t / grid.n_unknowns, "nodal_max_error": err}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="a 256 x 256 mask (smoke run)")
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    from lapbench.domains import Rectangle
    from lapbench.problems import Problem
    from lapbench.solvers import SOLVERS

    pixels = 256 if args.quick else 1024
    repeats = 3 if args.quick else 1
    out: dict = {"threads": args.threads, "cpu_count": os.cpu_count(), "mask_pixels": pixels * pixels, "rows": []}
    with threadpool_limits(args.threads):
        mask = _mask(pixels)
        u = _cubic()
        prob = Problem("cubic", "laplace", mask, g=u, exact=u)
        rect = Problem("cubic", "laplace", Rectangle(), g=u, exact=u)
        out["region_pixels"] = int(mask.cells.sum())
        print(f"mask {pixels} x {pixels}: {out['region_pixels']} region pixels", flush=True)
        cases = [("pixel5", {"linear_solver": "direct"}, prob), ("pixel5", {"linear_solver": "amg"}, prob),
                 ("pixel5", {"linear_solver": "fst_pcg"}, prob),
                 ("fem_p1", {"level": 0, "linear_solver": "amg"}, prob),
                 ("fst5", {"n": pixels}, rect), ("fd5", {"n": pixels, "linear_solver": "amg"}, rect)]
        for name, params, p in cases:
            row = {"solver": name, **params, "domain": p.domain.kind,
                   **run_case(SOLVERS[name](params=params), p.public(), u, repeats)}
            out["rows"].append(row)
            print(f"  {name:7s} {str(params):40s} N={row['N']:8d} setup {row['setup_s']:.3f} s solve "
                  f"{row['solve_s']:.3f} s  {row['us_per_unknown']:.2f} us/unknown  it={row['iterations']}  "
                  f"err={row['nodal_max_error']:.1e}", flush=True)
        row = {"solver": "pixel5-system", "linear_solver": "direct_colamd", "domain": "mask", **colamd_direct(mask, u)}
        out["rows"].append(row)
        print(f"  SuperLU COLAMD ordering: solve {row['solve_s']:.3f} s, {row['us_per_unknown']:.2f} us/unknown", flush=True)
    path = Path("results/perf/pixel_scaling.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"written {path}")


if __name__ == "__main__":
    main()
