"""The reliability diagram: `sqlrisk chart` on a query with stated_mean, observed_rate and
deals columns (reliability_table), as SVG and PNG.

The SVG is read as XML and each point checked against the rows it draws: a bin at
(stated_mean, observed_rate) on a square frame whose diagonal is perfect calibration (the
usual reliability diagram: common practice).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest
from typer.testing import CliRunner

from conftest import ROOT, assert_png, run_saved
from sqlrisk.cli import app

SEEDS = ROOT / "seeds"
cli = CliRunner()
SOURCE = ["--source", f"closed_deals={SEEDS / 'closed_deals.csv'}"]
NS = {"s": "http://www.w3.org/2000/svg"}


def test_chart_draws_a_reliability_diagram_as_svg(demo_con, tmp_path):
    out = tmp_path / "rel.svg"
    result = cli.invoke(app, ["chart", "reliability_table", *SOURCE, "--output", str(out)])
    assert result.exit_code == 0, result.output
    tree = ET.parse(out)  # valid XML
    assert tree.getroot().tag == "{http://www.w3.org/2000/svg}svg"
    table = run_saved(demo_con, "reliability_table")
    points = tree.findall(".//s:circle[@class='point']", NS)
    labels = [t.text for t in tree.findall(".//s:text[@class='deals']", NS)]
    assert len(points) == len(table) == 10
    assert labels == [f"{r['deals']:,}" for r in table]
    assert len(tree.findall(".//s:line[@class='interval']", NS)) == 10
    diagonal = tree.find(".//s:line[@class='diagonal']", NS)
    frame = tree.find(".//s:rect[@class='axis']", NS)
    left, top = float(frame.get("x")), float(frame.get("y"))
    side = float(frame.get("width"))
    assert (float(diagonal.get("x1")), float(diagonal.get("y1"))) == (left, top + side)
    assert (float(diagonal.get("x2")), float(diagonal.get("y2"))) == (left + side, top)
    for circle, r in zip(points, table):  # each bin sits at (stated_mean, observed_rate)
        assert float(circle.get("cx")) == pytest.approx(left + r["stated_mean"] * side, abs=0.06)
        assert float(circle.get("cy")) == pytest.approx(top + (1 - r["observed_rate"]) * side,
                                                        abs=0.06)
    radii = [float(c.get("r")) for c in points]
    deals = [r["deals"] for r in table]
    assert radii.index(max(radii)) == deals.index(max(deals))  # the biggest bin, biggest circle


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
    assert 50 < len(ET.parse(svg).findall(".//s:circle[@class='point']", NS)) < 100


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
    titles = {ET.parse(f).find(".//s:text[@class='title']", NS).text for f in files}
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
