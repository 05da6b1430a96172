"""lapbench: error-against-runtime benchmarks of PINNs and classical solvers.

The package's names for notebooks and scripts (`run_case`, `run_suite`, `load_results`,
`make_report`, `check_claim`, ...) live in `lapbench.api` and are loaded on first use, so that importing any
submodule stays cheap.
"""
_API = ("run_case", "run_suite", "load_results", "make_report", "check_claim", "ConfigError")

__all__ = list(_API)


def __getattr__(name: str):
    if name in _API:
        from lapbench import api

        return getattr(api, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_API))
