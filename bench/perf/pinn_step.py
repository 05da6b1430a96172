"""PINN performance: `python -m lapbench.perf.pinn_step [--quick] [--budget SECONDS]`.

Measures, in one run on this machine (best of repeats):
1. the Laplacian strategies of `lapbench.solvers.pinn.model.Network.derivatives` (forward propagation,
   nested torch.autograd.grad, torch.func) per Adam step, 2 500 points, 4 x 50 tanh network,
   1 thread, float32 and float64, with their agreement (the default must be the fastest
   correct one);
2. one training step of the hard-boundary strong-form loss (as `pinn_hard` runs it) against a
   plain forward + backward + Adam step of the same network on the same points (target ratio:
   at most 3), at 1 and 2 threads, float32 and float64, in alternating blocks (median of the
   block ratios), next to the floor that no exact forward-Laplacian step can go below (its
   stacked matrix products, tanh and Adam; see `step_ratio`);
3. time to relative L2 error 1e-3 and the best error within the training budget for the
   `pinn_hard` preset on sin(pi x) sin(pi y), next to the classical solvers' time to the same
   error, all through `lapbench.run.run_case` (forked, pinned, timed as in any sweep);
4. the step cost against the dimension d (DIMS): one Adam step of the strong-form residual loss
   with the forward Laplacian (d + 2 streams), nested autograd (d backward passes), the
   coordinate-sampled forward Laplacian with k = SAMPLED_K coordinates (k + 2 streams, Hu et al.
   2024) and a plain forward + backward step, 1 thread, float32 (``--dims-only`` runs this part
   alone and updates its entry in the JSON file).
Writes results/perf/pinn_step.json.
"""
from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np

POINTS = 2500
WIDTH, DEPTH = 50, 4
DIMS = (2, 3, 4, 6, 8, 10, 16, 20)
SAMPLED_K = 2


def _best_ms(fn, repeats: int, inner: int) -> float:
    for _ in range(2):
        fn()
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(inner):
            fn()
        best = min(best, (time.perf_counter() - t0) / inner)
    return best * 1e3


def laplacian_strategies(repeats: int) -> list[dict]:
    import torch

    from lapbench.solvers.pinn.model import Network

    torch.set_num_threads(1)
    rows = []
    for precision, dtype in (("float32", torch.float32), ("float64", torch.float64)):
        gen = torch.Generator().manual_seed(0)
        net = Network((0, 1, 0, 1), WIDTH, DEPTH, "tanh", 0, 1.0, dtype, gen)
        x = torch.rand(POINTS, 2, dtype=dtype, generator=gen)
        opt = torch.optim.Adam(net.parameters(), lr=1e-6)
        # agreement first, on the same weights (the timed steps below change them)
        laps = {m: net.derivatives(x, 2, m)[2].detach() for m in ("forward", "autograd", "func")}
        ref = laps["autograd"]
        for method in ("forward", "autograd", "func"):
            lap = laps[method]

            def step(method=method):
                opt.zero_grad(set_to_none=True)
                loss = torch.mean((net.derivatives(x, 2, method)[2] + 1.0) ** 2)
                loss.backward()
                opt.step()

            rows.append({"precision": precision, "method": method,
                         "adam_step_ms": _best_ms(step, repeats, 5),
                         "max_rel_diff_vs_autograd": float((lap - ref).abs().max() / ref.abs().max())})
            print(f"  laplacian {precision} {method:<9} {rows[-1]['adam_step_ms']:7.2f} ms/step  "
                  f"max rel diff {rows[-1]['max_rel_diff_vs_autograd']:.1e}", flush=True)
    return rows


def _interleaved(fns: dict, rounds: int, inner: int) -> dict:
    """Median per-call ms of each function, timed in alternating blocks so that drift of the
    machine (frequency, neighbours) hits all of them alike; ratios are taken block by block."""
    for fn in fns.values():
        for _ in range(3):
            fn()
    times = {k: [] for k in fns}
    for _ in range(rounds):
        for k, fn in fns.items():
            t0 = time.perf_counter()
            for _ in range(inner):
                fn()
            times[k].append((time.perf_counter() - t0) / inner * 1e3)
    return {k: np.asarray(v) for k, v in times.items()}


def step_ratio(repeats: int) -> list[dict]:
    """PINN step against a plain step, and against the floor of any exact forward Laplacian.

    The floor runs only what no implementation of the four-stream forward Laplacian can avoid:
    per hidden-to-hidden layer the stacked (4 n x w) products of the forward pass, of the input
    gradient and of the weight gradient, one tanh on the values, and the Adam update. Its ratio
    to the plain step says whether a target ratio is reachable at all on this machine.
    """
    import resource

    import torch

    from lapbench.problems import make_problem
    from lapbench.solvers.pinn.losses import Loss
    from lapbench.solvers.pinn.model import Network
    from lapbench.solvers.pinn.runtime import retain_freed_memory
    from lapbench.solvers.pinn.losses import Collocation

    retain_freed_memory()                     # as the PINN solver does in its case process
    prob = make_problem({"name": "sine"}).public()
    rows = []
    for threads in (1, 2):
        torch.set_num_threads(threads)
        for precision, dtype in (("float32", torch.float32), ("float64", torch.float64)):
            gen = torch.Generator().manual_seed(0)
            net = Network(prob.domain.bbox, WIDTH, DEPTH, "tanh", 0, 1.0, dtype, gen)
            col = Collocation(prob, POINTS, 400, "sobol", True, dtype, np.random.default_rng(0))
            loss = Loss("residual", hard=True, laplacian="forward", area=1.0)
            opt = torch.optim.Adam(net.parameters(), lr=1e-6)
            x = col.batch.x
            k = 4                                              # value, 2 gradient rows, Laplacian
            hidden = [lin.weight.detach() for lin in net.layers[1:-1]]
            streams = [torch.randn(k * POINTS, WIDTH, dtype=dtype, generator=gen)
                       for _ in range(len(hidden) + 1)]
            values = torch.randn(POINTS, WIDTH, dtype=dtype, generator=gen)

            def plain():
                opt.zero_grad(set_to_none=True)
                torch.mean(net(x) ** 2).backward()
                opt.step()

            def pinn():
                opt.zero_grad(set_to_none=True)
                loss(net, col.batch, None)[0].backward()
                opt.step()

            def floor():
                for i, W in enumerate(hidden):
                    streams[i + 1] = streams[i] @ W.T
                for _ in range(DEPTH):
                    torch.tanh(values)
                for i, W in reversed(list(enumerate(hidden))):
                    streams[i + 1].T @ streams[i]
                    streams[i + 1] @ W
                for q in net.parameters():
                    q.grad = torch.zeros_like(q)
                opt.step()

            faults0 = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
            t = _interleaved({"plain": plain, "pinn": pinn, "floor": floor}, 2 * repeats, 4)
            faults = (resource.getrusage(resource.RUSAGE_SELF).ru_minflt - faults0) / (2 * repeats * 4 * 3)
            ratio, floor_ratio = t["pinn"] / t["plain"], t["floor"] / t["plain"]
            rows.append({"threads": threads, "precision": precision,
                         "plain_step_ms": float(np.median(t["plain"])),
                         "pinn_step_ms": float(np.median(t["pinn"])),
                         "floor_ms": float(np.median(t["floor"])),
                         "ratio": float(np.median(ratio)),
                         "ratio_range": [float(ratio.min()), float(ratio.max())],
                         "floor_ratio": float(np.median(floor_ratio)),
                         "page_faults_per_step": faults})
            r = rows[-1]
            print(f"  step {threads} thread(s) {precision}: plain {r['plain_step_ms']:6.2f} ms, pinn_hard "
                  f"{r['pinn_step_ms']:6.2f} ms, ratio {r['ratio']:.2f} (blocks {ratio.min():.2f}-"
                  f"{ratio.max():.2f}); floor of any exact forward Laplacian {r['floor_ms']:6.2f} ms, "
                  f"ratio {r['floor_ratio']:.2f}; {faults:.0f} page faults per step", flush=True)
    torch.set_num_threads(1)
    return rows


def time_to_tolerance(budget: float, tol: float = 1e-3) -> dict:
    from lapbench.run import Case, run_case

    out = {"problem": "sine (k = l = 1)", "tolerance": tol, "train_budget_s": budget}
    with tempfile.TemporaryDirectory() as tmp:
        rec, _ = run_case(Case(problem={"name": "sine"}, solver={"name": "pinn_hard"}, seed=0, threads=1,
                               budget={"time_limit": budget + 120, "train_time": budget}), tmp)
        hist = rec["history"]
        hit = next((h for h in hist if h.get("rel_l2", 1.0) <= tol), None)
        out["pinn_hard"] = {
            "status": rec["status"], "stopped": rec["info"].get("stopped"),
            "steps": rec["cost"]["iterations"], "params": rec["cost"]["params"],
            "final_rel_l2": rec["metrics"].get("rel_l2"),
            "best_rel_l2_in_history": min((h["rel_l2"] for h in hist if "rel_l2" in h), default=None),
            "time_to_tol_s": hit["time"] if hit else None,
            "total_time_s": rec["timings"]["total"],
            "foreign_load": rec["environment"].get("foreign_load"),
        }
        print(f"  pinn_hard: time to {tol:g}: {out['pinn_hard']['time_to_tol_s']} s; final rel_l2 "
              f"{out['pinn_hard']['final_rel_l2']:.2e} after {out['pinn_hard']['total_time_s']:.1f} s "
              f"({out['pinn_hard']['stopped']})", flush=True)
        classical = {}
        for name, ns in (("fst5", (8, 16, 32, 64, 128, 256)), ("fst9", (4, 8, 16, 32, 64)),
                         ("fd9", (4, 8, 16, 32, 64)), ("cheb", (4, 6, 8, 10, 12, 16))):
            for n in ns:
                rec, _ = run_case(Case(problem={"name": "sine"}, solver={"name": name, "n": n}, seed=0,
                                       threads=1, budget={"time_limit": 60}), tmp)
                err = rec["metrics"].get("rel_l2", np.inf)
                if err <= tol:
                    classical[name] = {"n": n, "rel_l2": err, "time_s": rec["timings"]["total"]}
                    print(f"  {name}: n = {n} reaches {err:.2e} in {rec['timings']['total'] * 1e3:.2f} ms",
                          flush=True)
                    break
        out["classical"] = classical
    return out


def step_against_dimension(repeats: int) -> list[dict]:
    """ms per Adam step of the residual loss in d dimensions (part 4 of the module docstring)."""
    import torch

    from lapbench.solvers.pinn.losses import Batch, Loss
    from lapbench.solvers.pinn.model import Network
    from lapbench.solvers.pinn.sampling import PointData

    torch.set_num_threads(1)
    rows = []
    for d in DIMS:
        gen = torch.Generator().manual_seed(0)
        net = Network([v for _ in range(d) for v in (0.0, 1.0)], WIDTH, DEPTH, "tanh", 0, 1.0,
                      torch.float32, gen)
        rng = np.random.default_rng(0)
        batch = Batch(PointData(x=rng.uniform(0, 1, (POINTS, d)), f=np.ones(POINTS)), torch.float32)
        opt = torch.optim.Adam(net.parameters(), lr=1e-6)
        variants = {"forward": Loss(laplacian="forward"), "autograd": Loss(laplacian="autograd"),
                    f"forward_k{SAMPLED_K}": Loss(laplacian="forward", laplacian_dims=SAMPLED_K)}

        def stepper(loss):
            counter = iter(range(10 ** 9))

            def step():
                opt.zero_grad(set_to_none=True)
                loss(net, batch, None, step=next(counter))[0].backward()
                opt.step()
            return step

        def plain():
            opt.zero_grad(set_to_none=True)
            torch.mean(net(batch.x) ** 2).backward()
            opt.step()

        row = {"d": d, "plain_step_ms": _best_ms(plain, repeats, 5)}
        for name, loss in variants.items():
            if name == f"forward_k{SAMPLED_K}" and SAMPLED_K >= d:
                row[f"{name}_step_ms"] = None
                continue
            row[f"{name}_step_ms"] = _best_ms(stepper(loss), repeats, 3)
        rows.append(row)
        print("  d = {:2d}: plain {:6.2f} ms, forward {:7.2f} ms, autograd {:7.2f} ms, sampled k = {} {} ms"
              .format(d, row["plain_step_ms"], row["forward_step_ms"], row["autograd_step_ms"], SAMPLED_K,
                      "-" if row[f"forward_k{SAMPLED_K}_step_ms"] is None
                      else f"{row[f'forward_k{SAMPLED_K}_step_ms']:7.2f}"), flush=True)
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and a 30 s training budget")
    ap.add_argument("--budget", type=float, default=None,
                    help="training budget of the time-to-tolerance run in seconds (default 150; "
                         "the issue's full measurement is 300)")
    ap.add_argument("--dims-only", action="store_true",
                    help="only part 4 (step cost against d); updates that entry of the JSON file")
    args = ap.parse_args(argv)
    repeats = 3 if args.quick else 7
    budget = args.budget or (30.0 if args.quick else 150.0)
    import os

    import torch

    from lapbench.solvers.pinn import PINN

    PINN.preload()
    path = Path("results/perf/pinn_step.json")
    if args.dims_only:
        out = json.loads(path.read_text()) if path.is_file() else {}
        print("4. step cost against the dimension (1 thread, float32)", flush=True)
        out["dimension"] = {"loadavg_1min_start": os.getloadavg()[0], "points": POINTS,
                            "network": f"{DEPTH} x {WIDTH} tanh", "rows": step_against_dimension(repeats),
                            "loadavg_1min_end": os.getloadavg()[0]}
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(out, indent=1))
        print(f"wrote {path}")
        return
    out = {"machine": {"cpus": os.cpu_count(), "torch": torch.__version__,
                       "loadavg_1min_start": os.getloadavg()[0]},
           "network": f"{DEPTH} x {WIDTH} tanh, {POINTS} points"}
    print("1. Laplacian strategies (1 thread)", flush=True)
    out["laplacian"] = laplacian_strategies(repeats)
    print("2. PINN step against plain forward + backward", flush=True)
    out["step_ratio"] = step_ratio(repeats)
    print(f"3. time to 1e-3 on sin(pi x) sin(pi y), training budget {budget:g} s", flush=True)
    out["time_to_tolerance"] = time_to_tolerance(budget)
    print("4. step cost against the dimension (1 thread, float32)", flush=True)
    out["dimension"] = {"points": POINTS, "network": f"{DEPTH} x {WIDTH} tanh",
                        "rows": step_against_dimension(repeats)}
    out["machine"]["loadavg_1min_end"] = os.getloadavg()[0]
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1))
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
