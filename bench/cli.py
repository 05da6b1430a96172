"""The `lapbench` command: run, list, report (and the stages that plug in later).

Bad input never reaches a half-written state: every case of a run or sweep is composed and
validated before the first one starts; errors print one line and exit with code 2.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

from bench.config import ConfigError, build_params, positive

EXIT_USAGE = 2
GROUPS = ("problem", "solver", "suite", "report")
USAGE = """usage: lapbench <command> [options] [hydra overrides]

commands:
  run      run one case, a --multirun sweep, or a named suite (suite=<name>)
  list     problems, solvers (one line each) and which pairings are supported
  report   tables of the records (options: report.<key>=...)
  check    compare a suite's records with results/baseline/<suite>.json (exit 0 / 1 regression)
  baseline write results/baseline/<suite>.json from a suite's records (options: check.<key>=...)
  tones    membrane frequencies of eigen records: speed=C or tension=T density=RHO (bench/tones.py)
  conform  run the solver conformance checks on one solver config (a plug-in's: --config-dir DIR)

examples:
  lapbench run problem=peak solver=fd9 solver.n=128
  lapbench run --multirun problem=sine,peak solver=fd5,fst9 solver.n=32,64,128
  lapbench run suite=default
  lapbench report report.suite=default
  lapbench conform --config-dir examples/sor_solver/conf solver=sor solver.n=16
"""


def conf_dir() -> Path:
    """The Hydra tree: conf/ beside the source checkout, or bench/conf inside an installed wheel."""
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "conf", here / "conf"):
        if (cand / "config.yaml").is_file():
            return cand
    import importlib.resources

    return Path(str(importlib.resources.files("bench.conf")))


def fail(msg: str) -> "NoReturn":  # noqa: F821
    print(f"lapbench: error: {msg}", file=sys.stderr)
    raise SystemExit(EXIT_USAGE)


# ------------------------------------------------------------------------------------------------
# Argument handling shared by the Hydra-based commands
# ------------------------------------------------------------------------------------------------
class Args:
    """Hydra's own flags that lapbench honours, and the overrides."""

    def __init__(self, argv: list[str]):
        self.multirun = False
        self.config_dirs: list[str] = []
        self.config_name = "config"
        self.overrides: list[str] = []
        self.help = False
        it = iter(argv)
        for a in it:
            if a in ("-m", "--multirun"):
                self.multirun = True
            elif a in ("-cd", "--config-dir"):
                self.config_dirs.append(self._value(a, it))
            elif a.startswith("--config-dir="):
                self.config_dirs.append(a.split("=", 1)[1])
            elif a in ("-cn", "--config-name"):
                self.config_name = self._value(a, it)
            elif a.startswith("--config-name="):
                self.config_name = a.split("=", 1)[1]
            elif a in ("-h", "--help"):
                self.help = True
            elif a.startswith("-"):
                fail(f"unknown option {a!r}; options: --multirun, --config-dir DIR, --config-name NAME")
            else:
                self.overrides.append(a)
        for d in self.config_dirs:
            if not Path(d).is_dir():
                fail(f"`--config-dir` {d!r} is not a folder")
        self.overrides = replace_mapping_overrides(self.overrides)

    @staticmethod
    def _value(flag, it):
        try:
            return next(it)
        except StopIteration:
            fail(f"`{flag}` needs a value")

    def hydra_argv(self) -> list[str]:
        out = []
        for d in self.config_dirs:
            out += ["--config-dir", str(Path(d).resolve())]
        if self.config_name != "config":
            out += ["--config-name", self.config_name]
        return out

    def searchpath_overrides(self) -> list[str]:
        if not self.config_dirs:
            return []
        return ["hydra.searchpath=[" + ",".join(f"file://{Path(d).resolve()}" for d in self.config_dirs) + "]"]


def replace_mapping_overrides(overrides: list[str]) -> list[str]:
    """``key={...}`` replaces the node instead of merging into it.

    Hydra merges a mapping value into the existing node, so ``problem.domain={kind: disk,
    radius: 2}`` would keep the rectangle's x0..y1 and fail. lapbench rewrites it to
    ``~key`` + ``+key={...}``, Hydra's own spelling of a replacement.
    """
    from hydra.core.override_parser.overrides_parser import OverridesParser

    out = []
    parser = OverridesParser.create()
    for o in overrides:
        try:
            p = parser.parse_override(o)
        except Exception:  # noqa: BLE001  (reported with context by the validation that follows)
            out.append(o)
            continue
        if (not p.is_add() and not p.is_delete() and not p.is_sweep_override() and p.package is None
                and "." in p.key_or_group and not p.key_or_group.startswith("hydra")
                and isinstance(p.value(), dict)):
            key = p.key_or_group
            out += [f"~{key}", f"+{key}={o.split('=', 1)[1]}"]
        else:
            out.append(o)
    return out


def _group_options(group: str, overrides: list[str] | None = None) -> list[str]:
    """Options of a config group; pass the `hydra.searchpath` override to include --config-dir folders."""
    from hydra.core.global_hydra import GlobalHydra

    searchpath = [o for o in overrides or [] if o.startswith("hydra.searchpath=")]
    try:
        loader = GlobalHydra.instance().config_loader()
        if searchpath:
            return sorted(set(loader.get_group_options(group, config_name=_CONFIG_NAME[0], overrides=searchpath)))
        return sorted(loader.get_group_options(group))
    except Exception:  # noqa: BLE001
        return []


def _translate_hydra_error(exc: Exception, overrides: list[str]) -> str:
    """One line for Hydra's multi-line composition errors."""
    msg = str(exc)
    first = msg.strip().splitlines()[0] if msg.strip() else type(exc).__name__
    if "Could not find '" in msg:
        missing = msg.split("Could not find '", 1)[1].split("'", 1)[0]
        group, _, option = missing.rpartition("/")
        if group:
            opts = _group_options(group, overrides)
            return f"`{group}` must be one of: {', '.join(opts)}; got {option!r}"
        return f"config {missing!r} not found"
    if "Could not override '" in msg:
        key = msg.split("Could not override '", 1)[1].split("'", 1)[0]
        parent = key.rpartition(".")[0]
        known = ""
        try:
            cfg = _compose_cached(tuple(o for o in overrides if not o.startswith(key + "=")))
            node = cfg
            for part in parent.split(".") if parent else []:
                node = node[part]
            known = "; known fields: " + ", ".join(sorted(str(k) for k in node.keys()))
        except Exception:  # noqa: BLE001
            pass
        return f"`{key}` is not a known field{known}"
    if "Error parsing override" in msg or "mismatched input" in msg or "extraneous input" in msg:
        return f"malformed override: {first}"
    return first


_COMPOSE_CACHE: dict = {}


def _compose_cached(overrides: tuple[str, ...]):
    from hydra import compose

    if overrides not in _COMPOSE_CACHE:
        _COMPOSE_CACHE[overrides] = compose(_CONFIG_NAME[0], overrides=list(overrides), return_hydra_config=True)
    return _COMPOSE_CACHE[overrides]


_CONFIG_NAME = ["config"]
_GROUP_CACHE: dict[str, bool] = {}


def _is_group(key: str) -> bool:
    """Whether `key` names a config group (composed by Hydra) rather than a value."""
    if key not in _GROUP_CACHE:
        _GROUP_CACHE[key] = "/" in key or bool(_group_options(key))
    return _GROUP_CACHE[key]


def compose_case(overrides: list[str]):
    """Compose a full config for one case, Hydra semantics, errors as ConfigError (one line).

    Group choices (``problem=...``) are composed by Hydra once per distinct choice set; dotted
    value overrides are then applied on a struct copy, which is how Hydra applies them too.
    """
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from omegaconf import OmegaConf
    from omegaconf.errors import OmegaConfBaseException

    parser = OverridesParser.create()
    try:
        parsed = parser.parse_overrides(overrides)
    except Exception as exc:  # noqa: BLE001
        raise ConfigError(_translate_hydra_error(exc, overrides)) from None
    structural, values = [], []
    for o, p in zip(overrides, parsed):
        key = p.key_or_group
        if p.is_sweep_override():
            raise ConfigError(f"`{key}`: sweep values need --multirun (got {o!r})")
        if p.is_add() and "." not in key and not key.startswith("hydra") and not _group_options(key):
            # `+foo=1` would add a root field that nothing reads: a typo, refused like any unknown key
            known = ", ".join(sorted(str(k) for k in _compose_cached(()).keys() if k != "hydra"))
            raise ConfigError(f"`{key}` is not a known field; known fields: {known}")
        if not key.startswith("hydra") and not p.is_add() and not p.is_delete() and p.package is None \
                and ("." in key or not _is_group(key)):
            values.append((key, p.value(), o))
        else:
            structural.append(o)
    try:
        base = _compose_cached(tuple(structural))
    except ConfigError:
        raise
    except Exception as exc:  # noqa: BLE001
        raise ConfigError(_translate_hydra_error(exc, structural)) from None
    # Copy without Hydra's own (large) node, keeping what lapbench reads of it: the group
    # choices and config sources. Copying the whole tree cost ~0.1 s per case when planning.
    plain = OmegaConf.to_container(OmegaConf.masked_copy(base, [k for k in base if k != "hydra"]),
                                   resolve=False)
    if "hydra" in base:
        runtime = {}
        for key in ("choices", "config_sources"):
            node = OmegaConf.select(base, f"hydra.runtime.{key}", default=None)
            if node is not None:
                runtime[key] = OmegaConf.to_container(node, resolve=False)
        plain["hydra"] = {"runtime": runtime}
    cfg = OmegaConf.create(plain)
    OmegaConf.set_struct(cfg, True)
    for key, value, text in values:
        try:
            OmegaConf.update(cfg, key, value, merge=True)
        except OmegaConfBaseException:
            parent = key.rpartition(".")[0]
            try:
                node = OmegaConf.select(cfg, parent) if parent else cfg
                known = "; known fields: " + ", ".join(sorted(str(k) for k in node.keys()))
            except Exception:  # noqa: BLE001
                known = ""
            raise ConfigError(f"`{key}` is not a known field{known}") from None
    return cfg


def case_from_cfg(cfg):
    """Case plus run options from a composed config (validated; ConfigError on bad input)."""
    import dataclasses

    from omegaconf import OmegaConf

    from bench.run import Case

    @dataclasses.dataclass
    class RootOptions:
        seed: int = 0
        threads: int = 1
        results_dir: str = "results"
        force: bool = False
        save_field: bool = False
        case_index: int | None = None

        def __post_init__(self):
            if self.seed < 0:
                raise ConfigError(f"`seed` must be a non-negative integer, got {self.seed}")
            positive("threads", self.threads, integer=True, maximum=4096)

    label = None
    if "hydra" in cfg:
        choices = OmegaConf.select(cfg, "hydra.runtime.choices", default=None)
        label = choices.get("problem") if choices is not None else None
        cfg = OmegaConf.masked_copy(cfg, [k for k in cfg.keys() if k != "hydra"])
    try:
        plain = OmegaConf.to_container(cfg, resolve=True)
    except Exception as exc:  # noqa: BLE001
        raise ConfigError(f"cannot resolve config: {str(exc).splitlines()[0]}") from None
    opts = build_params(RootOptions, {k: plain.get(k) for k in ("seed", "threads", "results_dir", "force",
                                                                "save_field", "case_index")
                                      if plain.get(k) is not None})
    if not isinstance(plain.get("problem"), dict) or not isinstance(plain.get("solver"), dict):
        raise ConfigError("`problem` and `solver` must be config groups (problem=<name> solver=<name>)")
    if label is None:
        try:
            from hydra.core.hydra_config import HydraConfig

            label = HydraConfig.get().runtime.choices.get("problem")
        except Exception:  # noqa: BLE001
            label = None
    suite = (plain.get("suite") or {}).get("name")
    case = Case(problem=plain["problem"], solver=plain["solver"], problem_label=label or plain["problem"].get("name"),
                seed=opts.seed, threads=opts.threads, budget=plain.get("budget") or {}, suite=suite,
                save_field=opts.save_field)
    return case, opts


def _strip(overrides: list[str], keys: tuple[str, ...]) -> list[str]:
    return [o for o in overrides if o.split("=", 1)[0].lstrip("+~") not in keys]


def _validate(cfg, overrides: list[str], suite=None) -> None:
    """Build and prepare one composed case; a bad field's error names the file or override that set it."""
    from bench.plugins import annotate_config_error
    from bench.run import prepare

    try:
        case, opts = case_from_cfg(cfg)
        prepare(case, opts.results_dir)
    except ConfigError as exc:
        raise annotate_config_error(exc, cfg, overrides, suite=suite) from None


def plan_run(args: Args):
    """Compose and validate every case of the request; returns (cases as override lists, suite size).

    Raises ConfigError on the first bad case, before anything runs.
    """
    from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
    from hydra.core.override_parser.overrides_parser import OverridesParser

    from bench.suites import expand_suite

    base = args.searchpath_overrides() + args.overrides
    if args.multirun:
        try:
            parsed = OverridesParser.create().parse_overrides(base)
        except Exception as exc:  # noqa: BLE001
            raise ConfigError(_translate_hydra_error(exc, base)) from None
        combos = [c for batch in BasicSweeper.split_arguments(parsed, None) for c in batch]
    else:
        combos = [base]
    planned = []
    for combo in combos:
        cfg = compose_case(combo)
        suite = cfg.get("suite") or {}
        if suite.get("name"):
            if args.multirun and any(OverridesParser.create().parse_override(o).is_sweep_override()
                                     for o in args.overrides):
                raise ConfigError("`suite` cannot be combined with --multirun sweep values; "
                                  "put the sweep in the suite file")
            from omegaconf import OmegaConf

            cases = expand_suite(OmegaConf.to_container(suite, resolve=True))
            if not cases:
                raise ConfigError(f"`suite` {suite.get('name')!r} has no cases")
            rest = _strip(combo, ("suite", "case_index"))
            for case_ov in cases:
                ccfg = compose_case(case_ov + rest)
                _validate(ccfg, rest, suite=(suite.get("name"), case_ov))
            return [combo], len(cases)
        _validate(cfg, combo)
        planned.append(combo)
    return planned, None


# ------------------------------------------------------------------------------------------------
# The Hydra job
# ------------------------------------------------------------------------------------------------
_PROGRESS = {"bar": None, "done": 0}


def _progress_line(text: str, total: int | None):
    bar = _PROGRESS.get("bar")
    if bar is None and total and sys.stderr.isatty():
        from tqdm import tqdm

        bar = _PROGRESS["bar"] = tqdm(total=total, unit="case", file=sys.stderr, dynamic_ncols=True)
    _PROGRESS["done"] += 1
    if bar is not None:
        bar.update(1)
        bar.set_postfix_str(text[:60])
        if _PROGRESS["done"] >= (total or 0):
            bar.close()
            _PROGRESS["bar"] = None
    else:
        # one write per line: parallel workers share this stream and must not interleave mid-line
        sys.stdout.write(text + "\n")
        sys.stdout.flush()


def _worker_share(hc) -> int | None:
    """This worker's share of the cores under the sweep's Hydra launcher (None: sequential)."""
    from omegaconf import OmegaConf

    from bench.run import launcher_share

    if hc.mode.name != "MULTIRUN":
        return None
    try:
        launcher = OmegaConf.to_container(hc.launcher, resolve=True)
    except Exception:  # noqa: BLE001  (unresolvable launcher field: the affinity mask still caps cores)
        return None
    return launcher_share(launcher)


def job(cfg) -> None:
    """Run one case of a run or sweep (called by Hydra's launcher, in any process)."""
    from hydra.core.hydra_config import HydraConfig

    from bench.run import execute, prepare
    from bench.suites import expand_suite

    hc = HydraConfig.get()
    _CONFIG_NAME[0] = hc.job.config_name or "config"
    total = None
    index = cfg.get("case_index")
    suite = cfg.get("suite") or {}
    if suite.get("name") and index is not None:
        from omegaconf import OmegaConf

        cases = expand_suite(OmegaConf.to_container(suite, resolve=True))
        total = len(cases)
        task = _strip(list(hc.overrides.task), ("suite", "case_index"))
        cfg = compose_case(cases[int(index)] + task)
    case, opts = case_from_cfg(cfg)
    if suite.get("name") and index is not None:
        case.suite = suite.get("name")  # the case was composed without `suite=`; its record keeps the name
    prep = prepare(case, opts.results_dir)
    rec, skipped = execute(prep, force=opts.force, cores=_worker_share(hc))
    n = (index + 1) if index is not None else (hc.job.num + 1 if hc.mode.name == "MULTIRUN" else 1)
    # eigen problems are judged by the worst relative eigenvalue error (bench/eigen_metrics.py)
    ename = "eig_rel_max" if rec["problem"].get("kind") == "eigen" else "rel_l2"
    err = rec.get("metrics", {}).get(ename)
    t = rec.get("timings", {}).get("total")
    line = (f"[{n}{'/' + str(total) if total else ''}] {rec['problem']['id']} {rec['solver']['name']} "
            f"{rec['solver']['resolution_label']} seed={rec['seed']}: {rec['status']}"
            f"{'' if err is None else f' {ename}={err:.3e}'}{'' if t is None else f' time={t:.3g}s'}"
            f"{' (record exists, skipped)' if skipped else ''}"
            f"{'' if rec['status'] == 'ok' else ' - ' + str(rec.get('reason', ''))[:200]}")
    _progress_line(line, total)
    if hc.mode.name != "MULTIRUN":
        print(f"record: {prep.path}")


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
    from hydra import initialize_config_dir

    args = Args(argv)
    if args.help:
        print(USAGE)
        return 0
    _CONFIG_NAME[0] = args.config_name
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        try:
            planned, suite_size = plan_run(args)
        except ConfigError as exc:
            fail(str(exc))
    if suite_size is not None:
        overrides = _strip(args.overrides, ("case_index",)) + [f"case_index=range(0,{suite_size})"]
        print(f"lapbench: suite of {suite_size} cases; records under "
              f"{_results_dir_of(planned[0])}/runs/", file=sys.stderr)
        code = _hydra_main(args, overrides, multirun=True)
    else:
        code = _hydra_main(args, args.overrides, multirun=args.multirun)
    return code


def _results_dir_of(overrides: list[str]) -> str:
    for o in overrides:
        if o.startswith("results_dir="):
            return o.split("=", 1)[1]
    return "results"


# ------------------------------------------------------------------------------------------------
# list and report
# ------------------------------------------------------------------------------------------------
def cmd_list(argv: list[str]) -> int:
    from hydra import initialize_config_dir

    from bench.config import describe_fields
    from bench.problems import make_problem
    from bench.run import make_solver
    from solvers import SOLVERS

    args = Args(argv)
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        problems = {}
        for name in _group_options("problem", args.searchpath_overrides()):
            try:
                cfg = compose_case(args.searchpath_overrides() + [f"problem={name}"])
                from omegaconf import OmegaConf

                problems[name] = make_problem(OmegaConf.to_container(cfg.problem, resolve=True))
            except Exception as exc:  # noqa: BLE001
                problems[name] = exc
        solver_names = _group_options("solver", args.searchpath_overrides())
        solvers = {}
        for name in solver_names:
            try:
                cfg = compose_case(args.searchpath_overrides() + [f"solver={name}"])
                from omegaconf import OmegaConf

                solvers[name] = make_solver(OmegaConf.to_container(cfg.solver, resolve=True))
            except Exception as exc:  # noqa: BLE001
                solvers[name] = exc
    print("problems (conf/problem/<name>.yaml):")
    for name, p in problems.items():
        if isinstance(p, Exception):
            print(f"  {name:<14} (invalid config: {p})")
        else:
            print(f"  {name:<14} {p.kind:<8} {p.domain.kind:<10} {p.source[:70]}")
    print("\nsolvers (conf/solver/<name>.yaml):")
    for name, s in solvers.items():
        if isinstance(s, Exception):
            print(f"  {name:<14} (invalid config: {s})")
        else:
            print(f"  {name:<14} {s.family:<9} {s.description}  [{describe_fields(s.Params)}]")
    unregistered = sorted(set(SOLVERS) - set(solvers))
    if unregistered:
        print(f"  (registered without a config file: {', '.join(unregistered)})")
    print("\nsupported pairings (y = runs, . = unsupported):")
    names = [n for n, s in solvers.items() if not isinstance(s, Exception)]
    width = max([len(n) for n in names] + [4])
    print(" " * 16 + " ".join(n.rjust(width) for n in names))
    for pname, p in problems.items():
        if isinstance(p, Exception):
            continue
        cells = []
        for n in names:
            ok, _ = solvers[n].supports(p)
            cells.append(("y" if ok else ".").rjust(width))
        print(f"  {pname:<14}" + " ".join(cells))
    return 0


def cmd_report(argv: list[str]) -> int:
    from hydra import initialize_config_dir
    from omegaconf import OmegaConf

    from bench.report import ReportConfig, write_report

    args = Args(argv)
    _CONFIG_NAME[0] = args.config_name
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        try:
            cfg = compose_case(args.searchpath_overrides() + args.overrides)
            rcfg = build_params(ReportConfig, OmegaConf.to_container(cfg.report, resolve=True), prefix="report")
        except ConfigError as exc:
            fail(str(exc))
    results_dir = OmegaConf.select(cfg, "results_dir") or "results"
    out, table = write_report(rcfg, out_root=Path(results_dir) / "reports")
    from bench.report import to_markdown

    print(to_markdown(table) if len(table) else "(no records found)")
    print(f"lapbench: report of {len(table)} cases written to {out}/", file=sys.stderr)
    return 0


from bench.check import cmd_baseline, cmd_check  # noqa: E402  (the check stage: bench/check.py)
from bench.plugins import cmd_conform  # noqa: E402  (plug-in conformance: bench/plugins.py)

def _cmd_tones(argv: list[str]) -> int:
    from bench.tones import cmd_tones

    return cmd_tones(argv)


COMMANDS = {"run": cmd_run, "list": cmd_list, "report": cmd_report, "check": cmd_check, "baseline": cmd_baseline,
            "conform": cmd_conform, "tones": _cmd_tones}


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(USAGE)
        return 0 if argv else EXIT_USAGE
    cmd, rest = argv[0], argv[1:]
    if cmd not in COMMANDS:
        fail(f"unknown command {cmd!r}; commands: {', '.join(COMMANDS)}")
    try:
        code = COMMANDS[cmd](rest)
    except ConfigError as exc:
        fail(str(exc))
    sys.exit(code)


if __name__ == "__main__":
    main()
