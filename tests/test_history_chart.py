"""`sqlrisk chart` on dated band odds (odds_history, band_history): the odds over time, one
file per owner or one page of panels, the latest odds and each band's move beside the plot."""

from __future__ import annotations

import pytest

import sqlrisk
from chart_checks import collisions, rendered_boxes, svg_ids, svg_texts
from sqlrisk import chart_history, chart_rows, demo, demo_history, queries, runner
from sqlrisk.text_format import pct


@pytest.fixture(scope="module")
def history():
    con = sqlrisk.connect()
    demo.load_seeds(con)
    demo_history.write_weekly_snapshots(con)
    yield con, runner.run_query(con, queries.find("odds_history"), {}).table
    con.close()


def test_one_owner_history_shows_the_latest_odds_and_moves(history, tmp_path):
    con, table = history
    out = chart_rows.draw_rows(con, table, tmp_path / "h.svg", where="owner_id = 'own_032'")
    assert out == [tmp_path / "h.svg"]
    texts = svg_texts(out[0])
    rows = [r for r in table.to_pylist() if r["owner_id"] == "own_032"]
    first, last = rows[0], rows[-1]
    assert texts["title"] == "own_032: how the odds moved"
    names = ["below floor", "floor to target", "target to stretch", "stretch or more"]
    assert [texts[f"band-name-{k}"] for k in range(1, 5)] == names
    for k, column in enumerate(["below_floor", "floor_to_target", "target_to_stretch",
                                "stretch_or_more"], start=1):
        assert texts[f"band-prob-{k}"] == pct(last[column])
        move = 100 * (last[column] - first[column])
        assert texts[f"band-move-{k}"].startswith(f"{move:+.1f} pts since")
    assert texts["reach-prob-1"] == pct(last["reach_target"])
    assert "reach-target" in svg_ids(out[0])


def test_several_owners_give_one_file_each_or_one_grid_page(history, tmp_path):
    con, table = history
    where = "region = 'Tidewater Bay'"
    owners = sorted({r["owner_id"] for r in table.to_pylist() if r["region"] == "Tidewater Bay"})
    files = chart_rows.draw_rows(con, table, tmp_path / "o.svg", where=where)
    assert sorted(p.name for p in files) == [f"o-{o}.svg" for o in owners]
    page = chart_rows.draw_rows(con, table, tmp_path / "g.svg", where=where, grid=True)
    texts = svg_texts(page[0])
    assert [texts[f"p{k}-title"] for k in range(1, len(owners) + 1)] == owners


def test_history_labels_do_not_collide(history):
    con, table = history
    charts = chart_history.history_charts(con, table, "region = 'Redcliff Highlands'")
    for drawn in [chart_history.history_figure(charts[0]), chart_history.history_grid(charts)]:
        assert collisions(drawn.boxes, drawn.lines) == []
        assert collisions(rendered_boxes(drawn), drawn.lines) == []


def test_a_single_snapshot_is_not_a_history(history):
    con, _ = history
    one = con.sql("SELECT * FROM band_history WHERE as_of = DATE '2026-11-30'").to_arrow_table()
    assert not chart_history.is_history(one)
    assert chart_history.is_history(con.sql("SELECT * FROM band_history").to_arrow_table())
