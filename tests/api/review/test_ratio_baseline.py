"""A room's usual ratio (``beamaudit.api.review.ratio_baseline``) on series worked by hand.

The rule (the median of the preceding ``months`` judged months, at least ``min_months`` of them)
is the project's own choice; the expected baselines are medians computed by hand.
"""

from __future__ import annotations

import math

import pandas as pd

from beamaudit.api.review.ratio_baseline import ratio_baselines


def _series(room: str, medians: list[float]) -> pd.DataFrame:
    return pd.DataFrame(
        {"room": room, "month": [f"2025-{i + 1:02d}" for i in range(len(medians))],
         "median": medians}
    )  # fmt: skip


def test_the_baseline_is_the_median_of_the_preceding_months_in_a_window() -> None:
    out = ratio_baselines(
        _series("A", [1.0, 1.2, 1.1, 1.5, 1.6, 1.7]), keys=["room"], months=3, min_months=2
    )
    got = out["baseline"].tolist()
    assert all(math.isnan(x) for x in got[:2])  # fewer than two months before
    # Mar: median(1.0, 1.2); Apr: median(1.0, 1.2, 1.1); May: median(1.2, 1.1, 1.5);
    # Jun: median(1.1, 1.5, 1.6)
    assert got[2:] == [1.1, 1.1, 1.2, 1.5]
    assert out["baseline_months"].tolist() == [0, 1, 2, 3, 3, 3]


def test_rooms_have_baselines_of_their_own_whatever_the_row_order() -> None:
    table = pd.concat([_series("B", [0.8, 0.8, 0.8, 0.9]), _series("A", [1.1, 1.1, 1.1, 1.6])])
    out = ratio_baselines(table.iloc[::-1], keys=["room"], months=6, min_months=3)
    last = out.groupby("room")["baseline"].last()
    assert last.to_dict() == {"A": 1.1, "B": 0.8}


def test_an_empty_series_has_no_baselines() -> None:
    out = ratio_baselines(_series("A", []), keys=["room"], months=6, min_months=3)
    assert len(out) == 0 and {"baseline", "baseline_months"} <= set(out.columns)
