"""The problem catalogue, grouped by kind; PROBLEMS lists every entry (name = conf/problem/<name>.yaml)."""
from __future__ import annotations

from typing import Callable

from lapbench.config import ConfigError, build_params
from lapbench.problems import curved, custom, eigen, highdim, imaging, manufactured, rectangle
from lapbench.problems.base import MAX_EVAL_LEVEL, BoundaryDataError, Problem
from lapbench.problems.eigen import EigenProblem
from lapbench.problems.rectangle import plate_series, plate_terms

__all__ = ["Problem", "EigenProblem", "PROBLEMS", "make_problem", "BoundaryDataError", "MAX_EVAL_LEVEL",
           "plate_series", "plate_terms"]

# name -> (Params schema, builder, one-line description)
PROBLEMS: dict[str, tuple[type, Callable, str]] = {
    **rectangle.CATALOGUE, **manufactured.CATALOGUE, **curved.CATALOGUE, **eigen.CATALOGUE, **custom.CATALOGUE,
    **highdim.CATALOGUE,
    **imaging.CATALOGUE,
}


def make_problem(cfg) -> Problem:
    """Build a problem from its config mapping (``name`` plus the builder's fields)."""
    if hasattr(cfg, "items") and not isinstance(cfg, dict):
        from omegaconf import OmegaConf

        cfg = OmegaConf.to_container(cfg, resolve=True)
    cfg = dict(cfg)
    name = cfg.get("name")
    if name not in PROBLEMS:
        raise ConfigError(f"`problem.name` must be one of {', '.join(sorted(PROBLEMS))}; got {name!r}")
    schema, builder, _ = PROBLEMS[name]
    params = build_params(schema, cfg, prefix="problem")
    return builder(params)
