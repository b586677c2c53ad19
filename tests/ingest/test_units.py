"""Unit conversions: exact SI-prefix factors (BIPM SI Brochure, 9th ed.,
Table 7) and UCUM spellings."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from beamaudit.ingest.units import UnitError, convert, dimension_of, known_units, normalise_unit


@pytest.mark.parametrize(
    ("value", "src", "dst", "expected"),
    [
        (1.0, "Gy.m2", "Gy.cm2", 1e4),  # 1 m² = 1e4 cm²
        (1.0, "dGy.cm2", "Gy.cm2", 0.1),  # image-header DAP unit (PS3.3 C.8.7.8)
        (1.0, "dGy.cm2", "Gy.m2", 1e-5),  # DICOM-NOTES 1.2: 1 dGy·cm² = 1e-5 Gy·m²
        (1.0, "dGy.cm2", "mGy.cm2", 100.0),
        (442.0, "uA.s", "mA.s", 0.442),  # TID 10003B Exposure in µA·s
        (7.5, "s", "ms", 7500.0),  # TID 10013 Exposure Time in s
        (0.012, "Gy", "mGy", 12.0),
        (1.0, "dGy", "mGy", 100.0),  # (0040,0302) EntranceDose, (0040,0316) OrganDose
        (0.04, "m2", "cm2", 400.0),
        (256000.0, "uA", "mA", 256.0),
        (12500.0, "us", "ms", 12.5),
        (1.0, "Gy.cm", "mGy.cm", 1000.0),
        (3.0, "{ratio}", "1", 3.0),
        (15.0, "{pulse}/s", "/s", 15.0),
        (1.0, "mAs", "mA.s", 1.0),
    ],
)
def test_known_conversions(value: float, src: str, dst: str, expected: float) -> None:
    assert convert(value, src, dst) == pytest.approx(expected, rel=1e-15)


def test_decimal_results_are_tidy() -> None:
    assert convert(1.2e-5, "Gy.m2", "Gy.cm2") == 0.12
    assert convert(1.2, "dGy.cm2", "Gy.cm2") == 0.12


def test_other_dimension_is_refused() -> None:
    with pytest.raises(
        UnitError, match=r"cannot convert 'mGy' \(dose\) to 'Gy.cm2' \(kerma_area\)"
    ):
        convert(1.0, "mGy", "Gy.cm2")


def test_unknown_unit_is_refused() -> None:
    with pytest.raises(UnitError, match="unknown unit 'furlong'"):
        convert(1.0, "furlong", "mm")
    with pytest.raises(UnitError, match="unknown unit"):
        dimension_of("parsec")


def test_normalise_unit() -> None:
    assert normalise_unit("µA.s") == "uA.s"
    assert normalise_unit("{X-Ray sources}") == "1"
    assert normalise_unit("cm^2") == "cm2"


_units = st.sampled_from(known_units())


@given(value=st.floats(min_value=-1e12, max_value=1e12, allow_nan=False), unit=_units, other=_units)
def test_round_trip_within_a_dimension(value: float, unit: str, other: str) -> None:
    if dimension_of(unit) != dimension_of(other):
        with pytest.raises(UnitError):
            convert(value, unit, other)
        return
    back = convert(convert(value, unit, other), other, unit)
    assert back == pytest.approx(value, rel=1e-13, abs=1e-300)


@given(a=st.floats(min_value=0, max_value=1e9), b=st.floats(min_value=0, max_value=1e9))
def test_conversion_is_monotonic(a: float, b: float) -> None:
    if a < b:
        assert convert(a, "Gy.m2", "Gy.cm2") <= convert(b, "Gy.m2", "Gy.cm2")
