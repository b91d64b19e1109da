"""The backtest chart: `sqlrisk chart backtest` on a result shaped like sql/backtest.sql (one
summary row per method with pit_counts, per-forecast rows with NULL pit_counts), as SVG and
PNG: a PIT histogram per method with the uniform count and its binomial 95% band, and each
method's coverage of the 80% interval against the ideal.

The results here are built by hand (invented scores; counts drawn with a fixed seed: a U
shape, a flat one, a hump and a slope), so the chart is checked against known rows; the
reference bands against SciPy's binomial quantiles and the binomial CDF summed by hand.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pyarrow as pa
import pytest
from typer.testing import CliRunner

from chart_checks import collisions, rendered_boxes, svg_texts
from conftest import assert_png
from sqlrisk import chart_backtest, chart_rows, chart_style, demo_history, queries, runner
from sqlrisk.chart_layout import Box
from sqlrisk.cli import app
from sqlrisk.errors import ParameterError
from sqlrisk.text_format import money

cli = CliRunner()
FORECASTS = 200
#: PIT bin weights per method (invented): too narrow, right, too wide, mean too high.
SHAPES = {
    "stated": [3, 1.6, 1, 0.7, 0.6, 0.6, 0.7, 1, 1.6, 3],
    "calibrated": [1] * 10,
    "stated, rho 0.15": [0.4, 0.6, 0.9, 1.3, 1.6, 1.6, 1.3, 0.9, 0.6, 0.4],
    "calibrated, rho 0.15": [1.5, 1.4, 1.2, 1.1, 1, 1, 0.9, 0.8, 0.6, 0.5],
}
COVERAGE = [0.62, 0.795, 0.93, 0.81]
CRPS = [41250.4, 38900.0, 40110.7, 37620.2]
RPS = [0.142, 0.118, 0.131, 0.109]
SCHEMA = pa.schema([("method", pa.string()), ("period", pa.string()), ("owner_id", pa.string()),
                    ("forecasts", pa.int64()), ("coverage_80", pa.float64()),
                    ("crps", pa.float64()), ("band_rps", pa.float64()),
                    ("reach_brier", pa.float64()), ("pit", pa.float64()),
                    ("pit_counts", pa.list_(pa.int64())), ("pit_expected", pa.float64())])


def summary_rows() -> list[dict]:
    rng = np.random.default_rng(20261)
    rows = []
    for k, (method, weights) in enumerate(SHAPES.items()):
        w = np.asarray(weights, float)
        counts = np.bincount(rng.choice(10, FORECASTS, p=w / w.sum()), minlength=10)
        rows.append({"method": method, "period": "all", "owner_id": "all",
                     "forecasts": FORECASTS, "coverage_80": COVERAGE[k], "crps": CRPS[k],
                     "band_rps": RPS[k], "reach_brier": 0.2, "pit": 0.5,
                     "pit_counts": counts.tolist(), "pit_expected": FORECASTS / 10})
    return rows


def forecast_rows() -> list[dict]:
    """Per-forecast rows as -p show=forecasts adds them: NULL pit_counts, one forecast each."""
    rng = np.random.default_rng(7)
    return [{"method": method, "period": f"2025-Q{q}", "owner_id": f"own_{o:03d}",
             "forecasts": 1, "coverage_80": float(rng.random() < 0.8), "crps": 1.0e5 * rng.random(),
             "band_rps": rng.random(), "reach_brier": rng.random(), "pit": rng.random(),
             "pit_counts": None, "pit_expected": None}
            for method in SHAPES for q in (1, 2, 3, 4) for o in range(1, 6)]


def table(rows) -> pa.Table:
    return pa.Table.from_pylist(rows, schema=SCHEMA)


@pytest.fixture
def summary():
    return table(summary_rows())


@pytest.fixture
def everything():  # the per-forecast rows first, as sql/backtest.sql orders them
    return table(forecast_rows() + summary_rows())


def test_draws_one_svg_and_one_png_with_every_method(con, summary, tmp_path):
    svg = chart_rows.draw_rows(con, summary, tmp_path / "backtest.svg")
    assert svg == [tmp_path / "backtest.svg"]
    assert ET.parse(svg[0]).getroot().tag == "{http://www.w3.org/2000/svg}svg"
    texts = svg_texts(svg[0])
    for k, row in enumerate(summary_rows(), start=1):
        assert texts[f"p{k}-title"] == row["method"]
        scores = f"mean CRPS {money(row['crps'])} · RPS {row['band_rps']:.3f}"
        assert texts[f"p{k}-scores"] == scores
        assert texts[f"coverage-{k}"] == f"{100 * row['coverage_80']:.0f}%"
    assert [texts[f"coverage-{k}"] for k in range(1, 5)] == ["62%", "80%", "93%", "81%"]
    assert "200 forecasts per method" in texts["subtitle"]
    assert "U shape" in "\n".join(v for k, v in texts.items() if k.startswith("note"))
    again = chart_rows.draw_rows(con, summary, tmp_path / "again.svg")
    assert again[0].read_bytes() == svg[0].read_bytes()  # the same bytes run after run
    png = chart_rows.draw_rows(con, summary, tmp_path / "backtest.png", grid=True)
    assert png == [tmp_path / "backtest.png"] and list(tmp_path.glob("*.png")) == png
    assert assert_png(png[0]) == (1145, 675)


def test_the_bars_are_the_summary_counts_and_forecast_rows_are_left_out(con, summary,
                                                                      everything, tmp_path):
    alone = chart_backtest.backtest_chart(con, summary)
    mixed = chart_backtest.backtest_chart(con, everything)
    assert mixed == alone
    assert [m.method for m in alone.methods] == list(SHAPES)  # the query's order
    assert [m.counts for m in alone.methods] == [r["pit_counts"] for r in summary_rows()]
    drawn = chart_backtest.backtest_figure(mixed)
    bars = {p.get_gid(): p for ax in drawn.fig.axes for p in ax.patches if p.get_gid()}
    for k, row in enumerate(summary_rows(), start=1):
        heights = [bars[f"p{k}-bar-{b}"].get_height() for b in range(1, 11)]
        assert heights == row["pit_counts"]
        lefts = [bars[f"p{k}-bar-{b}"].get_x() for b in range(1, 11)]
        assert lefts == pytest.approx([b / 10 for b in range(10)])
    chart_style.pyplot()[1].close(drawn.fig)
    a = svg_texts(chart_rows.draw_rows(con, summary, tmp_path / "a.svg")[0])
    b = svg_texts(chart_rows.draw_rows(con, everything, tmp_path / "b.svg")[0])
    assert a == b


def test_panels_share_one_y_scale_and_mark_the_uniform_count(con, summary):
    drawn = chart_backtest.backtest_figure(chart_backtest.backtest_chart(con, summary))
    panels = [ax for ax in drawn.fig.axes if any(p.get_gid() and "-bar-" in p.get_gid()
                                                  for p in ax.patches)]
    assert len(panels) == 4 and len({ax.get_ylim() for ax in panels}) == 1
    for k, ax in enumerate(panels, start=1):
        line = next(ln for ln in ax.lines if ln.get_gid() == f"p{k}-expected")
        assert list(line.get_ydata()) == [FORECASTS / 10] * 2
    chart_style.pyplot()[1].close(drawn.fig)


def binomial_quantile(n: int, p: float, q: float) -> int:
    """The smallest count k with P(X <= k) >= q for X ~ Binomial(n, p), summed term by term
    (the definition of the quantile)."""
    total = 0.0
    for k in range(n + 1):
        total += math.comb(n, k) * p ** k * (1 - p) ** (n - k)
        if total >= q:
            return k
    return n


def test_reference_bands_are_binomial_95_percent_ranges(con, summary):
    from scipy.stats import binom

    chart = chart_backtest.backtest_chart(con, summary)
    for m in chart.methods:
        # SciPy: scipy.stats.binom.ppf, the binomial quantile function
        assert m.band == (binom.ppf(0.025, FORECASTS, 0.1), binom.ppf(0.975, FORECASTS, 0.1))
        assert m.coverage_range == (binom.ppf(0.025, FORECASTS, 0.8) / FORECASTS,
                                    binom.ppf(0.975, FORECASTS, 0.8) / FORECASTS)
    # the same counts from the binomial CDF summed by hand; SciPy 1.17 gives 12, 29, 149, 171
    assert chart.methods[0].band == (binomial_quantile(200, 0.1, 0.025),
                                     binomial_quantile(200, 0.1, 0.975)) == (12, 29)
    assert (binomial_quantile(200, 0.8, 0.025), binomial_quantile(200, 0.8, 0.975)) == (149, 171)
    drawn = chart_backtest.backtest_figure(chart)
    spans = [p for ax in drawn.fig.axes for p in ax.patches if p.get_gid() == "p1-band"]
    (y0, y1), = [(p.get_bbox().y0, p.get_bbox().y1) for p in spans]
    assert (y0, y1) == (12, 29)
    # a bar outside the band is drawn in the deeper colour
    from matplotlib.colors import to_rgba

    bars = {p.get_gid(): p for ax in drawn.fig.axes for p in ax.patches if p.get_gid()}
    for k, m in enumerate(chart.methods, start=1):
        for b, count in enumerate(m.counts, start=1):
            inside = 12 <= count <= 29
            assert bars[f"p{k}-bar-{b}"].get_facecolor() == to_rgba(
                chart_backtest.INSIDE_FILL if inside else chart_backtest.OUTSIDE_FILL)
    assert any(bars[f"p1-bar-{b}"].get_facecolor() == to_rgba(chart_backtest.OUTSIDE_FILL)
               for b in range(1, 11))  # the U shape leaves the band
    chart_style.pyplot()[1].close(drawn.fig)


@pytest.mark.parametrize("methods", [list(SHAPES), ["stated"],
                                     [*SHAPES, "stated per stage with a very long method name",
                                      "x"]])
def test_labels_do_not_collide(con, methods):
    rows = summary_rows()
    extra = [dict(rows[k % 4], method=name, coverage_80=[0.0, 1.0][k % 2])
             for k, name in enumerate(methods[4:])]
    chosen = [r for r in rows if r["method"] in methods] + extra
    drawn = chart_backtest.backtest_figure(chart_backtest.backtest_chart(con, table(chosen)))
    assert collisions(drawn.boxes, drawn.lines) == []
    assert collisions(rendered_boxes(drawn), drawn.lines) == []
    width, height = chart_style.fig_px(drawn.fig)
    frame = Box(0, 0, width, height)
    assert all(box.inside(frame) for box in rendered_boxes(drawn).values())
    chart_style.pyplot()[1].close(drawn.fig)


def test_where_keeps_the_matching_methods(con, everything, tmp_path):
    out = chart_rows.draw_rows(con, everything, tmp_path / "w.svg", where="method LIKE 'stated%'")
    texts = svg_texts(out[0])
    assert [texts[f"p{k}-title"] for k in (1, 2)] == ["stated", "stated, rho 0.15"]
    assert "p3-title" not in texts and "coverage-3" not in texts


def test_no_summary_row_is_a_one_line_error(con, everything, tmp_path):
    with pytest.raises(ParameterError) as where:
        chart_rows.draw_rows(con, everything, tmp_path / "x.svg", where="period = '2025-Q1'")
    message = str(where.value)
    assert "\n" not in message and "--where" in message and "method = 'stated'" in message
    with pytest.raises(ParameterError) as none:
        chart_rows.draw_rows(con, table(forecast_rows()), tmp_path / "y.svg")
    assert "\n" not in str(none.value) and "summary row" in str(none.value)
    assert not list(tmp_path.iterdir())


BACKTEST_SQL = ("-- A backtest result, by hand.\n"
                "SELECT * FROM (VALUES ('stated', 'all', 'all', 200::BIGINT, 0.7, 41000.0, "
                "0.14, [30, 22, 18, 16, 14, 15, 17, 20, 21, 27]::BIGINT[], 20.0), "
                "('stated', '2025-Q1', 'own_001', 1::BIGINT, 1.0, 900.0, 0.1, NULL, NULL)) "
                "AS t(method, period, owner_id, forecasts, coverage_80, crps, band_rps, "
                "pit_counts, pit_expected)\n")


def test_the_cli_draws_it_and_refuses_cuts(tmp_path):
    query = tmp_path / "my_backtest.sql"
    query.write_text(BACKTEST_SQL)
    out = tmp_path / "bt.svg"
    result = cli.invoke(app, ["chart", str(query), "--output", str(out)])
    assert result.exit_code == 0, result.output
    assert svg_texts(out)["coverage-1"] == "70%" and svg_texts(out)["p1-title"] == "stated"
    cuts = cli.invoke(app, ["chart", str(query), "--cuts", "1,2",
                            "--output", str(tmp_path / "c.svg")])
    assert cuts.exit_code == 1 and "--cuts" in cuts.output and cuts.output.count("\n") == 1
    empty = cli.invoke(app, ["chart", str(query), "--where", "period <> 'all'",
                             "--output", str(tmp_path / "e.svg")])
    assert empty.exit_code == 1 and empty.output.count("\n") == 1
    assert "no backtest summary row" in empty.output


def test_other_chart_shapes_are_not_backtests(demo_con, summary):
    assert chart_backtest.is_backtest_table(summary)
    reliability = runner.run_query(demo_con, queries.find("reliability_table"), {}).table
    demo_history.write_weekly_snapshots(demo_con)
    history = runner.run_query(demo_con, queries.find("odds_history"), {}).table
    outcomes = runner.run_query(demo_con, queries.find("region_outcomes"), {}).table
    for other in (reliability, history, outcomes):
        assert not chart_backtest.is_backtest_table(other)
    assert chart_rows.find_outcome_column(summary) is None  # why it is checked first
