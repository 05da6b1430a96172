"""Suites (conf/suite/): named sweeps as lists of grids, expanded into per-case overrides."""
from __future__ import annotations

import itertools

from lapbench.config import ConfigError

__all__ = ["expand_suite", "override_string", "describe_suite", "TOLERANCE_KEY", "TOLERANCE_METRIC_KEY",
           "split_tolerance"]

# Solve-to-tolerance grids: ``tolerances: [1e-3, 1e-6]`` (and optionally ``tolerance_metric: rel_l2``)
# make each case of the grid one search per tolerance (lapbench.tolerance); the resolution knob may be
# written ``solver.<knob>: auto``. Their cases carry these reserved keys, which lapbench.compose
# removes before composing (`split_tolerance`).
TOLERANCE_KEY = "tolerance"
TOLERANCE_METRIC_KEY = "tolerance_metric"


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
        grid = _tolerance_grid(grid, f"suite.cases[{i}]")
        keys = sorted(grid, key=lambda k: (("." in k) or k.startswith("+"), list(grid).index(k)))
        axes = [grid[k] if isinstance(grid[k], list) else [grid[k]] for k in keys]
        for combo in itertools.product(*axes):
            out.append([override_string(k, v) for k, v in zip(keys, combo)])
    return out


def _is_auto(v) -> bool:
    return isinstance(v, str) and v.strip().lower() == "auto"


def _tolerance_grid(grid: dict, where: str) -> dict:
    """A grid's ``tolerances`` list as the reserved ``tolerance`` axis (checked: positive numbers)."""
    auto = [k for k, v in grid.items() if k.startswith("solver.") and _is_auto(v)]
    if "tolerances" not in grid:
        if auto:
            raise ConfigError(f"`{where}.{auto[0]}: auto` needs `tolerances: [...]` in the same grid "
                              f"(the errors to solve to)")
        if TOLERANCE_KEY in grid or TOLERANCE_METRIC_KEY in grid:
            raise ConfigError(f"`{where}`: write `tolerances: [...]` (a list), not `{TOLERANCE_KEY}`")
        return grid
    tols = grid["tolerances"]
    tols = tols if isinstance(tols, list) else [tols]
    if not tols:
        raise ConfigError(f"`{where}.tolerances` must list at least one error, e.g. [1e-3, 1e-6]")
    for j, t in enumerate(tols):
        if isinstance(t, bool) or not isinstance(t, (int, float)) or not t > 0 or t != t or t == float("inf"):
            raise ConfigError(f"`{where}.tolerances[{j}]` must be a positive number, got {t!r}")
    out = {k: v for k, v in grid.items() if k != "tolerances"}
    out[TOLERANCE_KEY] = [float(t) for t in tols]
    return out


def split_tolerance(overrides: list[str]) -> tuple[list[str], dict | None]:
    """(overrides without the tolerance keys and `solver.<knob>=auto`, the search spec or None).

    The spec is ``{"tolerance": float, "metric": str | None, "auto": [knob keys written auto]}``.
    """
    rest, spec, auto = [], {}, []
    for o in overrides:
        key, _, value = o.partition("=")
        if key == TOLERANCE_KEY:
            spec["tolerance"] = float(value)
        elif key == TOLERANCE_METRIC_KEY:
            spec["metric"] = value.strip("'\"")
        elif key.startswith("solver.") and _is_auto(value.strip("'\"")):
            auto.append(key[len("solver."):])
        else:
            rest.append(o)
    if "tolerance" not in spec:
        return overrides, None
    return rest, {"tolerance": spec["tolerance"], "metric": spec.get("metric"), "auto": auto}
