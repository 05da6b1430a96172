"""The check stage: a suite's records against its committed baseline; exit codes for CI."""
from lapbench.check.baseline import (BASELINE_FORMAT, BASELINE_SCHEMA_VERSION, case_key, dumps_baseline,
                                  entry_from_record, group_key, key_of_prepared, read_baseline, solver_options,
                                  summarise, write_baseline)
from lapbench.check.compare import EXIT_CLEAN, EXIT_REGRESSION, CheckConfig, CheckResult, Finding, compare
from lapbench.check.output import format_table, to_junit, to_markdown
from lapbench.check.plan import CHECK_USAGE, CheckPlan, plan_check, run_baseline, run_check

__all__ = ["CheckConfig", "Finding", "CheckResult", "compare", "format_table", "to_markdown", "to_junit",
           "plan_check", "run_check", "run_baseline", "CheckPlan", "CHECK_USAGE", "EXIT_CLEAN", "EXIT_REGRESSION",
           "BASELINE_FORMAT", "BASELINE_SCHEMA_VERSION", "case_key", "group_key", "solver_options",
           "entry_from_record", "key_of_prepared", "summarise", "dumps_baseline", "write_baseline",
           "read_baseline"]
