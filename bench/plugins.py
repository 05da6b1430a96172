"""Solver plug-ins: any importable class named by a solver config's `_target_`, held to the contract.

A solver config (``conf/solver/<name>.yaml`` in lapbench's tree or in a folder added with
``--config-dir``) that sets ``_target_: package.module.Class`` runs that class instead of a
registered one. The class must implement the public solver contract (see `check_contract` and
DEVELOPERS.md, "Plug-in solvers"); the harness then times, isolates, measures and records it
exactly like a built-in. Records of plug-in runs carry the import path and, when the code comes
from an installed distribution, its name and version (`provenance`).

Bad plug-ins are refused before anything runs, with one line naming the field and exit code 2:
a target that does not import (the import error is quoted), a class missing part of the
contract (the missing names are listed), a config field of the wrong type (the file is named).
"""
from __future__ import annotations

import dataclasses
import importlib
import re
from functools import lru_cache
from pathlib import Path

from bench.config import ConfigError

__all__ = ["import_object", "load_plugin_class", "check_contract", "make_plugin_solver", "provenance",
           "CONTRACT_ATTRIBUTES", "CONTRACT_METHODS"]

FIELD = "solver._target_"
# Class attributes the harness reads from every solver (records, `lapbench list`, conformance).
CONTRACT_ATTRIBUTES = ("name", "family", "description", "Params", "tags")
# Public methods the harness calls; a `Solver` subclass inherits all of them and adds `_solve`.
CONTRACT_METHODS = ("supports", "solve", "resolution", "preload")


def import_object(target: str, field: str = FIELD):
    """The object at ``package.module.Attr`` (or ``package.module:Attr``); ConfigError naming `field`."""
    if not isinstance(target, str) or not target.strip():
        raise ConfigError(f"`{field}` must be an import path such as 'mypackage.module.MySolver', "
                          f"got {target!r}")
    target = target.strip()
    if not re.fullmatch(r"[A-Za-z_][\w]*(\.[A-Za-z_][\w]*)*(:[A-Za-z_][\w]*(\.[A-Za-z_][\w]*)*)?", target):
        raise ConfigError(f"`{field}` must be a dotted import path such as 'mypackage.module.MySolver', "
                          f"got {target!r}")
    if ":" in target:
        module_name, attr_path = target.split(":", 1)
        candidates = [(module_name, attr_path.split("."))]
    else:
        parts = target.split(".")
        if len(parts) < 2:
            raise ConfigError(f"`{field}` {target!r} names no class: write 'module.ClassName'")
        candidates = [(".".join(parts[:i]), parts[i:]) for i in range(len(parts) - 1, 0, -1)]
    first_missing = None
    for module_name, attrs in candidates:
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as exc:
            # Only "this very module does not exist" lets us try a shorter prefix; a missing
            # dependency inside an existing module is the user's real error.
            if exc.name is not None and (module_name == exc.name or module_name.startswith(exc.name + ".")):
                first_missing = first_missing or exc
                continue
            raise ConfigError(f"`{field}` cannot import {target!r}: importing module {module_name!r} "
                              f"failed with ModuleNotFoundError: {exc}") from None
        except Exception as exc:  # noqa: BLE001  (any error raised by the plug-in's own module)
            raise ConfigError(f"`{field}` cannot import {target!r}: importing module {module_name!r} "
                              f"failed with {type(exc).__name__}: {_one_line(exc)}") from None
        obj = module
        for i, attr in enumerate(attrs):
            try:
                obj = getattr(obj, attr)
            except AttributeError:
                where = ".".join([module_name] + attrs[:i])
                raise ConfigError(f"`{field}` cannot import {target!r}: {where!r} has no attribute "
                                  f"{attr!r}") from None
        return obj
    raise ConfigError(f"`{field}` cannot import {target!r}: ModuleNotFoundError: {first_missing} "
                      f"(is the plug-in's package installed or on PYTHONPATH?)")


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0][:300] if text else ""


def check_contract(cls) -> list[str]:
    """The parts of the solver contract that class `cls` lacks or gets wrong (empty: complete).

    The contract (DEVELOPERS.md, "Plug-in solvers"): subclass `solvers.base.Solver`, whose
    public ``solve()`` owns validation, timing and status for every method alike; implement
    ``_solve(problem, budget, ctx) -> Solution``; set the class attributes `name` and `family`
    (non-empty strings), `description` (string), `Params` (a dataclass of the options) and
    `tags` (a `solvers.base.Tags`). For a class that does not subclass `Solver`, the public
    methods and attributes it lacks are named as well.
    """
    from solvers.base import Solver, Tags

    problems: list[str] = []
    is_sub = isinstance(cls, type) and issubclass(cls, Solver)
    if not is_sub:
        missing = [f"missing attribute `{a}`" for a in CONTRACT_ATTRIBUTES if not hasattr(cls, a)]
        missing += [f"missing method `{m}`" for m in CONTRACT_METHODS + ("_solve",)
                    if not callable(getattr(cls, m, None))]
        return ["does not subclass solvers.base.Solver"] + missing
    if cls._solve is Solver._solve:
        problems.append("missing method `_solve(problem, budget, ctx)`")
    for meth in CONTRACT_METHODS:
        if not callable(getattr(cls, meth, None)):
            problems.append(f"method `{meth}` is overridden by a non-callable")
    name = getattr(cls, "name", None)
    if not isinstance(name, str) or not name.strip():
        problems.append(f"attribute `name` must be a non-empty string, got {name!r}")
    family = getattr(cls, "family", None)
    if not isinstance(family, str) or not family.strip():
        problems.append(f"attribute `family` must be a non-empty string such as 'fd' or 'pinn', got {family!r}")
    if not isinstance(getattr(cls, "description", None), str):
        problems.append("attribute `description` must be a string")
    params = getattr(cls, "Params", None)
    if not (isinstance(params, type) and dataclasses.is_dataclass(params)):
        problems.append("attribute `Params` must be a dataclass of the solver's options")
    if not isinstance(getattr(cls, "tags", None), Tags):
        problems.append("attribute `tags` must be a solvers.base.Tags")
    return problems


def load_plugin_class(target: str):
    """Import the class named by `target` and check it against the solver contract.

    Raises
    ------
    ConfigError
        ``solver._target_`` does not import (the import error is quoted), is not a class, or
        the class lacks part of the contract (each missing method or attribute is named).
    """
    obj = import_object(target)
    if not isinstance(obj, type):
        raise ConfigError(f"`{FIELD}` {target!r} is a {type(obj).__name__}, not a class; name a solver "
                          f"class (see DEVELOPERS.md, 'Plug-in solvers')")
    problems = check_contract(obj)
    if problems:
        raise ConfigError(f"`{FIELD}` {target!r} does not implement the solver contract: "
                          f"{'; '.join(problems)} (see DEVELOPERS.md, 'Plug-in solvers')")
    return obj


@lru_cache(maxsize=None)
def _distribution_of(top_level: str) -> tuple[str | None, str | None]:
    """(distribution name, version) that installs the top-level package, or (None, None)."""
    from importlib import metadata

    dists = sorted(set(metadata.packages_distributions().get(top_level, [])))
    if not dists:
        return None, None
    name = dists[0]
    try:
        return name, metadata.version(name)
    except metadata.PackageNotFoundError:
        return name, None


def provenance(cls, target: str) -> dict:
    """Where a plug-in's code came from: import path, module file, distribution and version.

    ``distribution`` and ``version`` are None when the module is not part of an installed
    distribution (e.g. it was found on PYTHONPATH).
    """
    module = getattr(cls, "__module__", "") or ""
    mod = importlib.import_module(module) if module else None
    path = getattr(mod, "__file__", None)
    dist, version = _distribution_of(module.split(".")[0]) if module else (None, None)
    return {"target": target, "module": module, "file": str(Path(path).resolve()) if path else None,
            "distribution": dist, "version": version}


def make_plugin_solver(cfg: dict):
    """Instantiate the plug-in solver of a solver config that has `_target_`.

    The config's other keys (``name`` aside) become the solver's Params, validated like a
    built-in's. ``name``, when given, must equal the class's `name` (one name everywhere), and a
    plug-in may not take a built-in solver's name. The instance carries ``provenance()`` for
    its records.
    """
    from solvers import SOLVERS

    target = cfg.get("_target_")
    cls = load_plugin_class(target)
    name = cfg.get("name")
    if name is not None and name != cls.name:
        raise ConfigError(f"`solver.name` {name!r} differs from the name {cls.name!r} of the plug-in "
                          f"class {target!r}; the config's name, the class's name and the records' "
                          f"solver column must agree")
    if cls.name in SOLVERS and SOLVERS[cls.name] is not cls:
        raise ConfigError(f"`solver.name` {cls.name!r} of plug-in {target!r} is a built-in solver's name; "
                          f"built-ins: {', '.join(sorted(SOLVERS))}; choose another name")
    params = {k: v for k, v in cfg.items() if k not in ("name", "_target_")}
    try:
        solver = cls(params=params)
    except ConfigError:
        raise
    except Exception as exc:  # noqa: BLE001  (a constructor that crashes is a bad plug-in)
        raise ConfigError(f"`{FIELD}` {target!r} could not be constructed: {type(exc).__name__}: "
                          f"{_one_line(exc)}") from None
    own = getattr(solver, "provenance", None)
    info = provenance(cls, target)

    def merged() -> dict:
        extra = own() if callable(own) else {}
        return {**(extra if isinstance(extra, dict) else {}), "plugin": info}

    try:
        solver.provenance = merged
    except AttributeError:  # a class with __slots__: records then lack the plug-in's provenance
        pass
    return solver


# ------------------------------------------------------------------------------------------------
# Naming the config file behind a bad field
# ------------------------------------------------------------------------------------------------
# ------------------------------------------------------------------------------------------------
# `lapbench conform`: the conformance suite against a user's solver config
# ------------------------------------------------------------------------------------------------
CONFORM_USAGE = """usage: lapbench conform [--config-dir DIR] solver=<name> [solver.<option>=<value> ...]

Runs the solver conformance checks (bench/conformance.py, the same checks every built-in
solver passes in tests/test_conformance.py) against the solver that `solver=<name>` selects,
typically a plug-in whose conf/solver/<name>.yaml lives in DIR. Each check runs in its own
process; small options (e.g. solver.n=16) keep it quick.

exit codes: 0 every applicable check passes, 1 some check fails, 2 bad config or plug-in
"""
# A check solves at most a few times, each with the suite's per-solve budget.
CHECK_TIMEOUT = 600.0


def _run_check_isolated(name: str, make, timeout: float) -> tuple[str, str, str]:
    """One conformance check in a forked child: a crash or a hang fails the check, not the command."""
    import os
    import pickle
    import select
    import signal
    import sys
    import time

    from bench import conformance

    rfd, wfd = os.pipe()
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:  # child
        code = 0
        try:
            os.close(rfd)
            from threadpoolctl import threadpool_limits

            with threadpool_limits(limits=1):   # shared machines: one thread, like a default case
                row = conformance.run_checks(make, [name])[0]
            data = pickle.dumps(tuple(str(v) for v in row))
            view = memoryview(data)
            while view:
                view = view[os.write(wfd, view):]
        except BaseException:  # noqa: BLE001
            code = 70
        finally:
            os._exit(code)
    os.close(wfd)
    chunks, t0, timed_out = [], time.monotonic(), False
    try:
        while True:
            left = timeout - (time.monotonic() - t0)
            if left <= 0:
                timed_out = True
                os.kill(pid, signal.SIGKILL)
                break
            ready, _, _ = select.select([rfd], [], [], min(left, 1.0))
            if ready:
                data = os.read(rfd, 1 << 16)
                if not data:
                    break
                chunks.append(data)
    finally:
        os.close(rfd)
        _, status = os.waitpid(pid, 0)
    if timed_out:
        return name, "FAIL", f"did not finish within {timeout:g} s (killed)"
    if chunks:
        try:
            return pickle.loads(b"".join(chunks))
        except Exception:  # noqa: BLE001  (truncated: the child died while writing)
            pass
    if os.WIFSIGNALED(status):
        return name, "FAIL", f"the check's process was killed by signal {signal.Signals(os.WTERMSIG(status)).name}"
    return name, "FAIL", f"the check's process exited with code {os.WEXITSTATUS(status)} without a result"


def format_conformance(rows) -> str:
    """The pass/fail table: one line per check with its reason."""
    w = max([len(r[0]) for r in rows] + [5])
    lines = [f"{'check':<{w}}  result  reason", f"{'-' * w}  ------  ------"]
    lines += [f"{c:<{w}}  {res:<6}  {why}".rstrip() for c, res, why in rows]
    return "\n".join(lines)


def conform(argv: list[str]) -> int:
    """`lapbench conform`: run the conformance checks against one solver config; exit 0, 1 or 2."""
    import sys

    from omegaconf import OmegaConf

    from bench import conformance
    from bench.compose import Args, Session, annotate_config_error, locate_config_file
    from bench.run import make_solver

    args = Args(argv)
    if args.help:
        print(CONFORM_USAGE)
        return 0
    if args.multirun:
        raise ConfigError("`--multirun` does not apply to conform: check one solver config at a time")
    if not any(o.split("=", 1)[0] == "solver" for o in args.overrides):
        raise ConfigError("`solver` is required: lapbench conform [--config-dir DIR] solver=<name>")
    cfg = None
    with Session(args) as session:
        try:
            cfg = session.compose(args.searchpath_overrides() + args.overrides)
            scfg = OmegaConf.to_container(cfg.solver, resolve=True)
            solver = make_solver(scfg)
        except ConfigError as exc:
            raise annotate_config_error(exc, cfg, args.overrides) from None
    where = locate_config_file(cfg, "solver")
    origin = scfg.get("_target_") or f"built-in {type(solver).__module__}.{type(solver).__name__}"
    print(f"conformance of solver {solver.name!r} ({origin}{f', {where}' if where else ''}), "
          f"options {solver.resolution() or scfg}")
    type(solver).preload()
    conformance._problems()  # build the catalogue once, before the checks fork

    def make():
        return make_solver(scfg)

    rows = []
    for name in conformance.CHECKS:
        rows.append(_run_check_isolated(name, make, CHECK_TIMEOUT))
        if sys.stderr.isatty():  # progress for people; quiet in logs and tests
            print(f"  {name}: {rows[-1][1]}", file=sys.stderr, flush=True)
    print(format_conformance(rows))
    failed = [r for r in rows if r[1] == "FAIL"]
    n_na = sum(r[1] == "n/a" for r in rows)
    print(f"{len(rows)} checks: {len(rows) - len(failed) - n_na} passed, {n_na} not applicable, "
          f"{len(failed)} failed")
    return 1 if failed else 0
