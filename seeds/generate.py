"""Generate the sqlrisk demo data set.

Writes five CSV files beside this script for Brindlewick Software, a
made-up B2B software company:

* owners.csv         - sellers, with their team and region
* pipeline.csv       - open deals expected to close in 2027-Q1
* quota_bands.csv    - floor / target / stretch cut points per seller
* closed_deals.csv   - closed deals from 2026, used for calibration
* pipeline_weeks.csv - the open pipeline on six Mondays up to today (2026-11-30)
* past_deals.csv     - 2026's four quarters: the deals open on each quarter's first day
                       that were expected to close in it, and what each of them did
* past_quotas.csv    - those quarters' floor / target / stretch per seller

The company, regions, teams, product lines and every person's name are
invented. Any resemblance to real companies or people is a coincidence.
The random seeds are fixed, so every run writes exactly the same files.

Run from the repository root:  python seeds/generate.py
"""

import csv
import datetime as dt
import io
from pathlib import Path

import numpy as np
from scipy.special import ndtri

SEED = 20270101
OUT_DIR = Path(__file__).resolve().parent

COMPANY = "Brindlewick Software"
REGIONS = [
    "Saltmarsh Reach", "Copperfield Basin", "Emberglen Valley",
    "Frostmere Heights", "Amberline Plains", "Tidewater Bay",
    "Redcliff Highlands",
]
TEAM_KINDS = ["Pathfinders", "Anchors"]  # two teams per region
PRODUCT_LINES = ["Ledgerloom", "Quillstack", "Brightvault", "Tallyforge", "Nimbleroute"]
PRODUCT_WEIGHTS = [0.30, 0.25, 0.20, 0.15, 0.10]

FIRST_NAMES = [
    "Orlena", "Tavish", "Mirabet", "Corwen", "Elspa", "Dariel", "Ysolde",
    "Fenrick", "Juniva", "Bramwel", "Sorrel", "Calyx", "Odessa", "Perrin",
    "Lunet", "Hollis", "Wrenna", "Thaddon",
]
SURNAMES = [
    "Ashcombe", "Velloway", "Marchbank", "Quenby", "Thistlewood", "Orrin",
    "Greyhallow", "Penwarden", "Dunstable", "Kestley", "Brackwater",
    "Loverin", "Fairholm", "Sallowby", "Wexcombe", "Tarrant",
]

# Stage name -> mean stated win probability (the seller's own number).
STAGES = {"scout": 0.10, "scope": 0.25, "pitch": 0.45, "terms": 0.65, "handshake": 0.85}
STAGE_WEIGHTS = [0.30, 0.25, 0.20, 0.15, 0.10]
# True win rate = stated * factor: pessimistic early, optimistic late.
CALIBRATION = {"scout": 1.35, "scope": 1.05, "pitch": 0.92, "terms": 0.88, "handshake": 0.82}

AMOUNT_MEDIAN, AMOUNT_SIGMA, AMOUNT_CAP = 38_000, 1.0, 1_900_000
NEGATIVE_SHARE = 0.01
Q1_START, Q1_DAYS = dt.date(2027, 1, 1), 90      # 2027-01-01 .. 2027-03-31
HIST_START, HIST_DAYS = dt.date(2026, 1, 1), 365  # 2026-01-01 .. 2026-12-31


def csv_text(header, rows):
    """A seed file's text, exactly as ``write_csv`` writes it (CRLF line ends)."""
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer)
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def write_csv(name, header, rows):
    with open(OUT_DIR / name, "w", newline="") as f:
        f.write(csv_text(header, rows))
    print(f"wrote {name}: {len(rows)} rows")


def round_to(x, step):
    return int(step * round(x / step))


def make_owners(rng):
    """5-9 sellers per region, split over the region's two teams."""
    first, last = np.meshgrid(FIRST_NAMES, SURNAMES)
    all_names = [f"{a} {b}" for a, b in zip(first.ravel(), last.ravel())]
    sizes = rng.integers(5, 10, size=len(REGIONS))
    names = rng.choice(all_names, size=int(sizes.sum()), replace=False)
    owners, k = [], 0
    for region, size in zip(REGIONS, sizes):
        short = region.split()[0]
        for i in range(size):
            team = f"{short} {TEAM_KINDS[i % 2]}"
            owners.append({"owner_id": f"own_{k + 1:03d}", "owner_name": str(names[k]),
                           "team": team, "region": region})
            k += 1
    return owners


def owner_traits(rng, owners):
    """Optimism shifts stated probabilities; skill scales true win rates."""
    for o in owners:
        o["optimism"] = rng.normal(0.0, 0.05)
        o["skill"] = float(np.exp(rng.normal(0.0, 0.12)))


def draw_stage_and_prob(rng, owner, n):
    stage_names = list(STAGES)
    idx = rng.choice(len(stage_names), size=n, p=STAGE_WEIGHTS)
    means = np.array([STAGES[stage_names[i]] for i in idx])
    stated = means + owner["optimism"] + rng.normal(0.0, 0.06, size=n)
    stated = np.round(np.clip(stated, 0.02, 0.97), 2)
    return [stage_names[i] for i in idx], stated


def draw_amounts(rng, n, allow_negative):
    amounts = rng.lognormal(np.log(AMOUNT_MEDIAN), AMOUNT_SIGMA, size=n)
    amounts = np.clip(amounts, 1_000, AMOUNT_CAP)
    if allow_negative:
        credit = rng.random(n) < NEGATIVE_SHARE
        amounts[credit] = -rng.uniform(500, 20_000, size=credit.sum())
    return [round_to(a, 100) for a in amounts]


def random_dates(rng, start, days, n):
    offsets = rng.integers(0, days, size=n)
    return [(start + dt.timedelta(days=int(d))).isoformat() for d in offsets]


def draw_open_deals(rng, owner, start, days):
    """One owner's open deals: how many, stages, stated probabilities, amounts, close dates."""
    n = int(rng.integers(15, 61))
    stages, probs = draw_stage_and_prob(rng, owner, n)
    amounts = draw_amounts(rng, n, allow_negative=True)
    return n, stages, probs, amounts, random_dates(rng, start, days, n)


def make_pipeline(rng, owners):
    rows = []
    for o in owners:
        n, stages, probs, amounts, closes = draw_open_deals(rng, o, Q1_START, Q1_DAYS)
        products = rng.choice(PRODUCT_LINES, size=n, p=PRODUCT_WEIGHTS)
        for s, p, a, c, pl in zip(stages, probs, amounts, closes, products):
            rows.append([None, o["owner_id"], o["region"], s, a, float(p), c, str(pl)])
    order = rng.permutation(len(rows))  # interleave owners
    rows = [rows[i] for i in order]
    for i, r in enumerate(rows):
        r[0] = f"dl_{i + 1:05d}"
    return rows


def make_quota_bands(rng, owners, pipeline, period="2027-Q1"):
    """Target near each owner's expected pipeline value, with spread."""
    expected = {o["owner_id"]: 0.0 for o in owners}
    for r in pipeline:
        expected[r[1]] += r[4] * r[5]
    rows = []
    for o in owners:
        ev = max(expected[o["owner_id"]], 20_000)
        target = round_to(ev / np.exp(rng.normal(0.0, 0.2)), 1_000)
        floor = round_to(target * rng.uniform(0.55, 0.75), 1_000)
        stretch = round_to(target * rng.uniform(1.25, 1.55), 1_000)
        rows.append([o["owner_id"], period, floor, target, stretch])
    return rows


def true_win_rate(stages, stated, owner):
    factor = np.array([CALIBRATION[s] for s in stages])
    return np.clip(stated * factor * owner["skill"], 0.01, 0.98)


def make_closed_deals(rng, owners):
    rows = []
    for o in owners:
        n = int(rng.integers(80, 151))
        stages, stated = draw_stage_and_prob(rng, o, n)
        won = (rng.random(n) < true_win_rate(stages, stated, o)).astype(int)
        amounts = draw_amounts(rng, n, allow_negative=False)
        closed = random_dates(rng, HIST_START, HIST_DAYS, n)
        for s, p, w, a, c in zip(stages, stated, won, amounts, closed):
            rows.append([None, o["owner_id"], s, float(p), int(w), a, c])
    rows.sort(key=lambda r: (r[6], r[1]))
    for i, r in enumerate(rows):
        r[0] = f"cd_{i + 1:05d}"
    return rows


#: The weekly history draws from its own random stream, so the other seed files stay the same.
WEEKS_SEED = 20261026
WEEK_DATES = [dt.date(2026, 10, 26) + dt.timedelta(weeks=k) for k in range(6)]  # Mondays
STAGE_NAMES = list(STAGES)
#: Deals that were open in an earlier week and are gone today get ids from here on
#: (today's pipeline uses dl_00001 .. dl_02189).
GONE_FIRST_ID = 90_001
#: How each kind of owner's pipeline moved in one week, read backwards: the chance that one
#: of today's deals was created during the week, that it sat one stage lower at the start of
#: it, that its amount was different; and the mean number of deals open at the start of the
#: week that were lost or pushed out of the quarter during it.
WEEK_MOVES = {
    "improving": {"created": 0.04, "advanced": 0.15, "resized": 0.06, "gone": 0.3},
    "steady":    {"created": 0.02, "advanced": 0.04, "resized": 0.06, "gone": 0.9},
    "declining": {"created": 0.01, "advanced": 0.02, "resized": 0.06, "gone": 2.0},
}
TRENDING_OWNERS = 8  # owners improving, and as many declining; the others are steady


def owner_trends(rng, owners):
    """Which owners' odds rose over the weeks, fell, or stayed about level."""
    order = rng.permutation(len(owners))
    trend = {}
    for rank, i in enumerate(order):
        trend[owners[i]["owner_id"]] = ("improving" if rank < TRENDING_OWNERS else
                                        "declining" if rank < 2 * TRENDING_OWNERS else "steady")
    return trend


def week_before(rng, deals, owners, trend, next_id):
    """The open deals a week before ``deals``, and the next free id for a gone deal."""
    earlier = []
    for deal in deals:
        moves = WEEK_MOVES[trend[deal[1]]]
        if rng.random() < moves["created"]:
            continue
        deal = list(deal)
        k = STAGE_NAMES.index(deal[3])
        if k > 0 and rng.random() < moves["advanced"]:
            # one stage back, the seller's probability lower by the gap of the stage means
            gap = STAGES[STAGE_NAMES[k]] - STAGES[STAGE_NAMES[k - 1]]
            deal[3] = STAGE_NAMES[k - 1]
            deal[5] = float(np.round(np.clip(deal[5] - gap, 0.02, 0.97), 2))
        if rng.random() < moves["resized"]:
            deal[4] = round_to(deal[4] * rng.uniform(0.8, 1.25), 100)
        earlier.append(deal)
    for o in owners:
        n = int(rng.poisson(WEEK_MOVES[trend[o["owner_id"]]]["gone"]))
        if not n:
            continue
        stages, probs = draw_stage_and_prob(rng, o, n)
        amounts = draw_amounts(rng, n, allow_negative=False)
        closes = random_dates(rng, Q1_START, Q1_DAYS, n)
        products = rng.choice(PRODUCT_LINES, size=n, p=PRODUCT_WEIGHTS)
        for s, p, a, c, pl in zip(stages, probs, amounts, closes, products):
            earlier.append([f"dl_{next_id:05d}", o["owner_id"], o["region"], s, a, float(p),
                            c, str(pl)])
            next_id += 1
    earlier.sort(key=lambda deal: deal[0])
    return earlier, next_id


def make_pipeline_weeks(pipeline, owners):
    """The open pipeline on each of the six Mondays of ``WEEK_DATES``, as_of first.

    The last Monday's rows are ``pipeline`` itself, row for row. Walking back a week at a
    time (``week_before``): some of today's deals were not created yet, some sat a stage
    lower or at another amount, and deals lost or pushed out of the quarter since were
    still open (drawn like the pipeline's own deals). Improving owners advanced many deals
    and lost few, so their odds rose over the weeks; declining owners lost many.
    """
    rng = np.random.default_rng(WEEKS_SEED)
    trend = owner_trends(rng, owners)
    weeks = [[list(deal) for deal in pipeline]]
    next_id = GONE_FIRST_ID
    for _ in WEEK_DATES[:-1]:
        earlier, next_id = week_before(rng, weeks[0], owners, trend, next_id)
        weeks.insert(0, earlier)
    return [[day.isoformat(), *deal] for day, deals in zip(WEEK_DATES, weeks) for deal in deals]


#: The past quarters draw from their own random stream, so the other seed files stay the same.
PAST_SEED = 20260102
PAST_QUARTERS = [("2026-Q1", dt.date(2026, 1, 1), 90), ("2026-Q2", dt.date(2026, 4, 1), 91),
                 ("2026-Q3", dt.date(2026, 7, 1), 92), ("2026-Q4", dt.date(2026, 10, 1), 92)]
#: The chance that a deal open on a quarter's first day slips out of it (neither won nor lost).
SLIP = {"scout": 0.20, "scope": 0.15, "pitch": 0.10, "terms": 0.07, "handshake": 0.04}
#: In this region a shared shock each quarter moves its deals together (one-factor Gaussian
#: copula with correlation PAST_SHOCK_RHO); elsewhere deals are won independently.
SHOCK_REGION = "Frostmere Heights"
PAST_SHOCK_RHO = 0.3
PAST_COLUMNS = ["period", "period_start", "deal_id", "owner_id", "region", "stage", "amount",
                "win_prob", "expected_close", "result", "closed_on"]


def copula_wins(rng, rate, shock, rho):
    """Which deals are won: deal i when sqrt(rho) shock + sqrt(1 - rho) e_i < Phi^-1(rate_i),
    with e_i standard normal. Each deal keeps its win rate; rho > 0 makes them win together
    (rho = 0: independent draws)."""
    noise = rng.standard_normal(len(rate))
    return np.sqrt(rho) * shock + np.sqrt(1.0 - rho) * noise < ndtri(rate)


def make_past_quarters(owners):
    """Each 2026 quarter's open deals per owner at its first day, what they did, and quotas.

    Deals are drawn like pipeline.csv's; a deal first slips out of the quarter with the
    chance ``SLIP`` of its stage, otherwise it closes in it, won with the true win rate of
    closed_deals (``true_win_rate``: optimistic sellers late in the cycle, each owner's
    skill), through ``copula_wins`` with the quarter's shock in ``SHOCK_REGION``.
    """
    rng = np.random.default_rng(PAST_SEED)
    deals, quotas = [], []
    for period, start, days in PAST_QUARTERS:
        shock = rng.standard_normal()
        quarter = []
        for o in owners:
            n, stages, stated, amounts, closes = draw_open_deals(rng, o, start, days)
            closed_on = random_dates(rng, start, days, n)
            slipped = rng.random(n) < np.array([SLIP[s] for s in stages])
            rho = PAST_SHOCK_RHO if o["region"] == SHOCK_REGION else 0.0
            won = copula_wins(rng, true_win_rate(stages, stated, o), shock, rho)
            for i in range(n):
                result = "slipped" if slipped[i] else "won" if won[i] else "lost"
                quarter.append([None, o["owner_id"], o["region"], stages[i], amounts[i],
                                float(stated[i]), closes[i], result,
                                "" if slipped[i] else closed_on[i]])
        quotas += make_quota_bands(rng, owners, quarter, period)
        deals += [[period, start.isoformat(), *deal] for deal in quarter]
    for i, deal in enumerate(deals):
        deal[2] = f"pd_{i + 1:05d}"
    return deals, quotas


PIPELINE_COLUMNS = ["deal_id", "owner_id", "region", "stage", "amount", "win_prob",
                    "expected_close", "product_line"]


def make_seed_files():
    """Every seed file's header and rows, by file name (what ``main`` writes)."""
    rng = np.random.default_rng(SEED)
    owners = make_owners(rng)
    owner_traits(rng, owners)
    pipeline = make_pipeline(rng, owners)
    bands = make_quota_bands(rng, owners, pipeline)
    closed = make_closed_deals(rng, owners)
    past = make_past_quarters(owners)
    return {
        "owners.csv": (["owner_id", "owner_name", "team", "region"],
                       [[o["owner_id"], o["owner_name"], o["team"], o["region"]] for o in owners]),
        "pipeline.csv": (PIPELINE_COLUMNS, pipeline),
        "quota_bands.csv": (["owner_id", "period", "floor", "target", "stretch"], bands),
        "closed_deals.csv": (["deal_id", "owner_id", "stage_at_snapshot", "stated_prob",
                              "won", "amount", "closed_on"], closed),
        # after the files above: its stream is its own, and it copies today's pipeline
        "pipeline_weeks.csv": (["as_of", *PIPELINE_COLUMNS],
                               make_pipeline_weeks(pipeline, owners)),
        # their own stream too: the four quarters before the pipeline's
        "past_deals.csv": (PAST_COLUMNS, past[0]),
        "past_quotas.csv": (["owner_id", "period", "floor", "target", "stretch"], past[1]),
    }


def main():
    for name, (header, rows) in make_seed_files().items():
        write_csv(name, header, rows)


if __name__ == "__main__":
    main()
