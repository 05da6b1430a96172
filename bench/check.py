"""The check stage: compare a suite's records with its committed baseline; exit codes for CI.

Rules (options in conf/check/default.yaml, overridable as ``check.<key>=...``):

- Deterministic solvers, per case: a status change from ``ok`` is a regression; each error
  (a float metric) may grow to at most ``error_factor * max(baseline, error_floor)`` (the floor
  sits near rounding level, where cross-machine differences are noise, not regressions); an
  integer metric (a count, such as the number of eigenvalues delivered) may not change.
- Stochastic solvers and the families in ``median_families`` (PINNs: reproducible for a fixed
  seed on one machine, but a long float32 training amplifies rounding differences between
  machines), per group of seeds: the median error over the seeds that finished ``ok`` may grow
  to at most ``stochastic_factor * max(baseline median, error_floor)``, and the number of
  failed seeds may not grow.
- Runtime: the solver's time divided by the calibration kernel's time taken right before the
  case (`bench.calibration`), clamped below at ``runtime_floor`` (tiny times are jitter), may
  grow by at most ``runtime_factor``; ``runtime`` says whether that is an ``error``, a ``warn``
  or ``off``. Cases during which other processes kept more than ``busy_limit`` cores busy (on
  either side) are not time-compared: their times measure the neighbours (a note says how many).
- Baseline cases without a record are listed as missing (an error unless ``missing=warn``);
  cases without a baseline entry are listed as new.

A baseline whose times were normalised by another calibration kernel is not time-compared (a
note; with ``runtime=error`` it is an incompatible baseline, exit 2).

Outputs: a table on the terminal, ``summary.md`` and ``junit.xml`` under
``<results_dir>/check/<suite>/``. Exit codes: 0 clean, 1 regression, 2 usage error or an
unreadable or incompatible baseline.
"""
from __future__ import annotations

import dataclasses
import math
import statistics
import sys
from pathlib import Path

from bench.baseline import group_key, key_of_prepared, read_baseline, summarise, write_baseline
from bench.config import ConfigError, one_of

__all__ = ["CheckConfig", "Finding", "CheckResult", "compare", "format_table", "to_markdown",
           "to_junit", "plan_check", "run_check", "run_baseline", "EXIT_CLEAN", "EXIT_REGRESSION"]

EXIT_CLEAN = 0
EXIT_REGRESSION = 1
RUNTIME_MODES = ("off", "warn", "error")
MISSING_MODES = ("warn", "error")
SHOW = ("problems", "all")
# Severity order of findings (tables list the worst first).
VERDICTS = ("regression", "missing", "warning", "new", "improved", "ok")


@dataclasses.dataclass
class CheckConfig:
    """`lapbench check` / `lapbench baseline` options (conf/check/default.yaml)."""

    baseline: str | None = None
    baseline_dir: str = "results/baseline"
    run: bool = False
    error_factor: float = 1.25
    error_floor: float = 1e-11
    stochastic_factor: float = 3.0
    median_families: list[str] = dataclasses.field(default_factory=lambda: ["pinn"])
    runtime: str = "warn"
    runtime_factor: float = 2.0
    runtime_floor: float = 0.5
    busy_limit: float | None = 1.0
    missing: str = "error"
    metrics: list[str] | None = None
    out_dir: str | None = None
    show: str = "problems"

    def __post_init__(self):
        for name in ("error_factor", "stochastic_factor", "runtime_factor"):
            v = getattr(self, name)
            if not v >= 1.0:
                raise ConfigError(f"`{name}` must be a factor of at least 1, got {v!r}")
        if self.busy_limit is not None and self.busy_limit < 0:
            raise ConfigError(f"`busy_limit` must be null or zero or positive, got {self.busy_limit!r}")
        for name in ("error_floor", "runtime_floor"):
            if getattr(self, name) < 0:
                raise ConfigError(f"`{name}` must be zero or positive, got {getattr(self, name)!r}")
        one_of("runtime", self.runtime, RUNTIME_MODES)
        one_of("missing", self.missing, MISSING_MODES)
        one_of("show", self.show, SHOW)
        if self.metrics is not None and not self.metrics:
            raise ConfigError("`metrics` must be null (every recorded error) or a non-empty list")

    def busy(self, entry: dict) -> bool:
        """Whether other processes kept more than `busy_limit` cores busy during the case."""
        load = entry.get("foreign_load")
        return self.busy_limit is not None and isinstance(load, (int, float)) and load > self.busy_limit

    def by_median(self, entry: dict) -> bool:
        """Whether a case is compared through the median over its seed group."""
        return not entry.get("deterministic", True) or entry.get("family", "") in self.median_families

    def baseline_path(self, suite: str) -> Path:
        return Path(self.baseline) if self.baseline else Path(self.baseline_dir) / f"{suite}.json"


@dataclasses.dataclass
class Finding:
    """One comparison outcome: which case (or seed group), which check, values and tolerance."""

    key: str
    check: str                 # an error metric, "status", "failures", "time" or "presence"
    verdict: str               # one of VERDICTS
    baseline: object = None
    current: object = None
    ratio: float | None = None
    limit: str = ""
    message: str = ""
    solver: str = ""


@dataclasses.dataclass
class CheckResult:
    suite: str
    findings: list[Finding]
    compared: int              # cases and seed groups present on both sides
    baseline_provenance: dict
    current_provenance: dict
    config: CheckConfig
    notes: list[str] = dataclasses.field(default_factory=list)

    def count(self, verdict: str) -> int:
        """Cases (or seed groups) with at least one finding of this verdict."""
        return len({f.key for f in self.findings if f.verdict == verdict})

    @property
    def failed(self) -> bool:
        return any(f.verdict == "regression" for f in self.findings)

    @property
    def exit_code(self) -> int:
        return EXIT_REGRESSION if self.failed else EXIT_CLEAN

    def headline(self) -> str:
        parts = [f"{self.compared} compared"]
        for v, label in (("regression", "regressions"), ("missing", "missing"), ("warning", "warnings"),
                         ("new", "new"), ("improved", "improved")):
            parts.append(f"{self.count(v)} {label}")
        state = "REGRESSION" if self.failed else "clean"
        return f"lapbench check {self.suite}: {state} ({', '.join(parts)})"


# -- comparison ------------------------------------------------------------------------------------
def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _compare_errors(key, solver, base: dict, cur: dict, factor: float, cfg: CheckConfig,
                    label: str = "") -> list[Finding]:
    """Each error metric of the baseline against its current value (growth factor above a floor)."""
    out = []
    names = sorted(base) if cfg.metrics is None else [m for m in cfg.metrics if m in base]
    for m in names:
        b, c = base.get(m), cur.get(m)
        if not _finite(b):
            continue  # nothing to hold the current value to
        limit = factor * max(b, cfg.error_floor)
        lim_text = f"<= {limit:.3e} ({factor:g} x max(base, {cfg.error_floor:g})){label}"
        if not _finite(c):
            out.append(Finding(key, m, "regression", b, c, None, lim_text,
                               f"{m} is {'missing' if c is None else c} (baseline {b:.3e})", solver))
            continue
        ratio = c / b if b > 0 else math.inf if c > 0 else 1.0
        if c > limit:
            out.append(Finding(key, m, "regression", b, c, ratio, lim_text,
                               f"{m} grew {ratio:.3g}x: {b:.3e} -> {c:.3e}", solver))
        elif b > cfg.error_floor and c * factor < b:
            out.append(Finding(key, m, "improved", b, c, ratio, lim_text,
                               f"{m} fell {1 / ratio if ratio else math.inf:.3g}x: {b:.3e} -> {c:.3e}", solver))
        else:
            out.append(Finding(key, m, "ok", b, c, ratio, lim_text, "", solver))
    return out


def _compare_counts(key, solver, base: dict, cur: dict, cfg: CheckConfig) -> list[Finding]:
    """Integer metrics (e.g. the number of eigenvalues delivered) must not change."""
    out = []
    for m in sorted(base) if cfg.metrics is None else [m for m in cfg.metrics if m in base]:
        b, c = base[m], cur.get(m)
        if c != b:
            out.append(Finding(key, m, "regression", b, c, None, f"== {b}", f"{m} changed: {b} -> {c}", solver))
        else:
            out.append(Finding(key, m, "ok", b, c, None, f"== {b}", "", solver))
    return out


def _compare_time(key, solver, b, c, cfg: CheckConfig, label: str = "") -> list[Finding]:
    if cfg.runtime == "off" or not _finite(b) or not _finite(c):
        return []
    fl = cfg.runtime_floor
    ratio = max(c, fl) / max(b, fl) if max(b, fl) > 0 else 1.0
    lim_text = f"<= {cfg.runtime_factor:g} x (normalised, floor {fl:g}){label}"
    if ratio > cfg.runtime_factor:
        verdict = "regression" if cfg.runtime == "error" else "warning"
        return [Finding(key, "time", verdict, b, c, ratio, lim_text,
                        f"normalised time grew {ratio:.3g}x: {b:.3g} -> {c:.3g}", solver)]
    if ratio * cfg.runtime_factor < 1.0:
        return [Finding(key, "time", "improved", b, c, ratio, lim_text,
                        f"normalised time fell {1 / ratio:.3g}x: {b:.3g} -> {c:.3g}", solver)]
    return [Finding(key, "time", "ok", b, c, ratio, lim_text, "", solver)]


def _compare_case(key, b: dict, c: dict, cfg: CheckConfig, timing: bool) -> list[Finding]:
    solver = b["solver"]
    bs, cs = b["status"], c["status"]
    if bs == "ok" and cs != "ok":
        reason = f": {c.get('reason')}" if c.get("reason") else ""
        return [Finding(key, "status", "regression", bs, cs, None, "== ok", f"status ok -> {cs}{reason}"[:300],
                        solver)]
    if bs != "ok" and cs == "ok":
        return [Finding(key, "status", "improved", bs, cs, None, "", f"status {bs} -> ok", solver)]
    if bs != cs:
        return [Finding(key, "status", "warning", bs, cs, None, "", f"status {bs} -> {cs}", solver)]
    if cs != "ok":
        return [Finding(key, "status", "ok", bs, cs, None, "", "", solver)]
    out = _compare_errors(key, solver, b["errors"], c["errors"], cfg.error_factor, cfg)
    out += _compare_counts(key, solver, b.get("counts") or {}, c.get("counts") or {}, cfg)
    if timing and b.get("threads") == c.get("threads"):
        out += _compare_time(key, solver, b.get("time_norm"), c.get("time_norm"), cfg)
    return out


def _median(values):
    vals = [v for v in values if _finite(v)]
    return statistics.median(vals) if vals else None


def _compare_group(gkey, bs: list[dict], cs: list[dict], cfg: CheckConfig, timing: bool) -> list[Finding]:
    """Seeds of a stochastic method: failure count, then medians over the seeds that finished ok."""
    solver = bs[0]["solver"]
    n = len(cs)
    b_fail = sum(e["status"] != "ok" for e in bs)
    c_fail = sum(e["status"] != "ok" for e in cs)
    out = []
    if c_fail > b_fail:
        reasons = "; ".join(sorted({f"seed {e['seed']}: {e['status']}" for e in cs if e["status"] != "ok"}))
        out.append(Finding(gkey, "failures", "regression", f"{b_fail}/{n}", f"{c_fail}/{n}", None,
                           f"<= {b_fail}/{n}", f"failed seeds {b_fail}/{n} -> {c_fail}/{n} ({reasons})"[:300],
                           solver))
    elif c_fail < b_fail:
        out.append(Finding(gkey, "failures", "improved", f"{b_fail}/{n}", f"{c_fail}/{n}", None, "",
                           f"failed seeds {b_fail}/{n} -> {c_fail}/{n}", solver))
    b_ok = [e for e in bs if e["status"] == "ok"]
    c_ok = [e for e in cs if e["status"] == "ok"]
    if not b_ok or not c_ok:
        return out
    names = sorted({m for e in b_ok for m in e["errors"]})
    b_med = {m: _median(e["errors"].get(m) for e in b_ok) for m in names}
    c_med = {m: _median(e["errors"].get(m) for e in c_ok) for m in names}
    label = f"; median of {len(c_ok)} seeds"
    out += _compare_errors(gkey, solver, b_med, c_med, cfg.stochastic_factor, cfg, label)
    if timing and {e.get("threads") for e in bs} == {e.get("threads") for e in cs}:
        out += _compare_time(gkey, solver, _median(e.get("time_norm") for e in b_ok),
                             _median(e.get("time_norm") for e in c_ok), cfg, label)
    return out


def compare(base_doc: dict, cur_doc: dict, cfg: CheckConfig, not_run: set[str] | None = None) -> CheckResult:
    """Compare two baseline-shaped documents (the committed one and the current run's).

    `not_run` holds the keys of suite cases that have no record; baseline cases among them are
    *missing*, other baseline cases without a record were dropped from the suite (a warning).
    """
    base, cur = base_doc["cases"], cur_doc["cases"]
    not_run = not_run or set()
    notes = []
    bk = base_doc["provenance"].get("calibration_kernel")
    ck = cur_doc["provenance"].get("calibration_kernel")
    timing = cfg.runtime != "off"
    if timing and bk != ck and cur:
        if cfg.runtime == "error":
            raise ConfigError(f"`check.baseline` times were normalised by calibration kernel {bk!r}, this run's "
                              f"by {ck!r}: they cannot be compared; regenerate the baseline or set "
                              "check.runtime=warn")
        timing = False
        notes.append(f"runtime not compared: the baseline was calibrated with kernel {bk!r}, "
                     f"this run with {ck!r}; regenerate the baseline")
    findings: list[Finding] = []
    compared = 0
    busy = 0
    groups_b: dict[str, list] = {}
    groups_c: dict[str, list] = {}
    for key in sorted(set(base) & set(cur)):
        b, c = base[key], cur[key]
        if not (cfg.by_median(b) or cfg.by_median(c)):
            compared += 1
            quiet = not (cfg.busy(b) or cfg.busy(c))
            busy += timing and not quiet
            findings += _compare_case(key, b, c, cfg, timing and quiet)
        else:
            groups_b.setdefault(group_key(b), []).append(b)
            groups_c.setdefault(group_key(c), []).append(c)
    for gkey in sorted(groups_b):
        compared += 1
        quiet = not any(cfg.busy(e) for e in groups_b[gkey] + groups_c[gkey])
        busy += timing and not quiet
        findings += _compare_group(gkey, sorted(groups_b[gkey], key=lambda e: e["seed"]),
                                   sorted(groups_c[gkey], key=lambda e: e["seed"]), cfg, timing and quiet)
    if busy:
        notes.append(f"time of {busy} of {compared} cases not compared: other processes kept more than "
                     f"{cfg.busy_limit:g} {'core' if cfg.busy_limit == 1 else 'cores'} busy while they ran (records' environment.foreign_load; "
                     "check.busy_limit)")
    for key in sorted(set(base) - set(cur)):
        b = base[key]
        if key in not_run:
            verdict = "regression" if cfg.missing == "error" else "missing"
            msg = "no record (the case did not run or its record is unreadable)"
        else:
            verdict, msg = "warning", "in the baseline but no longer in the suite; regenerate the baseline"
        findings.append(Finding(key, "presence", verdict, b["status"], None, None, "", msg, b["solver"]))
    for key in sorted(set(cur) - set(base)):
        c = cur[key]
        findings.append(Finding(key, "presence", "new", None, c["status"], None, "",
                                "not in the baseline (new case)", c["solver"]))
    return CheckResult(base_doc.get("suite") or cur_doc.get("suite"), findings, compared,
                       base_doc.get("provenance") or {}, cur_doc.get("provenance") or {}, cfg, notes)


# -- outputs ---------------------------------------------------------------------------------------------
def _cell(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        if not math.isfinite(v):
            return str(v)
        return f"{v:.3e}" if (abs(v) < 1e-2 or abs(v) >= 1e4) and v != 0 else f"{v:.4g}"
    return str(v)


def _rows(result: CheckResult, show_all: bool):
    order = {v: i for i, v in enumerate(VERDICTS)}
    rows = [f for f in result.findings if show_all or f.verdict != "ok"]
    rows.sort(key=lambda f: (order[f.verdict], f.key, f.check))
    return rows


def _display_verdict(f: Finding) -> str:
    if f.verdict == "regression" and f.check == "presence":
        return "MISSING"
    return f.verdict.upper() if f.verdict == "regression" else f.verdict


def format_table(result: CheckResult, show_all: bool = False) -> str:
    """Plain-text table for the terminal: what changed, by how much, against which tolerance."""
    head = ("result", "case", "check", "baseline", "current", "ratio", "tolerance", "detail")
    rows = [(_display_verdict(f), f.key, f.check, _cell(f.baseline), _cell(f.current),
             "-" if f.ratio is None else f"{f.ratio:.3g}", f.limit or "-", f.message or "-")
            for f in _rows(result, show_all)]
    lines = [result.headline()]
    lines += [f"note: {n}" for n in result.notes]
    if rows:
        widths = [max(len(str(r[i])) for r in rows + [head]) for i in range(len(head) - 1)]
        fmt = "  ".join(f"{{:<{w}}}" for w in widths) + "  {}"
        lines.append(fmt.format(*head))
        lines.append(fmt.format(*("-" * w for w in widths), "-" * 9))
        lines += [fmt.format(*r) for r in rows]
    return "\n".join(lines) + "\n"


def _md(v) -> str:
    return str(v).replace("|", "\\|")


def to_markdown(result: CheckResult) -> str:
    """The Markdown summary (for a CI job page or a pull request comment)."""
    cfg = result.config
    bp, cp = result.baseline_provenance, result.current_provenance
    out = [f"# lapbench check: suite `{result.suite}` - {'REGRESSION' if result.failed else 'clean'}", ""]
    out.append(f"{result.compared} cases or seed groups compared: {result.count('regression')} regressions, "
               f"{result.count('missing')} missing, {result.count('warning')} warnings, "
               f"{result.count('new')} new, {result.count('improved')} improved.")
    out.append("")
    out += [f"> {n}" for n in result.notes] + ([""] if result.notes else [])
    out.append(f"- baseline: created {bp.get('created')}, git {bp.get('git')}, cpu {bp.get('cpu')}, "
               f"calibration {(bp.get('calibration_s') or {}).get('median')} s")
    out.append(f"- current: {cp.get('records')} records, git {cp.get('git')}, cpu {cp.get('cpu')}, "
               f"calibration {(cp.get('calibration_s') or {}).get('median')} s")
    out.append(f"- tolerances: errors x{cfg.error_factor:g} (stochastic solvers: median over seeds "
               f"x{cfg.stochastic_factor:g}) above {cfg.error_floor:g}; normalised time "
               f"x{cfg.runtime_factor:g} above {cfg.runtime_floor:g} ({cfg.runtime}); missing cases: "
               f"{cfg.missing}")
    out.append("")
    sections = (("Regressions", ("regression",)), ("Missing", ("missing",)), ("Warnings", ("warning",)),
                ("New cases", ("new",)), ("Improvements", ("improved",)))
    rows = _rows(result, False)
    for title, verdicts in sections:
        sel = [f for f in rows if f.verdict in verdicts]
        if not sel:
            continue
        n_cases = len({f.key for f in sel})
        out += [f"## {title} ({n_cases} {'case' if n_cases == 1 else 'cases'}, {len(sel)} "
                f"{'finding' if len(sel) == 1 else 'findings'})", "",
                "| case | check | baseline | current | ratio | tolerance | detail |", "|---|---|---|---|---|---|---|"]
        for f in sel:
            out.append("| " + " | ".join(_md(x) for x in (
                f.key, f.check, _cell(f.baseline), _cell(f.current), "-" if f.ratio is None else f"{f.ratio:.3g}",
                f.limit, f.message)) + " |")
        out.append("")
    return "\n".join(out) + "\n"


def to_junit(result: CheckResult) -> str:
    """JUnit XML: one test case per case or seed group; regressions are failures, new cases skipped,
    warnings and improvements in the test case's system-out."""
    import xml.etree.ElementTree as ET

    by_key: dict[str, list[Finding]] = {}
    for f in result.findings:
        by_key.setdefault(f.key, []).append(f)
    suite = ET.Element("testsuite", name=f"lapbench.check.{result.suite}")
    failures = skipped = 0
    for key in sorted(by_key):
        fs = by_key[key]
        tc = ET.SubElement(suite, "testcase", classname=f"lapbench.{result.suite}.{fs[0].solver}", name=key)
        bad = [f for f in fs if f.verdict == "regression"]
        if bad:
            failures += 1
            el = ET.SubElement(tc, "failure", message="; ".join(f.message for f in bad)[:1000],
                               type="regression")
            el.text = "\n".join(f"{f.check}: baseline {_cell(f.baseline)}, current {_cell(f.current)}, "
                                f"tolerance {f.limit}" for f in bad)
        elif all(f.verdict in ("new", "missing") for f in fs):
            skipped += 1
            ET.SubElement(tc, "skipped", message="; ".join(f.message for f in fs))
        notes = [f"{f.verdict}: {f.check}: {f.message}" for f in fs if f.verdict in ("warning", "improved")]
        if notes:
            ET.SubElement(tc, "system-out").text = "\n".join(notes)
    suite.set("tests", str(len(by_key)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped))
    root = ET.Element("testsuites", name="lapbench check", tests=str(len(by_key)), failures=str(failures))
    root.append(suite)
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


# -- the commands ------------------------------------------------------------------------------------------
CHECK_USAGE = """usage: lapbench check suite=<name> [results_dir=DIR] [check.<key>=...] [case overrides]
       lapbench baseline suite=<name> [results_dir=DIR] [check.<key>=...] [case overrides]

check     compare the suite's records under DIR/runs with results/baseline/<suite>.json;
          writes DIR/check/<suite>/summary.md and junit.xml; exit 0 clean, 1 regression,
          2 usage error or unreadable baseline
baseline  write results/baseline/<suite>.json from the suite's records (review and commit it)

check.run=true runs the suite first (cases whose record exists are skipped; force=true reruns).
Other options: conf/check/default.yaml.
"""


@dataclasses.dataclass
class CheckPlan:
    """A parsed `check`/`baseline` request: the suite's cases and where their records are."""

    args: object
    name: str
    ccfg: CheckConfig
    results_dir: str
    planned: list          # [(case, record path)]


def plan_check(argv: list[str]) -> CheckPlan:
    """Parse arguments, compose the suite's cases and locate their records; no case runs here."""
    from omegaconf import OmegaConf

    from bench.compose import Args, Session, case_from_cfg, strip_overrides
    from bench.config import build_params
    from bench.suites import expand_suite

    args = Args(argv)
    if args.multirun:
        raise ConfigError("`--multirun` does not apply here; the suite names the cases (suite=<name>)")
    with Session(args) as session:
        base = args.searchpath_overrides() + args.overrides
        cfg = session.compose(base)
        if "check" not in cfg:
            raise ConfigError("`check` options are missing from the config; add `- check: default` to its defaults")
        ccfg = build_params(CheckConfig, OmegaConf.to_container(cfg.check, resolve=True), prefix="check")
        suite = OmegaConf.to_container(cfg.suite, resolve=True) if cfg.get("suite") else {}
        name = suite.get("name")
        if not name:
            raise ConfigError("`suite` is required: lapbench check suite=<name>; suites: "
                              + ", ".join(o for o in session.group_options("suite") if o != "none"))
        cases = expand_suite(suite)
        if not cases:
            raise ConfigError(f"`suite` {name!r} has no cases")
        rest = strip_overrides(base, ("suite", "case_index"))
        planned = []
        results_dir = OmegaConf.select(cfg, "results_dir") or "results"
        for ov in cases:
            case, opts = case_from_cfg(session.compose(ov + rest))
            case.suite = name
            results_dir = opts.results_dir
            planned.append((case, _locate(case, results_dir)))
    return CheckPlan(args, name, ccfg, results_dir, planned)


def _locate(case, results_dir) -> Path:
    """The record file of a case, named as `bench.run.prepare` names it, without building the
    problem (a manufactured problem runs sympy when built: seconds per case)."""
    from bench.records import config_hash, record_path
    from bench.run import make_solver

    solver = make_solver(case.solver)
    label = case.problem_label or case.problem.get("name")
    return record_path(results_dir, label, solver.name, config_hash(case.identity()))


def _collect(planned):
    """(records found, cases without a readable record)."""
    import warnings

    from bench.records import RecordWarning, read_record

    records, missing = [], []
    for case, path in planned:
        rec = None
        if path.exists():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RecordWarning)
                rec = read_record(path)
        if rec is None:
            missing.append(case)
        else:
            records.append(rec)
    return records, missing


def _key(case, results_dir) -> str:
    """The key of a case without a record: needs the problem's knobs, so the case is built (and
    validated) in full."""
    from bench.run import prepare

    return key_of_prepared(prepare(case, results_dir))


def _command_line(cmd: str, args) -> str:
    kept = [o for o in args.overrides if not o.startswith(("results_dir=", "check.baseline"))]
    return " ".join(["lapbench", cmd] + kept)


def run_check(plan: CheckPlan) -> int:
    """`lapbench check`: compare a suite's records with its baseline; exit 0, 1 or 2."""
    name, ccfg, results_dir = plan.name, plan.ccfg, plan.results_dir
    base_path = ccfg.baseline_path(name)
    base_doc = read_baseline(base_path, suite=name)
    records, missing = _collect(plan.planned)
    cur_doc = summarise(records, name)
    result = compare(base_doc, cur_doc, ccfg, {_key(c, results_dir) for c in missing})
    out_dir = Path(ccfg.out_dir) if ccfg.out_dir else Path(results_dir) / "check" / name
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        (out_dir / "summary.md").write_text(to_markdown(result))
        (out_dir / "junit.xml").write_text(to_junit(result))
    except OSError as exc:
        raise ConfigError(f"`check.out_dir` {str(out_dir)!r} cannot be written: {exc}") from None
    sys.stdout.write(format_table(result, show_all=ccfg.show == "all"))
    print(f"lapbench: compared {len(records)} records of suite {name!r} with {base_path}; "
          f"summary in {out_dir}/summary.md and {out_dir}/junit.xml", file=sys.stderr)
    return result.exit_code


def run_baseline(plan: CheckPlan) -> int:
    """`lapbench baseline`: write results/baseline/<suite>.json from the suite's records."""
    name, results_dir = plan.name, plan.results_dir
    records, missing = _collect(plan.planned)
    if missing:
        raise ConfigError(
            f"`suite` {name!r}: {len(missing)} of {len(plan.planned)} cases have no record under "
            f"{results_dir}/runs (e.g. {_key(missing[0], results_dir)!r}); run `lapbench run suite={name} "
            f"results_dir={results_dir}` first, or add check.run=true")
    doc = summarise(records, name, command=_command_line("baseline", plan.args))
    path = write_baseline(plan.ccfg.baseline_path(name), doc)
    statuses: dict[str, int] = {}
    for e in doc["cases"].values():
        statuses[e["status"]] = statuses.get(e["status"], 0) + 1
    print(f"lapbench: wrote {path}: {len(doc['cases'])} cases ("
          + ", ".join(f"{n} {s}" for s, n in sorted(statuses.items())) + "); review the diff and commit it",
          file=sys.stderr)
    return 0
