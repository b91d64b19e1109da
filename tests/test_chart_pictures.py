"""Every chart as a picture: the file decodes, has the expected size, carries its labels,
and its PNG matches a stored reference rendering within a tolerance.

The charts are drawn from fixed descriptions (no query), so a difference means the drawing
changed. After a deliberate change of the look, look at the new pictures and store them:
``cd tests && python test_chart_pictures.py`` writes those of ``tests/reference/*.png``
whose bytes changed (or are missing) and leaves the others untouched. The tolerance
is matplotlib's RMS pixel difference (``matplotlib.testing.compare``): 3 of 255 lets
anti-aliasing differences between FreeType builds pass and catches a moved label.
"""

from __future__ import annotations

import datetime as dt
import sys
from pathlib import Path

import numpy as np
import pytest

from chart_checks import svg_texts
from conftest import assert_png
from sqlrisk import chart_drawing as drawing
from sqlrisk import chart_backtest, chart_history, chart_reliability
from sqlrisk.chart_style import save

REFERENCE = Path(__file__).resolve().parent / "reference"
TOLERANCE = 3.0


def outcome_spec() -> drawing.OutcomeChart:
    x = np.linspace(0.0, 2.0e6, 200)
    reach = 1.0 / (1.0 + np.exp((x - 1.0e6) / 1.6e5))  # a smooth falling curve, invented
    cuts = [drawing.CutMark(n, v, float(1.0 / (1.0 + np.exp((v - 1.0e6) / 1.6e5))))
            for n, v in (("floor", 6.0e5), ("target", 1.0e6), ("stretch", 1.4e6))]
    reached = [1.0] + [c.reach for c in cuts] + [0.0]
    bands = [drawing.Band(n, reached[k] - reached[k + 1]) for k, n in
             enumerate(drawing.band_names([c.name for c in cuts]))]
    return drawing.OutcomeChart("Example seller", (x.tolist(), reach.tolist()), cuts, bands,
                                mean=1.0e6, quantiles=(6.5e5, 1.0e6, 1.35e6),
                                note="Odds within +/-0.05 percentage points.")


def history_spec() -> chart_history.HistoryChart:
    dates = [dt.date(2026, 10, 5) + dt.timedelta(weeks=k) for k in range(6)]
    low = np.linspace(0.5, 0.2, 6)
    top = np.linspace(0.05, 0.2, 6)
    mid = 1 - low - top
    return chart_history.HistoryChart(
        "Example seller", dates, [("below floor", low.tolist()), ("floor to target",
                                   (mid * 0.6).tolist()), ("target or more",
                                   (mid * 0.4 + top).tolist())],
        [("target", (mid * 0.4 + top).tolist())], "Band odds as each snapshot stored them.")


def reliability_spec() -> chart_reliability.ReliabilityChart:
    stated = np.linspace(0.05, 0.95, 10)
    return chart_reliability.ReliabilityChart(
        "Example diagram", [(float(s), float(min(1, s * 0.9 + 0.03)), int(40 + 30 * k))
                            for k, s in enumerate(stated)],
        [(float(max(0, s * 0.9 - 0.05)), float(min(1, s * 0.9 + 0.11))) for s in stated],
        "Invented bins.\nDashed line: observed = stated.")


def backtest_spec() -> chart_backtest.BacktestChart:
    counts = {"stated": [44, 27, 15, 12, 9, 10, 13, 17, 22, 31],  # invented: a U shape,
              "calibrated": [19, 22, 18, 21, 20, 17, 23, 19, 21, 20],  # flat,
              "stated, rho 0.15": [8, 12, 19, 27, 34, 31, 26, 20, 14, 9],  # a hump,
              "calibrated, rho 0.15": [31, 27, 24, 22, 20, 19, 18, 15, 13, 11]}  # a slope
    scores = [(0.64, 41250.0, 0.142), (0.795, 38900.0, 0.118), (0.93, 40110.0, 0.131),
              (0.81, 37620.0, 0.109)]
    return chart_backtest.BacktestChart(
        "Backtest: won totals against their forecasts",
        [chart_backtest.method_scores(m, c, 200, cov, crps=crps, rps=rps)
         for (m, c), (cov, crps, rps) in zip(counts.items(), scores)],
        "200 forecasts per method (invented)", chart_backtest.NOTE)


PICTURES = {
    "outcome": (lambda: drawing.outcome_figure(outcome_spec()), (960, 520),
                ["Example seller", "floor 600k", "target 1M", "stretch 1.4M", "Band odds"]),
    "outcome-grid": (lambda: drawing.outcome_grid([outcome_spec()] * 3, "Exact odds."),
                     (690, 545), ["Example seller", "target 50.0%"]),
    "history": (lambda: chart_history.history_figure(history_spec()), (960, 520),
                ["Example seller: how the odds moved", "below floor", "reach target"]),
    "history-grid": (lambda: chart_history.history_grid([history_spec()] * 2), (690, 320),
                     ["Example seller", "floor to target"]),
    "reliability": (lambda: chart_reliability.reliability_figure(reliability_spec()), (580, 620),
                    ["Example diagram", "observed win rate"]),
    "backtest": (lambda: chart_backtest.backtest_figure(backtest_spec()), (1145, 675),
                 ["stated, rho 0.15", "mean CRPS 41,250 · RPS 0.142", "PIT of the won total",
                  "64%", "93%", "U shape"]),
}


@pytest.mark.parametrize("name", PICTURES)
def test_png_matches_its_reference(name, tmp_path):
    from matplotlib.testing.compare import compare_images

    draw, size, _ = PICTURES[name]
    out = save(draw().fig, tmp_path / f"{name}.png")
    assert assert_png(out) == size
    diff = compare_images(str(REFERENCE / f"{name}.png"), str(out), tol=TOLERANCE)
    assert diff is None, diff


@pytest.mark.parametrize("name", PICTURES)
def test_svg_decodes_and_carries_its_labels(name, tmp_path):
    draw, size, labels = PICTURES[name]
    out = save(draw().fig, tmp_path / f"{name}.svg")
    texts = "\n".join(svg_texts(out).values())
    for label in labels:
        assert label in texts, (label, texts[:300])
    head = out.read_text()[:600]
    w, h = size
    assert f'width="{w * 72 / 100:g}pt"' in head and f'height="{h * 72 / 100:g}pt"' in head


def write_references() -> None:
    """Draw every picture; write those whose bytes differ from the stored reference (or
    that have none), leaving the others' files untouched."""
    import io

    from sqlrisk.chart_style import pyplot, write

    REFERENCE.mkdir(exist_ok=True)
    for name, (draw, _, _) in PICTURES.items():
        fig, buffer, path = draw().fig, io.BytesIO(), REFERENCE / f"{name}.png"
        write(fig, buffer, "png")
        pyplot()[1].close(fig)
        if path.exists() and path.read_bytes() == buffer.getvalue():
            print("unchanged", path)
        else:
            path.write_bytes(buffer.getvalue())
            print("wrote", path)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    write_references()
