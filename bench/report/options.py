"""Report options (conf/report/default.yaml, ``report.<key>=...``) and the fixed vocabularies:
formats, metrics, figure kinds, statuses that count as failures, method families."""
from __future__ import annotations

import dataclasses

from lapbench.config import ConfigError, in_range, one_of, positive

__all__ = ["ReportConfig", "FigureOptions", "FitOptions", "FieldOptions", "FORMATS", "METRICS", "FIGURE_KINDS",
           "IMAGE_FORMATS", "LEARNED_FAMILIES", "FAIL_STATUSES", "NOT_REACHED", "FAMILY_ORDER"]

FORMATS = ("md", "csv", "tex", "html")
METRICS = ("rel_l2", "abs_l2", "max_abs", "rel_max", "nodal_max")
FIGURE_KINDS = ("pareto", "order", "training", "field", "overview", "images", "dimensions")
IMAGE_FORMATS = ("png", "svg")
LEARNED_FAMILIES = ("pinn",)       # everything else is a classical method
FAIL_STATUSES = ("failed", "timeout", "diverged", "crashed", "out_of_memory", "unsupported")
NOT_REACHED = "not reached"
FAMILY_ORDER = ("fd", "spectral", "fem", "pinn")   # reading order of method columns; fixed figure colours


def _is_learned(family) -> bool:
    return family in LEARNED_FAMILIES


@dataclasses.dataclass
class FigureOptions:
    """Which figures, in which image formats, at which size."""

    kinds: list[str] = dataclasses.field(default_factory=lambda: list(FIGURE_KINDS))
    formats: list[str] = dataclasses.field(default_factory=lambda: list(IMAGE_FORMATS))
    dpi: int = 150
    width: float = 6.4          # inches; a report column
    height: float = 4.4
    font_scale: float = 1.0

    def __post_init__(self):
        for i, k in enumerate(self.kinds):
            one_of(f"kinds[{i}]", k, FIGURE_KINDS)
        if not self.formats:
            raise ConfigError("`formats` must name at least one image format: png, svg")
        for i, f in enumerate(self.formats):
            one_of(f"formats[{i}]", f, IMAGE_FORMATS)
        positive("dpi", self.dpi, integer=True, maximum=1200)
        positive("width", self.width, maximum=40)
        positive("height", self.height, maximum=40)
        positive("font_scale", self.font_scale, maximum=5)


@dataclasses.dataclass
class FitOptions:
    """Which points of a resolution ladder enter the convergence-order fit."""

    floor: float = 1e-11   # errors at or below this are round-off, not discretisation error
    points: int = 4        # fit the finest this many points (0: all kept points)

    def __post_init__(self):
        if self.floor < 0:
            raise ConfigError(f"`floor` must be non-negative, got {self.floor!r}")
        if self.points < 0 or self.points == 1:
            raise ConfigError(f"`points` must be 0 (all) or at least 2, got {self.points!r}")


@dataclasses.dataclass
class FieldOptions:
    """The case(s) whose pointwise error field is drawn (records run with save_field=true)."""

    problem: str | None = None      # problem label or id; null: any
    solver: str | None = None
    resolution: str | None = None   # e.g. "n=64"
    seed: int | None = None
    max_panels: int = 4

    def __post_init__(self):
        positive("max_panels", self.max_panels, integer=True, maximum=16)


@dataclasses.dataclass
class ReportConfig:
    """`lapbench report` options (override as ``report.<key>=...``)."""

    name: str | None = None
    results: list[str] = dataclasses.field(default_factory=lambda: ["results"])
    suite: str | None = None
    problem: list[str] | str | None = None
    solver: list[str] | str | None = None
    metric: str = "rel_l2"
    eigen_metric: str | None = "eig_rel_max"
    tolerances: list[float] = dataclasses.field(default_factory=lambda: [1e-2, 1e-4, 1e-6])
    budgets: list[float] = dataclasses.field(default_factory=lambda: [0.01, 0.1, 1.0, 10.0, 100.0])
    formats: list[str] = dataclasses.field(default_factory=lambda: ["md", "csv"])
    runs_table: bool = True
    figures: FigureOptions = dataclasses.field(default_factory=FigureOptions)
    fit: FitOptions = dataclasses.field(default_factory=FitOptions)
    field: FieldOptions = dataclasses.field(default_factory=FieldOptions)

    def __post_init__(self):
        if self.name is None:
            self.name = self.suite or "latest"
        if not self.name or "/" in self.name or self.name.startswith(".") or "\\" in self.name:
            raise ConfigError(f"`name` must be a plain folder name, got {self.name!r}")
        if not self.results:
            raise ConfigError("`results` must list at least one results folder")
        for i, f in enumerate(self.formats):
            one_of(f"formats[{i}]", f, FORMATS)
        one_of("metric", self.metric, METRICS)
        if not self.tolerances:
            raise ConfigError("`tolerances` must list at least one tolerance, e.g. [1e-2, 1e-4]")
        for i, t in enumerate(self.tolerances):
            positive(f"tolerances[{i}]", t)
            in_range(f"tolerances[{i}]", t, 0, 1e6)
        if not self.budgets:
            raise ConfigError("`budgets` must list at least one time budget in seconds, e.g. [1, 10]")
        for i, b in enumerate(self.budgets):
            positive(f"budgets[{i}]", b)
        self.tolerances = sorted(set(self.tolerances), reverse=True)
        self.budgets = sorted(set(self.budgets))
        if isinstance(self.problem, str):
            self.problem = [self.problem]
        if isinstance(self.solver, str):
            self.solver = [self.solver]

