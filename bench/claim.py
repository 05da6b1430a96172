"""Claim check: what would the best classical method need for a claimed error on this machine?

Given a problem, a claimed error (metric named) and a claimed time (optionally the claimed
hardware in words), `claim_check` solves the problem to the claimed error with every classical
method that supports it (`lapbench.tolerance.solve_to_tolerance`, each probe an ordinary recorded
case) and returns a `Verdict`: the fastest classical method that reached the error, its
resolution and time here, the ratio claimed time / classical time, the seeds and repeats behind
the time, every method's outcome, and the rules applied. `Verdict.to_markdown()` and
`Verdict.to_latex()` render it; nothing is printed here (progress goes through `on_probe`).

Rules of the verdict (stated in its text): equal accuracy (the same metric, measured by the harness
on the problem's shared evaluation set, at or below the claimed error); the strongest baseline (every
classical method lapbench has for the problem, each at its cheapest resolution reaching the error,
the fastest of them counts); hardware differences stated, not hidden (this machine's CPU, threads
and versions beside the claimed hardware; no conversion factor is applied). After McGreivy & Hakim,
Nature Machine Intelligence 2024.
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Callable

from lapbench.config import ConfigError
from lapbench.tolerance import EIGEN_METRICS, SOLUTION_METRICS, ToleranceResult, metric_for, solve_to_tolerance

__all__ = ["Claim", "Verdict", "claim_check", "classical_solvers", "plan_claim", "probe_line", "check_folder_name",
           "write_verdict", "CITATION"]

CITATION = ("McGreivy & Hakim, \"Weak baselines and reporting biases lead to overoptimism in machine learning "
            "for fluid-related partial differential equations\", Nature Machine Intelligence (2024)")


@dataclasses.dataclass
class Claim:
    """A claimed result: error `error` in metric `metric`, reached in `time` seconds.

    ``metric`` None means the default of the problem kind (``rel_l2``; ``eig_rel_max`` for eigen
    problems). ``hardware`` and ``method`` are free text for the verdict (what the claim ran on,
    and what it was).
    """

    error: float
    time: float
    metric: str | None = None
    hardware: str | None = None
    method: str | None = None

    def __post_init__(self):
        for key in ("error", "time"):
            v = getattr(self, key)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v <= 0:
                raise ConfigError(f"`claim.{key}` must be a positive number"
                                  f"{' (seconds)' if key == 'time' else ''}, got {v!r}")
        if self.metric is not None and self.metric not in SOLUTION_METRICS + EIGEN_METRICS:
            raise ConfigError(f"`claim.metric` must be one of {', '.join(SOLUTION_METRICS + EIGEN_METRICS)}; "
                              f"got {self.metric!r}")
        for key in ("hardware", "method"):
            v = getattr(self, key)
            if v is not None and not isinstance(v, str):
                raise ConfigError(f"`claim.{key}` must be text, got {v!r}")


def classical_solvers(problem) -> list[str]:
    """Registered classical solvers with a resolution knob that support `problem`, in registry order."""
    from lapbench.report.options import LEARNED_FAMILIES
    from lapbench.tolerance import KNOBS
    from lapbench.solvers import SOLVERS

    out = []
    for name, cls in SOLVERS.items():
        if cls.family in LEARNED_FAMILIES or name not in KNOBS:
            continue
        if cls().supports(problem)[0]:
            out.append(name)
    return out


@dataclasses.dataclass
class Verdict:
    """The answer of a claim check (plain data; render with `to_markdown` / `to_latex`)."""

    claim: Claim
    metric: str
    problem_id: str
    problem_text: str
    results: list            # [ToleranceResult], one per classical method
    environment: dict
    threads: int
    seed: int
    command: str = ""

    @property
    def best(self) -> ToleranceResult | None:
        hit = [r for r in self.results if r.reached and math.isfinite(r.time_s)]
        return min(hit, key=lambda r: (r.time_s, r.solver)) if hit else None

    @property
    def ratio(self) -> float:
        """Claimed time / the best classical method's time here (above 1: the classical method is faster)."""
        b = self.best
        return self.claim.time / b.time_s if b is not None and b.time_s > 0 else math.nan

    def _repeats(self, r: ToleranceResult) -> str:
        t = (r.record or {}).get("timing") or {}
        reps = t.get("repeats") or []
        if t.get("statistic") == "median" and len(reps) > 1:
            return f"median of {len(reps)} timed repeats after a warm-up (fastest {min(reps):.3g} s, slowest {max(reps):.3g} s)"
        return "one timed run"

    def headline(self) -> str:
        """One sentence a reader can quote."""
        b, c = self.best, self.claim
        what = f"{self.metric} {c.error:.3g}"
        if b is None:
            return (f"No classical method lapbench has reached {what} on {self.problem_id} within its limits "
                    f"here; the claim of {c.time:.3g} s stands unmatched by these baselines.")
        r = self.ratio
        cmp = (f"{r:.3g} times faster than the claimed {c.time:.3g} s" if r >= 1
               else f"{1 / r:.3g} times slower than the claimed {c.time:.3g} s")
        return (f"On {self.problem_id}, {b.solver} ({b.resolution()}) reaches {what} (measured {b.error:.3g}) in "
                f"{b.time_s:.3g} s on this machine, {cmp}.")

    def rules(self) -> list[str]:
        hw = self.claim.hardware or "not stated"
        env = self.environment
        versions = ", ".join(f"{k} {v}" for k, v in (env.get("versions") or {}).items() if v and k in
                             ("lapbench", "numpy", "scipy", "scikit-fem", "pyamg"))
        return [
            f"Equal accuracy: every method is judged by the same metric (`{self.metric}`), measured by the "
            "harness on the problem's shared evaluation set, at or below the claimed error.",
            "Strongest baseline: every classical method lapbench has for this problem, each at the smallest "
            "resolution reaching the error (doubling, then bisection; each probe an isolated, timed, recorded "
            "case); the fastest counts.",
            f"Hardware differences stated, not hidden: this machine: {env.get('cpu') or 'unknown CPU'}, "
            f"{self.threads} thread(s) per case, {versions}, git {env.get('git') or 'unknown'}; the claim's "
            f"hardware: {hw}. No conversion factor is applied.",
            f"Time is the method's own time (setup + solve), the {'median of timed repeats' if self.best else 'timing'} "
            f"of a deterministic solve; seed {self.seed}.",
            f"These rules follow {CITATION}.",
        ]

    def rows(self) -> list[dict]:
        out = []
        for r in sorted(self.results, key=lambda r: (not r.reached, r.time_s if r.reached else math.inf, r.solver)):
            out.append({"method": r.solver,
                        "resolution": r.resolution() or "-",
                        f"{self.metric}": f"{r.error:.3g}" if r.reached else _best_text(r, self.metric),
                        "time (s)": f"{r.time_s:.3g}" if r.reached else "not reached",
                        "probes": str(len(r.probes)),
                        "timing": self._repeats(r) if r.reached else (r.reason or r.status)})
        return out

    def to_markdown(self) -> str:
        b, c = self.best, self.claim
        lines = ["# lapbench claim check", "", f"**{self.headline()}**", "",
                 f"- Problem: {self.problem_id}: {self.problem_text}",
                 f"- Claim: {c.method or 'a method'} reached {self.metric} = {c.error:.3g} in {c.time:.3g} s "
                 f"on {c.hardware or 'unstated hardware'}."]
        if b is not None:
            lines += [f"- Best classical method here: {b.solver} at {b.resolution()}, {b.time_s:.3g} s "
                      f"({self._repeats(b)}), {self.metric} = {b.error:.3g}.",
                      f"- Ratio claimed time / classical time: {self.ratio:.3g}."]
        lines += ["", "| " + " | ".join(self.rows()[0]) + " |" if self.rows() else "",
                  "|" + "---|" * len(self.rows()[0]) if self.rows() else ""]
        for row in self.rows():
            lines.append("| " + " | ".join(str(v).replace("|", "\\|") for v in row.values()) + " |")
        lines += ["", "## Rules applied", ""] + [f"- {t}" for t in self.rules()]
        if self.command:
            lines += ["", f"Reproduce: `{self.command}`"]
        return "\n".join(lines) + "\n"

    def to_latex(self) -> str:
        from lapbench.report.writers import tex_escape

        rows = self.rows()
        cols = list(rows[0]) if rows else []
        body = [r"\begin{tabular}{" + "l" * len(cols) + "}", r"\toprule",
                " & ".join(tex_escape(x) for x in cols) + r" \\", r"\midrule"]
        body += [" & ".join(tex_escape(v) for v in row.values()) + r" \\" for row in rows]
        body += [r"\bottomrule", r"\end{tabular}"]
        rules = "\n".join(rf"\item {tex_escape(t)}" for t in self.rules())
        return ("% Generated by `lapbench claim`.\n\\begin{table}[htbp]\n\\centering\n\\small\n"
                + "\n".join(body) + "\n"
                + f"\\caption{{Claim check on {tex_escape(self.problem_id)}. {tex_escape(self.headline())}}}\n"
                + "\\label{tab:claim}\n\\end{table}\n\\begin{itemize}\n" + rules + "\n\\end{itemize}\n")


def _best_text(r: ToleranceResult, metric: str) -> str:
    p = r.best_probe()
    return f"best {p.error:.3g}" if p is not None else "-"


def claim_check(problem: dict, claim: Claim, solvers: dict | list | None = None, seed: int = 0, threads: int = 1,
                budget: dict | None = None, timing: dict | None = None, results_dir: str | Path = "results",
                problem_label: str | None = None, force: bool = False, command: str = "",
                on_probe: Callable | None = None) -> Verdict:
    """Solve `problem` to the claimed error with every classical method; the verdict.

    Parameters
    ----------
    problem : dict
        A problem config (as composed from conf/problem/<name>.yaml plus overrides).
    claim : Claim
    solvers : dict or list or None
        Solver configs by name (``{name: config}``), or names (default configs); None: every
        classical method that supports the problem (`classical_solvers`).
    seed, threads, budget, timing, results_dir, problem_label, force
        As for any case (`lapbench.run.Case`); probes' records go to `results_dir`.
    command : str
        The command line that reproduces the verdict (shown in it).
    on_probe : callable or None
        ``on_probe(solver, probe, record)`` after every probe.
    """
    from lapbench.problems import make_problem
    from lapbench.records import environment
    from lapbench.run import Case, effective_threads

    prob = make_problem(problem)
    try:
        metric = metric_for(prob.kind, claim.metric)
    except ConfigError as exc:
        raise ConfigError(f"`claim.{str(exc).lstrip('`')}") from None
    if solvers is None:
        solvers = classical_solvers(prob)
    if isinstance(solvers, (list, tuple)):
        solvers = {s: {"name": s} for s in solvers}
    if not solvers:
        raise ConfigError(f"no classical method supports problem {prob.name!r} ({prob.kind} on a "
                          f"{prob.domain.kind}); nothing to compare the claim with")
    label = problem_label or prob.name
    cases = {name: Case(problem=problem, solver=dict(cfg), problem_label=label, seed=seed, threads=threads,
                        budget=dict(budget or {}), timing=dict(timing or {}), suite="claim")
             for name, cfg in solvers.items()}
    from lapbench.tolerance import knob_for

    for cfg in solvers.values():          # every solver has a knob: checked before anything runs
        knob_for(cfg)
    results = []
    for name, case in cases.items():
        cb = (lambda p, rec, name=name: on_probe(name, p, rec)) if on_probe else None
        results.append(solve_to_tolerance(case, claim.error, metric, results_dir=results_dir, force=force,
                                          on_probe=cb))
    pid = label
    for r in results:
        if r.record is not None or any(p.path for p in r.probes):
            rec = r.record
            if rec is None:
                from lapbench.records import read_record

                rec = next((read_record(p.path) for p in r.probes if p.path), None)
            if rec:
                pid = rec["problem"].get("id", label)
                break
    return Verdict(claim=claim, metric=metric, problem_id=pid, problem_text=f"{prob.kind} problem; {prob.source}",
                   results=results, environment=environment(), threads=effective_threads(threads)[0], seed=seed,
                   command=command)


def plan_claim(args, solvers=None):
    """(case, run options, {solver: config}) of a claim check, composed as ``lapbench run`` composes.

    `args` is a `lapbench.compose.Args` holding the problem and run overrides (``problem=...``,
    ``problem.<knob>=...``, ``seed=...``, ``results_dir=...``); `solvers` a list of solver names
    (None: every classical method that supports the problem). Every solver config is composed
    from conf/solver/<name>.yaml and its resolution knob checked before anything runs.
    """
    from omegaconf import OmegaConf

    from lapbench.compose import Session, case_from_cfg
    from lapbench.problems import make_problem
    from lapbench.tolerance import knob_for

    if any(o.split("=", 1)[0].lstrip("+~") in ("solver", "suite") for o in args.overrides):
        raise ConfigError("`solver`/`suite` do not apply to a claim check; use claim.solvers=[...]")
    base = args.searchpath_overrides() + args.overrides
    with Session(args) as session:
        case, ropts = case_from_cfg(session.compose(base))
        if solvers is None:
            names = classical_solvers(make_problem(case.problem))
        elif isinstance(solvers, str):
            names = [solvers]
        elif isinstance(solvers, (list, tuple)) and all(isinstance(x, str) for x in solvers):
            names = list(solvers)
        else:
            raise ConfigError(f"`claim.solvers` must be a list of solver names, got {solvers!r}")
        configs = {}
        for s in names:
            cfg = session.compose(base + [f"solver={s}"])
            configs[s] = OmegaConf.to_container(cfg.solver, resolve=True)
            knob_for(configs[s])
    return case, ropts, configs


def write_verdict(verdict: Verdict, results_dir: str | Path, name: str | None = None) -> Path:
    """Write ``claim.md`` and ``claim.tex`` to ``<results_dir>/claims/<name or problem id>/``; the folder."""
    from lapbench.records import write_atomic
    from lapbench.report.frame import _slug

    out = Path(results_dir) / "claims" / (name or _slug(verdict.problem_id))
    out.mkdir(parents=True, exist_ok=True)
    write_atomic(out / "claim.md", verdict.to_markdown())
    write_atomic(out / "claim.tex", verdict.to_latex())
    return out


def check_folder_name(name: str | None, field: str = "claim.name") -> None:
    """A verdict folder name must be plain (checked before any probe runs)."""
    if name is not None and (not isinstance(name, str) or not name or "/" in name or name.startswith(".")):
        raise ConfigError(f"`{field}` must be a plain folder name, got {name!r}")


def probe_line(solver: str, probe, rec) -> str:
    """One progress line of a probe: its error, or why it failed."""
    what = f"{probe.error:.3e}" if probe.ok else (probe.reason or (rec or {}).get("reason") or "")
    return f"  {solver} {probe.value}: {probe.status} {what}{' (record exists)' if probe.skipped else ''}"
