"""Property-based tests (hypothesis) on unit conversions and on the pipeline's fingerprint.

Units (ingest/units.py): conversions within a dimension compose (a->b->c equals a->c), are
linear (k*v converts to k*convert(v)), keep the sign, and agree with the SI prefixes as powers of
ten (BIPM SI Brochure, 9th ed., Table 7); across dimensions, or with an unknown unit, they are
refused. Fingerprint (api/intake/pipeline.py): the same exposures give the same fingerprint whatever
the transfer syntax they came in, the provenance and the notes; any change of an exposure value
changes it.
"""

from __future__ import annotations

import io
import math
from collections import defaultdict

import pytest
from corpus import dx_header
from hypothesis import given, settings
from hypothesis import strategies as st
from pydicom import dcmread
from pydicom.uid import ExplicitVRBigEndian, ExplicitVRLittleEndian, ImplicitVRLittleEndian

from beamaudit.api.intake.pipeline import printable, result_fingerprint
from beamaudit.ingest.pseudonym import Pseudonymiser
from beamaudit.ingest.reader import read_bytes, read_dataset
from beamaudit.ingest.units import UnitError, convert, dimension_of, known_units

PSEUDONYMISER = Pseudonymiser(b"properties-key-properties-key-32")


def _by_dimension() -> dict[str, list[str]]:
    groups: dict[str, list[str]] = defaultdict(list)
    for unit in known_units():
        groups[dimension_of(unit)].append(unit)
    return {dim: units for dim, units in groups.items() if len(units) >= 2}


DIMENSIONS = _by_dimension()
values = st.floats(min_value=1e-6, max_value=1e6, allow_nan=False, allow_infinity=False)
same_dimension = st.sampled_from(sorted(DIMENSIONS)).flatmap(
    lambda dim: st.tuples(*(st.sampled_from(DIMENSIONS[dim]) for _ in range(3)))
)


@given(value=values, units=same_dimension)
def test_conversions_compose(value: float, units: tuple[str, str, str]) -> None:
    a, b, c = units
    direct = convert(value, a, c)
    via = convert(convert(value, a, b), b, c)
    assert via == pytest.approx(direct, rel=1e-12)


@given(value=values, k=st.floats(min_value=1e-3, max_value=1e3), units=same_dimension)
def test_conversions_are_linear_and_keep_the_sign(
    value: float, k: float, units: tuple[str, str, str]
) -> None:
    a, b, _ = units
    assert convert(k * value, a, b) == pytest.approx(k * convert(value, a, b), rel=1e-12)
    assert convert(-value, a, b) == pytest.approx(-convert(value, a, b), rel=1e-12)
    assert convert(0.0, a, b) == 0.0


@given(value=values, units=same_dimension)
def test_factors_are_powers_of_ten_or_exact_time_ratios(
    value: float, units: tuple[str, str, str]
) -> None:
    a, b, _ = units
    ratio = convert(value, a, b) / value
    # SI prefixes are powers of ten; min and h are 60 s and 3600 s (SI Brochure Table 8)
    candidates = [ratio * f for f in (1.0, 60.0, 1 / 60.0, 3600.0, 1 / 3600.0)]
    assert any(abs(math.log10(x) - round(math.log10(x))) < 1e-9 for x in candidates), (a, b)


@given(value=values, a=st.sampled_from(known_units()), b=st.sampled_from(known_units()))
def test_other_dimensions_are_refused(value: float, a: str, b: str) -> None:
    if dimension_of(a) == dimension_of(b):
        convert(value, a, b)
    else:
        with pytest.raises(UnitError, match="cannot convert"):
            convert(value, a, b)


@given(unit=st.text(min_size=1, max_size=8))
def test_unknown_units_are_refused_never_guessed(unit: str) -> None:
    try:
        dimension = dimension_of(unit)
    except UnitError:
        with pytest.raises(UnitError):
            convert(1.0, unit, "mGy")
        return
    assert dimension in {dimension_of(u) for u in known_units()}


# ------------------------------------------------------------------------------ fingerprint


def _result(**values: object):  # type: ignore[no-untyped-def]
    ds = dx_header("fingerprint", **values)
    buffer = io.BytesIO()
    ds.save_as(buffer, enforce_file_format=True)
    return read_bytes(buffer.getvalue(), pseudonymiser=PSEUDONYMISER, source="fp")


def _reencoded(syntax: str):  # type: ignore[no-untyped-def]
    ds = dx_header("fingerprint")
    ds.file_meta.TransferSyntaxUID = syntax
    buffer = io.BytesIO()
    ds.save_as(buffer, enforce_file_format=True)
    return read_dataset(
        dcmread(io.BytesIO(buffer.getvalue())), pseudonymiser=PSEUDONYMISER, source="other"
    )


@pytest.mark.parametrize("syntax", [ImplicitVRLittleEndian, ExplicitVRBigEndian])
def test_fingerprint_is_the_same_whatever_the_transfer_syntax(syntax: str) -> None:
    baseline = _reencoded(ExplicitVRLittleEndian)
    assert result_fingerprint(_reencoded(syntax)) == result_fingerprint(baseline)


@settings(max_examples=40, deadline=None)
@given(notes=st.lists(st.text(max_size=20), max_size=3), label=st.text(max_size=20))
def test_fingerprint_ignores_provenance_and_notes(notes: list[str], label: str) -> None:
    first = _result()
    second = _result()
    second.events[0].notes.extend(notes)
    second.events[0].provenance["kvp_kv"] = label
    assert result_fingerprint(second) == result_fingerprint(first)


@settings(max_examples=40, deadline=None)
@given(
    kvp=st.integers(min_value=40, max_value=150),
    uas=st.integers(min_value=100, max_value=100_000),
    dap=st.decimals(min_value="0.001", max_value="99", places=3),
)
def test_fingerprint_changes_with_any_exposure_value(kvp: int, uas: int, dap: object) -> None:
    base = result_fingerprint(_result())
    changed = _result(KVP=str(kvp), ExposureInuAs=uas, ImageAndFluoroscopyAreaDoseProduct=str(dap))
    same = (kvp, uas, str(dap)) == (125, 2500, "0.110")
    assert (result_fingerprint(changed) == base) == same


@given(text=st.text(max_size=40))
def test_printable_text_has_no_control_characters_and_keeps_the_rest(text: str) -> None:
    cleaned = printable(text)
    assert len(cleaned) == len(text)
    for before, after in zip(text, cleaned, strict=True):
        control = (ord(before) < 0x20 and before not in "\t\n\r") or before == "\x7f"
        assert after == ("\ufffd" if control else before)
