"""The report's summary on top (bench/report/summary.py) on synthetic records.

Every expected value is derived by hand from the synthetic records below with the rules of
bench/report/rules.py; none is measured. The fd5 ladder has error 0.64 h^2 exactly (h = 1/8, 1/16,
1/32: 1e-2, 2.5e-3, 6.25e-4), so its least-squares order is 2 [closed form].
"""
from __future__ import annotations

import pytest

from lapbench.config import build_params
from lapbench.report import ReportConfig, _load, write_report
from lapbench.report.rules import EXPECTED_ORDER, expected_order, floored, reference_floor
from lapbench.report.tables import build_tables
from tests.test_report import make_record, write_all


def _ladder(errs, solver="fd5", times=(0.001, 0.002, 0.004), **kw):
    return [make_record(solver=solver, config={"n": n}, err=e, total=t, dofs=(n - 1) ** 2, h=1.0 / n, **kw)
            for n, e, t in zip((8, 16, 32), errs, times)]


def _summary(tmp_path, recs, **cfg):
    write_all(tmp_path, recs)
    rcfg = build_params(ReportConfig, {"results": [str(tmp_path)], "tolerances": [1e-2, 1e-3],
                                       "budgets": [0.003, 100.0], **cfg})
    r, frame = _load(rcfg)
    tables = build_tables(r, frame, rcfg)
    assert tables[0].key == "summary"      # the answers first
    return tables[0].summary, rcfg


def test_summary_table_sentence_and_orders(tmp_path):
    recs = _ladder([1e-2, 2.5e-3, 6.25e-4])
    recs += [make_record(solver="pinn_hard", family="pinn", config={"width": 20}, err=1e-3, total=10.0, seed=s,
                         params=500) for s in range(3)]
    s, _ = _summary(tmp_path, recs)
    row = s.table.iloc[0]
    assert row["fastest to 1e-02"] == "fd5 (n=8) 1 ms"          # first run at or below 1e-2
    assert row["fastest to 1e-03"] == "fd5 (n=32) 4 ms"         # 6.25e-4 <= 1e-3 at 4 ms
    assert row["best within 0.003 s"] == "fd5 (n=16) 2.50e-03"  # n=32 (4 ms) is over the budget
    assert row["best within 100 s"] == "fd5 (n=32) 6.25e-04"
    text = s.sentences["sine(k=1,l=1)"]
    # the learned method's best error 1e-3 (upper median of 3 seeds, 10 s); fd5 reaches it in 4 ms: 2,500 x
    assert text == ("On sine(k=1,l=1), the fastest method to rel_l2 1e-03 is fd5 (n=32, 4 ms); the best "
                    "learned method, pinn_hard, reached 1.00e-03 at best (10 s), which fd5 reaches in 4 ms, "
                    "2,500 times sooner.")
    o = s.orders.iloc[0]
    assert (o["method"], o["expected"], o["observed"], o["verdict"]) == ("fd5", "2", "2.00", "as expected")
    assert "synthetic CPU" in s.environment[0]
    assert s.commands == ["lapbench run suite=synthetic results_dir=" + str(tmp_path),
                          "lapbench report report.name=latest results_dir=" + str(tmp_path)]


def test_lower_order_is_flagged(tmp_path):
    # error proportional to h (1e-2, 5e-3, 2.5e-3): order 1 against fd5's expected 2
    s, _ = _summary(tmp_path, _ladder([1e-2, 5e-3, 2.5e-3]))
    o = s.orders.iloc[0]
    assert (o["observed"], o["verdict"]) == ("1.00", "lower")


def test_errors_below_the_reference_accuracy_are_not_numbers(tmp_path):
    recs = _ladder([1e-2, 1e-6, 1e-10], pparams={"k": 1, "l": 1, "reference": "computed", "reference_error": 1e-8})
    for r in recs:
        r["metrics"]["rel_max"] = r["metrics"]["max_abs"]      # max |u| = 1: relative = absolute
    write_all(tmp_path, recs)
    rcfg = build_params(ReportConfig, {"results": [str(tmp_path)], "tolerances": [1e-2], "budgets": [100.0]})
    tables = build_tables(*_load(rcfg), rcfg)
    s = tables[0].summary
    assert s.table.iloc[0]["best within 100 s"] == "fd5 (n=32) < 1e-08 (reference accuracy)"
    at_budget = next(t for t in tables if t.key.startswith("accuracy_at_budget"))
    assert at_budget.display.iloc[0]["100 s"] == "< 1e-08 (reference accuracy) (n=32)"
    best = next(t for t in tables if t.key == "best_error")
    assert best.display.iloc[0]["fd5"].startswith("< 1e-08 (reference accuracy)")
    assert "1e-10" not in s.table.to_string() and "1.00e-10" not in s.table.to_string()
    assert floored(2e-9, 1e-8) == "< 1e-08 (reference accuracy)" and floored(2e-8, 1e-8) == "2.00e-08"


def test_reference_floor_of_eigen_and_exact_problems():
    eig = {"problem": {"kind": "eigen", "n_eigs": 2,
                       "reference": {"kind": "computed", "rel_estimate": [1e-9, 2e-9, 5e-9]}}, "metrics": {}}
    assert reference_floor(eig, "eig_rel_max") == 2e-9 and reference_floor(eig, "eig_rel_1") == 1e-9
    closed = {"problem": {"kind": "eigen", "n_eigs": 2, "reference": {"kind": "published", "rel_estimate": [0, 0]}}}
    assert reference_floor(closed, "eig_rel_max") is None
    exact = {"problem": {"kind": "poisson", "params": {"k": 1}}, "metrics": {"rel_l2": 1e-12}}
    assert reference_floor(exact, "rel_l2") is None
    # expected orders: P2 finite elements h^3 in L2 and h^4 for eigenvalues (Strang & Fix 1973)
    assert expected_order("fem_p2", "poisson") == 3 and expected_order("fem_p2", "eigen") == 4
    assert expected_order("cheb", "poisson") is None and "cheb" in EXPECTED_ORDER


def test_summary_on_top_of_the_written_report(tmp_path):
    write_all(tmp_path, _ladder([1e-2, 2.5e-3, 6.25e-4]))
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)], "formats": ["md", "html", "csv", "tex"],
                                      "figures": {"kinds": []}})
    out, _ = write_report(cfg, out_root=tmp_path / "reports")
    md = (out / "report.md").read_text()
    assert md.index("## Summary") < md.index("## How to read this report")
    assert md.count("## Summary") == 1 and "Reproduce:" in md
    assert (out / "summary.md").read_text().startswith("# lapbench report: summary")
    assert "<h2>Summary</h2>" in (out / "report.html").read_text()
    assert (out / "csv" / "summary.csv").is_file()


@pytest.mark.parametrize("solver", sorted(EXPECTED_ORDER))
def test_expected_orders_cover_registered_solvers(solver):
    from lapbench.solvers import SOLVERS

    assert solver in SOLVERS and SOLVERS[solver].family != "pinn"
