"""The reliability diagram: `sqlrisk chart` on a query with stated_mean, observed_rate and
deals columns (reliability_table), as SVG and PNG.

The SVG is read as XML and each point checked against the rows it draws: a bin at
(stated_mean, observed_rate) on a square frame whose diagonal is perfect calibration (the
usual reliability diagram: common practice).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from typer.testing import CliRunner

from chart_checks import collisions, svg_ids, svg_texts
from conftest import ROOT, assert_png, run_saved
from sqlrisk import chart_reliability
from sqlrisk.cli import app

SEEDS = ROOT / "seeds"
cli = CliRunner()
SOURCE = ["--source", f"closed_deals={SEEDS / 'closed_deals.csv'}"]


def test_chart_draws_a_reliability_diagram_as_svg(demo_con, tmp_path):
    out = tmp_path / "rel.svg"
    result = cli.invoke(app, ["chart", "reliability_table", *SOURCE, "--output", str(out)])
    assert result.exit_code == 0, result.output
    tree = ET.parse(out)  # valid XML
    assert tree.getroot().tag == "{http://www.w3.org/2000/svg}svg"
    table = run_saved(demo_con, "reliability_table")
    ids, texts = svg_ids(out), svg_texts(out)
    assert {f"point-{k}" for k in range(1, 11)} <= ids and "point-11" not in ids
    assert {f"interval-{k}" for k in range(1, 11)} <= ids and "diagonal" in ids
    assert [texts[f"deals-{k}"] for k in range(1, 11)] == [f"{r['deals']:,}" for r in table]


def test_each_bin_sits_at_its_stated_mean_and_observed_rate(demo_con):
    table = run_saved(demo_con, "reliability_table")
    chart = chart_reliability.ReliabilityChart(
        "bins", [(r["stated_mean"], r["observed_rate"], r["deals"]) for r in table],
        [(r["wilson_lo"], r["wilson_hi"]) for r in table])
    drawn = chart_reliability.reliability_figure(chart)
    lines = {ln.get_gid(): ln for ax in drawn.fig.axes for ln in ax.lines}
    assert list(lines["diagonal"].get_xdata()) == [0, 1] == list(lines["diagonal"].get_ydata())
    sizes = []
    for k, r in enumerate(table, start=1):
        point = lines[f"point-{k}"]
        assert (point.get_xdata()[0], point.get_ydata()[0]) == (r["stated_mean"], r["observed_rate"])
        assert list(lines[f"interval-{k}"].get_ydata()) == [r["wilson_lo"], r["wilson_hi"]]
        sizes.append(point.get_markersize())
    deals = [r["deals"] for r in table]
    assert sizes.index(max(sizes)) == deals.index(max(deals))  # the biggest bin, biggest circle
    assert collisions(drawn.boxes, []) == []


def test_chart_draws_a_reliability_diagram_as_png_and_skips_empty_bins(tmp_path):
    out = tmp_path / "rel.png"
    result = cli.invoke(app, ["chart", "reliability_table", *SOURCE, "-p", "bins=100",
                              "--output", str(out)])
    assert result.exit_code == 0, result.output
    assert_png(out)
    svg = tmp_path / "rel100.svg"
    assert cli.invoke(app, ["chart", "reliability_table", *SOURCE, "-p", "bins=100",
                            "--output", str(svg)]).exit_code == 0
    # 100 bins, of which those without deals (e.g. 0.98-0.99) are not drawn
    points = [i for i in svg_ids(svg) if i.startswith("point-")]
    assert 50 < len(points) < 100


def test_chart_one_diagram_per_label(tmp_path):
    query = tmp_path / "by_stage.sql"
    query.write_text("-- Reliability by stage.\n"
                     "SELECT stage_at_snapshot AS stage, round(stated_prob, 1) AS b, "
                     "count(*) AS deals, avg(stated_prob) AS stated_mean, "
                     "avg(won) AS observed_rate FROM closed_deals GROUP BY ALL\n")
    result = cli.invoke(app, ["chart", str(query), *SOURCE, "--output", str(tmp_path / "s.svg"),
                              "--where", "stage IN ('scout', 'terms')"])
    assert result.exit_code == 0, result.output
    files = sorted(tmp_path.glob("s-*.svg"))
    titles = {svg_texts(f)["title"] for f in files}
    assert titles == {"scout", "terms"}


def test_chart_errors_name_both_shapes_and_refuse_cuts(tmp_path):
    neither = cli.invoke(app, ["chart", "owner_quantiles", "--source",
                               f"pipeline={SEEDS / 'pipeline.csv'}", "--source",
                               f"quota_bands={SEEDS / 'quota_bands.csv'}",
                               "--output", str(tmp_path / "x.svg")])
    assert neither.exit_code == 1 and neither.output.count("\n") == 1
    assert "no outcome column" in neither.output and "stated_mean, observed_rate, deals" \
        in neither.output
    cuts = cli.invoke(app, ["chart", "reliability_table", *SOURCE, "--cuts", "1,2",
                            "--output", str(tmp_path / "y.svg")])
    assert cuts.exit_code == 1 and "--cuts" in cuts.output and cuts.output.count("\n") == 1
