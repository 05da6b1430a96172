"""Configs -> cases: Hydra composition with lapbench's rules, validation, suite planning.

The layer below the command line: `Session` composes configs (Hydra's compose API, one session
per config name and search path, so two config names in one process never share a cache),
turns each into a validated `lapbench.run.Case`, and `plan_run` expands a request (one case, a
--multirun sweep, a suite) into prepared cases before anything runs. Errors are ConfigError,
one line naming the field; the command line turns them into exit code 2.
"""
from __future__ import annotations

import dataclasses
import re
from pathlib import Path

from lapbench.config import ConfigError, build_params, conf_dir, positive

__all__ = ["Args", "Session", "conf_dir", "case_from_cfg", "plan_run", "strip_overrides",
           "replace_mapping_overrides", "annotate_config_error", "locate_config_file", "INTERNAL_KEYS"]

# root keys lapbench sets itself; never offered as "known fields" to a user
INTERNAL_KEYS = ("hydra", "case_index")


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
                raise ConfigError(f"unknown option {a!r}; options: --multirun, --config-dir DIR, --config-name NAME, --help")
            else:
                self.overrides.append(a)
        for d in self.config_dirs:
            if not Path(d).is_dir():
                raise ConfigError(f"`--config-dir` {d!r} is not a folder")
        self.overrides = replace_mapping_overrides(self.overrides)

    @staticmethod
    def _value(flag, it):
        try:
            return next(it)
        except StopIteration:
            raise ConfigError(f"`{flag}` needs a value") from None

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




def unknown_field(key: str, known: list[str], text: str = "") -> str:
    """"`key` is not a known field; did you mean ...?; known fields: ..." (one line)."""
    import difflib

    leaf = key.rpartition(".")[2].lstrip("+~")
    close = difflib.get_close_matches(leaf, known, n=1, cutoff=0.6)
    hint = f"; did you mean `{key.rpartition('.')[0] + '.' if '.' in key else ''}{close[0]}`?" if close else ""
    return f"`{key.lstrip('+~')}` is not a known field{hint}" + (f"; known fields: {', '.join(sorted(known))}"
                                                              if known else "")


_EXPRESSION_CHARS = set("()*/^+ ")


def malformed_override(overrides: list[str], first: str) -> str:
    """Which override Hydra could not parse, with a hint to quote an expression value."""
    from hydra.core.override_parser.overrides_parser import OverridesParser

    parser = OverridesParser.create()
    for o in overrides:
        try:
            parser.parse_override(o)
        except Exception:  # noqa: BLE001
            key, _, value = o.partition("=")
            if value and _EXPRESSION_CHARS & set(value):
                return (f"`{key}`: the value {value!r} must be quoted for the command line, "
                        f"e.g. '{key}=\"{value}\"'")
            return f"malformed override {o!r}: {first}"
    return f"malformed override: {first}"


class Session:
    """One Hydra composition context: config name, search path, and caches that belong to it.

    Use as ``with Session(args) as s: cfg = s.compose(overrides)``; Hydra's global state is
    initialised on entry and cleared on exit.
    """

    def __init__(self, args: Args | None = None, config_name: str | None = None):
        self.args = args
        self.config_name = config_name or (args.config_name if args else "config")
        self._searchpath = args.searchpath_overrides() if args else []
        self._cache: dict = {}
        self._groups: dict[str, bool] = {}
        self._ctx = None

    def __enter__(self) -> "Session":
        from hydra import initialize_config_dir
        from hydra.core.global_hydra import GlobalHydra

        GlobalHydra.instance().clear()
        self._ctx = initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3")
        self._ctx.__enter__()
        return self

    def __exit__(self, *exc):
        self._ctx.__exit__(*exc)
        self._ctx = None
        return False

    def group_options(self, group: str, overrides: list[str] | None = None) -> list[str]:
        """Options of a config group (the --config-dir folders of the session included)."""
        from hydra.core.global_hydra import GlobalHydra

        searchpath = [o for o in (overrides or []) + self._searchpath if o.startswith("hydra.searchpath=")]
        try:
            loader = GlobalHydra.instance().config_loader()
            if searchpath:
                return sorted(set(loader.get_group_options(group, config_name=self.config_name,
                                                           overrides=searchpath[:1])))
            return sorted(loader.get_group_options(group))
        except Exception:  # noqa: BLE001
            return []

    def is_group(self, key: str) -> bool:
        """Whether `key` names a config group (composed by Hydra) rather than a value."""
        if key not in self._groups:
            self._groups[key] = "/" in key or bool(self.group_options(key))
        return self._groups[key]

    def compose_base(self, overrides: tuple[str, ...]):
        from hydra import compose

        if overrides not in self._cache:
            self._cache[overrides] = compose(self.config_name, overrides=list(overrides), return_hydra_config=True)
        return self._cache[overrides]

    def _plain(self, structural: tuple[str, ...]) -> dict:
        """The composed config as plain containers, without Hydra's own (large) node but with what
        lapbench reads of it (the group choices and config sources); cached per choice set."""
        from omegaconf import OmegaConf

        key = ("plain", structural)
        if key not in self._cache:
            try:
                base = self.compose_base(structural)
            except ConfigError:
                raise
            except Exception as exc:  # noqa: BLE001
                raise ConfigError(self.translate_error(exc, list(structural))) from None
            plain = OmegaConf.to_container(OmegaConf.masked_copy(base, [k for k in base if k != "hydra"]),
                                           resolve=False)
            if "hydra" in base:
                runtime = {}
                for name in ("choices", "config_sources"):
                    node = OmegaConf.select(base, f"hydra.runtime.{name}", default=None)
                    if node is not None:
                        runtime[name] = OmegaConf.to_container(node, resolve=False)
                plain["hydra"] = {"runtime": runtime}
            self._cache[key] = plain
        return self._cache[key]

    def known_root_fields(self) -> list[str]:
        return sorted(str(k) for k in self.compose_base(tuple(self._searchpath)).keys() if k not in INTERNAL_KEYS)

    def translate_error(self, exc: Exception, overrides: list[str]) -> str:
        """One line for Hydra's multi-line composition errors."""
        msg = str(exc)
        first = msg.strip().splitlines()[0] if msg.strip() else type(exc).__name__
        if "Could not find '" in msg:
            missing = msg.split("Could not find '", 1)[1].split("'", 1)[0]
            group, _, option = missing.rpartition("/")
            if group:
                import difflib

                opts = [o for o in self.group_options(group, overrides) if o != "none" or group == "suite"]
                close = difflib.get_close_matches(option, opts, n=1, cutoff=0.6)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                return f"`{group}` must be one of: {', '.join(opts)}; got {option!r}{hint}"
            return f"config {missing!r} not found"
        if "Could not override '" in msg:
            key = msg.split("Could not override '", 1)[1].split("'", 1)[0]
            parent = key.rpartition(".")[0]
            known: list[str] = []
            try:
                cfg = self.compose_base(tuple(o for o in overrides if not o.startswith(key + "=")))
                node = cfg
                for part in parent.split(".") if parent else []:
                    node = node[part]
                known = [str(k) for k in node.keys() if parent or str(k) not in INTERNAL_KEYS]
            except Exception:  # noqa: BLE001
                pass
            return unknown_field(key, known)
        if "Error parsing override" in msg or "mismatched input" in msg or "extraneous input" in msg \
                or "token recognition error" in msg or "no viable alternative" in msg:
            return malformed_override(overrides, first)
        return first

    def compose(self, overrides: list[str]):
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
            raise ConfigError(self.translate_error(exc, overrides)) from None
        structural, values = [], []
        for o, p in zip(overrides, parsed):
            key = p.key_or_group
            if p.is_sweep_override():
                raise ConfigError(f"`{key}`: sweep values need --multirun (got {o!r})")
            if p.is_add() and "." not in key and not key.startswith("hydra") and not self.group_options(key):
                # `+foo=1` would add a root field that nothing reads: a typo, refused like any unknown key
                raise ConfigError(unknown_field(key, self.known_root_fields()))
            if not key.startswith("hydra") and not p.is_add() and not p.is_delete() and p.package is None \
                    and ("." in key or not self.is_group(key)):
                values.append((key, p.value(), o))
            else:
                structural.append(o)
        plain = self._plain(tuple(structural))   # OmegaConf.create below copies it
        cfg = OmegaConf.create(plain)
        OmegaConf.set_struct(cfg, True)
        for key, value, text in values:
            try:
                OmegaConf.update(cfg, key, value, merge=True)
            except OmegaConfBaseException:
                parent = key.rpartition(".")[0]
                try:
                    node = OmegaConf.select(cfg, parent) if parent else cfg
                    known = [str(k) for k in node.keys() if parent or str(k) not in INTERNAL_KEYS]
                except Exception:  # noqa: BLE001
                    known = []
                raise ConfigError(unknown_field(key, known, text)) from None
        return cfg


def case_from_cfg(cfg):
    """Case plus run options from a composed config (validated; ConfigError on bad input)."""
    import dataclasses

    from omegaconf import OmegaConf

    from lapbench.run import Case

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
                timing=plain.get("timing") or {},
                save_field=opts.save_field)
    return case, opts


def strip_overrides(overrides: list[str], keys: tuple[str, ...]) -> list[str]:
    return [o for o in overrides if o.split("=", 1)[0].lstrip("+~") not in keys]


def _validate(cfg, overrides: list[str], suite=None):
    """Build and prepare one composed case; a bad field's error names the file or override that set it."""
    from lapbench.run import prepare

    try:
        case, opts = case_from_cfg(cfg)
        return prepare(case, opts.results_dir), opts
    except ConfigError as exc:
        raise annotate_config_error(exc, cfg, overrides, suite=suite) from None


@dataclasses.dataclass
class Plan:
    """A validated request: every case prepared, and how Hydra would launch it."""

    cases: list              # [(lapbench.run.Prepared, root options)], in run order
    combos: list             # override lists, one per Hydra job (a suite: one, swept by case_index)
    suite: str | None = None
    launcher: str = "basic"  # the hydra/launcher choice

    @property
    def sequential(self) -> bool:
        """Hydra's basic launcher: lapbench runs the cases itself from this process."""
        return self.launcher in ("basic", None, "")


def plan_run(session: Session, args: Args) -> Plan:
    """Compose, validate and prepare every case of the request before anything runs.

    Raises ConfigError on the first bad case.
    """
    from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from omegaconf import OmegaConf

    from lapbench.suites import expand_suite, split_tolerance

    base = args.searchpath_overrides() + args.overrides
    if args.multirun:
        try:
            parsed = OverridesParser.create().parse_overrides(base)
        except Exception as exc:  # noqa: BLE001
            raise ConfigError(session.translate_error(exc, base)) from None
        combos = [c for batch in BasicSweeper.split_arguments(parsed, None) for c in batch]
    else:
        combos = [base]
    plan = Plan(cases=[], combos=[])
    for combo in combos:
        cfg = session.compose(combo)
        plan.launcher = str(OmegaConf.select(cfg, "hydra.runtime.choices.hydra/launcher", default="basic"))
        suite = cfg.get("suite") or {}
        if suite.get("name"):
            if args.multirun and any(OverridesParser.create().parse_override(o).is_sweep_override()
                                     for o in args.overrides):
                raise ConfigError("`suite` cannot be combined with --multirun sweep values; "
                                  "put the sweep in the suite file")
            cases = expand_suite(OmegaConf.to_container(suite, resolve=True))
            if not cases:
                raise ConfigError(f"`suite` {suite.get('name')!r} has no cases")
            rest = strip_overrides(combo, ("suite", "case_index"))
            for case_ov in cases:
                case_ov, tol = split_tolerance(case_ov)
                prep, opts = _validate(session.compose(case_ov + rest), rest, suite=(suite.get("name"), case_ov))
                prep.case.suite = suite.get("name")  # composed without `suite=`; its record keeps the name
                if tol is not None:
                    prep.tolerance = _tolerance_spec(prep, tol, suite.get("name"))
                plan.cases.append((prep, opts))
            plan.combos, plan.suite = [combo], suite.get("name")
            return plan
        plan.cases.append(_validate(cfg, combo))
        plan.combos.append(combo)
    return plan


def _tolerance_spec(prep, tol: dict, suite: str) -> dict:
    """Check a solve-to-tolerance case before anything runs: a solver with a declared knob (the one
    written `auto`, if any), a metric of the problem's kind. (Under a parallel launcher each search
    is one job, its probes one after another.)"""
    from lapbench.tolerance import knob_for, metric_for

    knob = knob_for(prep.case.solver)
    for key in tol["auto"]:
        if key != knob.key:
            raise ConfigError(f"`solver.{key}: auto` in suite {suite!r}: the resolution knob of solver "
                              f"{prep.solver.name} is `{knob.key}`")
    return {"tolerance": tol["tolerance"], "metric": metric_for(prep.problem.kind, tol["metric"])}


_FIELD_RE = re.compile(r"^`(problem|solver)\.([^`.\[]+)")


def locate_config_file(cfg, group: str) -> Path | None:
    """The YAML file that supplied config group `group` of a composed config (Hydra's search path)."""
    from omegaconf import OmegaConf

    choice = OmegaConf.select(cfg, f"hydra.runtime.choices.{group}", default=None)
    sources = OmegaConf.select(cfg, "hydra.runtime.config_sources", default=None) or []
    if not choice:
        return None
    for src in sources:
        if src.get("schema") != "file" or not src.get("path"):
            continue
        cand = Path(src["path"]) / group / f"{choice}.yaml"
        if cand.is_file():
            return cand
    return None


def annotate_config_error(exc: ConfigError, cfg, overrides: list[str], suite=None) -> ConfigError:
    """The same error, saying where the bad ``problem.*``/``solver.*`` field was set.

    ``suite`` is ``(suite name, the case's overrides from the suite file)`` for suite cases.
    """
    msg = str(exc)
    m = _FIELD_RE.match(msg)
    if m is None or cfg is None or " (set " in msg:
        return exc
    group, key = m.group(1), m.group(2)

    def sets(o: str) -> bool:
        # `~key` only deletes (the rewrite of a mapping value): the `+key=...` after it sets it
        return not o.startswith("~") and o.split("=", 1)[0].lstrip("+") == f"{group}.{key}"

    for o in overrides:
        if sets(o) and not o.startswith("hydra."):
            return ConfigError(f"{msg} (set on the command line: {o!r})")
    if suite is not None:
        for o in suite[1]:
            if sets(o):
                return ConfigError(f"{msg} (set by suite {suite[0]!r}: {o!r})")
    path = locate_config_file(cfg, group)
    if path is None:
        return exc
    return ConfigError(f"{msg} (set in {path})")


