"""Report figure of a dimension study: time-to-tolerance against the dimension d, per method.

For every problem family (problem name) recorded at two or more dimensions, a row of panels, one
per tolerance of the report: x the dimension d (``problem.params.dim``; the domain's length for
records without it), y the method's time to the tolerance by the report's rule
(`lapbench.report.rules.time_to_tolerance`: first checkpoint or final solution at or below the
tolerance, best configuration, upper median over seeds), one line per method, learned methods
dashed. A method that ran at some d but never reached the tolerance there is drawn as an open
triangle on the panel's top edge ("not reached"). conf/suite/dimensions.yaml is the study.

The builder takes the report's `Figure` type and save function as arguments, so that this module
does not import `lapbench.report.figures` (which calls it).
"""
from __future__ import annotations

import math

import numpy as np

from lapbench.report.options import _is_learned
from lapbench.report.rules import time_to_tolerance
from lapbench.report.style import _decade_label, _legend, _markers, method_colours

__all__ = ["fig_dimensions", "record_dimension", "dimension_table"]


def record_dimension(rec) -> int:
    """The space dimension of a record's problem (2 for planar problems)."""
    prob = rec.get("problem") or {}
    dim = (prob.get("params") or {}).get("dim")
    if dim is None:
        dom = prob.get("domain") or {}
        for key in ("lo", "center"):
            if isinstance(dom.get(key), list):
                return len(dom[key])
        return 2
    return int(dim)


def dimension_table(recs, frame, tolerances, metric: str = "rel_l2"):
    """time_to_tolerance rows with the problem's name and dimension added (columns ``name``, ``d``)."""
    tt = time_to_tolerance(recs, frame, tolerances, metric)
    info = {}
    for i in frame.index:
        pid = frame.at[i, "problem_id"]
        if pid not in info:
            info[pid] = ((recs[i].get("problem") or {}).get("name"), record_dimension(recs[i]))
    return tt.assign(name=tt["problem_id"].map(lambda p: info[p][0]),
                     d=tt["problem_id"].map(lambda p: info[p][1]))


def fig_dimensions(recs, frame, cfg, folder, Figure, save):
    """One figure, a row of panels per problem name recorded at two or more dimensions and a
    column per tolerance (module docstring); None when no problem has two dimensions."""
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FuncFormatter

    tt = dimension_table(recs, frame, cfg.tolerances, cfg.metric)
    names = sorted(n for n, g in tt.groupby("name") if g["d"].nunique() >= 2)
    if not names:
        return None
    tols = sorted(tt["tolerance"].unique(), reverse=True)
    colours, markers = method_colours(frame), _markers(frame)
    fig, axes = plt.subplots(len(names), len(tols), figsize=(cfg.figures.width, cfg.figures.height * len(names)),
                             sharey=True, layout="constrained", squeeze=False)
    finite = tt["time_s"].astype(float)
    finite = finite[np.isfinite(finite) & (finite > 0)]
    top = 10 ** math.ceil(math.log10(finite.max() * 3)) if len(finite) else 1.0
    bottom = 10 ** math.floor(math.log10(finite.min() / 3)) if len(finite) else 1e-3
    all_dims = set()
    for row, name in zip(axes, names):
        g = tt[tt["name"] == name]
        dims = sorted(g["d"].unique())
        all_dims.update(int(d) for d in dims)
        for ax, tol in zip(row, tols):
            h = g[(g["tolerance"] == tol) & ~g["unsupported"].astype(bool)]
            for (fam, solver), m in h.groupby(["family", "solver"], sort=True):
                m = m.sort_values("d")
                t = m["time_s"].astype(float).to_numpy()
                ok = np.isfinite(t)
                style = dict(ls="--" if _is_learned(fam) else "-", lw=1.2, ms=5)
                if ok.any():
                    ax.plot(m["d"].to_numpy()[ok], t[ok], color=colours[solver], marker=markers[solver],
                            label=solver, **style)
                if (~ok).any():
                    ax.plot(m["d"].to_numpy()[~ok], np.full(int((~ok).sum()), top), ls="none", marker="^",
                            mfc="none", color=colours[solver], ms=7, clip_on=False, label=solver)
            ax.set_yscale("log")
            ax.set_ylim(bottom, top)
            ax.yaxis.set_major_formatter(FuncFormatter(_decade_label))
            ax.set_xticks(dims)
            ax.set_xlabel("dimension d")
            ax.set_title(f"{name}: {cfg.metric} \u2264 {tol:g}", fontsize="small")
        row[0].set_ylabel("time to tolerance (s)")
    _legend(fig, axes[0][0])
    key = "time_to_tolerance_by_dimension"
    return Figure(key, "Time to tolerance against dimension",
                  f"Method time (setup + solve, or training) until the {cfg.metric} first reached each "
                  f"tolerance, on {', '.join(names)} in d = {', '.join(str(d) for d in sorted(all_dims))}: best "
                  "configuration of each method, upper median over seeds; learned methods dashed. Open "
                  "triangles on the top edge: ran at that d and never reached the tolerance. No point: not "
                  "run or not supported at that d.",
                  save(fig, folder, key, cfg), None)
