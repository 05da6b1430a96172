"""The summary on top of a report: the answers before the evidence.

Per problem: the fastest method to each tolerance and the most accurate within each budget (one
small table), one sentence a reader can quote, each classical method's expected against observed
convergence order, and the problem statement (PDE, domain, exact solution or reference and its
source). For the whole report: versions, git revision, CPU and threads, and the commands that
reproduce it. Errors below a computed reference's own accuracy are shown as
``< floor (reference accuracy)`` (lapbench.report.rules.reference_floor), never as a number.
Everything is built from the rules' tables (time_to_tolerance, accuracy_at_budget, speedup_table,
order_check); nothing is measured here.
"""
from __future__ import annotations

import dataclasses

from lapbench.report.frame import _finite, _metric_name, natural_key
from lapbench.report.options import ReportConfig
from lapbench.report.rules import floored, order_check, order_fits, problem_floors

__all__ = ["Summary", "build_summary", "problem_statement", "reproduce_commands"]

PDE = {"laplace": "-Laplace(u) = 0 in the domain, u = g on its boundary",
       "poisson": "-Laplace(u) = f in the domain, u = g on its boundary",
       "eigen": "-Laplace(u) = lambda u in the domain, u = 0 on its boundary (the k lowest eigenvalues)"}


@dataclasses.dataclass
class Summary:
    """The summary: `table` (problem x criteria, strings), `sentences` and `statements` per problem,
    `orders` (expected against observed), `environment` and `commands` (lines)."""

    table: object                 # pandas DataFrame of strings
    sentences: dict
    statements: dict
    orders: object                # pandas DataFrame of strings
    environment: list
    commands: list
    metric: str = ""

    def to_markdown(self, to_markdown) -> str:
        """Markdown, tables rendered by `to_markdown` (lapbench.report.writers.to_markdown, which sits
        above this module)."""
        lines = ["## Summary", ""]
        for pid, s in self.sentences.items():
            lines.append(f"- {s}")
        lines += ["", f"Fastest method to each tolerance and most accurate within each budget ({self.metric}; "
                  "time in seconds of method time):", "", to_markdown(self.table)]
        if len(self.orders):
            lines += ["Expected (smooth solutions) against observed convergence order of the classical methods:",
                      "", to_markdown(self.orders)]
        lines += ["Problems:", ""] + [f"- **{pid}**: {t}" for pid, t in self.statements.items()] + [""]
        lines += [f"- {t}" for t in self.environment]
        lines += ["", "Reproduce:", "", "```"] + self.commands + ["```", ""]
        return "\n".join(lines)



def _short_time(t) -> str:
    if not _finite(t):
        return "-"
    if t < 1e-3:
        return f"{t * 1e6:.3g} us"
    if t < 1:
        return f"{t * 1e3:.3g} ms"
    return f"{t:.3g} s"


def _times(x: float) -> str:
    """A speed-up factor for prose: 2.5, 38, 2,500."""
    return f"{x:,.0f}" if x >= 100 else f"{x:.2g}"


def problem_statement(rec: dict) -> str:
    """PDE, domain, exact solution or reference with its source, from one record."""
    p = rec.get("problem") or {}
    d = p.get("domain") or {}
    dom = d.get("kind", "?") + (" " + ", ".join(f"{k}={v}" for k, v in d.items() if k != "kind" and
                                               not isinstance(v, (list, dict))) if len(d) > 1 else "")
    text = f"{PDE.get(p.get('kind'), p.get('kind', '?'))}; domain: {dom}; {p.get('source') or 'source not stated'}"
    ref = p.get("reference") or {}
    if p.get("kind") == "eigen" and ref:
        srcs = sorted(set(ref.get("sources") or [])) or [ref.get("kind", "")]
        text += f"; reference eigenvalues: {', '.join(s for s in srcs if s)}"
    return text


def reproduce_commands(cfg: ReportConfig, recs) -> list[str]:
    """The commands that regenerate the records and this report."""
    suites = sorted({r.get("suite") for r in recs if r.get("suite")})
    results = cfg.results[0] if cfg.results else "results"
    rd = "" if results == "results" else f" results_dir={results}"
    lines = [f"lapbench run suite={s}{rd}" for s in ([cfg.suite] if cfg.suite else suites)]
    parts = [f"report.name={cfg.name}"]
    if cfg.suite:
        parts.insert(0, f"report.suite={cfg.suite}")
    if cfg.problem:
        parts.append("report.problem=[" + ",".join(cfg.problem) + "]")
    if cfg.solver:
        parts.append("report.solver=[" + ",".join(cfg.solver) + "]")
    lines.append("lapbench report " + " ".join(parts) + rd)
    return lines


def _environment(recs) -> list[str]:
    envs = [r.get("environment") or {} for r in recs]
    cpus = sorted({e.get("cpu") for e in envs if e.get("cpu")})
    gits = sorted({e.get("git") for e in envs if e.get("git")})
    threads = sorted({r.get("threads") for r in recs if r.get("threads") is not None})
    cores = sorted({e.get("cpu_count") for e in envs if e.get("cpu_count")})
    vers: dict = {}
    for e in envs:
        for k, v in (e.get("versions") or {}).items():
            if v:
                vers.setdefault(k, set()).add(v)
    vtext = ", ".join(f"{k} {'/'.join(sorted(v))}" for k, v in sorted(vers.items()))
    py = sorted({e.get("python") for e in envs if e.get("python")})
    return [f"Machine: {', '.join(cpus) or 'unknown CPU'} ({', '.join(map(str, cores)) or '?'} cores); threads per "
            f"case: {', '.join(map(str, threads)) or '?'}.",
            f"Versions: Python {', '.join(py) or '?'}; {vtext or 'not recorded'}.",
            f"Git revision: {', '.join(gits) or 'unknown'}."]


def _best_cell(rows, flag: str, by: str, show) -> str:
    """The best row among those with `flag` (least `by`, ties by solver) as ``solver (config) value``."""
    hit = rows[rows[flag]].sort_values([by, "solver"])
    if not len(hit):
        return "none"
    r = hit.iloc[0]
    return f"{r['solver']} ({r['config']}) {show(r[by])}"


def _sentence(pid, tt, sp, floor, metric: str, cfg: ReportConfig) -> str:
    """One quotable sentence: the tightest tolerance met and by whom; learned against classical."""
    t = tt[tt["problem_id"] == pid]
    out = f"On {pid}"
    reached = t[t["reached"]]
    if len(reached):
        tol = reached["tolerance"].min()
        r = reached[reached["tolerance"] == tol].sort_values(["time_s", "solver"]).iloc[0]
        tol_txt = (f"{tol:.0e}" if floor is None or tol >= floor
                   else f"{tol:.0e} (below the reference accuracy {floor:.2g}, so not verifiable)")
        out += f", the fastest method to {metric} {tol_txt} is {r['solver']} ({r['config']}, {_short_time(r['time_s'])})"
    else:
        out += f", no method reached {metric} {max(cfg.tolerances):.0e}"
    s = sp[(sp["problem_id"] == pid) & (sp["level"] != "tolerance")] if len(sp) else sp
    if len(s):
        row = s.iloc[0]
        e = floored(row["error"], floor)
        if row["winner"] == "classical" and _finite(row["speedup"]):
            out += (f"; the best learned method, {row['learned']}, reached {e} at best ({_short_time(row['learned_time_s'])}), "
                    f"which {row['classical']} reaches in {_short_time(row['classical_time_s'])}, "
                    f"{_times(row['speedup'])} times sooner")
        elif row["winner"] == "learned" and _finite(row["speedup"]):
            out += (f"; the learned method {row['learned']} reached {e} in {_short_time(row['learned_time_s'])}, "
                    f"{_times(row['speedup'])} times sooner than the best classical method {row['classical']}")
        elif row["winner"] == "learned":
            out += f"; the learned method {row['learned']} reached {e}, which no classical run here reached"
    return out + "."


def build_summary(recs, frame, cfg: ReportConfig, tt, ab, sp) -> Summary:
    """The summary from the report's time-to-tolerance (`tt`), accuracy-at-budget (`ab`) and
    speed-up (`sp`) tables (lapbench.report.rules)."""
    import pandas as pd

    metric = cfg.metric if not (frame["kind"] == "eigen").all() else (cfg.eigen_metric or cfg.metric)
    floors = problem_floors(recs, frame, cfg.metric, cfg.eigen_metric)
    pids = sorted(frame["problem_id"].unique(), key=natural_key)
    rows = []
    for pid in pids:
        fl = floors.get(pid)
        row = {"problem": pid}
        t = tt[tt["problem_id"] == pid]
        for tol in cfg.tolerances:
            row[f"fastest to {tol:.0e}"] = _best_cell(t[t["tolerance"] == tol], "reached", "time_s", _short_time)
        a = ab[ab["problem_id"] == pid]
        for B in cfg.budgets:
            row[f"best within {B:g} s"] = _best_cell(a[a["budget_s"] == B], "within", "error",
                                                      lambda e, fl=fl: floored(e, fl, ".2e"))
        rows.append(row)
    table = pd.DataFrame(rows)
    sentences = {pid: _sentence(pid, tt, sp, floors.get(pid), metric, cfg) for pid in pids}
    statements = {}
    for pid in pids:
        i = int(frame.index[frame["problem_id"] == pid][0])
        statements[pid] = problem_statement(recs[i])
    fits = order_check(order_fits(frame, cfg.fit.floor, cfg.fit.points), frame)
    orders = pd.DataFrame({
        "problem": fits["problem_id"],
        "method": [s + (f" ({v})" if v else "") for s, v in zip(fits["solver"], fits["variant"])],
        "expected": [f"{e:g}" if _finite(e) else ("spectral" if v == "spectral" else "")
                     for e, v in zip(fits["expected"], fits["verdict"])],
        "observed": [f"{o:.2f}" if _finite(o) else "" for o in fits["order"]],
        "verdict": list(fits["verdict"]),
    }) if len(fits) else pd.DataFrame()
    metric_name = _metric_name(cfg) + (f" (eigen problems: {cfg.eigen_metric})" if cfg.eigen_metric
                                       and (frame["kind"] == "eigen").any() else "")
    return Summary(table, sentences, statements, orders, _environment(recs), reproduce_commands(cfg, recs),
                   metric_name)
