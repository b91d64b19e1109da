"""`sqlrisk chart` on outcomes: the exceedance curve P(total >= x), its labelled cut points,
small multiples, named cuts, accuracy in probability, and no label over another or the curve.

The numbers on a chart are sqlrisk's own (outcome_reach, outcome_bands, ...), so these tests
check that the picture carries them, and check the curve itself against references from
outside the project: enumeration of every win/loss scenario of a small group (the definition
of the distribution) and SciPy's Wilson interval for a simulated curve's envelope.
"""

from __future__ import annotations

import itertools

import pytest
from typer.testing import CliRunner

import sqlrisk
from chart_checks import collisions, rendered_boxes, svg_ids, svg_texts
from conftest import ROOT, assert_png
from sqlrisk import chart_drawing, chart_rows, chart_style, queries, runner
from sqlrisk.cli import app
from sqlrisk.text_format import money, pct

cli = CliRunner()
SEEDS = ROOT / "seeds"
SOURCES = [f"--source=pipeline={SEEDS / 'pipeline.csv'}",
           f"--source=quota_bands={SEEDS / 'quota_bands.csv'}",
           f"--source=owners={SEEDS / 'owners.csv'}"]
SMALL = ("SELECT 'three deals' AS seller, 300.0 AS floor, 500.0 AS target, 900.0 AS stretch, "
         "outcome_dist(a, p) AS outcome FROM (VALUES (400.0, 0.5), (300.0, 0.7), (250.0, 0.3)) "
         "t(a, p)")
SMALL_DEALS = [(400.0, 0.5), (300.0, 0.7), (250.0, 0.3)]


def invoke(*args):
    return cli.invoke(app, ["chart", *args])


def reach_by_enumeration(deals, x):
    """P(total >= x) summed over all 2^n win/loss scenarios (the definition)."""
    total = 0.0
    for won in itertools.product((0, 1), repeat=len(deals)):
        p = 1.0
        for (a, q), w in zip(deals, won):
            p *= q if w else 1 - q
        total += p if sum(a * w for (a, _), w in zip(deals, won)) >= x - 1e-9 else 0.0
    return total


@pytest.fixture(scope="module")
def regions():
    con = sqlrisk.connect()
    for name in ("pipeline", "quota_bands", "owners"):
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM read_csv(?)", [str(SEEDS / f"{name}.csv")])
    table = runner.run_query(con, queries.find("region_outcomes"), {}).table
    yield con, table
    con.close()


def test_chart_svg_labels_each_cut_with_its_name_and_reach_odds(tmp_path, regions):
    con, table = regions
    out = tmp_path / "tide.svg"
    result = invoke("region_outcomes", *SOURCES, "--where", "region = 'Tidewater Bay'",
                    "--output", str(out))
    assert result.exit_code == 0, result.output
    texts = svg_texts(out)
    con.register("tbl", table)
    cuts, bands, mean, reach = con.execute(
        "SELECT [floor, target, stretch]::DOUBLE[], outcome_bands(outcome, [floor, target, "
        "stretch]::DOUBLE[]), outcome_mean(outcome), [outcome_reach(outcome, floor), outcome_reach(outcome, target), "
        "outcome_reach(outcome, stretch)] FROM tbl WHERE region = 'Tidewater Bay'").fetchall()[0]
    con.unregister("tbl")
    assert texts["title"] == "Tidewater Bay"
    for i, (name, value, r) in enumerate(zip(("floor", "target", "stretch"), cuts, reach), 1):
        label = texts[f"cut-label-{i}"]
        assert label.startswith(f"{name} {chart_style.compact_money(value)}"), label
        assert pct(r) in label  # reach odds beside the name: outcome_reach at the cut
    assert [texts[f"band-prob-{k}"] for k in range(1, 5)] == [pct(b) for b in bands]
    assert [texts[f"band-name-{k}"] for k in range(1, 5)] == [
        "below floor", "floor to target", "target to stretch", "stretch or more"]
    assert texts["total-value-expected"] == money(mean)
    assert "chance of reaching" in "".join(texts.values())  # the y-axis title
    assert {"p10-label", "p50-label", "p90-label", "expected-label"} <= set(texts)
    assert {"curve", "cut-point-1", "cut-point-2", "cut-point-3"} <= svg_ids(out)


def test_png_one_file_per_row_named_after_its_label(tmp_path):
    result = invoke("region_outcomes", *SOURCES, "--output", str(tmp_path / "r.png"))
    assert result.exit_code == 0, result.output
    regions = sorted({line.split(",")[-1].strip() for line in
                      (SEEDS / "owners.csv").read_text().splitlines()[1:]})
    expected = {"r-" + "-".join(r.lower().split()) + ".png" for r in regions}
    assert {p.name for p in tmp_path.glob("r-*.png")} == expected  # never r-1.png, r-2.png
    for f in tmp_path.glob("r-*.png"):
        assert assert_png(f) == (960, 520)


def test_grid_draws_every_row_as_a_panel_in_query_order(tmp_path):
    out = tmp_path / "regions.svg"
    result = invoke("region_outcomes", *SOURCES, "--grid", "--output", str(out))
    assert result.exit_code == 0, result.output
    assert [p.name for p in tmp_path.iterdir()] == ["regions.svg"]
    texts = svg_texts(out)
    titles = [texts[f"p{k}-title"] for k in range(1, 8)]
    assert titles == sorted(titles) and "p8-title" not in texts  # ORDER BY region, 7 regions
    assert all(f"p{k}-cut-label-2" in texts for k in range(1, 8))  # own cuts in every panel
    assert texts["note"].startswith("Odds within +/-") and "least exact panel" in texts["note"]


def test_cuts_named_on_the_command_line_or_as_structs(tmp_path):
    query = tmp_path / "q.sql"
    query.write_text(f"-- Small.\n{SMALL}\n")
    result = invoke(str(query), "--cuts", "plan=450,hope=700", "--output", str(tmp_path / "a.svg"))
    assert result.exit_code == 0, result.output
    texts = svg_texts(tmp_path / "a.svg")
    assert texts["cut-label-1"].startswith("plan 450") and texts["cut-label-2"].startswith("hope 700")
    assert texts["band-name-2"] == "plan to hope"
    structs = tmp_path / "s.sql"
    structs.write_text("-- Struct cuts.\nSELECT 'x' AS who, [{'name': 'low', 'value': 300.0}, "
                       "{'name': 'high', 'value': 650.0}] AS cuts, outcome_dist(a, p) AS outcome "
                       "FROM (VALUES (400.0, 0.5), (300.0, 0.7), (250.0, 0.3)) t(a, p)\n")
    assert invoke(str(structs), "--output", str(tmp_path / "s.svg")).exit_code == 0
    texts = svg_texts(tmp_path / "s.svg")
    assert texts["cut-label-1"].startswith("low 300") and texts["band-name-3"] == "high or more"
    bad = invoke(str(query), "--cuts", "plan=lots", "--output", str(tmp_path / "b.svg"))
    assert bad.exit_code == 2 and "NAME=NUMBER" in bad.output


def test_floor_target_stretch_columns_name_the_cuts_and_missing_ones_are_left_out(tmp_path):
    query = tmp_path / "q.sql"
    query.write_text("-- Cuts as columns.\nSELECT 'x' AS who, 50.0 AS floor, NULL::DOUBLE AS target,"
                     " 120.0 AS stretch, outcome_dist(t, 0.5) AS outcome FROM range(1, 20) r(t)\n")
    result = invoke(str(query), "--output", str(tmp_path / "q.svg"))
    assert result.exit_code == 0, result.output
    texts = svg_texts(tmp_path / "q.svg")
    assert texts["cut-label-1"].startswith("floor") and texts["cut-label-2"].startswith("stretch")
    assert "cut-label-3" not in texts and texts["band-name-2"] == "floor to stretch"


def test_accuracy_is_stated_in_probability(tmp_path, regions):
    con, table = regions
    small = tmp_path / "q.sql"
    small.write_text(f"-- Small.\n{SMALL}\n")
    assert invoke(str(small), "--output", str(tmp_path / "q.svg")).exit_code == 0
    assert svg_texts(tmp_path / "q.svg")["note"] == "Exact odds."
    assert invoke("region_outcomes", *SOURCES, "--output", str(tmp_path / "r.svg")).exit_code == 0
    con.register("tbl", table)
    errors = dict(con.execute("SELECT region, outcome_error(outcome) FROM tbl").fetchall())
    con.unregister("tbl")
    for path in tmp_path.glob("r-*.svg"):
        texts = svg_texts(path)
        assert texts["note"] == (f"Odds within +/-{100 * errors[texts['title']]:.2g} "
                                 "percentage points.")


def test_small_group_curve_is_the_exact_step_function(regions):
    con, _ = regions
    chart = chart_rows.outcome_charts(con, con.sql(SMALL).to_arrow_table())[0]
    xs, ys = chart.curve
    totals = sorted({sum(a for a, _ in c) for r in range(4) for c in itertools.combinations(
        SMALL_DEALS, r)})
    for t in totals:  # at each total the curve's upper value is P(S >= t) by enumeration
        at = [y for x, y in zip(xs, ys) if x == t]
        assert max(at) == pytest.approx(reach_by_enumeration(SMALL_DEALS, t), abs=1e-12)
    for a, b in zip(totals, totals[1:]):  # between totals it is flat at P(S >= b)
        mid = [y for x, y in zip(xs, ys) if a < x < b]
        assert all(y == pytest.approx(reach_by_enumeration(SMALL_DEALS, b), abs=1e-12) for y in mid)
    assert [c.reach for c in chart.cuts] == pytest.approx(
        [reach_by_enumeration(SMALL_DEALS, c) for c in (300, 500, 900)], abs=1e-12)


def test_simulated_curve_carries_its_wilson_envelope(regions):
    from scipy.stats import binomtest

    con, _ = regions
    chart = chart_rows.outcome_charts(con, con.sql(
        "SELECT 'sim' AS who, outcome_sim(amount, win_prob, trials := 2000, seed := 7) AS outcome "
        "FROM pipeline WHERE region = 'Tidewater Bay'").to_arrow_table())[0]
    ex, lo, hi = chart.envelope
    for k in range(0, len(ex), 37):
        r = chart.curve[1][k]
        ci = binomtest(round(r * 2000), 2000).proportion_ci(0.95, method="wilson")  # SciPy
        assert (lo[k], hi[k]) == pytest.approx((ci.low, ci.high), abs=1e-9)
        assert lo[k] <= r <= hi[k]
    assert "Monte Carlo, 2,000 trials" in chart.note


CROWDED = [
    SMALL,
    # cuts packed close together, one past the best case, one below the worst
    "SELECT 'crowded' AS who, [{'name': 'a', 'value': 0.0}, {'name': 'b', 'value': 4.0e6}, "
    "{'name': 'c', 'value': 4.1e6}, {'name': 'd', 'value': 4.2e6}, {'name': 'e', 'value': 9e7}] "
    "AS cuts, outcome_dist(amount, win_prob) AS outcome FROM pipeline WHERE region = 'Frostmere Heights'",
    "SELECT 'one dominant deal' AS who, 1e5 AS floor, 1.2e6 AS target, 2e6 AS stretch, "
    "outcome_dist(a, p) AS outcome FROM (SELECT 2e6 AS a, 0.4 AS p UNION ALL "
    "SELECT amount, win_prob FROM pipeline WHERE owner_id = 'own_003')",
    "SELECT owner_id, [{'name': 'floor', 'value': q.floor}, {'name': 'target', 'value': q.target}, "
    "{'name': 'stretch', 'value': q.stretch}] AS cuts, outcome_sim(amount, win_prob, trials := 3000) "
    "AS outcome FROM pipeline JOIN quota_bands q USING (owner_id) WHERE owner_id <= 'own_006' "
    "GROUP BY owner_id, q.floor, q.target, q.stretch ORDER BY owner_id",
]


@pytest.mark.parametrize("sql", CROWDED + ["regions"])
def test_no_label_overlaps_another_or_the_curve(regions, sql):
    con, table = regions
    charts = chart_rows.outcome_charts(con, table if sql == "regions" else con.sql(sql).to_arrow_table())
    drawn = [chart_drawing.outcome_figure(c) for c in charts]
    drawn.append(chart_drawing.outcome_grid(charts, chart_rows.grid_note(charts)))
    for d in drawn:
        # the boxes the layout estimated from font size, then the ones matplotlib drew
        assert collisions(d.boxes, d.lines) == []
        assert collisions(rendered_boxes(d), d.lines) == []
        chart_style.pyplot()[1].close(d.fig)


def test_palette_is_our_own():
    import matplotlib
    from matplotlib.colors import to_hex

    defaults = {to_hex(c) for c in matplotlib.rcParamsDefault["axes.prop_cycle"].by_key()["color"]}
    defaults |= {to_hex(c) for c in ("C0", "tab:blue", "tab:orange", "tab:green")}
    ours = {*chart_style.BAND_FILLS, *chart_style.BAND_EDGES, chart_style.INK}
    assert not ours & defaults
    assert chart_style.band_colours(4) == list(chart_style.BAND_FILLS)
    assert chart_style.band_colours(2) == [chart_style.BAND_FILLS[0], chart_style.BAND_FILLS[-1]]


def test_chart_needs_an_outcome_column(tmp_path):
    result = invoke("owner_quantiles", *SOURCES[:2], "--output", str(tmp_path / "x.svg"))
    assert result.exit_code == 1 and "no outcome column" in result.output
    assert result.output.count("\n") == 1
