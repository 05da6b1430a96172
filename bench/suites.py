"""Suites (conf/suite/): named sweeps as lists of grids, expanded into per-case overrides."""
from __future__ import annotations

import itertools

from bench.config import ConfigError

__all__ = ["expand_suite", "override_string", "describe_suite"]


def describe_suite(path) -> str:
    """The first sentence of a suite file's leading comment ('' without one)."""
    if path is None:
        return ""
    lines = []
    try:
        for line in open(path, encoding="utf-8"):
            if not line.startswith("#"):
                break
            lines.append(line.lstrip("#").strip())
    except OSError:
        return ""
    text = " ".join(x for x in lines if x)
    end = text.find(". ")
    return text[: end + 1] if end >= 0 else text


def override_string(key: str, value) -> str:
    """``key=value`` in Hydra override syntax (lists and strings quoted safely)."""
    if isinstance(value, bool):
        v = "true" if value else "false"
    elif value is None:
        v = "null"
    elif isinstance(value, (int, float)):
        v = repr(value)
    elif isinstance(value, (list, tuple)):
        v = "[" + ",".join(override_string("_", x).split("=", 1)[1] for x in value) + "]"
    else:
        s = str(value)
        v = s if s.replace("_", "").replace("-", "").replace(".", "").isalnum() else "'" + s.replace("'", "\\'") + "'"
    return f"{key}={v}"


def expand_suite(suite: dict) -> list[list[str]]:
    """Every case of a suite as a list of override strings, in a stable order.

    A suite's ``cases`` is a list of grids ``{key: value-or-list}``; each grid contributes the
    Cartesian product of its lists, keys in their written order (group keys such as ``problem``
    and ``solver`` first, so that their fields can be overridden after them).
    """
    name = suite.get("name")
    grids = suite.get("cases") or []
    if not isinstance(grids, list):
        raise ConfigError(f"`suite.cases` of suite {name!r} must be a list of grids")
    out: list[list[str]] = []
    for i, grid in enumerate(grids):
        if not isinstance(grid, dict) or not grid:
            raise ConfigError(f"`suite.cases[{i}]` of suite {name!r} must be a non-empty mapping")
        keys = sorted(grid, key=lambda k: (("." in k) or k.startswith("+"), list(grid).index(k)))
        axes = [grid[k] if isinstance(grid[k], list) else [grid[k]] for k in keys]
        for combo in itertools.product(*axes):
            out.append([override_string(k, v) for k, v in zip(keys, combo)])
    return out
