"""Running many cases: the sequential driver, the one-line case report and the progress bar.

A sequential run or suite (Hydra's basic launcher) is run here, from the preloaded parent, case
after case: composition and validation happened once for all cases (lapbench.compose.plan_run), so
an extra case costs its own fork and record write, not a Hydra job. Parallel and cluster
launchers still run one Hydra job per case (lapbench.cli.job), printing the same lines.
"""
from __future__ import annotations

import sys

__all__ = ["case_line", "tolerance_line", "Progress", "run_sequential"]


def case_line(rec: dict, n: int, total: int | None, skipped: bool = False) -> str:
    """``[3/10] sine(k=1,l=1) fd5 n=64 seed=0: ok rel_l2=1.2e-04 time=2.1ms (median of 5)``.

    The reason of a case that did not end ``ok`` is given in full.
    """
    ename = "eig_rel_max" if rec["problem"].get("kind") == "eigen" else "rel_l2"
    err = (rec.get("metrics") or {}).get(ename)
    timings = rec.get("timings") or {}
    t = timings.get("total")
    reps = (rec.get("timing") or {}).get("repeats") or []
    how = f" (median of {len(reps)})" if len(reps) > 1 else ""
    res = rec["solver"].get("resolution_label") or ""
    status = rec.get("status", "?")
    line = (f"[{n}{'/' + str(total) if total else ''}] {rec['problem']['id']} {rec['solver']['name']}"
            f"{' ' + res if res else ''} seed={rec['seed']}: {status}"
            f"{'' if err is None else f' {ename}={err:.3e}'}"
            f"{'' if t is None or status != 'ok' else f' time={_fmt_time(t)}{how}'}"
            f"{' (record exists, skipped)' if skipped else ''}")
    if status != "ok":
        line += " - " + " ".join(str(rec.get("reason", "")).split())
    return line


def _fmt_time(t: float) -> str:
    if t < 1e-3:
        return f"{t * 1e6:.3g}us"
    if t < 1.0:
        return f"{t * 1e3:.3g}ms"
    return f"{t:.3g}s"


class Progress:
    """One line per case; on a terminal also a progress bar kept below the lines, showing done /
    total with elapsed and remaining time (no per-second rate: cases differ by orders of
    magnitude in cost, so a rate says little)."""

    def __init__(self, total: int | None, stream=None):
        self.total = total
        self.stream = stream or sys.stdout
        self.bar = None
        if total and total > 1 and sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(total=total, unit="case", file=sys.stderr, dynamic_ncols=True, leave=False,
                            bar_format="{l_bar}{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}]")

    def line(self, text: str) -> None:
        if self.bar is not None:
            self.bar.write(text, file=self.stream)
            self.bar.update(1)
        else:
            # one write per line: parallel workers share this stream and must not interleave mid-line
            self.stream.write(text + "\n")
            self.stream.flush()

    def write(self, text: str) -> None:
        """A line that is not a finished case (the bar does not advance)."""
        if self.bar is not None:
            self.bar.write(text, file=self.stream)
        else:
            self.stream.write(text + "\n")
            self.stream.flush()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _to_tolerance(prep, opts, progress: Progress, n: int, total: int) -> list[dict]:
    """A suite's solve-to-tolerance case (lapbench.tolerance): one line per probe, then the outcome."""
    from lapbench.tolerance import solve_to_tolerance

    spec = prep.tolerance
    records: list[dict] = []

    def on_probe(probe, rec):
        if rec is not None:
            records.append(rec)
            progress.write(f"  {case_line(rec, n, total if total > 1 else None, probe.skipped)}")

    r = solve_to_tolerance(prep.case, spec["tolerance"], spec["metric"], results_dir=prep.path.parent.parent,
                           force=bool(getattr(opts, "force", False)), on_probe=on_probe)
    progress.line(tolerance_line(r, prep.case.problem_label, n, total))
    return records


def tolerance_line(r, problem: str, n: int, total: int | None) -> str:
    """``[2/8] sine fst9 to rel_l2 <= 1e-06: reached at n=43, rel_l2=9.9e-07 time=1.2ms (9 probes)``."""
    head = f"[{n}{'/' + str(total) if total and total > 1 else ''}] {problem} {r.solver} to {r.metric} <= {r.tolerance:.3g}: "
    if r.reached:
        return head + (f"reached at {r.resolution()}, {r.metric}={r.error:.3e} time={_fmt_time(r.time_s)} "
                       f"({len(r.probes)} probes)")
    return head + f"{r.status} - {' '.join(r.reason.split())} ({len(r.probes)} probes)"


def run_sequential(cases, progress: Progress | None = None, start: int = 0) -> list[dict]:
    """Run prepared cases one after another from this process; returns their records.

    `cases` is ``[(Prepared, options with .force), ...]``. Every case ends in a record (a failing
    case is a record, never an exception); an interrupt kills the running case and propagates,
    with the finished records already on disk.
    """
    from lapbench.run import execute

    import os

    total = len(cases)
    progress = progress or Progress(total)
    records = []
    if progress.bar is not None:   # a learned case's own training bar would break the sweep's bar
        os.environ["LAPBENCH_CASE_PROGRESS"] = "0"
    try:
        for i, (prep, opts) in enumerate(cases[start:], start=start):
            if prep.tolerance is not None:
                records.extend(_to_tolerance(prep, opts, progress, i + 1, total))
                continue
            rec, skipped = execute(prep, force=bool(getattr(opts, "force", False)))
            records.append(rec)
            progress.line(case_line(rec, i + 1, total if total > 1 else None, skipped))
    finally:
        progress.close()
    return records
