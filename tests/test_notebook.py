"""A notebook's usual flow: connect, query to a table, draw one outcome inline."""

from __future__ import annotations

import pyarrow as pa

import sqlrisk
from chart_checks import svg_texts
from conftest import ROOT, assert_png
from sqlrisk.text_format import pct


def test_query_to_arrow_then_draw_one_outcome(tmp_path):
    con = sqlrisk.connect()
    table = con.sql(
        "SELECT owner_id, outcome_dist(amount, win_prob) AS outcome, "
        "reach_odds(amount, win_prob, 900000) AS reach FROM read_csv(?) GROUP BY owner_id "
        "ORDER BY owner_id", params=[str(ROOT / "seeds" / "pipeline.csv")]).arrow().read_all()
    assert isinstance(table, pa.Table) and table.num_rows == 54
    first = table.slice(0, 1).to_pylist()[0]
    svg = sqlrisk.draw_outcome(first["outcome"], {"target": 900000}, title=first["owner_id"],
                               path=tmp_path / "o.svg")
    assert svg.startswith("<?xml") and (tmp_path / "o.svg").read_text() == svg
    texts = svg_texts(tmp_path / "o.svg")
    assert texts["title"] == first["owner_id"] and texts["cut-label-1"].startswith("target 900k")
    reach = con.sql("SELECT outcome_reach(?::" + sqlrisk.OUTCOME_SQL + ", 900000)",
                    params=[first["outcome"]]).fetchall()[0][0]
    assert pct(reach) in texts["cut-label-1"]
    sqlrisk.draw_outcome(first["outcome"], [900000], path=tmp_path / "o.png")
    assert assert_png(tmp_path / "o.png") == (960, 520)
