"""The `lapbench` command line: the top floor; nothing imports it.

Bad input never reaches a half-written state: every case of a run or sweep is composed and
validated (lapbench.compose) before the first one starts; errors print one line and exit with
code 2. A sequential run or suite is run by lapbench.sweep from this process; parallel and
cluster launchers get one Hydra job per case (`job`).
"""
from __future__ import annotations

import sys
from pathlib import Path
from typing import NoReturn

from lapbench.compose import Args, Session, case_from_cfg, conf_dir, plan_run, strip_overrides
from lapbench.config import ConfigError, build_params

EXIT_USAGE = 2
USAGE = """usage: lapbench <command> [options] [overrides]      (lapbench <command> --help: its options)

commands:
  run      run one case, a --multirun sweep, or a named suite (suite=<name>)
  list     suites, problems, solvers and which pairings are supported (--verbose: solver options)
  report   tables and figures of the records (options: report.<key>=...)
  check    compare a suite's records with results/baseline/<suite>.json (exit 0 / 1 regression)
  baseline write results/baseline/<suite>.json from a suite's records (options: check.<key>=...)
  tones    frequencies: eigen records (speed=C or tension=T density=RHO), flat tori (torus=A,B)
  claim    a claimed error and time against the best classical method here (claim.error= claim.time=)
  conform  run the solver conformance checks on one solver config (a plug-in's: --config-dir DIR)

options: --version, --help

examples:
  lapbench run problem=peak solver=fd9 solver.n=128
  lapbench run --multirun problem=sine,peak solver=fd5,fst9 solver.n=32,64,128
  lapbench run suite=default
  lapbench report report.suite=default
  lapbench conform --config-dir examples/sor_solver/conf solver=sor solver.n=16
"""
RUN_USAGE = """usage: lapbench run [--multirun] [--config-dir DIR] [--config-name NAME] [overrides]

  problem=<name> solver=<name> [problem.<knob>=V] [solver.<option>=V]   one case -> one record
  --multirun a=1,2 b=x,y                                                 every combination
  suite=<name>                                                           a named sweep (conf/suite/)
  hydra/launcher=parallel | slurm | slurm_local                          one Hydra job per case
  seed=, threads=, budget.time_limit=, budget.train_time=, budget.memory_limit_mb=,
  timing.repeats=, timing.min_time=, timing.max_time=, results_dir=, force=true, save_field=true
Expressions must be quoted for the shell and for Hydra: 'problem.u="exp(x)*sin(3*y)"'.
A rerun skips cases whose record exists (force=true reruns them); Ctrl-C keeps finished records.
"""
LIST_USAGE = """usage: lapbench list [--verbose] [--config-dir DIR]

Suites, problems and solvers (one line each; --verbose adds every solver's options), then the
supported pairings, one table per domain kind.
"""
REPORT_USAGE = """usage: lapbench report [--config-dir DIR] [report.<key>=...]

  report.name=NAME     output folder results/reports/NAME/
  report.suite=NAME    only records of that suite;  report.problem=[..] report.solver=[..]
  report.results=[DIR, ...]  results folders to read;  report.formats=[md, csv, tex, html]
Options and their defaults: conf/report/default.yaml.
"""


def fail(msg: str) -> NoReturn:
    print(f"lapbench: error: {msg}", file=sys.stderr)
    raise SystemExit(EXIT_USAGE)


def version() -> str:
    from importlib import metadata

    try:
        return metadata.version("lapbench")
    except metadata.PackageNotFoundError:
        return "unknown (not installed)"


# ------------------------------------------------------------------------------------------------
# run
# ------------------------------------------------------------------------------------------------
def _worker_share(hc) -> int | None:
    """This worker's share of the cores under the sweep's Hydra launcher (None: sequential)."""
    from omegaconf import OmegaConf

    from lapbench.run import launcher_share

    if hc.mode.name != "MULTIRUN":
        return None
    try:
        launcher = OmegaConf.to_container(hc.launcher, resolve=True)
    except Exception:  # noqa: BLE001  (unresolvable launcher field: the affinity mask still caps cores)
        return None
    return launcher_share(launcher)


def job(cfg) -> None:
    """Run one case of a sweep under a parallel or cluster launcher (called by Hydra, any process)."""
    from hydra.core.hydra_config import HydraConfig
    from omegaconf import OmegaConf

    from lapbench.run import execute, prepare
    from lapbench.suites import expand_suite, split_tolerance
    from lapbench.sweep import case_line

    hc = HydraConfig.get()
    session = Session(config_name=hc.job.config_name or "config")   # Hydra's app context is active
    total = None
    tol = None
    index = cfg.get("case_index")
    suite = cfg.get("suite") or {}
    if suite.get("name") and index is not None:
        cases = expand_suite(OmegaConf.to_container(suite, resolve=True))
        total = len(cases)
        task = strip_overrides(list(hc.overrides.task), ("suite", "case_index"))
        case_ov, tol = split_tolerance(cases[int(index)])
        cfg = session.compose(case_ov + task)
    case, opts = case_from_cfg(cfg)
    if suite.get("name") and index is not None:
        case.suite = suite.get("name")  # the case was composed without `suite=`; its record keeps the name
    prep = prepare(case, opts.results_dir)
    if suite.get("name") and index is not None and tol is not None:   # a solve-to-tolerance search
        from lapbench.sweep import tolerance_line
        from lapbench.tolerance import metric_for, solve_to_tolerance

        r = solve_to_tolerance(case, tol["tolerance"], metric_for(prep.problem.kind, tol["metric"]),
                               results_dir=opts.results_dir, force=opts.force)
        sys.stdout.write(tolerance_line(r, case.problem_label, index + 1, total) + "\n")
        sys.stdout.flush()
        return
    rec, skipped = execute(prep, force=opts.force, cores=_worker_share(hc))
    n = (index + 1) if index is not None else hc.job.num + 1
    # one write per line: parallel workers share this stream and must not interleave mid-line
    sys.stdout.write(case_line(rec, n, total, skipped) + "\n")
    sys.stdout.flush()


def _hydra_main(args: Args, overrides: list[str], multirun: bool) -> int:
    import hydra

    main = hydra.main(config_path=str(conf_dir()), config_name=args.config_name, version_base="1.3")(job)
    argv0 = sys.argv
    sys.argv = ["lapbench"] + args.hydra_argv() + (["--multirun"] if multirun else []) + overrides
    try:
        main()
    except SystemExit as exc:
        return int(exc.code or 0)
    finally:
        sys.argv = argv0
    return 0


def cmd_run(argv: list[str]) -> int:
    from lapbench.sweep import run_sequential

    args = Args(argv)
    if args.help:
        print(RUN_USAGE)
        return 0
    with Session(args) as session:
        plan = plan_run(session, args)
    results = plan.cases[0][1].results_dir if plan.cases else "results"
    if plan.suite:
        print(f"lapbench: suite {plan.suite!r} of {len(plan.cases)} cases; records under {results}/runs/",
              file=sys.stderr)
    if plan.sequential:
        try:
            records = run_sequential(plan.cases)
        except KeyboardInterrupt:
            print("lapbench: interrupted; finished records are kept, rerun the same command to resume",
                  file=sys.stderr)
            return 130
        if len(plan.cases) == 1 and not plan.suite:
            prep = plan.cases[0][0]
            if records[0].get("status") == "unsupported":
                print(f"lapbench: solver {prep.solver.name} does not support problem {prep.problem.name}: "
                      f"{records[0].get('reason')} (recorded as unsupported)", file=sys.stderr)
            print(f"record: {prep.path}")
        return 0
    if plan.suite:
        overrides = strip_overrides(args.overrides, ("case_index",)) + [f"case_index=range(0,{len(plan.cases)})"]
        return _hydra_main(args, overrides, multirun=True)
    return _hydra_main(args, args.overrides, multirun=True)


# ------------------------------------------------------------------------------------------------
# list and report
# ------------------------------------------------------------------------------------------------
def _words(text: str, width: int) -> str:
    """`text` cut to `width` characters at a word boundary (with an ellipsis when cut)."""
    text = " ".join(str(text).split())
    if len(text) <= width:
        return text
    cut = text[: width - 3].rsplit(" ", 1)[0].rstrip(",;:")
    return cut + "..."


def cmd_list(argv: list[str]) -> int:
    from omegaconf import OmegaConf

    from lapbench.config import describe_fields
    from lapbench.problems import make_problem
    from lapbench.run import make_solver
    from lapbench.solvers import SOLVERS

    verbose = any(a in ("-v", "--verbose") for a in argv)
    args = Args([a for a in argv if a not in ("-v", "--verbose")])
    if args.help:
        print(LIST_USAGE)
        return 0
    sp = args.searchpath_overrides()
    with Session(args) as session:
        suites = {}
        for name in session.group_options("suite", sp):
            if name == "none":
                continue
            try:
                from lapbench.compose import locate_config_file
                from lapbench.suites import describe_suite, expand_suite

                cfg = session.compose(sp + [f"suite={name}"])
                s = OmegaConf.to_container(cfg.suite, resolve=True)
                suites[name] = (len(expand_suite(s)), describe_suite(locate_config_file(cfg, "suite")))
            except Exception as exc:  # noqa: BLE001
                suites[name] = (None, f"(invalid: {exc})")
        problems = {}
        for name in session.group_options("problem", sp):
            try:
                cfg = session.compose(sp + [f"problem={name}"])
                problems[name] = make_problem(OmegaConf.to_container(cfg.problem, resolve=True))
            except Exception as exc:  # noqa: BLE001
                problems[name] = exc
        solvers = {}
        for name in session.group_options("solver", sp):
            try:
                cfg = session.compose(sp + [f"solver={name}"])
                solvers[name] = make_solver(OmegaConf.to_container(cfg.solver, resolve=True))
            except Exception as exc:  # noqa: BLE001
                solvers[name] = exc
    print("suites (conf/suite/<name>.yaml; lapbench run suite=<name>):")
    for name, (n, text) in suites.items():
        print(f"  {name:<12} {'' if n is None else f'{n:>4} cases'}  {_words(text, 70)}")
    print("\nproblems (conf/problem/<name>.yaml):")
    for name, p in problems.items():
        if isinstance(p, Exception):
            print(f"  {name:<16} (invalid config: {p})")
        else:
            print(f"  {name:<16} {p.kind:<8} {p.domain.kind:<10} {_words(p.source, 60)}")
    print("\nsolvers (conf/solver/<name>.yaml):")
    for name, s in solvers.items():
        if isinstance(s, Exception):
            print(f"  {name:<14} (invalid config: {s})")
            continue
        print(f"  {name:<14} {s.family:<9} {_words(s.description, 73)}")
        if verbose:
            print(f"  {'':<14} {'':<9} options: {describe_fields(s.Params)}")
    unregistered = sorted(set(SOLVERS) - set(solvers))
    if unregistered:
        print(f"  (registered without a config file: {', '.join(unregistered)})")
    names = [n for n, s in solvers.items() if not isinstance(s, Exception)]
    good = {n: p for n, p in problems.items() if not isinstance(p, Exception)}
    print("\nsupported pairings (y = runs, . = unsupported), by domain kind, classical then learned:")
    from lapbench.report import LEARNED_FAMILIES

    for kind in sorted({p.domain.kind for p in good.values()}):
        rows = {n: p for n, p in good.items() if p.domain.kind == kind}
        for learned in (False, True):
            cols = [n for n in names if (solvers[n].family in LEARNED_FAMILIES) == learned
                    and any(solvers[n].supports(p)[0] for p in rows.values())]
            if not cols:
                continue
            print(f"\n  {kind if not learned else '':<16}" + " ".join(cols))
            for pname, p in rows.items():
                cells = [("y" if solvers[n].supports(p)[0] else ".").center(len(n)) for n in cols]
                print(f"  {pname:<16}" + " ".join(cells).rstrip())
        rest = [n for n in names if not any(solvers[n].supports(p)[0] for p in rows.values())]
        if rest:   # wrapped at 100 columns
            import textwrap

            print(textwrap.fill(f"(no problem of this kind runs on: {', '.join(rest)})", 100,
                                initial_indent=" " * 18, subsequent_indent=" " * 19))
    return 0


def cmd_report(argv: list[str]) -> int:
    from omegaconf import OmegaConf

    from lapbench.report import ReportConfig, write_report

    args = Args(argv)
    if args.help:
        print(REPORT_USAGE)
        return 0
    with Session(args) as session:
        cfg = session.compose(args.searchpath_overrides() + args.overrides)
        rcfg = build_params(ReportConfig, OmegaConf.to_container(cfg.report, resolve=True), prefix="report")
    results_dir = OmegaConf.select(cfg, "results_dir") or "results"
    out, table = write_report(rcfg, out_root=Path(results_dir) / "reports")
    from lapbench.report import to_markdown

    print(to_markdown(table) if len(table) else "(no records found)")
    if (out / "summary.md").is_file():   # the answers last, where the terminal shows them
        print("\n" + (out / "summary.md").read_text())
    print(f"lapbench: report of {len(table)} cases written to {out}/", file=sys.stderr)
    return 0


# ------------------------------------------------------------------------------------------------
# check, baseline, conform, tones (their stages: bench/check/, bench/conformance.py, bench/tones.py)
# ------------------------------------------------------------------------------------------------
def _check_stage(argv: list[str], run) -> int:
    """`check` and `baseline`: plan the suite's cases, run them first when asked, then `run(plan)`."""
    from lapbench import check

    if any(a in ("-h", "--help") for a in argv):
        print(check.CHECK_USAGE)
        return 0
    plan = check.plan_check(argv)
    _run_first(plan)
    return run(plan)


def cmd_check(argv: list[str]) -> int:
    from lapbench import check

    return _check_stage(argv, check.run_check)


def cmd_baseline(argv: list[str]) -> int:
    from lapbench import check

    return _check_stage(argv, check.run_baseline)


def _run_first(plan) -> None:
    """check.run=true: run the suite (skipping cases whose record exists) before reading records."""
    if not plan.ccfg.run:
        return
    code = cmd_run(plan.args.hydra_argv() + plan.args.overrides)
    if code != 0:
        fail(f"the run of suite {plan.name!r} failed (exit code {code}); no comparison made")


def cmd_conform(argv: list[str]) -> int:
    from lapbench.conformance import conform

    return conform(argv)


def cmd_tones(argv: list[str]) -> int:
    from lapbench.tones import cmd_tones as tones

    if any(a in ("-h", "--help") for a in argv):
        print((tones.__doc__ or "").strip())
        return 0
    return tones(argv)


CLAIM_USAGE = """usage: lapbench claim [--config-dir DIR] problem=<name> [problem.<knob>=V] claim.error=E claim.time=T
                     [claim.metric=M] [claim.hardware='...'] [claim.method='...'] [claim.solvers=[a,b]]
                     [claim.name=NAME] [seed=, threads=, budget.*=, timing.*=, results_dir=]

Solves the problem to the claimed error with every classical method that supports it (each at
its cheapest resolution: doubling, then bisection; every probe an ordinary recorded case), and
writes a verdict: the fastest method, its resolution and time here, the ratio claimed time /
classical time. Prints the verdict; writes <results_dir>/claims/<name>/claim.md and claim.tex.
  claim.error   the claimed error (positive)        claim.time  the claimed time in seconds
  claim.metric  rel_l2 (default), abs_l2, max_abs, rel_max, nodal_max; eigen problems:
                eig_rel_max (default), eig_rel_1, mode_angle_max
  claim.hardware, claim.method   free text shown in the verdict
  claim.solvers  only these classical solvers (default: every one that supports the problem)
"""
CLAIM_KEYS = ("error", "time", "metric", "hardware", "method", "solvers", "name")


def _number(text: str):
    """A number as written (``1e-3`` too, which YAML 1.1 reads as text); other text unchanged."""
    try:
        return float(text)
    except ValueError:
        return text


def cmd_claim(argv: list[str]) -> int:
    """`lapbench claim`: everything validated before the first probe runs; bad input exits 2."""
    import shlex

    import yaml
    from omegaconf import OmegaConf

    from lapbench.claim import Claim, check_folder_name, claim_check, plan_claim, probe_line, write_verdict

    opts, rest = {}, []
    for a in argv:
        key, eq, value = a.partition("=")
        if key.startswith("claim.") and eq:
            field = key[len("claim."):]
            if field not in CLAIM_KEYS:
                from lapbench.compose import unknown_field

                raise ConfigError(unknown_field(key, list(CLAIM_KEYS)).replace("`claim.", "`claim.", 1))
            try:
                opts[field] = (value if field in ("hardware", "method", "name") else _number(value)
                               if field in ("error", "time") else yaml.safe_load(value))
            except yaml.YAMLError:
                raise ConfigError(f"`{key}`: cannot read the value {value!r}") from None
        else:
            rest.append(a)
    args = Args(rest)
    if args.help:
        print(CLAIM_USAGE)
        return 0
    for need in ("error", "time"):
        if need not in opts:
            raise ConfigError(f"`claim.{need}` is required (e.g. claim.error=1e-3 claim.time=30)")
    solvers = opts.pop("solvers", None)
    name = opts.pop("name", None)
    claim = Claim(**opts)
    check_folder_name(name)
    case, ropts, configs = plan_claim(args, solvers)
    command = "lapbench claim " + " ".join(shlex.quote(a) for a in argv)

    def progress(solver, probe, rec):
        print(probe_line(solver, probe, rec), file=sys.stderr)

    print(f"lapbench: claim check on {case.problem_label}: {len(configs)} classical method(s); "
          f"records under {ropts.results_dir}/runs/", file=sys.stderr)
    verdict = claim_check(case.problem, claim, configs, seed=case.seed, threads=case.threads, budget=case.budget,
                          timing=case.timing, results_dir=ropts.results_dir, problem_label=case.problem_label,
                          force=ropts.force, command=command, on_probe=progress)
    out = write_verdict(verdict, ropts.results_dir, name)
    print(verdict.to_markdown())
    print(f"lapbench: verdict written to {out}/claim.md and claim.tex", file=sys.stderr)
    return 0


COMMANDS = {"run": cmd_run, "list": cmd_list, "report": cmd_report, "check": cmd_check, "baseline": cmd_baseline,
            "conform": cmd_conform, "tones": cmd_tones, "claim": cmd_claim}


def main(argv: list[str] | None = None) -> int:
    import difflib

    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(USAGE)
        return 0 if argv else EXIT_USAGE
    if argv[0] in ("-V", "--version"):
        print(f"lapbench {version()}")
        return 0
    cmd, rest = argv[0], argv[1:]
    if cmd not in COMMANDS:
        close = difflib.get_close_matches(cmd, list(COMMANDS), n=1, cutoff=0.6)
        fail(f"unknown command {cmd!r}{f'; did you mean {close[0]!r}?' if close else ''}; "
             f"commands: {', '.join(COMMANDS)}")
    try:
        code = COMMANDS[cmd](rest)
    except ConfigError as exc:
        fail(str(exc))
    except BrokenPipeError:        # `lapbench list | head`: the reader left; not an error of ours
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        code = 0
    sys.exit(code)


if __name__ == "__main__":
    main()
