"""The dimension-study figure (bench/report/dimensions.py): time-to-tolerance grouped by d.

Synthetic records with known times (the records helper of tests/test_report.py): the table must
give each method's first time at or below each tolerance per dimension, exactly, and the figure
must be written."""
from __future__ import annotations

import math

from lapbench.config import build_params
from lapbench.report import ReportConfig, _load
from lapbench.report.dimensions import dimension_table, fig_dimensions, record_dimension
from lapbench.report.figures import Figure
from lapbench.report.style import _save
from tests.test_report import PNG_MAGIC, hist, make_record, write_all


def _records():
    recs = []
    for d, (t1, t2) in {2: (0.01, 0.02), 3: (0.1, 0.4), 4: (1.0, 5.0)}.items():
        p = {"dim": d, "frequency": 2.0}
        # a classical ladder: error 5e-3 at t1, 5e-4 at t2
        recs += [make_record("nd_harmonic", p, "fst9", "spectral", err=e, total=t, config={"n": n},
                             domain={"kind": "box", "lo": [0.0] * d, "hi": [1.0] * d}, kind="laplace")
                 for n, t, e in ((4, t1, 5e-3), (8, t2, 5e-4))]
        # a learned method: 1e-2 reached at 2 s in every d, 1e-3 never
        recs.append(make_record("nd_harmonic", p, "pinn_x", "pinn", err=4e-3, total=3.0, kind="laplace",
                                domain={"kind": "box", "lo": [0.0] * d, "hi": [1.0] * d},
                                history=hist((1.0, 5e-2), (2.0, 8e-3), (3.0, 4e-3))))
    return recs


def test_dimension_table_and_figure(tmp_path):
    write_all(tmp_path, _records())
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)], "formats": ["md"], "tolerances": [1e-2, 1e-3],
                                      "figures": {"formats": ["png"]}}, prefix="report")
    recs, frame = _load(cfg)
    assert sorted({record_dimension(r) for r in recs}) == [2, 3, 4]
    tt = dimension_table(recs, frame, [1e-2, 1e-3])
    got = {(r.solver, int(r.d), r.tolerance): r.time_s for r in tt.itertuples()}
    for d, (t1, t2) in {2: (0.01, 0.02), 3: (0.1, 0.4), 4: (1.0, 5.0)}.items():
        assert got[("fst9", d, 1e-2)] == t1 and got[("fst9", d, 1e-3)] == t2
        assert got[("pinn_x", d, 1e-2)] == 2.0 and math.isinf(got[("pinn_x", d, 1e-3)])
    (tmp_path / "fig").mkdir()
    fig = fig_dimensions(recs, frame, cfg, tmp_path / "fig", Figure, _save)
    assert fig is not None and fig.paths["png"].read_bytes()[:8] == PNG_MAGIC


def test_no_figure_for_a_single_dimension(tmp_path):
    write_all(tmp_path, [r for r in _records() if r["problem"]["params"]["dim"] == 3])
    cfg = build_params(ReportConfig, {"results": [str(tmp_path)], "formats": ["md"]}, prefix="report")
    recs, frame = _load(cfg)
    assert fig_dimensions(recs, frame, cfg, tmp_path / "fig", Figure, _save) is None
