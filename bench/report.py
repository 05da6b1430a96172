"""The report stage: records -> tables (Markdown, CSV) under results/reports/<name>/."""
from __future__ import annotations

import dataclasses
from pathlib import Path

from bench.config import ConfigError, one_of

__all__ = ["ReportConfig", "results_table", "write_report", "to_markdown"]

FORMATS = ("md", "csv")


@dataclasses.dataclass
class ReportConfig:
    name: str = "latest"
    results: list[str] = dataclasses.field(default_factory=lambda: ["results"])
    suite: str | None = None
    problem: str | None = None
    solver: str | None = None
    formats: list[str] = dataclasses.field(default_factory=lambda: ["md", "csv"])

    def __post_init__(self):
        if not self.name or "/" in self.name or self.name.startswith("."):
            raise ConfigError(f"`name` must be a plain folder name, got {self.name!r}")
        for f in self.formats:
            one_of("formats", f, FORMATS)


def _fmt(v, spec=".3g"):
    if v is None or v != v:
        return ""
    if isinstance(v, float):
        return format(v, spec)
    return str(v)


def results_table(df):
    """Problem x solver x resolution: status, errors, timings (s), dofs; sorted for reading."""
    import pandas as pd

    cols = ["problem_id", "solver", "resolution", "seed", "status", "rel_l2", "max_abs", "nodal_max",
            "t_setup", "t_solve", "t_total", "t_evaluate", "dofs", "n_params", "peak_rss_mb", "reason"]
    if df.empty:
        return pd.DataFrame(columns=cols)
    for c in cols:
        if c not in df:
            df[c] = None
    out = df[cols].copy()
    out["_dofs"] = pd.to_numeric(out["dofs"], errors="coerce").fillna(0)
    out = out.sort_values(["problem_id", "solver", "_dofs", "resolution", "seed"]).drop(columns="_dofs")
    return out.reset_index(drop=True)


def to_markdown(table) -> str:
    """A GitHub-style Markdown table (no optional dependency)."""
    headers = list(table.columns)
    lines = ["| " + " | ".join(headers) + " |", "|" + "|".join("---" for _ in headers) + "|"]
    for _, row in table.iterrows():
        cells = []
        for h in headers:
            v = row[h]
            spec = ".3g" if h.startswith("t_") or h == "peak_rss_mb" else ".3e"
            cells.append(_fmt(v, spec).replace("|", "\\|"))
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


def write_report(cfg: ReportConfig, out_root: str | Path = "results/reports") -> tuple[Path, object]:
    """Load records, build the table, write the requested formats; returns (folder, table)."""
    from bench.records import load_records, to_frame

    recs = load_records(cfg.results, suite=cfg.suite, problem=cfg.problem, solver=cfg.solver)
    table = results_table(to_frame(recs))
    out = Path(out_root) / cfg.name
    out.mkdir(parents=True, exist_ok=True)
    if "md" in cfg.formats:
        title = f"# lapbench results{f' (suite {cfg.suite})' if cfg.suite else ''}\n\n"
        (out / "results.md").write_text(title + f"{len(table)} cases; errors relative L2 (quadrature) "
                                        "and max abs; times in seconds.\n\n" + to_markdown(table))
    if "csv" in cfg.formats:
        table.to_csv(out / "results.csv", index=False)
    return out, table
