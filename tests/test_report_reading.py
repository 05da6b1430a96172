"""What a reader of a report sees: no label cut off at a figure's edge, each method its own colour,
identical results drawn so that neither hides the other (and said so in the caption), a table of
contents whose links land, links that survive moving the report folder, figures embedded in the
smaller of their formats.

The records are the synthetic ones of tests/test_report.py; fst5 is given exactly fd5's results
(as on a rectangle, where both solve the same 5-point system), so every expected overlap count
below is read off those records by hand.
"""
from __future__ import annotations

import base64
import html.parser
import re
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib.colors as mcolors
import pytest

from lapbench.config import build_params
from lapbench.report import ReportConfig, _load, write_report
from lapbench.report import figures as report_figures
from tests.test_report import classical_ladder, field_of, make_record, pinn_seeds, write_all

LONG = {"alpha": 1000.0, "xc": 0.5, "yc": 0.5}   # a long problem id: peak(alpha=1000.0,xc=0.5,yc=0.5)


def more_accurate(rec):
    """fd9's ladder: ten times more accurate than fd5's, 1.5 times slower (coincides with nothing)."""
    rec["metrics"] = {k: v / 10 for k, v in rec["metrics"].items()}
    rec["timings"] = {k: (v * 1.5 if k in ("setup", "solve", "total") else v) for k, v in rec["timings"].items()}
    return rec


def records(with_twin=True):
    recs = classical_ladder() + pinn_seeds()
    if with_twin:
        twin = classical_ladder(solver="fst5")
        for r in twin:
            r["solver"]["family"] = "spectral"
        recs += twin
    recs += [more_accurate(r) for r in classical_ladder(solver="fd9")]
    recs += classical_ladder(problem="peak", pparams=LONG) + [more_accurate(r) for r in classical_ladder(
        problem="peak", pparams=LONG, solver="fd9")]
    recs[1]["field"] = field_of()
    return recs


def report(tmp_path, recs, formats=("md", "csv", "html"), name="r", images=("png", "svg"), kinds=None):
    write_all(tmp_path / "res", recs)
    figures = {"formats": list(images), **({"kinds": list(kinds)} if kinds else {})}
    cfg = build_params(ReportConfig, {"results": [str(tmp_path / "res")], "name": name, "formats": list(formats),
                                      "figures": figures}, prefix="report")
    out, _ = write_report(cfg, tmp_path / "reports")
    return out, cfg


@pytest.fixture(scope="module")
def twin(tmp_path_factory):
    """The report of records() with every figure kind, each figure checked as it is saved: every
    label, tick label, title and legend entry inside the page, i.e. the tight box of what is drawn
    (matplotlib's Figure.get_tightbbox) within the figure (0.5 pt slack). Returns (folder, config,
    the figures that reached past their edge)."""
    outside = []
    save = report_figures._save

    def checked(fig, folder, key, cfg):
        fig.canvas.draw()
        tight, page = fig.get_tightbbox(fig.canvas.get_renderer()), fig.bbox_inches
        slack = 0.5 / 72
        if (tight.x0 < page.x0 - slack or tight.y0 < page.y0 - slack or tight.x1 > page.x1 + slack
                or tight.y1 > page.y1 + slack):
            outside.append((key, tight.bounds, page.bounds))
        return save(fig, folder, key, cfg)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(report_figures, "_save", checked)
        out, cfg = report(tmp_path_factory.mktemp("twin"), records())
    return out, cfg, outside


def test_no_text_reaches_past_the_figure_edge(twin):
    out, _, outside = twin
    stems = {p.stem.split("__")[0] for p in (out / "figures").glob("*.png")}
    assert stems >= {"best_error_by_problem", "error_vs_time", "error_vs_size", "training", "error_field"}
    assert outside == []


def _marker_styles(svg: Path):
    """style attributes of the markers (<use> elements) of an SVG written by matplotlib."""
    return [u.get("style", "") for u in ET.parse(svg).iter("{http://www.w3.org/2000/svg}use")]


def _fill(style):
    m = re.search(r"fill: (#[0-9a-f]{6})", style)
    return m.group(1) if m else None


def test_each_method_its_own_colour(twin):
    out, cfg, _ = twin
    _, frame = _load(cfg)
    colours = {s: mcolors.to_hex(c) for s, c in report_figures.method_colours(frame).items()}
    assert set(colours) == {"fd5", "fd9", "fst5", "pinn_x"}
    assert len(set(colours.values())) == 4   # fd5 and fd9 share a family, not a colour
    # in the figure: the filled markers of the four methods carry four colours, one each
    fills = {_fill(s) for s in _marker_styles(out / "figures" / "error_vs_time__sine-k-1-l-1.svg")} - {None}
    assert {colours[s] for s in ("fd5", "fd9", "pinn_x")} <= fills


def test_identical_results_are_drawn_as_rings_and_said_so(twin, tmp_path):
    out, cfg, _ = twin
    _, frame = _load(cfg)
    ring = mcolors.to_hex(report_figures.method_colours(frame)["fst5"])
    for fig in ("error_vs_time__sine-k-1-l-1", "error_vs_size__sine-k-1-l-1"):
        styles = _marker_styles(out / "figures" / f"{fig}.svg")
        rings = [s for s in styles if "fill: none" in s and f"stroke: {ring}" in s]
        # fst5's three runs coincide with fd5's three (same times, same errors): all three are rings
        # (the legend's sample may add one more, depending on how matplotlib writes it)
        assert len(rings) >= 3, (fig, styles)
        assert not any(_fill(s) == ring for s in styles)   # no filled fst5 marker hidden under fd5's
    md = (out / "report.md").read_text()
    assert md.count("Hollow, larger markers") == 3         # both per-problem figures and the overview
    # without the twin nothing coincides, and no caption speaks of rings
    out2, _ = report(tmp_path, records(with_twin=False), formats=["md"], images=["svg"],
                     kinds=["pareto", "order", "overview"])
    assert "Hollow" not in (out2 / "report.md").read_text()
    assert not any("fill: none" in s and "stroke-width: 1.4" in s
                   for s in _marker_styles(out2 / "figures" / "error_vs_time__sine-k-1-l-1.svg"))


class _Page(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs, self.ids, self.nav, self._in_nav, self.imgs, self.items = [], set(), [], False, [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "nav":
            self._in_nav = True
        if "id" in a:
            self.ids.add(a["id"])
            if tag in ("h3", "figure"):
                self.items.append(a["id"])
        for k in ("src", "href"):
            if a.get(k):
                self.refs.append(a[k])
                if self._in_nav and k == "href":
                    self.nav.append(a[k])
        if tag == "img":
            self.imgs.append(a["src"])

    def handle_endtag(self, tag):
        if tag == "nav":
            self._in_nav = False


def test_table_of_contents_in_markdown_and_html(twin):
    out, _, _ = twin
    md = (out / "report.md").read_text()
    toc = md.split("## Contents\n\n", 1)[1].split("\n\n", 1)[0].splitlines()
    # GitHub's heading anchors: lower case, punctuation dropped, spaces to hyphens (common practice)
    assert toc == ["- [How to read this report](#how-to-read-this-report)",
                   "- [Problem peak(alpha=1000.0,xc=0.5,yc=0.5)](#problem-peakalpha10000xc05yc05)",
                   "- [Problem sine(k=1,l=1)](#problem-sinek1l1)", "- [All problems](#all-problems)"]
    for line in toc:
        heading = line[3:].split("](", 1)[0]
        assert f"\n## {heading}\n" in md
    page = _Page()
    page.feed((out / "report.html").read_text())
    assert page.nav and all(h.startswith("#") and h[1:] in page.ids for h in page.nav)
    assert len(page.nav) == len(set(page.nav))     # repeated titles get distinct anchors
    # every table heading (h3) and figure is in the contents, and the sections too
    n_figs = len({p.stem for p in (out / "figures").iterdir()})
    assert len(page.items) >= n_figs + 5 and {f"#{i}" for i in page.items} <= set(page.nav)
    assert len(page.nav) == len(page.items) + 4    # + the four section headings above


def test_links_survive_moving_the_report_folder(twin, tmp_path):
    out, _, _ = twin
    moved = tmp_path / "elsewhere" / "copy"
    shutil.copytree(out, moved)   # references are resolved from the copy only; none may be absolute
    for name in ("report.html", "results.html"):
        page = _Page()
        text = (moved / name).read_text()
        page.feed(text)
        assert str(out) not in " ".join(page.refs)
        for ref in page.refs:
            assert not ref.startswith(("/", "file:", "http:", "https:")), ref
            assert (ref.startswith("data:image/") or (ref.startswith("#") and ref[1:] in page.ids)
                    or (moved / ref).is_file()), ref
    md = (moved / "report.md").read_text()
    for ref in re.findall(r"\]\(([^)#][^)]*)\)", md):
        assert not ref.startswith("/") and (moved / ref).is_file(), ref


def test_figures_embedded_in_their_smaller_format(twin):
    out, _, _ = twin
    page = _Page()
    page.feed((out / "report.html").read_text())
    figs = {p.stem for p in (out / "figures").iterdir()}
    assert len(page.imgs) == len(figs)
    kinds = []
    for src in page.imgs:
        mime, data = re.match(r"data:image/(png|svg\+xml);base64,(.*)", src, re.S).groups()
        fmt = "svg" if mime == "svg+xml" else "png"
        raw = base64.b64decode(data)
        # the embedded file is one of the written ones, and the smaller of the two
        match = [p for p in (out / "figures").glob(f"*.{fmt}") if p.read_bytes() == raw]
        assert len(match) == 1
        other = match[0].with_suffix(".png" if fmt == "svg" else ".svg")
        assert len(raw) <= other.stat().st_size
        kinds.append(fmt)
    # line plots are smaller as SVG, the dense error field as PNG
    assert "svg" in kinds and "png" in kinds


@pytest.mark.parametrize("formats", [["png"], ["svg"]])
def test_single_format_is_embedded(tmp_path, formats):
    out, _ = report(tmp_path, records(), formats=["html"], images=formats, kinds=["pareto", "overview"])
    page = _Page()
    page.feed((out / "report.html").read_text())
    mime = "svg+xml" if formats == ["svg"] else "png"
    assert page.imgs and all(s.startswith(f"data:image/{mime};base64,") for s in page.imgs)
