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
  case (`lapbench.calibration`), clamped below at ``runtime_floor`` (tiny times are jitter), may
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
from pathlib import Path

from lapbench.check.baseline import group_key
from lapbench.config import ConfigError, one_of

__all__ = ["CheckConfig", "Finding", "CheckResult", "compare", "EXIT_CLEAN", "EXIT_REGRESSION"]

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

