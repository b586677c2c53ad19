"""A bounded fuzz run of the reader: mutated valid files give a ParseResult or an IngestError.

Seeds are valid objects: an invented DX header, a CT image and a CR image shipped with pydicom and
pydicom-data (CT_small.dcm, RG1_UNCI.dcm), and a fluoroscopy and a CT dose report built to
PS3.16. A seeded mutation loop (bit flips, byte runs overwritten, bytes inserted or deleted,
chunks duplicated, cuts) makes 300 files from them; hypothesis adds arbitrary data sets behind a
valid file meta. Nothing else may come out: no other exception, no hang.
"""

from __future__ import annotations

import random
import time

import pytest
from corpus import DX_PRESENTATION, dx_header, encode, part10
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydicom.data import get_testdata_file
from pydicom.uid import ExplicitVRLittleEndian, ImplicitVRLittleEndian

from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import ParseResult
from beamaudit.ingest.pseudonym import Pseudonymiser
from beamaudit.ingest.reader import read_bytes

PSEUDONYMISER = Pseudonymiser(b"fuzz-key-fuzz-key-fuzz-key-32byt")
N_MUTANTS = 300
SLOWEST_S = 2.0  # one file; a mutant that takes longer is a hang in the making


def _seeds() -> list[bytes]:
    import rdsr_builders as rb  # tests/ingest, on sys.path through tests/conftest.py

    seeds = [encode(dx_header("fuzz-seed"))]
    for name in ("CT_small.dcm", "RG1_UNCI.dcm"):
        path = get_testdata_file(name, download=False)
        assert path is not None, f"{name} is not installed"
        with open(path, "rb") as fh:
            seeds.append(fh.read(200_000))  # headers only: the pixel data is never read anyway
    seeds.append(encode(rb.fluoroscopy_report()))
    seeds.append(encode(rb.ct_report()))
    return seeds


def _mutate(data: bytes, rng: random.Random) -> bytes:
    buf = bytearray(data)
    for _ in range(rng.randint(1, 6)):
        if not buf:
            break
        pos = rng.randrange(len(buf))
        op = rng.randrange(6)
        if op == 0:  # flip a bit
            buf[pos] ^= 1 << rng.randrange(8)
        elif op == 1:  # overwrite a run with random bytes, or with 0xFF (huge lengths)
            run = rng.randint(1, 8)
            fill = rng.randbytes(run) if rng.random() < 0.5 else b"\xff" * run
            buf[pos : pos + run] = fill
        elif op == 2:  # insert bytes
            buf[pos:pos] = rng.randbytes(rng.randint(1, 16))
        elif op == 3:  # delete bytes
            del buf[pos : pos + rng.randint(1, 16)]
        elif op == 4:  # duplicate a chunk
            chunk = buf[pos : pos + rng.randint(4, 64)]
            buf[pos:pos] = chunk
        else:  # cut
            del buf[pos:]
    return bytes(buf)


def _read(data: bytes, source: str) -> ParseResult | IngestError:
    try:
        return read_bytes(data, pseudonymiser=PSEUDONYMISER, source=source)
    except IngestError as exc:
        return exc


@pytest.mark.slow
def test_mutated_files_give_a_result_or_an_ingest_error() -> None:
    rng = random.Random(20240305)
    seeds = _seeds()
    outcomes: dict[str, int] = {}
    for i in range(N_MUTANTS):
        data = _mutate(seeds[i % len(seeds)], rng)
        start = time.perf_counter()
        try:
            outcome = _read(data, f"mutant-{i}")
        except Exception as exc:  # the point of the test: anything else is a bug
            path = f"/tmp/beamaudit-fuzz-mutant-{i}.dcm"
            with open(path, "wb") as fh:
                fh.write(data)
            raise AssertionError(f"mutant {i} (kept in {path}) raised {exc!r}") from exc
        assert time.perf_counter() - start < SLOWEST_S, f"mutant {i} took too long"
        key = "parsed" if isinstance(outcome, ParseResult) else outcome.code
        outcomes[key] = outcomes.get(key, 0) + 1
        if isinstance(outcome, IngestError):
            assert outcome.reason and outcome.source == f"mutant-{i}"
    # the loop reached both sides: damage the reader tolerates and damage it refuses
    assert outcomes.get("parsed", 0) > 0
    assert sum(n for k, n in outcomes.items() if k != "parsed") > 0


_TAIL = st.binary(min_size=0, max_size=600)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(body=_TAIL, implicit=st.booleans())
def test_any_bytes_behind_a_valid_file_meta_give_a_result_or_an_ingest_error(
    body: bytes, implicit: bool
) -> None:
    syntax = ImplicitVRLittleEndian if implicit else ExplicitVRLittleEndian
    data = part10(body, sop_class=DX_PRESENTATION, sop_instance="1.2.3.4", transfer_syntax=syntax)
    _read(data, "hypothesis")


@settings(max_examples=100, deadline=None)
@given(head=st.binary(min_size=0, max_size=400), keep=st.integers(min_value=0, max_value=4000))
def test_a_valid_header_behind_garbage_or_cut_anywhere_never_crashes(
    head: bytes, keep: int
) -> None:
    good = encode(dx_header("fuzz-cut"))
    _read(head + good[:keep], "hypothesis")
