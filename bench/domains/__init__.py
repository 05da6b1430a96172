"""Geometry: one module per domain kind, all listed in DOMAIN_KINDS (config key `kind`)."""
from __future__ import annotations

from lapbench.config import ConfigError
from lapbench.domains.ball import Ball, ball_volume, unit_ball
from lapbench.domains.base import Domain, EvalSet, gauss_legendre_panels, sobol_eval_set
from lapbench.domains.box import Box, unit_box
from lapbench.domains.mask import Mask
from lapbench.domains.polygon import LSHAPE_VERTICES, Polygon, lshape
from lapbench.domains.rectangle import Rectangle
from lapbench.domains.round import Annulus, Disk, polar
from lapbench.domains.triangulation import ear_clip, triangle_rule

__all__ = ["Domain", "EvalSet", "Mask", "Rectangle", "Disk", "Annulus", "Polygon", "LSHAPE_VERTICES", "lshape",
           "DOMAIN_KINDS", "make_domain", "gauss_legendre_panels", "polar", "triangle_rule", "ear_clip",
           "Box", "Ball", "unit_box", "unit_ball", "ball_volume", "sobol_eval_set"]

# kind -> domain class (its dataclass fields are the config keys)
DOMAIN_KINDS: dict[str, type[Domain]] = {"rectangle": Rectangle, "disk": Disk, "annulus": Annulus,
                                         "polygon": Polygon, "mask": Mask, "box": Box, "ball": Ball}


def make_domain(cfg: dict, field: str = "problem.domain") -> Domain:
    """Build a domain from its config mapping ``{kind: ..., <geometry>}``."""
    from lapbench.config import build_params

    cfg = dict(cfg)
    kind = cfg.pop("kind", "rectangle")
    if kind not in DOMAIN_KINDS:
        raise ConfigError(f"`{field}.kind` must be one of {', '.join(sorted(DOMAIN_KINDS))}; got {kind!r}")
    return build_params(DOMAIN_KINDS[kind], cfg, prefix=field)
