"""Pseudonymisation (HMAC-SHA256, RFC 2104 / RFC 4231) and age computation."""

from __future__ import annotations

import hashlib
import hmac
import multiprocessing
import stat
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from beamaudit.ingest import IngestError, Pseudonymiser, load_or_create_key
from beamaudit.ingest.pseudonym import age_from_age_string, age_from_dates


def test_hmac_sha256_matches_rfc_4231_test_case_2() -> None:
    # RFC 4231 section 4.3: key "Jefe", data "what do ya want for nothing?"
    expected = "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    assert (
        hmac.new(b"Jefe", b"what do ya want for nothing?", hashlib.sha256).hexdigest() == expected
    )


def test_pseudonym_is_keyed_truncated_and_ignores_padding() -> None:
    key = b"0123456789abcdef0123456789abcdef"
    p = Pseudonymiser(key)
    expected = hmac.new(key, b"\x1fPAT-42", hashlib.sha256).hexdigest()[:32]
    assert p.pseudonymise("PAT-42") == expected
    assert p.pseudonymise(" PAT-42 ") == expected
    assert p.pseudonymise("PAT-42", "HOSP-A") != expected
    assert Pseudonymiser(b"x" * 32).pseudonymise("PAT-42") != expected
    assert "PAT-42" not in repr(p) and key.decode() not in repr(p)


def test_short_key_and_empty_id_are_refused() -> None:
    with pytest.raises(IngestError, match="at least 16 bytes"):
        Pseudonymiser(b"short")
    with pytest.raises(IngestError, match="empty Patient ID"):
        Pseudonymiser(b"k" * 32).pseudonymise("   ")


def test_key_file_created_once_with_owner_only_permissions(tmp_path: Path) -> None:
    path = tmp_path / "secret.key"
    key = load_or_create_key(path)
    assert len(key) == 32
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert load_or_create_key(path) == key


def test_truncated_key_file_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "bad.key"
    path.write_bytes(b"abc")
    with pytest.raises(IngestError, match="holds 3 bytes") as info:
        load_or_create_key(path)
    assert info.value.code == "bad_key"


@pytest.mark.parametrize(
    ("text", "years"),
    [
        ("047Y", 47.0),
        ("006M", 0.5),
        ("052W", 52 * 7 / 365.2425),
        ("030D", 30 / 365.2425),
        ("22Y", 22.0),
    ],
)
def test_age_strings(text: str, years: float) -> None:
    # PS3.5 Table 6.2-1 AS: nnnD, nnnW, nnnM, nnnY (2-digit form accepted when reading)
    assert age_from_age_string(text) == pytest.approx(years)


def test_zero_age_is_not_recorded_and_garbage_is_refused() -> None:
    assert age_from_age_string("000Y") is None
    with pytest.raises(IngestError, match="not nnnD/W/M/Y"):
        age_from_age_string("forty")


def test_age_from_dates_on_birthdays_and_leap_day() -> None:
    assert age_from_dates(date(1980, 6, 1), date(2020, 6, 1)) == 40.0
    assert age_from_dates(date(2000, 2, 29), date(2001, 3, 1)) == 1.0  # birthday on 1 March
    assert 0.99 < age_from_dates(date(2000, 2, 29), date(2001, 2, 28)) < 1.0
    with pytest.raises(IngestError, match="after the study date"):
        age_from_dates(date(2020, 1, 2), date(2020, 1, 1))


@given(
    birth=st.dates(min_value=date(1900, 1, 1), max_value=date(2020, 12, 31)),
    days=st.integers(0, 40000),
)
def test_age_grows_with_time_and_counts_completed_years(birth: date, days: int) -> None:
    at = birth + timedelta(days=days)
    age = age_from_dates(birth, at)
    completed = at.year - birth.year - ((at.month, at.day) < (birth.month, birth.day))
    assert int(age) == completed or (birth.month, birth.day) == (2, 29)
    assert age_from_dates(birth, at + timedelta(days=1)) > age


@given(st.text(min_size=1, max_size=64).filter(lambda s: s.strip()))
def test_pseudonym_is_deterministic_hex(patient_id: str) -> None:
    p = Pseudonymiser(b"k" * 32)
    value = p.pseudonymise(patient_id)
    assert value == p.pseudonymise(patient_id)
    assert len(value) == 32 and all(c in "0123456789abcdef" for c in value)


def _load_after(barrier: Any, path: Path, out: Any) -> None:
    barrier.wait()
    try:
        out.put(load_or_create_key(path))
    except IngestError as exc:
        out.put(str(exc))


def test_processes_starting_together_share_one_whole_key(tmp_path: Path) -> None:
    # two listeners started at once on a fresh install both create the key on first use: each
    # must read the whole key the first one wrote, never a file still being written (seen as
    # "key file holds 0 bytes" before the key was written whole and linked into place)
    context = multiprocessing.get_context("fork")
    for attempt in range(12):
        path = tmp_path / f"race-{attempt}.key"
        n = 6
        barrier, out = context.Barrier(n), context.Queue()
        workers = [context.Process(target=_load_after, args=(barrier, path, out)) for _ in range(n)]
        for w in workers:
            w.start()
        keys = [out.get(timeout=30) for _ in workers]
        for w in workers:
            w.join(timeout=30)
        assert all(isinstance(k, bytes) for k in keys), [
            k for k in keys if not isinstance(k, bytes)
        ]
        assert len(set(keys)) == 1 and len(keys[0]) == 32
        assert path.read_bytes() == keys[0]
        assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        f"race-{i}.key" for i in range(12)
    )  # no temporary file left behind


def test_key_is_created_in_place_where_hard_links_are_refused(tmp_path: Path, monkeypatch) -> None:
    # some network and FUSE file systems refuse hard links (EPERM): the key file is then
    # created exclusively and written in place, with the same permissions and no file left over
    import beamaudit.ingest.pseudonym as pseudonym

    def refuse(*args: object) -> None:
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(pseudonym.os, "link", refuse)
    path = tmp_path / "nolinks.key"
    key = load_or_create_key(path)
    assert len(key) == 32 and path.read_bytes() == key
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert load_or_create_key(path) == key
    assert [p.name for p in tmp_path.iterdir()] == ["nolinks.key"]
