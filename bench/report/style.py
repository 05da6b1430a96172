"""Styling shared by the report's figures: colours (one per method, fixed per family), markers,
hollow rings for points that coincide with an earlier method's, log axes labelled at whole
decades, the legend below the axes, the matplotlib style and saving in the requested formats.
bench/report/figures.py draws with these; figure modules of their own may use them too."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from lapbench.report.frame import _metric_name
from lapbench.report.options import FAMILY_ORDER

__all__ = ["family_colours", "method_colours", "MARKERS"]

MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")


def family_colours(families) -> dict:
    """Family -> colour from the colour-blind palette, stable across reports."""
    import seaborn as sns

    pal = sns.color_palette("colorblind", 10)
    # blue, green, reddish purple, vermilion for the known families (orange is kept away from
    # vermilion, the pair hardest to tell apart); the rest of the palette after them
    known = {"fd": pal[0], "spectral": pal[2], "fem": pal[4], "pinn": pal[3]}
    extra = iter([pal[i] for i in (1, 5, 9, 8, 6, 7)])
    out = {}
    for f in sorted(set(families), key=lambda f: (f not in FAMILY_ORDER, str(f))):
        out[f] = known.get(f) or next(extra, pal[7])
    return out


def method_colours(frame) -> dict:
    """Solver -> colour, one per method: methods ordered by family (known families first), then by
    name, taking the colour-blind palette's ten colours in turn; past ten, evenly spaced hues."""
    import seaborn as sns

    fams = family_colours(frame["family"])
    fam_rank = {f: k for k, f in enumerate(fams)}
    pairs = sorted({(f, s) for f, s in zip(frame["family"], frame["solver"])},
                   key=lambda fs: (fam_rank[fs[0]], str(fs[1])))
    solvers = list(dict.fromkeys(s for _, s in pairs))
    pal = sns.color_palette("colorblind", 10)
    order = [0, 9, 2, 4, 3, 1, 8, 6, 5, 7]   # blue, sky blue, green, purple, vermilion, orange, ...
    if len(solvers) <= len(order):
        return {s: pal[order[k]] for k, s in enumerate(solvers)}
    hues = sns.color_palette("husl", len(solvers))
    return {s: hues[k] for k, s in enumerate(solvers)}


class _Overlap:
    """Remembers drawn points (to 0.1 % in log scale) and splits a method's points into the new
    ones and those that coincide with an earlier method's."""

    def __init__(self):
        self.seen = set()

    @staticmethod
    def _key(x, y):
        return (round(math.log10(x), 3), round(math.log10(y), 3)) if x > 0 and y > 0 else (x, y)

    def split(self, xs, ys):
        keys = [self._key(float(x), float(y)) for x, y in zip(xs, ys)]
        dup = np.array([k in self.seen for k in keys], bool)
        self.seen.update(keys)
        return dup


def _scatter_methods(ax, groups, colours, markers, overlap, **kw):
    """One scatter per method; points already drawn by an earlier method become hollow rings.
    Returns True if any point was drawn as a ring."""
    ringed = False
    for solver, x, y in groups:
        x, y = np.asarray(x, float), np.asarray(y, float)
        dup = overlap.split(x, y)
        c = colours[solver]
        if not dup.all():   # (an empty scatter would take the legend entry from the rings)
            ax.scatter(x[~dup], y[~dup], color=c, marker=markers[solver], s=28, edgecolor="white",
                       linewidth=0.4, label=solver, zorder=3, **kw)
        if dup.any():
            ax.scatter(x[dup], y[dup], facecolor="none", edgecolor=c, marker=markers[solver], s=90,
                       linewidth=1.4, label=solver, zorder=3.5, **kw)
            ringed = True
    return ringed


_RING_NOTE = (" Hollow, larger markers: runs whose point coincides with an earlier method's (identical "
              "results), drawn around it.")
_FRONT_STYLES = ["-", "--", "-.", ":"]


def _markers(frame) -> dict:
    """Solver -> marker, distinct within each family."""
    out = {}
    for _, g in frame.groupby("family", sort=True):
        for i, s in enumerate(sorted(g["solver"].unique())):
            out[s] = MARKERS[i % len(MARKERS)]
    return out


def _style(cfg):
    import matplotlib
    import seaborn as sns

    matplotlib.use("Agg")
    rc = {**sns.axes_style("ticks"), **sns.plotting_context("paper", font_scale=1.25 * cfg.figures.font_scale)}
    rc.update({"axes.grid": True, "grid.color": "#e3e3e3", "grid.linewidth": 0.6, "svg.hashsalt": "lapbench",
               "legend.frameon": False, "figure.dpi": 100,
               "svg.fonttype": "none"})   # SVG text stays text: smaller, editable in a paper
    return rc


def _save(fig, folder: Path, key: str, cfg) -> dict:
    import matplotlib.pyplot as plt

    paths = {}
    for fmt in cfg.figures.formats:
        p = folder / f"{key}.{fmt}"
        meta = {"Date": None} if fmt == "svg" else {}
        fig.savefig(p, dpi=cfg.figures.dpi, format=fmt, metadata=meta)
        paths[fmt] = p
    plt.close(fig)
    return paths


def _error_label(cfg, frame=None, pid=None) -> str:
    """Axis label of the error, with its unit; eigenvalue problems use the eigen metric."""
    if frame is not None and pid is not None and cfg.eigen_metric:
        kinds = set(frame.loc[frame["problem_id"] == pid, "kind"])
        if kinds == {"eigen"}:
            return f"eigenvalue error `{cfg.eigen_metric}` (dimensionless)"
    if cfg.metric.startswith("rel"):
        return f"{_metric_name(cfg)} (dimensionless)"
    return f"{_metric_name(cfg)} (units of u)"


def _legend(fig, ax):
    """One entry per label, below the axes (a legend beside them would squeeze the plot)."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        seen = {}
        for h, lab in zip(handles, labels):
            seen.setdefault(lab, h)
        ncols = 2 if max(len(lab) for lab in seen) > 28 else 3
        fig.legend(seen.values(), seen.keys(), loc="outside lower center", ncols=ncols, fontsize="small")


def _staircase(ax, front, **kw):
    """A Pareto front as the best error reachable within a time: steps at its points, held to the
    right edge of the axes (call after the limits are final)."""
    if len(front) == 0:
        return
    x0, x1 = ax.get_xlim()
    t = np.append(front["time"].to_numpy(float), x1)
    e = np.append(front["error"].to_numpy(float), front["error"].iloc[-1])
    ax.plot(t, e, drawstyle="steps-post", **kw)
    ax.set_xlim(x0, x1)


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079")


def _decade_label(v, _pos=None) -> str:
    """10 to a power in Unicode superscripts: no mathtext parsing (which dominated the run time)."""
    if v <= 0:
        return ""
    k = math.log10(v)
    if abs(k - round(k)) > 1e-9:
        return ""
    return "10" + str(int(round(k))).translate(_SUPERSCRIPT)


def _loglog(ax):
    """Log axes labelled at whole decades only; a range with fewer than two decade ticks is widened
    to whole decades, so that every axis carries at least two labels and minor labels never crowd."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter, NullLocator

    ax.set_xscale("log")
    ax.set_yscale("log")
    for axis, get, set_ in ((ax.xaxis, ax.get_xlim, ax.set_xlim), (ax.yaxis, ax.get_ylim, ax.set_ylim)):
        lo, hi = get()
        if lo > 0 and hi > lo:
            a, b = math.log10(lo), math.log10(hi)
            if math.floor(b) - math.ceil(a) + 1 < 2:
                set_(10.0 ** math.floor(a), 10.0 ** max(math.ceil(b), math.floor(a) + 1))
        axis.set_major_locator(LogLocator(base=10, numticks=12))
        axis.set_major_formatter(FuncFormatter(_decade_label))
        lo, hi = get()
        if lo > 0 and hi > lo and math.log10(hi / lo) <= 6:
            axis.set_minor_locator(LogLocator(base=10, subs=np.arange(2, 10) * 0.1, numticks=12))
        else:   # minor ticks over many decades are clutter, and slow to lay out
            axis.set_minor_locator(NullLocator())
        axis.set_minor_formatter(NullFormatter())
