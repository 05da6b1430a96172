"""Writing a report: Markdown, LaTeX, CSV and self-contained HTML under results/reports/<name>/,
with the rules text and a table of contents at the top of each.

Links between the report's files are relative (the folder can be moved or copied whole); the HTML
embeds every figure as a data URI, in whichever of its written formats (PNG, SVG) is smaller.
Wide tables scroll inside their own box, so that the page itself never scrolls sideways."""
from __future__ import annotations

import base64
import html
import re
from pathlib import Path

import numpy as np

from lapbench.report.figures import make_figures
from lapbench.report.frame import _finite, _load, _metric_name, _slug
from lapbench.report.options import ReportConfig
from lapbench.report.tables import Table, _cell_spec, _fmt, build_tables, results_table, runs_table

__all__ = ["write_report", "to_markdown", "latex_tabular", "latex_table", "html_table", "tex_escape"]


def to_markdown(table) -> str:
    """A GitHub-style Markdown table (no optional dependency)."""
    headers = list(table.columns)
    lines = ["| " + " | ".join(headers) + " |", "|" + "|".join("---" for _ in headers) + "|"]
    for _, row in table.iterrows():
        cells = [_fmt(row[h], _cell_spec(h)).replace("|", "\\|").replace("\n", " ") for h in headers]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


_TEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
                "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}


def tex_escape(text) -> str:
    """Escape LaTeX's special characters in plain text."""
    return "".join(_TEX_SPECIAL.get(c, c) for c in str(text))


def latex_tabular(display) -> str:
    """A booktabs tabular of a display table (first column left, the rest left: cells hold text)."""
    cols = list(display.columns)
    spec = "l" * len(cols)
    lines = [rf"\begin{{tabular}}{{{spec}}}", r"\toprule",
             " & ".join(tex_escape(c) for c in cols) + r" \\", r"\midrule"]
    for _, row in display.iterrows():
        lines.append(" & ".join(tex_escape(_fmt(row[c])) for c in cols) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


def _inline_tex(text: str) -> str:
    """Escape text for LaTeX, rendering Markdown's `code` spans in typewriter type."""
    return re.sub(r"`([^`]+)`", r"\\texttt{\1}", tex_escape(text))


def latex_table(t: Table) -> str:
    """A floating table with caption and label, ready to \\input into a paper."""
    return ("\\begin{table}[htbp]\n\\centering\n\\small\n" + latex_tabular(t.display)
            + f"\\caption{{{tex_escape(t.title)}. {_inline_tex(t.caption)}}}\n"
            + f"\\label{{tab:{_slug(t.key)}}}\n\\end{{table}}\n")


_CSS = """body{font-family:system-ui,-apple-system,Segoe UI,Roboto,sans-serif;max-width:72rem;margin:2rem auto;
padding:0 1rem;color:#222;line-height:1.45}table{border-collapse:collapse;margin:.5rem 0 1.5rem;font-size:.9rem}
th,td{padding:.25rem .6rem;text-align:left;vertical-align:top}thead th{border-top:2px solid #222;
border-bottom:1px solid #222}tbody tr:last-child td{border-bottom:2px solid #222}caption{caption-side:bottom;
text-align:left;font-size:.85rem;color:#555;padding-top:.3rem}figure{margin:1rem 0 2rem}img{max-width:100%}
figcaption{font-size:.85rem;color:#555}code{background:#f3f3f3;padding:0 .2rem}
img{height:auto}figure img{width:min(100%,60rem)}.tbl{overflow-x:auto;max-width:100%}p,li,figcaption,caption,h1,h2,h3{overflow-wrap:anywhere}
nav ul{padding-left:1.2rem;margin:.2rem 0}nav>ul{columns:2 24rem}nav>ul>li{break-inside:avoid}nav li{font-size:.9rem}
@media print{body{max-width:none;margin:0}.tbl{overflow:visible}figure,table{break-inside:avoid}
nav>ul{columns:1}}"""


def html_table(t: Table) -> str:
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in t.display.columns)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(_fmt(r[c]))}</td>" for c in t.display.columns) + "</tr>"
                   for _, r in t.display.iterrows())
    return (f"<div class=\"tbl\"><table><caption>{_inline_html(t.caption)}</caption><thead><tr>{head}</tr>"
            f"</thead><tbody>{body}</tbody></table></div>\n")


def _inline_html(text: str) -> str:
    """Escape text for HTML, rendering Markdown's `code` spans as <code>."""
    return re.sub(r"`([^`]+)`", r"<code>\1</code>", html.escape(text))


def _data_uri(path: Path) -> str:
    mime = {"png": "image/png", "svg": "image/svg+xml"}[path.suffix[1:]]
    return f"data:{mime};base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _smallest_image(paths: dict) -> Path:
    """The figure's smallest written file (PNG or SVG: line plots are smaller as SVG, dense
    fields as PNG); a data URI of it is the smallest too (same base64 for both)."""
    return min(paths.values(), key=lambda p: (p.stat().st_size, p.suffix))


def _anchor(text: str) -> str:
    """GitHub's heading anchor: lower case, punctuation dropped, spaces to hyphens (the HTML
    report uses the same ids, so one link works in both)."""
    return re.sub(r"[^\w\- ]", "", text.strip().lower()).replace(" ", "-")


def _toc_entries(tables, figs, recs) -> list[tuple[str, list[str]]]:
    """(section heading, [its table and figure headings]) in reading order."""
    out = [("How to read this report", [])]
    for name, ts, fs in _sections(tables, figs):
        if ts or fs:
            out.append((name, [t.title for t in ts] + [f.title for f in fs]))
    return out


def _repeats_text(frame) -> str:
    """How many timed repeats the median times of these runs took: ``5`` or ``5 to 40``."""
    if frame is None or "t_statistic" not in frame:
        return ""
    n = sorted({int(k) for k, s, st in zip(frame["repeats"], frame["t_statistic"], frame["status"])
                if s == "median" and st == "ok" and _finite(k)})
    if not n:
        return " (none of the runs read here was repeated)"
    return f" ({n[0]}{'' if n[0] == n[-1] else f' to {n[-1]}'} repeats in these runs)"


def _rules_text(cfg: ReportConfig, frame=None) -> list[str]:
    eig = (f" (eigenvalue problems: `{cfg.eigen_metric}`)" if cfg.eigen_metric else "")
    return [
        f"Error: {_metric_name(cfg)} (`{cfg.metric}`){eig}, measured by the harness on each problem's shared "
        "evaluation set. Time: the method's own time in seconds, setup + solve for classical methods and "
        "setup + training (+ inference) for learned methods; harness evaluation excluded.",
        "Time measurement: the time of a deterministic method is the median of N timed repeats after a "
        f"warm-up{_repeats_text(frame)}; the all-runs table shows N (`repeats`) and the spread of the repeats "
        "(`t_spread` = (slowest - fastest) / median). Learned and non-deterministic methods run once: "
        "their training history is the measurement.",
        "Time-to-tolerance of a run: the time of its first measured state (training checkpoint or final "
        "solution) with error at or below the tolerance; no interpolation between checkpoints. "
        "Accuracy-at-budget: the least error among the states measured at or before the budget. "
        "Choosing the best checkpoint uses hindsight that a user training a network does not have, "
        "so these numbers favour learned methods.",
        "Seeds of one configuration are combined by the upper median (the worse middle value for an even "
        "count); runs that failed, timed out, diverged, crashed, ran out of memory or were unsupported count "
        "as not reached, never dropped. Each method shows its best configuration. Records whose problem ids "
        "coincide but whose problem configs differ are different problems (`#<config hash>` after the id).",
    ]


def _filters_text(cfg: ReportConfig, recs) -> str:
    parts = [f"results: {', '.join(cfg.results)}"]
    if cfg.suite:
        parts.append(f"suite: {cfg.suite}")
    if cfg.problem:
        parts.append(f"problems: {', '.join(cfg.problem)}")
    if cfg.solver:
        parts.append(f"solvers: {', '.join(cfg.solver)}")
    return f"{len(recs)} runs read ({'; '.join(parts)})."


def _environment_text(recs) -> str:
    envs = {(r.get("environment") or {}).get("cpu") for r in recs} - {None, ""}
    threads = sorted({r.get("threads") for r in recs if r.get("threads") is not None})
    loads = [(r.get("environment") or {}).get("foreign_load") for r in recs]
    loads = [v for v in loads if _finite(v)]
    txt = (f"Machine: {', '.join(sorted(envs)) or 'unknown CPU'}; threads per case: "
           f"{', '.join(map(str, threads)) or 'unknown'}.")
    if loads:
        txt += (f" CPU load by other processes during the runs: median {np.median(loads):.2f}, "
                f"max {max(loads):.2f} cores (timings under load are less trustworthy).")
    return txt


def _clear(folder: Path, patterns) -> None:
    """Remove files this stage wrote before (stale per-problem files of an earlier report)."""
    if folder.is_dir():
        for pat in patterns:
            for p in folder.glob(pat):
                if p.is_file():
                    p.unlink()


def write_report(cfg: ReportConfig, out_root: str | Path = "results/reports") -> tuple[Path, object]:
    """Load records, build tables and figures, write the requested formats.

    Returns (report folder, table of all runs). Files: ``report.md`` / ``report.html`` /
    ``tables.tex`` (+ ``tables/<key>.tex``) / ``csv/<key>.csv``, ``figures/*.png|svg``, and the
    all-runs table ``results.md`` / ``results.csv`` / ``results.tex`` / ``results.html``.
    """
    recs, frame = _load(cfg)
    runs = results_table(frame)
    out = Path(out_root) / cfg.name
    out.mkdir(parents=True, exist_ok=True)
    tables = build_tables(recs, frame, cfg)

    figs = []
    if cfg.figures.kinds and len(frame):
        _clear(out / "figures", ["*.png", "*.svg"])
        figs = make_figures(recs, frame, cfg, out / "figures")

    title = f"lapbench report{f': suite {cfg.suite}' if cfg.suite else ''}"
    every_run = runs_table(runs)
    written = []
    if "csv" in cfg.formats:
        _clear(out / "csv", ["*.csv"])
        (out / "csv").mkdir(exist_ok=True)
        for t in tables:
            t.data.to_csv(out / "csv" / f"{t.key}.csv", index=False)
            written.append(f"csv/{t.key}.csv")
        if cfg.runs_table:
            runs.to_csv(out / "results.csv", index=False)
    if "md" in cfg.formats:
        summ = _summary(tables)
        if summ is not None:    # `lapbench report` prints it last
            (out / "summary.md").write_text(f"# {title}: summary\n\n" + summ.to_markdown(to_markdown))
        (out / "report.md").write_text(_markdown(title, cfg, recs, frame, tables, figs, out))
        if cfg.runs_table:
            (out / "results.md").write_text(
                f"# lapbench results{f' (suite {cfg.suite})' if cfg.suite else ''}\n\n{every_run.caption}\n\n"
                + to_markdown(runs))
    if "tex" in cfg.formats:
        _clear(out / "tables", ["*.tex"])
        (out / "tables").mkdir(exist_ok=True)
        for t in tables:
            (out / "tables" / f"{t.key}.tex").write_text(latex_table(t))
        (out / "tables.tex").write_text(_latex_document(title, tables))
        if cfg.runs_table:
            (out / "results.tex").write_text(latex_table(every_run))
    if "html" in cfg.formats:
        (out / "report.html").write_text(_html(title, cfg, recs, frame, tables, figs, out, written))
        if cfg.runs_table:
            suite = f" (suite {cfg.suite})" if cfg.suite else ""
            (out / "results.html").write_text(_html_page(f"lapbench results{suite}", [html_table(every_run)]))
    return out, runs


def _summary(tables):
    """The report's summary (lapbench.report.summary), carried by the `summary` table; None without."""
    return next((t.summary for t in tables if t.key == "summary"), None)


def _sections(tables, figs):
    """Group tables and figures for reading: per problem, then the cross-problem ones."""
    tables = [t for t in tables if t.key != "summary"]   # shown on top, not in a section
    problems = []
    for t in tables:
        if t.problem is not None and t.problem not in problems:
            problems.append(t.problem)
    for f in figs:
        if f.problem is not None and f.problem not in problems:
            problems.append(f.problem)
    sec = [(f"Problem {p}", [t for t in tables if t.problem == p], [f for f in figs if f.problem == p])
           for p in problems]
    sec.append(("All problems", [t for t in tables if t.problem is None], [f for f in figs if f.problem is None]))
    return sec


def _markdown(title, cfg, recs, frame, tables, figs, out: Path) -> str:
    lines = [f"# {title}", "", _filters_text(cfg, recs), "", _environment_text(recs) if recs else "", ""]
    if _summary(tables) is not None:
        lines += [_summary(tables).to_markdown(to_markdown)]
    lines += ["## Contents", ""]
    for sec, subs in _toc_entries(tables, figs, recs):   # sections only: subsection anchors repeat
        lines.append(f"- [{sec}](#{_anchor(sec)})")
    lines += [""]
    lines += ["## How to read this report", ""] + [f"- {t}" for t in _rules_text(cfg, frame)] + [""]
    if not recs:
        lines += ["No records matched; nothing to compare.", ""]
    for name, ts, fs in _sections(tables, figs):
        if not ts and not fs:
            continue
        lines += [f"## {name}", ""]
        for t in ts:
            lines += [f"### {t.title}", "", t.caption, "", to_markdown(t.display)]
        for f in fs:
            rel = f.paths.get("png") or f.paths.get("svg")
            lines += [f"### {f.title}", "", f"![{f.title}]({rel.relative_to(out).as_posix()})", "", f.caption, ""]
    if cfg.runs_table and "md" in cfg.formats:
        lines += ["Every run, one row each: [results.md](results.md).", ""]
    return "\n".join(lines)


def _latex_document(title, tables) -> str:
    body = "\n".join(latex_table(t) for t in tables)
    return ("% Generated by `lapbench report`. Each table is also in tables/<key>.tex for \\input.\n"
            "\\documentclass{article}\n\\usepackage[margin=2cm,landscape]{geometry}\n\\usepackage{booktabs}\n"
            "\\begin{document}\n" + f"\\section*{{{tex_escape(title)}}}\n" + body + "\\end{document}\n")


def _html_page(title: str, parts: list[str]) -> str:
    """A self-contained HTML page: title, the report's style sheet, the given body parts."""
    return "\n".join([f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
                      f"<title>{html.escape(title)}</title>"
                      f"<style>{_CSS}</style></head><body>", f"<h1>{html.escape(title)}</h1>",
                      *parts, "</body></html>\n"])


def _html(title, cfg, recs, frame, tables, figs, out: Path, csv_files) -> str:
    parts = [f"<p>{html.escape(_filters_text(cfg, recs))}</p>"]
    if recs:
        parts.append(f"<p>{html.escape(_environment_text(recs))}</p>")
    summary_table = next((t for t in tables if t.key == "summary"), None)
    if summary_table is not None:
        parts.append("<h2>Summary</h2><ul>" + "".join(f"<li>{html.escape(x)}</li>"
                                                      for x in summary_table.summary.sentences.values())
                     + "</ul>" + html_table(summary_table))
    ids = {}

    def uid(text):   # unique ids: a repeated heading gets -1, -2, ... as GitHub numbers them
        a = _anchor(text)
        n = ids.get(a, 0)
        ids[a] = n + 1
        return a if n == 0 else f"{a}-{n}"

    heads = [(sec, uid(sec), [(sub, uid(sub)) for sub in subs]) for sec, subs in _toc_entries(tables, figs, recs)]
    toc = "".join(f"<li><a href=\"#{a}\">{html.escape(sec)}</a>"
                  + ("<ul>" + "".join(f"<li><a href=\"#{b}\">{html.escape(sub)}</a></li>" for sub, b in subs)
                     + "</ul>" if subs else "") + "</li>" for sec, a, subs in heads)
    parts.append(f"<nav aria-label=\"Contents\"><h2>Contents</h2><ul>{toc}</ul></nav>")
    anchor = {}
    for sec, a, subs in heads:
        anchor.setdefault(sec, []).append(a)
        for sub, b in subs:
            anchor.setdefault(sub, []).append(b)

    def hid(text):
        return anchor[text].pop(0) if anchor.get(text) else uid(text)

    parts.append(f"<h2 id=\"{hid('How to read this report')}\">How to read this report</h2><ul>"
                 + "".join(f"<li>{_inline_html(t)}</li>" for t in _rules_text(cfg, frame)) + "</ul>")
    if not recs:
        parts.append("<p>No records matched; nothing to compare.</p>")
    csv_set = set(csv_files)
    for name, ts, fs in _sections(tables, figs):
        if not ts and not fs:
            continue
        parts.append(f"<h2 id=\"{hid(name)}\">{html.escape(name)}</h2>")
        for t in ts:
            link = f" <a href=\"csv/{html.escape(t.key)}.csv\">(CSV)</a>" if f"csv/{t.key}.csv" in csv_set else ""
            parts.append(f"<h3 id=\"{hid(t.title)}\">{html.escape(t.title)}{link}</h3>" + html_table(t))
        for f in fs:
            src = _smallest_image(f.paths)
            parts.append(f"<figure id=\"{hid(f.title)}\"><img alt=\"{html.escape(f.title)}\" "
                         f"src=\"{_data_uri(src)}\"><figcaption><b>{html.escape(f.title)}.</b> "
                         f"{_inline_html(f.caption)}</figcaption></figure>")
    if cfg.runs_table:
        parts.append("<p>Every run, one row each: <a href=\"results.html\">results.html</a>.</p>")
    return _html_page(title, parts)

