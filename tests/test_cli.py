"""The command line end to end (subprocess): records written, sweeps, bad input, reruns."""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import LAPBENCH, ROOT


def run(args, cwd, check=None):
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    p = subprocess.run([LAPBENCH, *args], cwd=cwd, capture_output=True, text=True, env=env, timeout=300)
    if check is not None:
        assert p.returncode == check, f"exit {p.returncode}\nstdout:{p.stdout}\nstderr:{p.stderr}"
    return p


def records(d):
    return sorted((Path(d) / "runs").glob("*.json"))


def test_run_writes_one_record(tmp_path):
    p = run(["run", "problem=peak", "solver=fd9", "solver.n=32", f"results_dir={tmp_path}"], tmp_path, check=0)
    recs = records(tmp_path)
    assert len(recs) == 1, p.stdout
    rec = json.loads(recs[0].read_text())
    assert rec["status"] == "ok"
    assert rec["problem"]["label"] == "peak" and rec["solver"]["name"] == "fd9"
    assert rec["solver"]["resolution"] == {"n": 32}
    for key in ("schema_version", "config_hash", "seed", "threads", "environment", "timings", "cost"):
        assert key in rec
    for key in ("versions", "cpu", "git", "cpu_count"):
        assert key in rec["environment"]
    assert rec["metrics"]["rel_l2"] > 0 and rec["timings"]["total"] > 0
    assert str(recs[0].name) in p.stdout


def test_multirun_writes_one_record_per_case(tmp_path):
    run(["run", "--multirun", "problem=sine,harmonic", "solver=fd5,cheb", "solver.n=8,12",
         f"results_dir={tmp_path}"], tmp_path, check=0)
    recs = [json.loads(r.read_text()) for r in records(tmp_path)]
    assert len(recs) == 8
    keys = {(r["problem"]["label"], r["solver"]["name"], r["solver"]["resolution"]["n"]) for r in recs}
    assert len(keys) == 8 and all(r["status"] == "ok" for r in recs)


def test_suite_run_and_rerun_skips_finished_cases(tmp_path):
    run(["run", "suite=smoke", f"results_dir={tmp_path}"], tmp_path, check=0)
    first = {r.name: r.stat().st_mtime_ns for r in records(tmp_path)}
    assert len(first) == 8  # conf/suite/smoke.yaml: 2 problems x 2 solvers x 2 resolutions
    p = run(["run", "suite=smoke", f"results_dir={tmp_path}"], tmp_path, check=0)
    assert p.stdout.count("skipped") == 8
    assert {r.name: r.stat().st_mtime_ns for r in records(tmp_path)} == first
    # force=true reruns
    run(["run", "suite=smoke", "force=true", f"results_dir={tmp_path}"], tmp_path, check=0)
    assert all(r.stat().st_mtime_ns != first[r.name] for r in records(tmp_path))


BAD = [
    (["problem=nosuch"], "`problem` must be one of: "),
    (["solver=nosuch"], "`solver` must be one of: "),
    (["solver.n=-4"], "`solver.n` must be a positive integer, got -4"),
    (["solver.n=0"], "`solver.n` must be a positive integer, got 0"),
    (["solver.n=abc"], "`solver.n` must be an integer, got 'abc'"),
    (["solver.n=2.5"], "`solver.n` must be an integer, got 2.5"),
    (["solver.bogus=1"], "`solver.bogus` is not a known field; known fields:"),
    (["budget.time_limit=-1"], "`budget.time_limit` must be positive"),
    (["seed=abc"], "`seed` must be an integer"),
    (["threads=0"], "`threads` must be a positive integer"),
    (["solver.linear_solver=cholesky"], "`solver.linear_solver` must be one of direct, amg"),
    (["problem=expr", "problem.u='__import__(\"os\").system(\"echo hi\")'"], "`problem.u`:"),
    (["problem=expr", "problem.u='x +* y'"], "`problem.u`: syntax error"),
    (["solver=fd5", "solver.n=40000"], "`solver.n` must be at most"),
    (["solver=fd5", "solver.n=20000"], "needs about"),
    (["--multirun", "solver.n=8,-1"], "`solver.n` must be a positive integer, got -1"),
    (["suite=nosuch"], "`suite` must be one of: "),
]


@pytest.mark.parametrize("args,message", BAD, ids=[" ".join(a) for a, _ in BAD])
def test_bad_input_exits_2_with_one_line_and_writes_nothing(tmp_path, args, message):
    p = run(["run", *args, f"results_dir={tmp_path / 'res'}"], tmp_path)
    assert p.returncode == 2, p.stderr
    lines = [line for line in p.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, p.stderr
    assert lines[0].startswith("lapbench: error: ") and message in lines[0], lines[0]
    assert not (tmp_path / "res").exists()


def test_unknown_command_and_option(tmp_path):
    p = run(["frobnicate"], tmp_path)
    assert p.returncode == 2 and "unknown command 'frobnicate'" in p.stderr
    p = run(["run", "--bogus"], tmp_path)
    assert p.returncode == 2 and "unknown option '--bogus'" in p.stderr


def test_list_shows_problems_solvers_and_pairings(tmp_path):
    p = run(["list"], tmp_path, check=0)
    for word in ("problems", "solvers", "supported pairings", "fd5", "fst9", "cheb", "sine", "plate"):
        assert word in p.stdout


def test_report_writes_markdown_and_csv(tmp_path):
    run(["run", "--multirun", "problem=sine", "solver=fd5,fst9", "solver.n=8,16", f"results_dir={tmp_path}"],
        tmp_path, check=0)
    p = run(["report", f"results_dir={tmp_path}", f"report.results=[{tmp_path}]", "report.name=t"], tmp_path, check=0)
    out = tmp_path / "reports" / "t"
    assert (out / "results.md").is_file() and (out / "results.csv").is_file()
    import pandas as pd

    df = pd.read_csv(out / "results.csv")
    assert len(df) == 4 and set(df["solver"]) == {"fd5", "fst9"}


def test_conf_found_when_installed_non_editable(tmp_path):
    """The Hydra tree ships inside the wheel (bench/conf) and is found there."""
    target = tmp_path / "site"
    subprocess.run([sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--no-build-isolation",
                    "--target", str(target), str(ROOT)], check=True, capture_output=True, timeout=300)
    code = "from lapbench.cli import conf_dir; d = conf_dir(); print(d); assert (d / 'config.yaml').is_file()"
    env = {**os.environ, "PYTHONPATH": str(target)}
    p = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, env=env, capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert str(target) in p.stdout
    assert (Path(p.stdout.strip()) / "solver" / "fd5.yaml").is_file()


def test_mapping_override_replaces_domain(tmp_path):
    """`problem.domain={...}` replaces the rectangle instead of merging into its x0..y1."""
    run(["run", "problem=expr", "problem.u='x**2 - y**2'", "problem.domain={kind: disk, radius: 0.5}",
         "solver=fem_p1", "solver.level=2", f"results_dir={tmp_path}"], tmp_path, check=0)
    (rec,) = [json.loads(r.read_text()) for r in records(tmp_path)]
    assert rec["problem"]["domain"] == {**rec["problem"]["domain"], "kind": "disk", "radius": 0.5}
    assert rec["status"] == "ok"
