"""Flat-torus enumeration cost: `python -m lapbench.perf.torus [--max-norm M]`.

Times `lapbench.lattice.torus_spectrum` (vectorised Fincke-Pohst over the dual lattice, exact int64
norms) for E_8 and Milnor's pair E_8 + E_8, D_16^+ at |w|^2 <= 2, 4, 6 (and 8 for E_8), best of 3
runs (1 for the largest), 1 thread, and reports the vectors enumerated per second beside the
theta-series count each must reach (240 sigma_3(m) for E_8, 480 sigma_7(m) for the pair), and the
same E_8 in a skewed basis with and without the LLL reduction.
Writes results/perf/torus.json.
"""
from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path


def sigma(k: int, m: int) -> int:
    return sum(d ** k for d in range(1, m + 1) if m % d == 0)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--max-norm", type=int, default=6, help="largest |w|^2 for the 16-dimensional pair")
    args = ap.parse_args(argv)
    from threadpoolctl import threadpool_limits

    from lapbench.lattice import load_torus, torus_spectrum

    cases = [("e8", m, 240, 3) for m in (2, 4, 6, 8)]
    cases += [(n, m, 480, 7) for n in ("e8e8", "d16plus") for m in range(2, args.max_norm + 1, 2)]
    rows = []
    with threadpool_limits(1):
        for name, m, c, k in cases:
            torus = load_torus(name)
            runs = 1 if (name != "e8" and m >= 6) or m >= 8 else 3
            best = float("inf")
            for _ in range(runs):
                t0 = time.perf_counter()
                sp = torus_spectrum(torus, m)
                best = min(best, time.perf_counter() - t0)
            total = sum(sp.multiplicities)
            expect = [1] + [c * sigma(k, j // 2) for j in range(2, m + 1, 2)]
            rows.append({"torus": name, "dim": torus.dim, "max_norm": m, "vectors": total, "seconds": best,
                         "vectors_per_s": total / best, "multiplicities": list(sp.multiplicities),
                         "theta_series": expect, "agree": list(sp.multiplicities) == expect, "runs": runs})
            print(f"{name:8s} |w|^2 <= {m}: {total:>9d} vectors in {best:7.3f} s "
                  f"({total / best:,.0f}/s), theta series {'agrees' if rows[-1]['agree'] else 'DIFFERS'}")
        # the same E_8 in a skewed basis (a random unimodular change, entries up to a few hundred):
        # the enumeration with and without the LLL reduction that torus_spectrum applies
        import numpy as np

        from lapbench.lattice import d_plus_basis, gram, inverse, lll_reduce, short_vector_counts

        rng = np.random.default_rng(1)
        U = np.eye(8, dtype=np.int64)
        for _ in range(40):
            i, j = rng.choice(8, 2, replace=False)
            U[i] += int(rng.integers(-3, 4)) * U[j]
        skewed = (U.astype(object) @ np.array(d_plus_basis(8), dtype=object)).tolist()
        A = np.array([[int(v) for v in r] for r in inverse(gram(skewed))], dtype=np.int64)
        skew = {"max_entry": int(np.abs(A).max()), "max_norm": 4}
        for label, form in (("unreduced", A), ("lll", None)):
            t0 = time.perf_counter()
            form = lll_reduce(A.astype(object))[0].astype(np.int64) if form is None else form
            counts = short_vector_counts(form, 4)
            skew[f"{label}_s"] = time.perf_counter() - t0
            skew[f"{label}_counts"] = list(counts.values())
        print(f"skewed E8 basis (dual Gram entries up to {skew['max_entry']}), |w|^2 <= 4: "
              f"{skew['unreduced_s']:.3f} s unreduced, {skew['lll_s']:.3f} s with LLL")
    out = {"skewed_e8": skew, "machine": {"cpus": os.cpu_count(), "loadavg_1min": os.getloadavg()[0]}, "threads": 1, "rows": rows}
    path = Path("results/perf/torus.json")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
