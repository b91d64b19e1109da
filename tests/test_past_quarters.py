"""The demo's past quarters (seeds/past_deals.csv, seeds/past_quotas.csv) as generate.py draws
them: reproducible, in their quarters, and moving as the generator says (invented data; these
tests check the generator, not sqlrisk's numbers)."""

from __future__ import annotations

import csv
import datetime as dt
import math
from collections import Counter, defaultdict

import numpy as np
import pytest

from conftest import ROOT
from sqlrisk.seeds import generate

SEEDS = ROOT / "seeds"


def read(name):
    with open(SEEDS / name, newline="") as f:
        return list(csv.DictReader(f))


@pytest.fixture(scope="module")
def deals():
    return read("past_deals.csv")


def test_the_files_on_disk_are_what_the_generator_writes_and_it_repeats_itself():
    files = generate.make_seed_files()
    again = generate.make_seed_files()
    for name in ("past_deals.csv", "past_quotas.csv"):
        assert files[name] == again[name]
        text = generate.csv_text(*files[name])
        assert (SEEDS / name).read_bytes() == text.encode()
    # the other files do not depend on the past quarters' stream
    for name in ("owners.csv", "pipeline.csv", "quota_bands.csv", "closed_deals.csv",
                 "pipeline_weeks.csv"):
        assert (SEEDS / name).read_bytes() == generate.csv_text(*files[name]).encode()
    size = sum((SEEDS / n).stat().st_size for n in ("past_deals.csv", "past_quotas.csv"))
    assert size < 2_000_000


def test_columns_owners_and_quarters(deals):
    assert list(deals[0]) == generate.PAST_COLUMNS
    owners = {r["owner_id"] for r in read("owners.csv")}
    pairs = {(r["period"], r["owner_id"]) for r in deals}
    assert pairs == {(q, o) for q, _, _ in generate.PAST_QUARTERS for o in owners}
    quotas = read("past_quotas.csv")
    assert {(r["period"], r["owner_id"]) for r in quotas} == pairs and len(quotas) == len(pairs)
    assert all(int(r["floor"]) < int(r["target"]) < int(r["stretch"]) for r in quotas)


def test_dates_fall_inside_each_deals_quarter_and_slipped_deals_did_not_close(deals):
    quarters = {q: (start, start + dt.timedelta(days=days - 1))
                for q, start, days in generate.PAST_QUARTERS}
    for r in deals:
        first, last = quarters[r["period"]]
        assert r["period_start"] == first.isoformat()
        assert first <= dt.date.fromisoformat(r["expected_close"]) <= last
        assert r["result"] in ("won", "lost", "slipped")
        assert (r["closed_on"] == "") == (r["result"] == "slipped")
        if r["closed_on"]:
            assert first <= dt.date.fromisoformat(r["closed_on"]) <= last


def test_slip_shares_by_stage_are_the_generators(deals):
    by_stage = defaultdict(list)
    for r in deals:
        by_stage[r["stage"]].append(r["result"] == "slipped")
    for stage, flags in by_stage.items():
        n, share = len(flags), np.mean(flags)
        rate = generate.SLIP[stage]
        assert abs(share - rate) < 4 * math.sqrt(rate * (1 - rate) / n), stage


def test_late_stage_sellers_are_optimistic(deals):
    for stage in ("terms", "handshake"):
        closed = [r for r in deals if r["stage"] == stage and r["result"] != "slipped"]
        stated = np.mean([float(r["win_prob"]) for r in closed])
        won = np.mean([r["result"] == "won" for r in closed])
        assert won < stated - 0.05, (stage, stated, won)


def test_the_shared_shock_makes_wins_move_together():
    """copula_wins: with rho 0.3 the share of wins in a 'quarter' varies far more than
    independent deals allow; with rho 0 it varies as a binomial share does."""
    rng = np.random.default_rng(4)
    rate = np.full(40, 0.5)
    shares = {rho: np.array([copula_wins_share(rng, rate, rho) for _ in range(2000)])
              for rho in (0.0, generate.PAST_SHOCK_RHO)}
    binomial = 0.5 * 0.5 / len(rate)
    assert shares[0.0].var() == pytest.approx(binomial, rel=0.15)
    assert shares[generate.PAST_SHOCK_RHO].var() > 4 * binomial
    # each deal keeps its win rate
    assert shares[generate.PAST_SHOCK_RHO].mean() == pytest.approx(0.5, abs=0.02)


def copula_wins_share(rng, rate, rho):
    return generate.copula_wins(rng, rate, rng.standard_normal(), rho).mean()


def test_only_the_shocked_region_swings_from_quarter_to_quarter(deals):
    """In the shocked region the quarters' win shares spread more than in any other."""
    counts = defaultdict(Counter)
    for r in deals:
        if r["result"] != "slipped":
            counts[r["region"], r["period"]][r["result"]] += 1
    spread = {}
    for region in {r["region"] for r in deals}:
        shares = [counts[region, q]["won"] / sum(counts[region, q].values())
                  for q, _, _ in generate.PAST_QUARTERS]
        spread[region] = np.std(shares)
    assert max(spread, key=spread.get) == generate.SHOCK_REGION
