"""The Python API for notebooks and scripts: ``import lapbench``.

A top floor beside the command line (nothing of the project imports it but the package's own
lazy ``__init__``). Every function goes through the same stages as the command line: configs
are composed and validated by Hydra exactly as ``lapbench run`` composes them, every case runs
isolated and timed in the same way and writes the same record files, so a notebook's numbers
and the nightly's are the same numbers. Bad input raises `ConfigError` (one line naming the
field and the allowed values) before anything runs.

    >>> import lapbench
    >>> df = lapbench.run_case("sine", "fst5", solver_options={"n": 64})
    >>> df = lapbench.run_suite("smoke", results_dir="results")
    >>> df = lapbench.load_results("results", suite="smoke")
    >>> folder = lapbench.make_report(suite="smoke", formats=["md", "html"])
    >>> verdict = lapbench.check_claim("sine", error=1e-3, time=30.0)

The names are verbs plus an object on purpose: the package's submodules (``run``, ``report``,
``records``, ...) share the namespace, and a function called ``run`` would be shadowed by the
module ``lapbench.run`` once anything imported it.
"""
from __future__ import annotations

import io
import re
from pathlib import Path

from lapbench.compose import Args, Session, plan_run
from lapbench.config import ConfigError, build_params

__all__ = ["run_case", "run_suite", "load_results", "make_report", "check_claim", "overrides_from",
           "ConfigError"]

_PLAIN = re.compile(r"^[A-Za-z0-9_.\-/+:]+$")


def _value(v) -> str:
    """`v` written in Hydra's override grammar."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if v is None:
        return "null"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ",".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ",".join(f"{k}:{_value(x)}" for k, x in v.items()) + "}"
    s = str(v)
    if _PLAIN.match(s):
        return s
    return "'" + s.replace("\\", "\\\\").replace("'", "\\'") + "'"


def overrides_from(prefix: str, options: dict | None) -> list[str]:
    """``{"n": 64}`` -> ``["<prefix>.n=64"]``: keyword options as command-line overrides."""
    if not options:
        return []
    if not isinstance(options, dict):
        raise ConfigError(f"`{prefix}` options must be a dict of option name -> value; got {type(options).__name__}")
    return [f"{prefix}.{k}={_value(v)}" for k, v in options.items()]


def _argv(problem, solver, suite, problem_options, solver_options, overrides, results_dir, force,
          config_dir) -> list[str]:
    argv: list[str] = []
    if config_dir is not None:
        argv += ["--config-dir", str(config_dir)]
    for key, val in (("problem", problem), ("solver", solver), ("suite", suite)):
        if val is not None:
            argv.append(f"{key}={_value(val)}")
    argv += overrides_from("problem", problem_options) + overrides_from("solver", solver_options)
    if isinstance(overrides, str):
        raise ConfigError("`overrides` must be a list of override strings, e.g. ['seed=1']")
    argv += list(overrides or ())
    if results_dir is not None:
        argv.append(f"results_dir={_value(str(results_dir))}")
    if force:
        argv.append("force=true")
    return argv


def _run(argv: list[str], progress: bool):
    from lapbench.records import to_frame
    from lapbench.sweep import Progress, run_sequential

    args = Args(argv)
    if args.multirun:
        raise ConfigError("`overrides` must not contain --multirun; run a suite or call run_case() per case")
    with Session(args) as session:
        plan = plan_run(session, args)
    if not plan.sequential:
        raise ConfigError(f"`hydra/launcher` {plan.launcher!r} is for the command line; the API runs "
                          "cases sequentially (use `lapbench run` for parallel or cluster launchers)")
    stream = None if progress else io.StringIO()
    return to_frame(run_sequential(plan.cases, progress=Progress(len(plan.cases), stream=stream)))


def run_case(problem: str, solver: str, *, problem_options: dict | None = None,
             solver_options: dict | None = None, overrides: list[str] | tuple = (),
             results_dir: str | Path = "results", force: bool = False, progress: bool = True,
             config_dir: str | Path | None = None):
    """Run one case and return its record as a one-row DataFrame.

    The case runs isolated in a forked child within its time and memory limits and is timed
    exactly as ``lapbench run problem=... solver=...`` times it; if its record exists it is
    read back, not rerun (``force=True`` reruns). ``overrides`` takes any further command-line
    overrides (``["seed=1", "budget.time_limit=60"]``); ``progress=False`` keeps the case line quiet.
    """
    return _run(_argv(problem, solver, None, problem_options, solver_options, overrides, results_dir,
                      force, config_dir), progress)


def run_suite(name: str, *, overrides: list[str] | tuple = (), results_dir: str | Path = "results",
              force: bool = False, progress: bool = True, config_dir: str | Path | None = None):
    """Run a named suite (conf/suite/<name>.yaml) sequentially; returns its records as a DataFrame.

    Every case is validated before the first runs; finished cases are skipped on a rerun, so an
    interrupted suite resumes where it stopped.
    """
    return _run(_argv(None, None, name, None, None, overrides, results_dir, force, config_dir), progress)


def load_results(results: str | Path | list = "results", *, suite: str | None = None, problem: str | None = None,
         solver: str | None = None):
    """Records under one or more results folders as a DataFrame (one row per record)."""
    from lapbench.records import load_records, to_frame

    folders = [results] if isinstance(results, (str, Path)) else list(results)
    return to_frame(load_records([str(f) for f in folders], suite=suite, problem=problem, solver=solver))


def make_report(*, suite: str | None = None, name: str | None = None, results: list | str | None = None,
           formats: list[str] | None = None, options: dict | None = None, results_dir: str | Path = "results",
           config_dir: str | Path | None = None) -> Path:
    """Write the report (tables, figures) as ``lapbench report`` does; returns its folder.

    Records are read from `results` (default: `results_dir`); `options` takes any further report
    option (``{"tolerances": [1e-3, 1e-6]}``); the report goes to ``<results_dir>/reports/<name>/``.
    """
    from omegaconf import OmegaConf

    from lapbench.report import ReportConfig, write_report

    opts = dict(options or {})
    for key, val in (("suite", suite), ("name", name), ("formats", formats)):
        if val is not None:
            opts[key] = val
    if results is None:
        results = results_dir
    opts["results"] = [str(results)] if isinstance(results, (str, Path)) else [str(r) for r in results]
    argv = (["--config-dir", str(config_dir)] if config_dir is not None else []) + overrides_from("report", opts)
    args = Args(argv)
    with Session(args) as session:
        cfg = session.compose(args.searchpath_overrides() + args.overrides)
        rcfg = build_params(ReportConfig, OmegaConf.to_container(cfg.report, resolve=True), prefix="report")
    out, _ = write_report(rcfg, out_root=Path(results_dir) / "reports")
    return out


def check_claim(problem: str, *, error: float, time: float, metric: str | None = None,
                hardware: str | None = None, method: str | None = None, solvers: list[str] | None = None,
                problem_options: dict | None = None, overrides: list[str] | tuple = (),
                results_dir: str | Path = "results", force: bool = False, progress: bool = True,
                name: str | None = None, config_dir: str | Path | None = None):
    """A claim check, as ``lapbench claim``: every classical method solved to the claimed error.

    Returns the `lapbench.claim.Verdict` (``verdict.best``: the fastest classical method's
    search result, with ``solver``, ``value`` and ``time_s``; ``verdict.ratio``: claimed time /
    its time here; ``to_markdown()``, ``to_latex()``), after writing ``claim.md`` and
    ``claim.tex`` under ``<results_dir>/claims/``. `metric` None is the problem kind's default
    (``rel_l2``, or ``eig_rel_max`` for eigen problems); `solvers` None means every classical
    method that supports the problem. Probes are ordinary records: a rerun reuses them.
    """
    import shlex
    import sys

    from lapbench.claim import Claim, check_folder_name, claim_check, plan_claim, probe_line, write_verdict

    claim = Claim(error=error, time=time, metric=metric, hardware=hardware, method=method)
    check_folder_name(name, "name")
    argv = _argv(problem, None, None, problem_options, None, overrides, results_dir, force, config_dir)
    case, ropts, configs = plan_claim(Args(argv), solvers)
    extra = {"error": error, "time": time, "metric": metric, "hardware": hardware, "method": method,
             "solvers": solvers, "name": name}
    command = "lapbench claim " + " ".join(shlex.quote(a) for a in argv + [
        f"claim.{k}={_value(v)}" for k, v in extra.items() if v is not None])

    def on_probe(solver, probe, rec):
        if progress:
            print(probe_line(solver, probe, rec), file=sys.stderr)

    verdict = claim_check(case.problem, claim, configs, seed=case.seed, threads=case.threads, budget=case.budget,
                          timing=case.timing, results_dir=ropts.results_dir, problem_label=case.problem_label,
                          force=ropts.force, command=command,
                          on_probe=on_probe)
    write_verdict(verdict, ropts.results_dir, name)
    return verdict
