"""wilson_interval against SciPy's Wilson interval, and its NULL rule."""

from __future__ import annotations

import pytest
from scipy import stats


@pytest.mark.parametrize("level", [0.5, 0.8, 0.95, 0.99])
def test_wilson_interval_matches_scipy(con, level):
    cases = [(0, 1), (1, 1), (0, 7), (3, 10), (7, 7), (50, 120), (1, 2500), (2499, 2500)]
    rows = con.execute("SELECT wilson_interval(k, n, level := ?) FROM "
                       "(SELECT unnest(?::INT[]) AS k, unnest(?::INT[]) AS n)",
                       [level, [k for k, _ in cases], [n for _, n in cases]]).fetchall()
    for (ci,), (k, n) in zip(rows, cases):
        # source: scipy.stats.binomtest(k, n).proportion_ci(method='wilson') (SciPy >= 1.7)
        ref = stats.binomtest(k, n).proportion_ci(confidence_level=level, method="wilson")
        assert (ci["lo"], ci["hi"]) == pytest.approx((ref.low, ref.high), abs=1e-12)


def test_null_in_null_out_and_no_trials_no_interval(con):
    assert con.execute("SELECT wilson_interval(NULL, 3), wilson_interval(1, NULL), "
                       "wilson_interval(0, 0)").fetchone() == (None, None, None)


def test_the_default_level_is_95_percent(con):
    assert con.execute("SELECT wilson_interval(3, 10) = wilson_interval(3, 10, level := 0.95)"
                       ).fetchone()[0]
