"""Filter layers, parsing and Beer-Lambert transmission."""

from __future__ import annotations

import numpy as np
import pytest

from beamaudit.model.attenuation import energy_bin_centres_kev, linear_attenuation_per_mm
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import (
    DEFAULT_TOTAL_FILTRATION_MM_AL,
    FilterSpec,
    default_filters,
    describe_filters,
    parse_filter,
    transmission,
)


def test_default_is_the_iec_minimum() -> None:
    # IEC 60601-1-3:2008 cl. 7.1: 2.5 mm Al minimum total filtration (PUBLISHED-VALUES c)
    assert DEFAULT_TOTAL_FILTRATION_MM_AL == 2.5
    assert default_filters() == (FilterSpec("Al", 2.5),)


@pytest.mark.parametrize(
    ("text", "material", "thickness"),
    [
        ("2.5:Al", "Al", 2.5),
        ("0.1:Cu", "Cu", 0.1),
        ("1:aluminium", "Al", 1.0),
        (" 0.2 : copper ", "Cu", 0.2),
    ],
)
def test_parse_filter(text: str, material: str, thickness: float) -> None:
    assert parse_filter(text) == FilterSpec(material, thickness)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("2.5", "THICKNESS_MM:MATERIAL"),
        ("x:Al", "not a number"),
        ("-1:Al", "non-negative"),
        ("1:Pu", "unknown material"),
        ("500:Al", "check the unit"),
    ],
)
def test_bad_filters_are_clear_errors(text: str, match: str) -> None:
    with pytest.raises(ModelError, match=match):
        parse_filter(text)


def test_transmission_is_beer_lambert() -> None:
    layers = (FilterSpec("Al", 2.0), FilterSpec("Cu", 0.1))
    e = energy_bin_centres_kev()
    expected = np.exp(
        -linear_attenuation_per_mm("Al", e) * 2.0
        - linear_attenuation_per_mm("Cu", e) * 0.1
        - linear_attenuation_per_mm("air", e) * 750.0
    )
    np.testing.assert_allclose(transmission(layers, air_path_mm=750.0), expected, rtol=1e-12)


def test_zero_thickness_and_no_layers_transmit_everything() -> None:
    assert np.all(transmission((FilterSpec("Al", 0.0),)) == 1.0)
    assert np.all(transmission(()) == 1.0)


def test_negative_air_path_rejected() -> None:
    with pytest.raises(ModelError, match="air path"):
        transmission((), air_path_mm=-1.0)


def test_describe() -> None:
    assert (
        describe_filters((FilterSpec("Al", 2.5), FilterSpec("Cu", 0.1))) == "2.5 mm Al + 0.1 mm Cu"
    )
