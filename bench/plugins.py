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
from functools import lru_cache
from pathlib import Path

from lapbench.config import ConfigError, _one_line, import_object

__all__ = ["import_object", "load_plugin_class", "check_contract", "make_plugin_solver", "provenance",
           "CONTRACT_ATTRIBUTES", "CONTRACT_METHODS"]

FIELD = "solver._target_"
# Class attributes the harness reads from every solver (records, `lapbench list`, conformance).
CONTRACT_ATTRIBUTES = ("name", "family", "description", "Params", "tags")
# Public methods the harness calls; a `Solver` subclass inherits all of them and adds `_solve`.
CONTRACT_METHODS = ("supports", "solve", "resolution", "preload")


def check_contract(cls) -> list[str]:
    """The parts of the solver contract that class `cls` lacks or gets wrong (empty: complete).

    The contract (DEVELOPERS.md, "Plug-in solvers"): subclass `lapbench.solvers.base.Solver`, whose
    public ``solve()`` owns validation, timing and status for every method alike; implement
    ``_solve(problem, budget, ctx) -> Solution``; set the class attributes `name` and `family`
    (non-empty strings), `description` (string), `Params` (a dataclass of the options) and
    `tags` (a `lapbench.solvers.base.Tags`). For a class that does not subclass `Solver`, the public
    methods and attributes it lacks are named as well.
    """
    from lapbench.solvers.base import Solver, Tags

    problems: list[str] = []
    is_sub = isinstance(cls, type) and issubclass(cls, Solver)
    if not is_sub:
        missing = [f"missing attribute `{a}`" for a in CONTRACT_ATTRIBUTES if not hasattr(cls, a)]
        missing += [f"missing method `{m}`" for m in CONTRACT_METHODS + ("_solve",)
                    if not callable(getattr(cls, m, None))]
        return ["does not subclass lapbench.solvers.base.Solver"] + missing
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
        problems.append("attribute `tags` must be a lapbench.solvers.base.Tags")
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
    from lapbench.solvers import SOLVERS

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
