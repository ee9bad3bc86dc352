"""Yield per station, lot and day: each part once, with the attempt that stands."""

from __future__ import annotations

import numpy as np
import pandas as pd

from sequencer.store.yields import final_mask, yield_by

ROWS = [  # station, lot, device, pass, verdict, bin_class, standing, measured
    ("P1", "FK2611-07", "0001", 1, "pass", "pass", None, "2026-05-04T06:00:00+00:00"),
    ("P1", "FK2611-07", "0002", 1, "fail", "fail", 1, "2026-05-04T06:01:00+00:00"),
    ("P1", "FK2611-07", "0002", 2, "pass", "pass", 0, "2026-05-04T06:02:00+00:00"),  # first stands
    ("P2", "FK2611-07", "0003", 1, "fail", "fail", 1, "2026-05-04T23:59:00+00:00"),
    ("P2", "FK2611-07", "0003", 2, "pass", "pass", 1, "2026-05-05T00:01:00+00:00"),
    ("P2", "FK2611-08", "0001", 1, "guard-band", "fail", None, "2026-05-05T08:00:00+00:00"),
]
COLUMNS = ["station", "lot", "device", "round", "verdict", "bin_class", "standing", "measured"]


def frame() -> pd.DataFrame:
    return pd.DataFrame(ROWS, columns=COLUMNS).assign(run_started="2026-05-04T05:00:00+00:00")


def test_each_part_counts_once_with_the_attempt_that_stood():
    rows = frame()
    final = rows[final_mask(rows)]
    assert list(final.index) == [0, 1, 4, 5]  # 0002 keeps attempt 1; 0003 takes attempt 2


def test_yield_per_station_lot_and_day():
    by_station = yield_by(frame(), "station").set_index("station")
    assert by_station.loc["P1", ["parts", "tests", "pass", "fail", "retested"]].tolist() == [
        2, 3, 1, 1, 1,
    ]  # fmt: skip
    assert by_station.loc["P1", "yield"] == 0.5
    assert by_station.loc["P2", "first-test yield"] == 0.0
    assert by_station.loc["P2", "yield"] == 0.5  # 0003 passed on retest, FK2611-08-0001 did not
    by_lot = yield_by(frame(), "lot").set_index("lot")
    assert by_lot.loc["FK2611-07", "parts"] == 3 and by_lot.loc["FK2611-08", "guard-band"] == 1
    by_day = yield_by(frame(), "day").set_index("day")
    assert by_day["parts"].to_dict() == {"2026-05-04": 2, "2026-05-05": 2}  # the result's day


def test_a_tray_run_without_bins_or_standing_counts_by_verdict():
    rows = frame().drop(columns=["standing", "bin_class"])
    by_lot = yield_by(rows, "lot").set_index("lot")
    assert by_lot.loc["FK2611-07", "yield"] == 1.0  # every part's last row passed
    assert yield_by(rows.iloc[0:0], "lot").empty


def test_the_final_rows_are_those_the_isin_rule_gives_on_a_large_random_table():
    """The part none of whose rows stood is found by grouping (fast on pyarrow text); the rule
    is unchanged: its last row is its result."""
    rng = np.random.default_rng(5)
    n = 5000
    frame = pd.DataFrame({
        "lot": rng.choice(["A", "B", None], n),
        "device": pd.array(rng.integers(0, 900, n).astype(str), dtype="string[pyarrow]"),
        "standing": rng.choice([1.0, 0.0, np.nan], n, p=[0.2, 0.7, 0.1]),
    })  # fmt: skip
    key = frame["lot"].fillna("").astype(str) + "\0" + frame["device"].astype(str)
    stood = frame["standing"].isna() | (frame["standing"] != 0)
    expected = pd.Series(False, index=frame.index)
    expected[key[stood].drop_duplicates(keep="last").index] = True
    never = ~key.isin(key[stood])
    expected[key[never].drop_duplicates(keep="last").index] = True
    assert never.any()  # the table has such parts
    pd.testing.assert_series_equal(final_mask(frame), expected)
