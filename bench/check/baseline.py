"""Baselines: the reviewed, committed summary of a suite's records that `lapbench check` compares with.

A baseline file (``results/baseline/<suite>.json``) holds one *entry* per case, keyed by a
stable case key (`lapbench.records.case_key`) built from what the case is, never from where or when it ran::

    <problem id> <solver>[<non-default options>] <resolution> seed=<seed>
    e.g.  "peak(alpha=1000.0,xc=0.5,yc=0.5) fd5[linear_solver=amg] n=64 seed=0"

Each entry keeps the status, the harness-measured errors, the solver time in seconds and
normalised by the calibration kernel (`lapbench.calibration`), the seed and thread count. The file
is pretty-printed with sorted keys and one case per line, so a review diff shows exactly the
cases that changed. A current run is summarised by the same functions, so that the comparison
is entry against entry.
"""
from __future__ import annotations

import dataclasses
import json
import math
import statistics
from datetime import datetime, timezone
from pathlib import Path

from lapbench.config import ConfigError
from lapbench.records import case_key, resolution_label

__all__ = ["BASELINE_FORMAT", "BASELINE_SCHEMA_VERSION", "case_key", "group_key", "solver_options",
           "entry_from_record", "key_of_prepared", "summarise", "dumps_baseline", "write_baseline",
           "read_baseline"]

BASELINE_FORMAT = "lapbench-baseline"
BASELINE_SCHEMA_VERSION = 1
ERROR_DIGITS = 6     # significant digits kept for errors: far below any tolerance, quiet diffs
TIME_DIGITS = 3      # significant digits kept for times: they are noisy beyond that anyway
REASON_CHARS = 200
_RESOLUTION_SKIP = ("name", "_target_")
_ENTRY_FIELDS = {"problem": str, "solver": str, "resolution": str, "options": str, "seed": int,
                 "deterministic": bool, "status": str, "errors": dict}


def _flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        if isinstance(v, dict):
            out.update(_flatten(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = v
    return out


def _defaults(solver_name: str) -> dict | None:
    """The registered solver's option defaults (flattened), or None for an unknown solver."""
    try:
        from lapbench.solvers import SOLVERS
    except Exception:  # noqa: BLE001
        return None
    cls = SOLVERS.get(solver_name)
    if cls is None:
        return None
    values = {}
    for f in dataclasses.fields(cls.Params):
        if f.default is not dataclasses.MISSING:
            v = f.default
        elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
            v = f.default_factory()
        else:
            continue
        values[f.name] = dataclasses.asdict(v) if dataclasses.is_dataclass(v) else v
    return _flatten(values)


def _same(a, b) -> bool:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool) \
            and not isinstance(b, bool):
        return float(a) == float(b)
    return a == b


def _fmt_value(v) -> str:
    if isinstance(v, float) and v.is_integer() and abs(v) < 1e15:
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ",".join(_fmt_value(x) for x in v) + "]"
    return str(v)


def solver_options(solver_name: str, config: dict, resolution: dict) -> str:
    """``linear_solver=amg,tol=1e-08``: the solver's options that differ from its defaults.

    Resolution knobs are excluded (they have their own part of the key). Options at their
    defaults are left out so that keys stay short; for a solver that is not registered every
    option is kept.
    """
    flat = _flatten({k: v for k, v in (config or {}).items() if k not in _RESOLUTION_SKIP})
    defaults = _defaults(solver_name)
    parts = []
    for k in sorted(flat):
        if k in (resolution or {}):
            continue
        if defaults is not None and k in defaults and _same(defaults[k], flat[k]):
            continue
        parts.append(f"{k}={_fmt_value(flat[k])}")
    return ",".join(parts)


def group_key(entry: dict) -> str:
    """The case key without the seed: the seeds of a stochastic method form one group."""
    key = case_key(entry["problem"], entry["solver"], entry.get("resolution") or "", entry.get("options") or "", 0)
    return key.rsplit(" seed=", 1)[0]


def key_of_prepared(prep) -> str:
    """The key of a prepared case (lapbench.run.prepare), whether or not it has a record yet."""
    from lapbench.run import problem_key

    res = prep.solver.resolution()
    return case_key(problem_key(prep), prep.solver.name, resolution_label(res),
                    solver_options(prep.solver.name, prep.case.solver, res), prep.case.seed)


def _round(v, digits: int):
    if v is None or isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    v = float(v)
    if not math.isfinite(v):
        return v
    return float(f"{v:.{digits - 1}e}")


def entry_from_record(rec: dict) -> tuple[str, dict]:
    """(case key, entry) summarising one record."""
    solver = rec["solver"]
    res = solver.get("resolution") or {}
    options = solver_options(solver.get("name", ""), solver.get("config") or {}, res)
    # float metrics are errors (compared with a tolerance); integer ones are counts such as the
    # number of eigenvalues delivered (compared exactly); lists are per-mode detail (skipped)
    errors, counts = {}, {}
    for k, v in sorted((rec.get("metrics") or {}).items()):
        if isinstance(v, float):
            errors[k] = _round(v, ERROR_DIGITS)
        elif isinstance(v, int) and not isinstance(v, bool):
            counts[k] = v
    total = (rec.get("timings") or {}).get("total")
    cal = (rec.get("environment") or {}).get("calibration_s")
    ok_time = rec.get("status") == "ok" and isinstance(total, (int, float))
    entry = {
        "problem": rec["problem"].get("id") or rec["problem"].get("label") or rec["problem"].get("name"),
        "solver": solver.get("name", ""),
        "resolution": solver.get("resolution_label") or resolution_label(res),
        "options": options,
        "seed": int(rec.get("seed") or 0),
        "family": solver.get("family") or "",
        "deterministic": bool(solver.get("deterministic", True)),
        "status": rec.get("status", "failed"),
        "reason": str(rec.get("reason") or "")[:REASON_CHARS],
        "errors": errors,
        "counts": counts,
        "threads": rec.get("threads"),
        "time_s": _round(total, TIME_DIGITS) if ok_time else None,
        "time_norm": _round(total / cal, TIME_DIGITS) if ok_time and cal else None,
        # cores kept busy by other processes during the case: its time is not trusted above a limit
        "foreign_load": _round((rec.get("environment") or {}).get("foreign_load"), 2) if ok_time else None,
    }
    key = case_key(entry["problem"], entry["solver"], entry["resolution"], options, entry["seed"])
    return key, entry


def _provenance(records: list[dict]) -> dict:
    """Where and with what the records were made (shared fields; lists where they differ)."""
    def values(get):
        out = []
        for r in records:
            try:
                v = get(r)
            except (KeyError, TypeError, AttributeError):
                v = None
            if v is not None and v not in out:
                out.append(v)
        return out[0] if len(out) == 1 else (sorted(out, key=str) if out else None)

    env = lambda r: r.get("environment") or {}  # noqa: E731
    cals = sorted(env(r)["calibration_s"] for r in records if env(r).get("calibration_s"))
    created = sorted(r.get("created") for r in records if r.get("created"))
    from lapbench.records import SCHEMA_VERSION

    return {
        "records": len(records),
        "record_schema_version": SCHEMA_VERSION,
        "records_created": [created[0], created[-1]] if created else None,
        "git": values(lambda r: env(r).get("git")),
        "host": values(lambda r: env(r).get("host")),
        "cpu": values(lambda r: env(r).get("cpu")),
        "cpu_count": values(lambda r: env(r).get("cpu_count")),
        "python": values(lambda r: env(r).get("python")),
        "versions": values(lambda r: env(r).get("versions")),
        "threads": values(lambda r: r.get("threads")),
        "calibration_kernel": values(lambda r: env(r).get("calibration_kernel")),
        "calibration_s": ({"min": _round(cals[0], TIME_DIGITS), "median": _round(statistics.median(cals), TIME_DIGITS),
                           "max": _round(cals[-1], TIME_DIGITS)} if cals else None),
    }


def summarise(records: list[dict], suite: str, command: str | None = None) -> dict:
    """The baseline document of a set of records (also used for the current side of a check).

    Raises ConfigError when two records share a case key (they would be indistinguishable).
    """
    cases: dict[str, dict] = {}
    for rec in records:
        key, entry = entry_from_record(rec)
        if key in cases:
            raise ConfigError(f"`suite` {suite!r}: two cases share the key {key!r}; make them differ in "
                              "problem, solver options, resolution or seed")
        cases[key] = entry
    prov = _provenance(records)
    prov["created"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
    if command:
        prov["command"] = command
    return {"format": BASELINE_FORMAT, "schema_version": BASELINE_SCHEMA_VERSION, "suite": suite,
            "provenance": prov, "cases": dict(sorted(cases.items()))}


def _json_safe(obj):
    """Non-finite floats as strings ("nan", "inf"): strict JSON readers refuse NaN literals."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return repr(obj)
    if isinstance(obj, dict):
        return {k: _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_json_safe(v) for v in obj]
    return obj


def dumps_baseline(doc: dict) -> str:
    """Sorted keys, header pretty-printed, one case per line (diff-friendly)."""
    doc = _json_safe(doc)
    head = {k: v for k, v in doc.items() if k != "cases"}
    lines = ["{"]
    for k in sorted(head):
        lines.append(f" {json.dumps(k)}: {json.dumps(head[k], sort_keys=True, indent=None)},")
    cases = doc.get("cases") or {}
    if cases:
        lines.append(' "cases": {')
        items = sorted(cases.items())
        for i, (k, v) in enumerate(items):
            sep = "," if i < len(items) - 1 else ""
            lines.append(f"  {json.dumps(k)}: {json.dumps(v, sort_keys=True)}{sep}")
        lines.append(" }")
    else:
        lines.append(' "cases": {}')
    lines.append("}")
    return "\n".join(lines) + "\n"


def write_baseline(path: str | Path, doc: dict) -> Path:
    """Write atomically (lapbench.records.write_atomic)."""
    from lapbench.records import write_atomic

    return write_atomic(path, dumps_baseline(doc))


def _bad(path, why: str) -> ConfigError:
    return ConfigError(f"`check.baseline` {str(path)!r} {why}")


def _number(v):
    """A stored number back to float (non-finite values are stored as strings)."""
    if v is None:
        return None
    if isinstance(v, str) and v in ("nan", "inf", "-inf"):
        return float(v)
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return float(v)
    raise ValueError(v)


def read_baseline(path: str | Path, suite: str | None = None) -> dict:
    """Read and validate a baseline file; ConfigError (one line, exit 2) when it is missing,
    unreadable, of another format or schema version, or of another suite."""
    path = Path(path)
    if not path.is_file():
        hint = f"; create it with `lapbench baseline suite={suite}`" if suite else ""
        raise _bad(path, f"does not exist{hint}")
    try:
        doc = json.loads(path.read_text())
    except (OSError, UnicodeDecodeError) as exc:
        raise _bad(path, f"cannot be read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise _bad(path, f"is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    if not isinstance(doc, dict) or doc.get("format") != BASELINE_FORMAT:
        raise _bad(path, f"is not a lapbench baseline (no \"format\": \"{BASELINE_FORMAT}\")")
    version = doc.get("schema_version")
    if version != BASELINE_SCHEMA_VERSION:
        raise _bad(path, f"has schema version {version!r}; this lapbench reads version "
                         f"{BASELINE_SCHEMA_VERSION}; regenerate it with `lapbench baseline suite=...`")
    if suite is not None and doc.get("suite") != suite:
        raise _bad(path, f"is the baseline of suite {doc.get('suite')!r}, not of {suite!r}")
    cases = doc.get("cases")
    if not isinstance(cases, dict):
        raise _bad(path, "has no \"cases\" mapping")
    if not isinstance(doc.get("provenance"), dict):
        raise _bad(path, "has no \"provenance\" mapping")
    for key, entry in cases.items():
        if not isinstance(entry, dict):
            raise _bad(path, f"case {key!r} is not a mapping")
        for field, tp in _ENTRY_FIELDS.items():
            if not isinstance(entry.get(field), tp) or (tp is int and isinstance(entry.get(field), bool)):
                raise _bad(path, f"case {key!r}: field {field!r} is missing or not {tp.__name__}")
        if not isinstance(entry.setdefault("counts", {}), dict) or any(
                isinstance(v, bool) or not isinstance(v, int) for v in entry["counts"].values()):
            raise _bad(path, f"case {key!r}: field 'counts' is not a mapping of integers")
        try:
            entry["errors"] = {k: _number(v) for k, v in entry["errors"].items()}
            for field in ("time_s", "time_norm", "foreign_load"):
                entry[field] = _number(entry.get(field))
        except ValueError as exc:
            raise _bad(path, f"case {key!r}: {exc.args[0]!r} is not a number") from None
    return doc

