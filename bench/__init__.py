"""lapbench harness: problems and domains, metrics, isolated runs, records, report, check, CLI."""
