"""The review core's input table: key columns factorised as pandas would factorise them."""

from __future__ import annotations

import numpy as np
import pandas as pd

from beamaudit.api.review.events import _sorted_categories


def test_sorted_categories_equal_factorising_the_texts_again() -> None:
    # categories unused by any row, missing values, unsorted categories: the result must be
    # what pd.Categorical of the rows' texts gives
    rng = np.random.default_rng(3)
    categories = ["ROOM 9", "ROOM 1", "unused", "ROOM 10", "Room 2", "also unused"]
    codes = rng.choice([-1, 0, 1, 3, 4], size=5000)
    values = pd.Categorical.from_codes(codes, categories=categories)
    expected = pd.Categorical(pd.Series(values).astype(object))
    got = _sorted_categories(values)
    assert list(got.categories) == list(expected.categories)
    assert np.array_equal(got.codes, expected.codes)
    empty = _sorted_categories(pd.Categorical.from_codes([-1, -1], categories=["a"]))
    assert list(empty.categories) == [] and list(empty.codes) == [-1, -1]
