"""The nightly check: baselines, tolerant comparison, the three outputs and the exit codes.

One tiny real suite (sine and harmonic x fd5 and fst9 x n = 8, 16; a few seconds) is run once
and its baseline written; each test then injects one change into a copy of its records (or runs
a patched solver) and runs `lapbench check` in a subprocess. Stochastic-solver (seed group)
rules are tested in-process on synthetic records. The patched solver is monkeypatched into this
process and its cases rerun here (forked children inherit the patch).
"""
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from lapbench.check import CheckConfig, compare, dumps_baseline, read_baseline, summarise
from lapbench.config import ConfigError
from lapbench.records import case_key, iter_records, resolution_label, write_record
from lapbench.run import Case, execute, prepare
from lapbench.solvers.base import Solution
from lapbench.solvers.fast_poisson import FST9
from tests.conftest import LAPBENCH, ROOT

SUITES = {
    "checktiny": """name: checktiny
cases:
  - problem: [sine, harmonic]
    solver: [fd5, fst9]
    solver.n: [8, 16]
""",
    # the same cases listed in another order (same suite name, so the same baseline applies)
    "checktiny_reordered": """name: checktiny
cases:
  - problem: [harmonic, sine]
    solver: [fst9, fd5]
    solver.n: [16, 8]
""",
}
KEYS = sorted(f"{p} {s} n={n} seed=0" for p in ("sine(k=1,l=1)", "harmonic(omega=1.0)")
              for s in ("fd5", "fst9") for n in (8, 16))


def lapbench(*args, cwd):
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "PYTHONPATH": str(ROOT)}
    return subprocess.run([LAPBENCH, *args], cwd=cwd, capture_output=True, text=True, env=env, timeout=600)


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """A config folder with the test suites, one real run of `checktiny` and its baseline."""
    root = tmp_path_factory.mktemp("check")
    conf = root / "conf"
    (conf / "suite").mkdir(parents=True)
    for name, text in SUITES.items():
        (conf / "suite" / f"{name}.yaml").write_text(text)
    runs = root / "base"
    p = lapbench("run", "--config-dir", str(conf), "suite=checktiny", f"results_dir={runs}", cwd=root)
    assert p.returncode == 0, p.stderr
    baseline = root / "baseline" / "checktiny.json"
    p = lapbench("baseline", "--config-dir", str(conf), "suite=checktiny", f"results_dir={runs}",
                 f"check.baseline={baseline}", cwd=root)
    assert p.returncode == 0, p.stderr
    return {"root": root, "conf": conf, "runs": runs, "baseline": baseline}


def check(world, results, *extra, suite="checktiny", baseline=None):
    """Run `lapbench check`; returns (process, stdout table, summary.md text or None, junit root or None)."""
    p = lapbench("check", "--config-dir", str(world["conf"]), f"suite={suite}", f"results_dir={results}",
                 f"check.baseline={baseline or world['baseline']}", *extra, cwd=world["root"])
    out = Path(results) / "check" / "checktiny"
    md = (out / "summary.md").read_text() if (out / "summary.md").exists() else None
    junit = ET.parse(out / "junit.xml").getroot() if (out / "junit.xml").exists() else None
    return p, p.stdout, md, junit


def copy_runs(world, dest: Path) -> Path:
    shutil.copytree(world["runs"] / "runs", dest / "runs")
    return dest


def edit(results: Path, fn):
    """Apply fn(record) to every record under results/runs, in place (same file names)."""
    for path in sorted((results / "runs").glob("*.json")):
        rec = json.loads(path.read_text())
        if fn(rec) is not False:
            write_record(path, rec)


def is_case(rec, problem, solver, n):
    return rec["problem"]["label"] == problem and rec["solver"]["name"] == solver \
        and rec["solver"]["resolution"]["n"] == n


def cells(line: str) -> list[str]:
    """Columns of a terminal-table row (columns are separated by two or more spaces)."""
    return re.split(r"\s{2,}", line.strip())


def junit_failures(junit) -> dict:
    return {tc.get("name"): tc.find("failure").get("message") for tc in junit.iter("testcase")
            if tc.find("failure") is not None}


# -- the baseline file ---------------------------------------------------------------------------------
def test_baseline_file_is_keyed_sorted_and_one_case_per_line(world):
    text = world["baseline"].read_text()
    doc = json.loads(text)
    assert doc["format"] == "lapbench-baseline" and doc["schema_version"] == 1 and doc["suite"] == "checktiny"
    assert list(doc["cases"]) == KEYS
    for key in KEYS:
        lines = [ln for ln in text.splitlines() if json.dumps(key) in ln]
        assert len(lines) == 1 and lines[0].strip().startswith(json.dumps(key) + ": {")
        entry = doc["cases"][key]
        assert entry["status"] == "ok" and entry["seed"] == 0 and entry["deterministic"] is True
        assert entry["errors"]["rel_l2"] > 0 and entry["time_norm"] > 0
    prov = doc["provenance"]
    for field in ("git", "cpu", "versions", "calibration_kernel", "calibration_s", "created", "command"):
        assert prov.get(field) is not None, field
    # the same records give the same file, apart from the creation time
    again = dumps_baseline(summarise(list(iter_records(world["runs"])), "checktiny",
                                     command=prov["command"]))
    strip = lambda t: [ln for ln in t.splitlines() if '"created"' not in ln]  # noqa: E731
    assert strip(again) == strip(text)


def test_baseline_refuses_incomplete_records(world, tmp_path):
    results = copy_runs(world, tmp_path / "r")
    next((results / "runs").glob("sine__fd5__*.json")).unlink()
    out = tmp_path / "b.json"
    p = lapbench("baseline", "--config-dir", str(world["conf"]), "suite=checktiny", f"results_dir={results}",
                 f"check.baseline={out}", cwd=tmp_path)
    assert p.returncode == 2
    assert p.stderr.strip().startswith("lapbench: error: `suite` 'checktiny': 1 of 8 cases have no record")
    assert not out.exists()


# -- clean comparisons -------------------------------------------------------------------------------------
def test_fresh_rerun_of_the_same_code_is_clean(world, tmp_path):
    p, table, md, junit = check(world, tmp_path, "check.run=true")
    assert p.returncode == 0, p.stdout + p.stderr
    assert "lapbench check checktiny: clean (8 compared, 0 regressions" in table
    assert "- clean" in md.splitlines()[0]
    assert junit.find("testsuite").get("failures") == "0" and junit.find("testsuite").get("tests") == "8"


def test_noise_within_tolerance_and_improvements_pass(world, tmp_path):
    results = copy_runs(world, tmp_path)

    def jitter(rec):
        if rec["solver"]["name"] == "fd5":
            rec["metrics"] = {k: v * 1.2 for k, v in rec["metrics"].items()}   # below the factor 1.25
        else:
            rec["metrics"] = {k: v / 10 for k, v in rec["metrics"].items()}    # a tenfold improvement
        rec["timings"]["total"] *= 1.8                                          # below the factor 2
    edit(results, jitter)
    p, table, md, junit = check(world, results, "check.runtime=error", "check.runtime_floor=0",
                                "check.busy_limit=null")
    assert p.returncode == 0, table + p.stderr
    assert "0 regressions" in table and "4 improved" in table
    improved = [ln for ln in table.splitlines() if ln.startswith("improved")]
    assert {cells(ln)[1] for ln in improved} == {k for k in KEYS if " fst9 " in k}
    assert "## Improvements (" in md and "sine(k=1,l=1) fst9 n=8 seed=0" in md
    assert not junit_failures(junit)


def test_reordered_suite_and_baseline_pass(world, tmp_path):
    doc = json.loads(world["baseline"].read_text())
    doc["cases"] = dict(reversed(list(doc["cases"].items())))
    shuffled = tmp_path / "shuffled.json"
    shuffled.write_text(json.dumps(doc, indent=2))     # unsorted, differently formatted: still valid
    p, table, md, junit = check(world, world["runs"], suite="checktiny_reordered", baseline=shuffled)
    assert p.returncode == 0, table + p.stderr
    assert "clean (8 compared, 0 regressions, 0 missing" in table


def test_times_scaled_by_a_constant_compare_unchanged(world, tmp_path):
    results = copy_runs(world, tmp_path)

    def slower_machine(rec):
        rec["timings"] = {k: (v * 7.3 if isinstance(v, float) else v) for k, v in rec["timings"].items()}
        rec["environment"]["calibration_s"] *= 7.3
    edit(results, slower_machine)
    p, table, md, junit = check(world, results, "check.runtime=error", "check.runtime_floor=0",
                                "check.runtime_factor=1.01", "check.show=all", "check.busy_limit=null")
    assert p.returncode == 0, table + p.stderr
    time_rows = [cells(ln) for ln in table.splitlines() if ln.startswith("ok") and "  time  " in ln]
    assert len(time_rows) == 8
    # ratio column: normalised times are stored to 3 significant digits, so equal to within 0.5%
    assert all(abs(float(r[5]) - 1) <= 0.005 for r in time_rows), time_rows
    # in process, the same comparison exactly: every time finding has ratio 1 up to storage rounding
    base = summarise(list(iter_records(world["runs"])), "checktiny")
    cur = summarise(list(iter_records(results)), "checktiny")
    cfg = CheckConfig(runtime="error", runtime_floor=0.0, runtime_factor=1.01, busy_limit=None)
    times = [f for f in compare(base, cur, cfg).findings if f.check == "time"]
    assert len(times) == 8 and all(abs(f.ratio - 1) <= 0.005 and f.verdict == "ok" for f in times)


# -- injected regressions ---------------------------------------------------------------------------------
_FST9_SOLVE = FST9._solve


def lossy_fst9_solve(self, problem, budget, ctx):
    """fst9 patched to lose one order: its interpolant is off by h^3 sin(pi x) sin(pi y).

    The perturbation vanishes on the boundary of the unit square and is O(h^3), one order above
    the scheme's O(h^4) error (Collatz's Mehrstellen scheme; LeVeque 2007, sec. 3.5).
    """
    sol = _FST9_SOLVE(self, problem, budget, ctx)
    h = 1.0 / self.params.n

    def bump(p):
        p = np.asarray(p, dtype=float)
        return h ** 3 * np.sin(np.pi * p[:, 0]) * np.sin(np.pi * p[:, 1])

    return Solution(evaluate=lambda p: sol.evaluate(p) + bump(p), nodes=sol.nodes,
                    values=None if sol.values is None else sol.values + bump(sol.nodes), info=sol.info)


def test_solver_losing_an_order_is_caught_in_all_outputs(world, tmp_path, monkeypatch):
    results = copy_runs(world, tmp_path)
    monkeypatch.setattr(FST9, "_solve", lossy_fst9_solve)
    # rerun the fst9 cases with the patched solver (forked from this process), same record files
    for path in sorted((results / "runs").glob("*__fst9__*.json")):
        rec = json.loads(path.read_text())
        case = Case(problem=rec["problem"]["config"], solver=rec["solver"]["config"],
                    problem_label=rec["problem"]["label"], seed=rec["seed"], threads=rec["threads_requested"],
                    budget=rec["budget"])
        prep = prepare(case, results)
        assert prep.path == path
        new, skipped = execute(prep, force=True)
        assert not skipped and new["status"] == "ok"
    p, table, md, junit = check(world, results)
    assert p.returncode == 1, table + p.stderr
    lossy = [k for k in KEYS if " fst9 " in k]
    regressed = {cells(ln)[1] for ln in table.splitlines() if ln.startswith("REGRESSION")}
    assert regressed == set(lossy)
    assert "1.25 x max(base, 1e-11)" in table      # the tolerance is shown beside the numbers
    assert md.splitlines()[0].endswith("REGRESSION")
    for key in lossy:
        assert f"| {key} | rel_l2 |" in md
    assert set(junit_failures(junit)) == set(lossy)
    assert all("rel_l2 grew" in m for m in junit_failures(junit).values())


def test_status_turned_failed_is_caught_in_all_outputs(world, tmp_path):
    results = copy_runs(world, tmp_path)

    def fail_one(rec):
        if not is_case(rec, "harmonic", "fd5", 16):
            return False
        rec.update(status="failed", reason="RuntimeError: injected", metrics={})
    edit(results, fail_one)
    p, table, md, junit = check(world, results)
    key = "harmonic(omega=1.0) fd5 n=16 seed=0"
    assert p.returncode == 1, table + p.stderr
    assert [cells(ln)[1] for ln in table.splitlines() if ln.startswith("REGRESSION")] == [key]
    assert "status ok -> failed: RuntimeError: injected" in table
    assert f"| {key} | status | ok | failed |" in md
    assert junit_failures(junit) == {key: "status ok -> failed: RuntimeError: injected"}


@pytest.mark.parametrize("mode,code", [("error", 1), ("warn", 0)])
def test_doubled_normalised_time(world, tmp_path, mode, code):
    results = copy_runs(world, tmp_path)

    def slow_one(rec):
        if not is_case(rec, "sine", "fd5", 16):
            return False
        rec["timings"]["total"] *= 2.0
    edit(results, slow_one)
    # smoke-sized cases take milliseconds: no floor, and a tolerance below the injected factor 2
    p, table, md, junit = check(world, results, f"check.runtime={mode}", "check.runtime_floor=0",
                                "check.runtime_factor=1.5", "check.busy_limit=null")
    key = "sine(k=1,l=1) fd5 n=16 seed=0"
    assert p.returncode == code, table + p.stderr
    row = [ln for ln in table.splitlines() if f"  {key}  time  " in ln]
    assert len(row) == 1 and row[0].startswith("REGRESSION" if mode == "error" else "warning")
    # the baseline stores normalised times to 3 significant digits, so the doubling reads 1.99-2.01
    import re

    grew = [float(g) for g in re.findall(r"normalised time grew ([0-9.]+)x", md)]
    assert len(grew) == 1 and abs(grew[0] - 2.0) <= 0.02, md
    if mode == "error":
        assert list(junit_failures(junit)) == [key]
    else:
        assert not junit_failures(junit)
        out = [tc.find("system-out").text for tc in junit.iter("testcase") if tc.get("name") == key]
        assert out and "warning: time" in out[0]


def test_missing_and_new_cases_are_listed(world, tmp_path):
    results = copy_runs(world, tmp_path)
    next((results / "runs").glob("harmonic__fst9__*.json")).unlink()   # one of n = 8, 16
    p, table, md, junit = check(world, results)
    assert p.returncode == 1
    missing = [ln for ln in table.splitlines() if ln.startswith("MISSING")]
    assert len(missing) == 1 and "harmonic(omega=1.0) fst9" in missing[0] and "no record" in missing[0]
    p, table, md, junit = check(world, results, "check.missing=warn")
    assert p.returncode == 0 and "1 missing" in table
    # a baseline without one case: that case is new, which is not a failure
    doc = json.loads(world["baseline"].read_text())
    del doc["cases"][KEYS[0]]
    smaller = tmp_path / "smaller.json"
    smaller.write_text(dumps_baseline(doc))
    p, table, md, junit = check(world, world["runs"], baseline=smaller)
    assert p.returncode == 0
    assert [cells(ln)[1] for ln in table.splitlines() if ln.startswith("new")] == [KEYS[0]]
    assert "## New cases (1 case, 1 finding)" in md


# -- unreadable or incompatible baselines, bad options: exit 2 ------------------------------------------------
@pytest.mark.parametrize("damage,message", [
    (lambda text: text[: len(text) // 2], "is not valid JSON (line "),
    (lambda text: text.replace('"schema_version": 1', '"schema_version": 99'),
     "has schema version 99; this lapbench reads version 1"),
], ids=["truncated", "schema-99"])
def test_corrupt_or_incompatible_baseline_exits_2(world, tmp_path, damage, message):
    bad = tmp_path / "bad.json"
    bad.write_text(damage(world["baseline"].read_text()))
    p, table, md, junit = check(world, tmp_path, baseline=bad)
    assert p.returncode == 2
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"lapbench: error: `check.baseline` '{bad}' {message}")
    assert md is None and junit is None and p.stdout == ""


@pytest.mark.parametrize("damage,message", [
    (lambda d: d.pop("format"), "is not a lapbench baseline"),
    (lambda d: d.update(suite="other"), "is the baseline of suite 'other', not of 'checktiny'"),
    (lambda d: d["cases"][KEYS[1]].pop("status"), f"case {KEYS[1]!r}: field 'status' is missing or not str"),
    (lambda d: d["cases"][KEYS[2]]["errors"].update(rel_l2="small"), "'small' is not a number"),
], ids=["not-a-baseline", "other-suite", "no-status", "bad-number"])
def test_incompatible_baseline_content_is_refused(world, tmp_path, damage, message):
    doc = json.loads(world["baseline"].read_text())
    damage(doc)
    path = tmp_path / "b.json"
    path.write_text(json.dumps(doc))
    with pytest.raises(ConfigError, match=r"^`check.baseline` .*" + re.escape(message)):
        read_baseline(path, suite="checktiny")


def test_missing_baseline_and_bad_options_exit_2(world, tmp_path):
    p, *_ = check(world, tmp_path, baseline=tmp_path / "none.json")
    assert p.returncode == 2 and "does not exist; create it with `lapbench baseline suite=checktiny`" in p.stderr
    p, *_ = check(world, tmp_path, "check.runtime=sometimes")
    assert p.returncode == 2
    assert p.stderr.strip() == "lapbench: error: `check.runtime` must be one of off, warn, error; got 'sometimes'"
    p = lapbench("check", f"results_dir={tmp_path}", cwd=tmp_path)
    assert p.returncode == 2 and p.stderr.startswith("lapbench: error: `suite` is required")


# -- stochastic solvers: medians over seeds, failure counts (synthetic records, in process) -------------------
def fake(seed, rel_l2, status="ok", solver="toy", deterministic=False, time=1.0, family="test"):
    """A minimal record as lapbench.run writes it (the fields the baseline reads)."""
    return {"problem": {"id": "sine(k=1,l=1)", "label": "sine"}, "seed": seed, "status": status,
            "reason": "" if status == "ok" else "injected",
            "solver": {"name": solver, "config": {"name": solver, "n": 8}, "resolution": {"n": 8},
                       "resolution_label": "n=8", "deterministic": deterministic, "family": family},
            "metrics": {"rel_l2": rel_l2} if status == "ok" else {}, "threads": 1,
            "timings": {"total": time}, "environment": {"calibration_s": 0.05, "calibration_kernel": "k"}}


def verdicts(base_recs, cur_recs, **cfg):
    result = compare(summarise(base_recs, "s"), summarise(cur_recs, "s"), CheckConfig(**cfg))
    return result, {(f.key, f.check): f.verdict for f in result.findings}


GROUP = "sine(k=1,l=1) toy n=8"
BASE = [fake(0, 1.0e-3), fake(1, 1.2e-3), fake(2, 0.9e-3)]


def test_one_bad_seed_does_not_move_the_median():
    result, v = verdicts(BASE, [fake(0, 1.0e-3), fake(1, 5e-2), fake(2, 1.1e-3)])
    assert v[(GROUP, "rel_l2")] == "ok" and result.exit_code == 0


def test_median_growth_beyond_the_stochastic_factor_is_a_regression():
    result, v = verdicts(BASE, [fake(0, 4e-3), fake(1, 5e-3), fake(2, 6e-3)])   # median 5e-3 > 3 x 1e-3
    assert v[(GROUP, "rel_l2")] == "regression" and result.exit_code == 1


def test_growing_failure_count_is_a_regression():
    result, v = verdicts(BASE, [fake(0, 1.0e-3), fake(1, 1.2e-3), fake(2, None, status="diverged")])
    assert v[(GROUP, "failures")] == "regression" and result.exit_code == 1
    f = next(f for f in result.findings if f.check == "failures")
    assert (f.baseline, f.current) == ("0/3", "1/3") and "seed 2: diverged" in f.message


def test_error_floor_absorbs_rounding_level_changes():
    key = "sine(k=1,l=1) toy n=8 seed=0"
    base = [fake(0, 1e-15, deterministic=True)]
    _, v = verdicts(base, [fake(0, 8e-12, deterministic=True)])     # below 1.25 x 1e-11
    assert v[(key, "rel_l2")] == "ok"
    _, v = verdicts(base, [fake(0, 2e-11, deterministic=True)])
    assert v[(key, "rel_l2")] == "regression"


def test_pinn_family_is_compared_by_median_even_when_reproducible():
    # PINNs are tagged deterministic (same seed, same machine: same result), yet training
    # amplifies rounding differences between machines: they are held to the seed-group median.
    base = [fake(s, e, deterministic=True, family="pinn") for s, e in enumerate((1.0e-3, 1.2e-3, 0.9e-3))]
    cur = [fake(s, e, deterministic=True, family="pinn") for s, e in enumerate((1.0e-3, 5e-2, 1.1e-3))]
    result, v = verdicts(base, cur)
    assert v[(GROUP, "rel_l2")] == "ok" and result.exit_code == 0
    _, v = verdicts(base, cur, median_families=[])     # per case: seed 1 grew 42x
    assert v[("sine(k=1,l=1) toy n=8 seed=1", "rel_l2")] == "regression"


def test_times_of_another_calibration_kernel_are_not_compared():
    base = [fake(0, 1e-3, deterministic=True)]
    cur = [fake(0, 1e-3, deterministic=True, time=10.0)]        # ten times slower ...
    cur[0]["environment"]["calibration_kernel"] = "other"       # ... by another yardstick
    result, v = verdicts(base, cur)
    assert ("sine(k=1,l=1) toy n=8 seed=0", "time") not in v and result.exit_code == 0
    assert "runtime not compared" in result.notes[0]
    with pytest.raises(ConfigError, match=r"^`check.baseline` times were normalised by calibration kernel 'k'"):
        verdicts(base, cur, runtime="error")


def test_count_metrics_must_not_change():
    def eig(n_eigs):
        rec = fake(0, 1e-3, deterministic=True)
        rec["metrics"]["n_eigs"] = n_eigs        # an integer metric: how many eigenvalues came back
        return rec
    result, v = verdicts([eig(4)], [eig(4)])
    assert v[("sine(k=1,l=1) toy n=8 seed=0", "n_eigs")] == "ok" and result.exit_code == 0
    result, v = verdicts([eig(4)], [eig(3)])
    assert v[("sine(k=1,l=1) toy n=8 seed=0", "n_eigs")] == "regression" and result.exit_code == 1


def test_times_measured_on_a_busy_machine_are_not_compared():
    base = [fake(0, 1e-3, deterministic=True)]
    cur = [fake(0, 1e-3, deterministic=True, time=10.0)]          # ten times slower ...
    cur[0]["environment"]["foreign_load"] = 1.7                   # ... with 1.7 cores taken by others
    result, v = verdicts(base, cur, runtime="error")
    assert ("sine(k=1,l=1) toy n=8 seed=0", "time") not in v and result.exit_code == 0
    assert result.notes[0].startswith("time of 1 of 1 cases not compared: other processes kept more than 1 core busy")
    result, v = verdicts(base, cur, runtime="error", busy_limit=None)
    assert v[("sine(k=1,l=1) toy n=8 seed=0", "time")] == "regression" and result.exit_code == 1


def test_case_key_is_the_records_identity_and_groups_drop_only_the_seed():
    from lapbench import check

    assert check.case_key is case_key        # one definition, in lapbench.records
    # the key format stated in bench/check/baseline.py's docstring, with its example
    assert case_key("peak(alpha=1000.0,xc=0.5,yc=0.5)", "fd5", "n=64", "linear_solver=amg", 0) == \
        "peak(alpha=1000.0,xc=0.5,yc=0.5) fd5[linear_solver=amg] n=64 seed=0"
    assert resolution_label({"level": 3, "h": 0.1}) == "level=3,h=0.1"   # knobs in their order, comma-joined
    entry = {"problem": "sine(k=1,l=1)", "solver": "pinn_x", "options": "", "resolution": "", "seed": 7}
    assert check.group_key(entry) == "sine(k=1,l=1) pinn_x -"            # no options, no resolution: "-"
