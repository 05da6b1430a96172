"""The report stage: records -> comparison tables and figures under results/reports/<name>/."""
from lapbench.report.figures import Figure, family_colours, make_figures
from lapbench.report.frame import _load, metric_key, natural_key  # noqa: F401  (_load: records + frame)
from lapbench.report.options import (FAIL_STATUSES, FAMILY_ORDER, FIGURE_KINDS, FORMATS, IMAGE_FORMATS,
                                  LEARNED_FAMILIES, METRICS, NOT_REACHED, FieldOptions, FigureOptions,
                                  FitOptions, ReportConfig)
from lapbench.report.rules import (accuracy_at_budget, best_errors, order_fits, pareto_front, run_points,
                                seed_summary, speedup_table, status_counts, time_to_tolerance, upper_median)
from lapbench.report.tables import Table, build_tables, results_table, runs_table
from lapbench.report.writers import html_table, latex_table, latex_tabular, tex_escape, to_markdown, write_report

__all__ = ["ReportConfig", "FigureOptions", "FitOptions", "FieldOptions", "Table", "results_table", "runs_table",
           "to_markdown", "run_points", "pareto_front", "time_to_tolerance", "accuracy_at_budget",
           "speedup_table", "order_fits", "seed_summary", "status_counts", "build_tables", "metric_key",
           "upper_median", "best_errors", "natural_key", "latex_tabular", "latex_table", "html_table",
           "tex_escape", "write_report", "LEARNED_FAMILIES", "FAIL_STATUSES", "FAMILY_ORDER", "FIGURE_KINDS",
           "FORMATS", "IMAGE_FORMATS", "METRICS", "NOT_REACHED", "Figure", "make_figures", "family_colours"]
