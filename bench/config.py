"""Config validation at the boundary: dataclass schemas, one-line errors naming the field."""
from __future__ import annotations

import dataclasses
import importlib
import re
import types
import typing
from pathlib import Path
from typing import Any, Literal, get_args, get_origin

__all__ = ["ConfigError", "build_params", "positive", "in_range", "one_of", "describe_fields", "import_object",
           "conf_dir"]


class ConfigError(ValueError):
    """Bad user input: one line naming the field, the rule, the bad value and the valid options.

    The command line prints it and exits with code 2 without writing anything.
    """


def _type_name(tp) -> str:
    origin = get_origin(tp)
    if origin is Literal:
        return "one of " + ", ".join(repr(a) for a in get_args(tp))
    if origin in (typing.Union, types.UnionType):
        return " or ".join(_type_name(a) for a in get_args(tp) if a is not type(None))
    if origin in (list, tuple):
        return "a list"
    return {int: "an integer", float: "a number", bool: "true or false", str: "a string",
            dict: "a mapping"}.get(tp, getattr(tp, "__name__", str(tp)))


def _coerce(value: Any, tp, field: str):
    """Convert `value` to `tp` or raise ConfigError (no silent truncation of floats to ints)."""
    origin = get_origin(tp)
    if tp is Any:
        return value
    if origin in (typing.Union, types.UnionType):
        args = get_args(tp)
        if value is None and type(None) in args:
            return None
        errors = []
        for a in args:
            if a is type(None):
                continue
            try:
                return _coerce(value, a, field)
            except ConfigError as exc:
                errors.append(exc)
        raise ConfigError(f"`{field}` must be {_type_name(tp)}, got {value!r}")
    if origin is Literal:
        allowed = get_args(tp)
        if value in allowed and type(value) is type(allowed[allowed.index(value)]):
            return value
        raise ConfigError(f"`{field}` must be one of {', '.join(repr(a) for a in allowed)}; got {value!r}")
    if origin in (list, tuple):
        if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__") or isinstance(value, dict):
            raise ConfigError(f"`{field}` must be a list, got {value!r}")
        (item_tp, *_) = get_args(tp) or (Any,)
        return [ _coerce(v, item_tp, f"{field}[{i}]") for i, v in enumerate(value)]
    if tp is bool:
        if isinstance(value, bool):
            return value
        raise ConfigError(f"`{field}` must be true or false, got {value!r}")
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer() and abs(value) < 2**53:
                return int(value)
            raise ConfigError(f"`{field}` must be an integer, got {value!r}")
        return value
    if tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"`{field}` must be a number, got {value!r}")
        value = float(value)
        if value != value or value in (float("inf"), float("-inf")):
            raise ConfigError(f"`{field}` must be a finite number, got {value!r}")
        return value
    if tp is str:
        if not isinstance(value, str):
            raise ConfigError(f"`{field}` must be a string, got {value!r}")
        return value
    if tp is dict:
        if not isinstance(value, dict):
            raise ConfigError(f"`{field}` must be a mapping, got {value!r}")
        return value
    if dataclasses.is_dataclass(tp):
        if not isinstance(value, dict):
            raise ConfigError(f"`{field}` must be a mapping, got {value!r}")
        return build_params(tp, value, prefix=field)
    return value


def build_params(schema, values: dict, prefix: str = "", ignore: tuple = ("name", "_target_")):
    """Instantiate dataclass `schema` from a plain mapping, validating every field.

    Unknown keys, wrong types and rule violations (checked by the schema's ``__post_init__``,
    which should raise ConfigError with the bare field name) raise ConfigError naming
    ``<prefix>.<field>``.
    """
    if hasattr(values, "items") and not isinstance(values, dict):
        from omegaconf import OmegaConf

        values = OmegaConf.to_container(values, resolve=True)
    fields = {f.name: f for f in dataclasses.fields(schema)}
    hints = typing.get_type_hints(schema)
    dot = f"{prefix}." if prefix else ""
    unknown = sorted(k for k in values if k not in fields and k not in ignore)
    if unknown:
        raise ConfigError(f"`{dot}{unknown[0]}` is not a known field; known fields: "
                          f"{', '.join(sorted(fields)) or '(none)'}")
    kwargs = {}
    for key, f in fields.items():
        if key in values:
            kwargs[key] = _coerce(values[key], hints[key], f"{dot}{key}")
    try:
        return schema(**kwargs)
    except ConfigError as exc:
        msg = str(exc)
        if prefix and msg.startswith("`") and not msg.startswith(f"`{dot}"):
            msg = f"`{dot}{msg[1:]}"
        raise ConfigError(msg) from None
    except TypeError as exc:  # a required field is missing
        raise ConfigError(f"`{prefix or schema.__name__}`: {exc}") from None


def positive(name: str, value, integer: bool = False, maximum=None):
    """Raise ConfigError unless ``0 < value`` (and ``value <= maximum`` when given)."""
    if value is None or value <= 0:
        kind = "a positive integer" if integer else "positive"
        raise ConfigError(f"`{name}` must be {kind}, got {value!r}")
    if maximum is not None and value > maximum:
        raise ConfigError(f"`{name}` must be at most {maximum}, got {value!r}")


def in_range(name: str, value, lo, hi):
    """Raise ConfigError unless ``lo <= value <= hi``."""
    if not (lo <= value <= hi):
        raise ConfigError(f"`{name}` must lie in [{lo}, {hi}], got {value!r}")


def one_of(name: str, value, allowed):
    """Raise ConfigError unless `value` is one of `allowed`."""
    if value not in allowed:
        raise ConfigError(f"`{name}` must be one of {', '.join(map(str, allowed))}; got {value!r}")


def describe_fields(schema) -> str:
    """``n=64, linear_solver='direct'``: the schema's defaults, for `lapbench list`."""
    parts = []
    for f in dataclasses.fields(schema):
        if f.default is not dataclasses.MISSING:
            parts.append(f"{f.name}={f.default!r}")
        elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
            parts.append(f"{f.name}={f.default_factory()!r}")
        else:
            parts.append(f"{f.name}=<required>")
    return ", ".join(parts)


def import_object(target: str, field: str = "solver._target_"):
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


def conf_dir() -> Path:
    """The Hydra tree: conf/ beside the source checkout, or bench/conf inside an installed wheel."""
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "conf", here / "conf"):
        if (cand / "config.yaml").is_file():
            return cand
    import importlib.resources

    return Path(str(importlib.resources.files("lapbench.conf")))
