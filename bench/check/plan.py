"""`lapbench check` and `lapbench baseline`: parse the request, locate the suite's records,
compare them with the baseline (or write it), write the outputs, return the exit code."""
from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

from lapbench.check.baseline import key_of_prepared, read_baseline, summarise, write_baseline
from lapbench.check.compare import CheckConfig, compare
from lapbench.check.output import format_table, to_junit, to_markdown
from lapbench.config import ConfigError

__all__ = ["CHECK_USAGE", "CheckPlan", "plan_check", "run_check", "run_baseline"]


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

    from lapbench.compose import Args, Session, case_from_cfg, strip_overrides
    from lapbench.config import build_params
    from lapbench.suites import expand_suite

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
    """The record file of a case, named as `lapbench.run.prepare` names it, without building the
    problem (a manufactured problem runs sympy when built: seconds per case)."""
    from lapbench.records import config_hash, record_path
    from lapbench.run import make_solver

    solver = make_solver(case.solver)
    label = case.problem_label or case.problem.get("name")
    return record_path(results_dir, label, solver.name, config_hash(case.identity()))


def _collect(planned):
    """(records found, cases without a readable record)."""
    import warnings

    from lapbench.records import RecordWarning, read_record

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
    from lapbench.run import prepare

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

