"""Records -> the report's DataFrame: filters, readable configuration labels, the error each
record is judged by (metric choice), and the problem order and file names used everywhere."""
from __future__ import annotations

import json
import math
import numbers
import re
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError
from lapbench.records import resolution_label
from lapbench.report.options import ReportConfig

__all__ = ["metric_key", "natural_key"]


def _load(cfg: ReportConfig):
    """Records matching the filters, and their DataFrame (row i = record i)."""
    from lapbench.records import load_records, to_frame

    for i, d in enumerate(cfg.results):
        if not Path(d).is_dir():
            raise ConfigError(f"`report.results[{i}]` must be an existing results folder, got {d!r} "
                              "(run `lapbench run ...` first, or point it at a folder that holds runs/)")
    recs = load_records(cfg.results, suite=cfg.suite)
    if cfg.problem:
        want = set(cfg.problem)
        recs = [r for r in recs if want & {r["problem"].get("label"), r["problem"].get("id"),
                                           r["problem"].get("name")}]
    if cfg.solver:
        recs = [r for r in recs if r["solver"].get("name") in cfg.solver]
    frame = to_frame(recs)
    if len(frame):
        frame = _with_labels(frame, recs)
        frame["error"] = [_error_of(r, cfg) for r in recs]
        # the case's own memory: peak resident set above the forked harness it started from
        # (which holds numpy/scipy and, for learned methods, torch: shared, not the method's)
        delta = frame["peak_rss_delta_mb"]
        frame["mem_mb"] = delta.where(delta.notna(), frame["peak_rss_mb"])
    return recs, frame


def metric_key(rec: dict, metric: str = "rel_l2", eigen_metric: str | None = None) -> str:
    """The metric a record is judged by: `eigen_metric` for eigenvalue problems, else `metric`."""
    if rec["problem"].get("kind") == "eigen" and eigen_metric:
        return eigen_metric
    return metric


def _metric_name(cfg: ReportConfig) -> str:
    return {"rel_l2": "relative L2 error", "abs_l2": "absolute L2 error", "max_abs": "max abs error",
            "rel_max": "relative max error", "nodal_max": "nodal max error"}[cfg.metric]


def _error_of(rec: dict, cfg: ReportConfig) -> float:
    """The report's error of a record (NaN when not measured)."""
    v = (rec.get("metrics") or {}).get(metric_key(rec, cfg.metric, cfg.eigen_metric))
    return float(v) if _finite(v) else float("nan")


def _flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in (d or {}).items():
        if isinstance(v, dict):
            out.update(_flatten(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = json.dumps(v, sort_keys=True) if isinstance(v, list) else v
    return out


def _with_labels(frame, recs):
    """Add `label` (readable configuration name: resolution plus whatever else varies among the
    configurations of the same problem and solver) and `variant` (the same without resolution)."""
    frame = frame.copy()
    flat = []
    for r in recs:
        f = {f"{k}": v for k, v in _flatten(r["solver"].get("config") or {}).items() if k not in ("name",)}
        b = r.get("budget") or {}
        f["train"] = b.get("train_time")
        f["limit"] = b.get("time_limit")
        f["threads"] = r.get("threads_requested", r.get("threads"))
        flat.append(f)
    labels, variants = [""] * len(recs), [""] * len(recs)
    for _, idx in frame.groupby(["problem_id", "solver"], dropna=False).groups.items():
        idx = list(idx)
        keys = sorted({k for i in idx for k in flat[i]})
        varying = [k for k in keys if len({repr(flat[i].get(k)) for i in idx}) > 1]
        for i in idx:
            res = recs[i]["solver"].get("resolution") or {}
            extra = [k for k in varying if k not in res]
            vparts = [_kv(k, flat[i].get(k)) for k in extra]
            labels[i] = ", ".join([p for p in (resolution_label(res, sep=", "),) if p] + vparts) or "default"
            variants[i] = ", ".join(vparts)
    frame["label"] = labels
    frame["variant"] = variants
    return frame


def _kv(k, v) -> str:
    if k in ("train", "limit"):
        return f"{k}={_g(v)}s" if v is not None else f"{k}=default"
    return f"{k}={v}"


def _g(v, spec=".3g") -> str:
    return format(float(v), spec) if v is not None else ""


def _finite(v) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_)) and math.isfinite(v)


def natural_key(text) -> tuple:
    """Sort key that orders embedded numbers by value: sine(k=2) before sine(k=16)."""
    parts = re.split(r"(\d+(?:\.\d+)?(?:e[-+]?\d+)?)", str(text))
    return tuple(float(p) if i % 2 else p for i, p in enumerate(parts))


def _slug(text: str) -> str:
    s = re.sub(r"[^A-Za-z0-9.]+", "-", str(text).replace("=", "-")).strip("-")
    return s[:60] or "problem"

