"""Records: one JSON file per case, written atomically; the loader turns them into a DataFrame."""
from __future__ import annotations

import hashlib
import json
import os
import platform
import subprocess
import tempfile
import warnings
from functools import lru_cache
from pathlib import Path

__all__ = ["SCHEMA_VERSION", "STATUSES", "config_hash", "problem_id", "problem_config_hash", "resolution_label",
           "case_key", "record_path", "write_atomic", "write_record", "read_record",
           "iter_records", "load_records", "to_frame", "environment", "RecordWarning"]

SCHEMA_VERSION = 1
STATUSES = ("ok", "failed", "timeout", "crashed", "out_of_memory", "diverged", "unsupported")
RUNS = "runs"


class RecordWarning(UserWarning):
    """An unreadable or foreign file in a results folder (skipped)."""


def canonical_json(obj) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


def config_hash(identity: dict) -> str:
    """SHA-256 of the canonical JSON of a case's identity (problem, solver, seed, threads, budget)."""
    return hashlib.sha256(canonical_json(identity).encode()).hexdigest()


def _short_hash(obj, n: int = 6) -> str:
    return hashlib.sha256(canonical_json(obj).encode()).hexdigest()[:n]


def _is_scalar(v) -> bool:
    return isinstance(v, (str, int, float, bool)) or v is None


UNIT_SQUARE = {"kind": "rectangle", "x0": 0.0, "x1": 1.0, "y0": 0.0, "y1": 1.0}


def _is_uniform(v) -> bool:
    """A non-empty list of equal numbers."""
    return (isinstance(v, (list, tuple)) and len(v) > 0
            and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v) and len(set(v)) == 1)


def _domain_tag(domain: dict | None) -> str:
    """``[disk cx=0 cy=0 radius=2]``, ``[box lo=0^10 hi=1^10]``; empty for the unit square; other
    lists as a short hash."""
    if not domain or {k: domain.get(k) for k in UNIT_SQUARE} == UNIT_SQUARE and len(domain) == len(UNIT_SQUARE):
        return ""
    parts = [str(domain.get("kind", "?"))]
    for k, v in domain.items():
        if k == "kind":
            continue
        if _is_scalar(v):
            parts.append(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}")
        elif _is_uniform(v):
            # a d-dimensional corner or centre with equal coordinates: ``lo=0^10``
            parts.append(f"{k}={float(v[0]):g}^{len(v)}")
        else:
            size = f"{len(v)} " if isinstance(v, (list, tuple)) else ""
            parts.append(f"{size}{k} ~{_short_hash(v)}")
    return "[" + " ".join(parts) + "]"


def problem_config_hash(config: dict | None) -> str:
    """Hash of a problem's whole config (every knob and the domain): two records with different
    hashes are different problems, whatever their ids say."""
    return hashlib.sha256(canonical_json(config or {}).encode()).hexdigest()[:16]


def problem_id(label: str, params: dict, domain: dict | None = None, config: dict | None = None,
               defaults: dict | None = None) -> str:
    """``sine(k=4,l=4)``, ``expr(u=x*y)[disk cx=0 cy=0 radius=2]``: label, knobs, domain.

    Scalar knobs are shown as they are; list or mapping knobs, and config keys that the builder's
    knobs do not show (expressions of a custom problem, say), as a short stable hash, so that
    two different problems never share an id and ids stay readable.
    """
    knobs = dict(params)
    hidden = {}
    for k, v in (config or {}).items():
        if k in ("name", "domain") or k in knobs or (k in defaults and defaults[k] == v):
            continue
        if _is_scalar(v):
            knobs[k] = v
        else:
            hidden[k] = v
    flat = ",".join(f"{k}={v}" if _is_scalar(v) else f"{k}=~{_short_hash(v)}" for k, v in sorted(knobs.items()))
    out = (f"{label}({flat})" if flat else label) + _domain_tag(domain)
    if hidden:
        out += f" ~{_short_hash(hidden)}"
    return out


def resolution_label(resolution: dict, sep: str = ",") -> str:
    """``n=64``, ``level=3,h=0.1``: a run's resolution knobs in their order (records'
    ``solver.resolution_label``; reports join them with ``sep=", "`` for reading)."""
    return sep.join(f"{k}={v}" for k, v in (resolution or {}).items())


def case_key(problem: str, solver: str, resolution: str, options: str, seed: int) -> str:
    """The stable identity of a case across runs and machines:
    ``<problem id> <solver>[<non-default options>] <resolution label> seed=<seed>``."""
    name = f"{solver}[{options}]" if options else solver
    return f"{problem} {name} {resolution or '-'} seed={int(seed)}"


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "-" for c in str(text))[:40]


def record_path(results_dir: str | Path, problem: str, solver: str, chash: str) -> Path:
    """results/runs/<problem>__<solver>__<hash16>.json"""
    return Path(results_dir) / RUNS / f"{_slug(problem)}__{_slug(solver)}__{chash[:16]}.json"


def write_atomic(path: str | Path, text: str) -> Path:
    """Write text atomically: temp file in the target folder, fsync, chmod 0644, os.replace.

    Readers see the old file or the new one, never a part (mkstemp's 0600 mode is widened so
    that other users of a shared results folder can read it).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".json", dir=path.parent)
    try:
        with os.fdopen(fd, "w") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    try:
        dfd = os.open(path.parent, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass
    _sweep_once(path.parent)
    return path


_SWEPT: set[str] = set()


def _sweep_once(folder: Path) -> None:
    """`remove_stale_temporaries` the first time this process writes into `folder`: leftovers
    come from writers killed before this process started, so one listing per folder suffices
    (a sweep writes thousands of records into one folder)."""
    key = os.fspath(folder)
    if key not in _SWEPT:
        _SWEPT.add(key)
        remove_stale_temporaries(folder)


STALE_TEMPORARY_S = 600.0


def remove_stale_temporaries(folder: str | Path, max_age: float = STALE_TEMPORARY_S) -> list[Path]:
    """Delete ``.tmp-*.json`` files older than `max_age` seconds in `folder`; return them.

    A writer killed between mkstemp and os.replace (kill -9, power loss) leaves its temporary
    behind; loaders ignore such files, and the first successful write of a later process into
    the same folder removes them. A live writer holds its temporary for milliseconds, so ten minutes cannot hit one.
    """
    import time

    removed = []
    now = time.time()
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        if not (entry.name.startswith(".tmp-") and entry.name.endswith(".json")):
            continue
        try:
            if now - entry.stat().st_mtime > max_age:
                os.unlink(entry.path)
                removed.append(Path(entry.path))
        except OSError:        # gone already (another writer removed it) or not ours
            pass
    return removed


def write_record(path: str | Path, record: dict) -> Path:
    """Write a record as JSON atomically (see `write_atomic`)."""
    return write_atomic(path, json.dumps(record, indent=1, sort_keys=True, allow_nan=True,
                                         default=_json_default))


def _json_default(o):
    import numpy as np

    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    return str(o)


MAX_RECORD_BYTES = 256 * 2 ** 20   # a record with a long history is a few MiB; larger is foreign
# Fields the loaders read, with the JSON types a record may hold there (None: the field may be
# absent or null). A file that breaks one of them is foreign and skipped, never a crash later.
_SHAPE = {"problem": (dict,), "solver": (dict,), "metrics": (dict, None), "timings": (dict, None),
          "timing": (dict, None), "cost": (dict, None), "budget": (dict, None), "environment": (dict, None), "info": (dict, None),
          "history": (list, None), "reason": (str, None), "suite": (str, None), "seed": (int, None),
          "threads": (int, None), "case_id": (str, None), "config_hash": (str, None)}
_NESTED = {("problem", "domain"): (dict, None), ("problem", "label"): (str, None),
           ("problem", "id"): (str, None), ("solver", "name"): (str,),
           ("solver", "resolution"): (dict, None), ("solver", "resolution_label"): (str, None)}


def _shape_error(rec) -> str | None:
    """Why a parsed JSON document is not a record this version can read, or None."""
    if not isinstance(rec, dict):
        return f"a JSON {type(rec).__name__}, not a record object"
    if rec.get("schema_version") != SCHEMA_VERSION:
        return f"schema_version {rec.get('schema_version')!r}, expected {SCHEMA_VERSION}"
    if rec.get("status") not in STATUSES:
        return f"status {rec.get('status')!r} is not one of {', '.join(STATUSES)}"
    checks = [((k,), rec.get(k), t) for k, t in _SHAPE.items()]
    checks += [((a, b), rec[a].get(b), t) for (a, b), t in _NESTED.items() if isinstance(rec.get(a), dict)]
    for keys, value, types in checks:
        if not (value is None and None in types) and not isinstance(value, tuple(t for t in types if t)):
            return f"field {'.'.join(keys)!r} holds {type(value).__name__}"
    for key in ("timings", "cost"):  # table columns: one JSON scalar per cell
        for k, v in (rec.get(key) or {}).items():
            if isinstance(v, (list, dict)):
                return f"field {key}.{k!r} holds {type(v).__name__}"
    return None


def read_record(path: str | Path) -> dict | None:
    """A record, or None (with a RecordWarning) when the file is unreadable or foreign."""
    path = Path(path)
    try:
        if not path.is_file():  # a folder, fifo or device named *.json would block or fail open()
            raise OSError("not a regular file")
        if path.stat().st_size > MAX_RECORD_BYTES:
            raise OSError(f"larger than {MAX_RECORD_BYTES // 2 ** 20} MiB")
        with open(path, encoding="utf-8") as fh:
            rec = json.load(fh)
    except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
        # ValueError covers malformed JSON and integers beyond Python's digit limit;
        # RecursionError, absurdly deep nesting
        warnings.warn(f"skipping unreadable record {path}: {type(exc).__name__}: {str(exc)[:200]}",
                      RecordWarning, stacklevel=2)
        return None
    why = _shape_error(rec)
    if why is not None:
        warnings.warn(f"skipping foreign or incompatible file {path} (not a lapbench record "
                      f"of schema version {SCHEMA_VERSION}: {why})", RecordWarning, stacklevel=2)
        return None
    return rec


def iter_records(results_dirs):
    """Yield every valid record under the given results folders (their runs/ subfolder, or the
    folder itself when it holds records directly)."""
    if isinstance(results_dirs, (str, Path)):
        results_dirs = [results_dirs]
    for d in results_dirs:
        d = Path(d)
        base = d / RUNS if (d / RUNS).is_dir() else d
        if not base.is_dir():
            continue
        for p in sorted(base.rglob("*.json")):
            if p.name.startswith(".tmp-"):
                continue
            rec = read_record(p)
            if rec is not None:
                yield rec


def load_records(results_dirs, suite: str | None = None, problem: str | None = None,
                 solver: str | None = None) -> list[dict]:
    """Valid records, optionally filtered by suite, problem id/label and solver name."""
    out = []
    for rec in iter_records(results_dirs):
        if suite is not None and rec.get("suite") != suite:
            continue
        if problem is not None and problem not in (rec["problem"].get("label"), rec["problem"].get("id"),
                                                   rec["problem"].get("name")):
            continue
        if solver is not None and rec["solver"].get("name") != solver:
            continue
        out.append(rec)
    return out


def to_frame(records):
    """Flatten records into a pandas DataFrame, one row per case."""
    import pandas as pd

    rows = []
    for r in records:
        m = r.get("metrics") or {}
        t = r.get("timings") or {}
        rt = r.get("timing") if isinstance(r.get("timing"), dict) else {}
        c = r.get("cost") or {}
        row = {
            "case_id": r.get("case_id"), "suite": r.get("suite"),
            "problem": r["problem"].get("label"), "problem_id": r["problem"].get("id"),
            "kind": r["problem"].get("kind"), "domain": (r["problem"].get("domain") or {}).get("kind"),
            "solver": r["solver"].get("name"), "family": r["solver"].get("family"),
            "resolution": r["solver"].get("resolution_label"),
            "seed": r.get("seed"), "threads": r.get("threads"), "status": r.get("status"),
            "reason": r.get("reason", ""),
            "dofs": c.get("dofs"), "n_params": c.get("params"), "iterations": c.get("iterations"),
            "h": c.get("h"), "peak_rss_mb": c.get("peak_rss_mb"), "peak_rss_delta_mb": c.get("peak_rss_delta_mb"),
            "t_setup": t.get("setup"), "t_solve": t.get("solve"), "t_evaluate": t.get("evaluate"),
            "t_total": t.get("total"), "t_wall": t.get("wall"),
            # repeated timing of deterministic methods (lapbench.run): every repeat's setup + solve
            "t_min": rt.get("min"), "t_max": rt.get("max"),
            "repeats": len(rt.get("repeats") or []) or 1, "t_statistic": rt.get("statistic", "single"),
            "problem_config": r["problem"].get("config_hash") or problem_config_hash(r["problem"].get("config")),
            # one configuration = everything but the seed (reports group seeds by it)
            "config_key": config_hash({"solver": r["solver"].get("config"), "budget": r.get("budget"),
                                       "threads": r.get("threads_requested", r.get("threads"))})[:16],
            "train_time": (r.get("budget") or {}).get("train_time"),
            "has_field": isinstance(r.get("field"), dict),
        }
        for k, v in m.items():
            if isinstance(v, (int, float)) or v is None:
                row[k] = v
        for k, v in (r["solver"].get("resolution") or {}).items():
            row[f"res_{k}"] = v
        rows.append(row)
    frame = pd.DataFrame(rows)
    if len(frame):
        # a report never combines different problems: one id with several configs gets the hash
        n_cfg = frame.groupby("problem_id", dropna=False)["problem_config"].transform("nunique")
        clash = n_cfg > 1
        frame.loc[clash, "problem_id"] = (frame.loc[clash, "problem_id"] + " #"
                                          + frame.loc[clash, "problem_config"].str[:6])
    return frame


@lru_cache(maxsize=1)
def _static_environment() -> dict:
    from importlib import metadata

    versions = {}
    for pkg in ("lapbench", "numpy", "scipy", "torch", "pyamg", "scikit-fem", "sympy", "hydra-core",
                "pandas", "threadpoolctl"):
        try:
            versions[pkg] = metadata.version(pkg)
        except metadata.PackageNotFoundError:
            versions[pkg] = None
    cpu = platform.processor() or ""
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    return {"versions": versions, "cpu": cpu, "cpu_count": os.cpu_count(),
            "python": platform.python_version(), "platform": platform.platform(),
            "host": platform.node(), "git": _git_revision()}


def _git_revision() -> str | None:
    here = Path(__file__).resolve().parent.parent
    try:
        out = subprocess.run(["git", "-C", str(here), "rev-parse", "HEAD"], capture_output=True,
                             text=True, timeout=5)
        if out.returncode != 0:
            return None
        dirty = subprocess.run(["git", "-C", str(here), "status", "--porcelain", "--untracked-files=no"],
                               capture_output=True, text=True, timeout=5).stdout.strip()
        return out.stdout.strip() + ("-dirty" if dirty else "")
    except (OSError, subprocess.SubprocessError):
        return None


def environment() -> dict:
    """Package versions, CPU model and count, Python, host, git revision (cached per process)."""
    return dict(_static_environment())
