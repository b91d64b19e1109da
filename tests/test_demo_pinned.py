"""The demo's stored outcomes are pinned: a speed-up that keeps the method keeps the bits.

The hash is of every owner's, region's and the company's outcome_dist on the demo pipeline
(origin, step, mass, trials, rounding; doubles as their IEEE bytes), taken on the code before
the second speed round (issue 17). A change of method that moves these numbers must say so
and re-pin the hash in the same commit.
"""

from __future__ import annotations

import hashlib
import struct

PINNED = "af1e6075d39430f46a65f0d9e6e8ce87f2d1621879a8b19d9a2a47d394c16b7a"

QUERY = """
SELECT coalesce(owner_id, region, 'all') AS who, outcome_dist(amount, win_prob) AS o
FROM pipeline
GROUP BY GROUPING SETS ((owner_id), (region), ())
ORDER BY grouping(owner_id, region), who
"""


def outcome_digest(con) -> str:
    h = hashlib.sha256()
    for who, o in con.execute(QUERY).fetchall():
        h.update(who.encode())
        h.update(struct.pack("<ddqd", o["origin"], o["step"], o["trials"], o["rounding"]))
        h.update(struct.pack(f"<{len(o['mass'])}d", *o["mass"]))
    return h.hexdigest()


def test_the_demo_outcomes_are_the_pinned_bits(demo_con):
    assert outcome_digest(demo_con) == PINNED


def test_the_digest_sees_one_amount_change(demo_con):
    con = demo_con
    # the check can fail: one deal's amount moved by 100 (amounts are whole numbers) changes it
    con.execute("CREATE TEMP TABLE saved AS SELECT * FROM pipeline")
    try:
        con.execute("UPDATE pipeline SET amount = amount + 100 WHERE deal_id = "
                    "(SELECT min(deal_id) FROM pipeline)")
        assert outcome_digest(con) != PINNED
    finally:
        con.execute("CREATE OR REPLACE TABLE pipeline AS SELECT * FROM saved")
