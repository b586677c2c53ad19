"""Exam-type mapping in linear time: a hostile header cannot stall ingest (SECURITY.md).

Any sender chooses its descriptions. With a backtracking engine the shipped rule
``re:\\b(chest|thorax)\\b.*\\b(lat|lateral)\\b`` searched in ``"chest " * 8000`` costs time
quadratic in the text (68 s of CPU for one header, measured before this change). The bounds
below are generous (several seconds for what now takes milliseconds): they catch a return to
backtracking, not a slow machine.
"""

from __future__ import annotations

import io
import re
import time

import pandas as pd
import pytest

from beamaudit.api.review.examtypes import (
    EVENT_FIELDS,
    MAX_MATCHED_CHARS,
    compile_pattern,
    load_default_rules,
    map_events,
    read_rules_csv,
)

GENEROUS_BOUND_S = 10.0


def _events(text: str, n: int = 3) -> pd.DataFrame:
    rows = []
    for i in range(n):
        row: dict[str, object] = {f: None for f in EVENT_FIELDS}
        row.update(
            modality=["DX", "CT", "XA"][i % 3],
            study_description=text + str(i),
            series_description=text,
            protocol_name=text,
        )
        rows.append(row)
    return pd.DataFrame(rows)


@pytest.mark.parametrize("text", ["chest " * 8000, "ab " * 20000 + "!", "pa " * 16000])
def test_shipped_rules_on_long_adversarial_descriptions(text: str) -> None:
    rules = load_default_rules()
    start = time.process_time()
    mapped = map_events(_events(text), rules)
    assert time.process_time() - start < GENEROUS_BOUND_S
    assert len(mapped) == 3


def test_a_physicist_s_catastrophic_pattern_runs_in_linear_time_too() -> None:
    # (a+)+$ backtracks exponentially in Python's re on "aaa...b" (common practice: ReDoS)
    rules = read_rules_csv(
        io.StringIO(
            "priority,exam_type,any_description\n1,chest_pa,re:^(a+)+$\n2,chest_ap,re:(x|x)*y\n"
        )
    )
    start = time.process_time()
    mapped = map_events(_events("a" * 40 + "b"), rules)
    mapped_x = map_events(_events("x" * 5000), rules)
    assert time.process_time() - start < GENEROUS_BOUND_S
    assert mapped.isna().all() and mapped_x.isna().all()


def test_only_the_first_characters_of_a_value_are_matched() -> None:
    pattern = compile_pattern("re:needle")
    assert pattern.search("x" * (MAX_MATCHED_CHARS - 6) + "needle")
    assert not pattern.search("x" * MAX_MATCHED_CHARS + "needle")


def test_back_references_are_refused_with_the_reason() -> None:
    with pytest.raises(re.error, match="escape"):
        compile_pattern(r"re:(chest)\1")


@pytest.mark.parametrize(
    ("glob", "value", "matches"),
    [
        ("CR|DX", "dx", True),
        ("LAT*", "lateral", True),
        ("*LATERAL*", "left lateral view", True),
        ("L?", "LL", True),
        ("L?", "LLL", False),
        ("[!a]b", "cb", True),
        ("[!a]b", "ab", False),
        ("[ab]x", "Bx", True),
        ("a[", "a[", True),
        ("a.b", "axb", False),  # a dot is a dot in a glob
    ],
)
def test_globs_mean_what_fnmatch_says(glob: str, value: str, matches: bool) -> None:
    import fnmatch

    assert bool(compile_pattern(glob).search(value)) is matches
    if "|" not in glob:  # | (alternatives) is ours; the rest is Python's fnmatch, which agrees
        assert fnmatch.fnmatch(value.lower(), glob.lower()) is matches
