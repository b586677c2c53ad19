"""Columns packed by PostgreSQL into one value each (api/runs/packed_columns.py): the unpacking.

The packed forms are PostgreSQL's binary send formats: ``float8send`` writes an IEEE 754 double
big-endian and ``int4send`` a 32-bit integer big-endian (PostgreSQL manual, *COPY*, binary format,
and the send functions of the built-in types); the texts are their bytes in the client's encoding.
The store tests (tests/api/test_reviews.py) hold the whole read to the plain one on PostgreSQL.
"""

from __future__ import annotations

import struct

import numpy as np

from beamaudit.api.runs import reviews
from beamaudit.api.runs.packed_columns import unpacked_numbers, unpacked_texts


def test_numbers_unpack_from_big_endian_doubles() -> None:
    values = [1.5, -0.0, float("nan"), 1e300, 2.0**53]
    packed = b"".join(struct.pack(">d", v) for v in values)
    out = unpacked_numbers(packed)
    assert out.dtype == np.float64 and out.dtype.byteorder in ("=", "<", "|")
    np.testing.assert_array_equal(out, np.array(values))


def test_a_statement_without_rows_unpacks_to_nothing() -> None:
    # string_agg over no row is NULL
    assert len(unpacked_numbers(None)) == 0
    texts = unpacked_texts(None, None)
    assert texts is not None and len(texts) == 0


def test_texts_unpack_by_their_lengths_in_bytes() -> None:
    words = ["chest_pa", "", "Schädel–Hirn", "漢字"]
    data = "".join(words).encode()
    lengths = b"".join(struct.pack(">i", len(w.encode())) for w in words)
    out = unpacked_texts(lengths, data)
    assert out is not None and out.to_pylist() == words


def test_lengths_that_do_not_add_up_refuse_the_texts() -> None:
    # lengths counted in another encoding than the bytes came in: not guessed at
    lengths = struct.pack(">i", 5)
    assert unpacked_texts(lengths, "Schädel".encode()) is None


def test_the_sparse_sources_are_what_the_sparse_columns_are_made_of() -> None:
    # an event with none of the sparse sources must have no sparse value: every stored column a
    # sparse column reads is a source, or one that only chooses (event type, modality)
    made_of = {c.key for c in reviews._sparse_stored_columns()}
    sources = {c.key for c in reviews._SPARSE_SOURCES}
    assert made_of - sources == {"event_type", "modality"}
    assert sources <= made_of
