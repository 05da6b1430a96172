"""The check's outputs: a plain-text table for the terminal, a Markdown summary and JUnit XML,
worst findings first."""
from __future__ import annotations

import math

from lapbench.check.compare import VERDICTS, CheckResult, Finding

__all__ = ["format_table", "to_markdown", "to_junit"]


def _cell(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        if not math.isfinite(v):
            return str(v)
        return f"{v:.3e}" if (abs(v) < 1e-2 or abs(v) >= 1e4) and v != 0 else f"{v:.4g}"
    return str(v)


def _rows(result: CheckResult, show_all: bool):
    order = {v: i for i, v in enumerate(VERDICTS)}
    rows = [f for f in result.findings if show_all or f.verdict != "ok"]
    rows.sort(key=lambda f: (order[f.verdict], f.key, f.check))
    return rows


def _display_verdict(f: Finding) -> str:
    if f.verdict == "regression" and f.check == "presence":
        return "MISSING"
    return f.verdict.upper() if f.verdict == "regression" else f.verdict


def format_table(result: CheckResult, show_all: bool = False) -> str:
    """Plain-text table for the terminal: what changed, by how much, against which tolerance."""
    head = ("result", "case", "check", "baseline", "current", "ratio", "tolerance", "detail")
    rows = [(_display_verdict(f), f.key, f.check, _cell(f.baseline), _cell(f.current),
             "-" if f.ratio is None else f"{f.ratio:.3g}", f.limit or "-", f.message or "-")
            for f in _rows(result, show_all)]
    lines = [result.headline()]
    lines += [f"note: {n}" for n in result.notes]
    if rows:
        widths = [max(len(str(r[i])) for r in rows + [head]) for i in range(len(head) - 1)]
        fmt = "  ".join(f"{{:<{w}}}" for w in widths) + "  {}"
        lines.append(fmt.format(*head))
        lines.append(fmt.format(*("-" * w for w in widths), "-" * 9))
        lines += [fmt.format(*r) for r in rows]
    return "\n".join(lines) + "\n"


def _md(v) -> str:
    return str(v).replace("|", "\\|")


def to_markdown(result: CheckResult) -> str:
    """The Markdown summary (for a CI job page or a pull request comment)."""
    cfg = result.config
    bp, cp = result.baseline_provenance, result.current_provenance
    out = [f"# lapbench check: suite `{result.suite}` - {'REGRESSION' if result.failed else 'clean'}", ""]
    out.append(f"{result.compared} cases or seed groups compared: {result.count('regression')} regressions, "
               f"{result.count('missing')} missing, {result.count('warning')} warnings, "
               f"{result.count('new')} new, {result.count('improved')} improved.")
    out.append("")
    out += [f"> {n}" for n in result.notes] + ([""] if result.notes else [])
    out.append(f"- baseline: created {bp.get('created')}, git {bp.get('git')}, cpu {bp.get('cpu')}, "
               f"calibration {(bp.get('calibration_s') or {}).get('median')} s")
    out.append(f"- current: {cp.get('records')} records, git {cp.get('git')}, cpu {cp.get('cpu')}, "
               f"calibration {(cp.get('calibration_s') or {}).get('median')} s")
    out.append(f"- tolerances: errors x{cfg.error_factor:g} (stochastic solvers: median over seeds "
               f"x{cfg.stochastic_factor:g}) above {cfg.error_floor:g}; normalised time "
               f"x{cfg.runtime_factor:g} above {cfg.runtime_floor:g} ({cfg.runtime}); missing cases: "
               f"{cfg.missing}")
    out.append("")
    sections = (("Regressions", ("regression",)), ("Missing", ("missing",)), ("Warnings", ("warning",)),
                ("New cases", ("new",)), ("Improvements", ("improved",)))
    rows = _rows(result, False)
    for title, verdicts in sections:
        sel = [f for f in rows if f.verdict in verdicts]
        if not sel:
            continue
        n_cases = len({f.key for f in sel})
        out += [f"## {title} ({n_cases} {'case' if n_cases == 1 else 'cases'}, {len(sel)} "
                f"{'finding' if len(sel) == 1 else 'findings'})", "",
                "| case | check | baseline | current | ratio | tolerance | detail |", "|---|---|---|---|---|---|---|"]
        for f in sel:
            out.append("| " + " | ".join(_md(x) for x in (
                f.key, f.check, _cell(f.baseline), _cell(f.current), "-" if f.ratio is None else f"{f.ratio:.3g}",
                f.limit, f.message)) + " |")
        out.append("")
    return "\n".join(out) + "\n"


def to_junit(result: CheckResult) -> str:
    """JUnit XML: one test case per case or seed group; regressions are failures, new cases skipped,
    warnings and improvements in the test case's system-out."""
    import xml.etree.ElementTree as ET

    by_key: dict[str, list[Finding]] = {}
    for f in result.findings:
        by_key.setdefault(f.key, []).append(f)
    suite = ET.Element("testsuite", name=f"lapbench.check.{result.suite}")
    failures = skipped = 0
    for key in sorted(by_key):
        fs = by_key[key]
        tc = ET.SubElement(suite, "testcase", classname=f"lapbench.{result.suite}.{fs[0].solver}", name=key)
        bad = [f for f in fs if f.verdict == "regression"]
        if bad:
            failures += 1
            el = ET.SubElement(tc, "failure", message="; ".join(f.message for f in bad)[:1000],
                               type="regression")
            el.text = "\n".join(f"{f.check}: baseline {_cell(f.baseline)}, current {_cell(f.current)}, "
                                f"tolerance {f.limit}" for f in bad)
        elif all(f.verdict in ("new", "missing") for f in fs):
            skipped += 1
            ET.SubElement(tc, "skipped", message="; ".join(f.message for f in fs))
        notes = [f"{f.verdict}: {f.check}: {f.message}" for f in fs if f.verdict in ("warning", "improved")]
        if notes:
            ET.SubElement(tc, "system-out").text = "\n".join(notes)
    suite.set("tests", str(len(by_key)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped))
    root = ET.Element("testsuites", name="lapbench check", tests=str(len(by_key)), failures=str(failures))
    root.append(suite)
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"

