"""Geometry resolution: order of preference, recorded sources, defaults marked as assumed."""

from __future__ import annotations

import math
import re
from dataclasses import fields
from decimal import Decimal
from typing import Any

import numpy as np
import pytest

from beamaudit.model.defaults import dose_default, exam_default, find_exam, load_exam_defaults
from beamaudit.model.errors import ModelError
from beamaudit.model.geometry import (
    GeometryInputs,
    ResolvedGeometry,
    field_area_at_distance_cm2,
    resolve_geometry,
)


def test_source_to_entrance_wins() -> None:
    geo = resolve_geometry(
        GeometryInputs(
            source_to_entrance_mm=720.0,
            source_to_patient_mm=1000.0,
            sid_mm=1100.0,
            body_part_thickness_mm=200.0,
            field_area_cm2=900.0,
            provenance={"source_to_entrance_mm": "(0040,0306) DistanceSourceToEntrance"},
        )
    )
    assert geo.fsd_mm == 720.0
    assert geo.distance_source == "source_to_entrance"
    assert geo.distance_trail.steps[-1].source == "(0040,0306) DistanceSourceToEntrance"
    assert geo.thickness_mm is None  # not needed, not used
    assert geo.fsd_standard_uncertainty_mm == pytest.approx(7.2)  # 1 % recorded, assumed row


def test_source_to_patient_minus_thickness() -> None:
    # DICOM PS3.3 C.8.11.7: (0018,1111) in DX is to the support side nearest the patient
    geo = resolve_geometry(
        GeometryInputs(source_to_patient_mm=1000.0, body_part_thickness_mm=220.0, sid_mm=1100.0)
    )
    assert geo.fsd_mm == 780.0
    assert geo.distance_source == "source_to_patient"
    assert geo.fsd_standard_uncertainty_mm == pytest.approx(math.hypot(10.0, 10.0))
    assert geo.field_source == "exam_default"
    assert geo.assumptions == [
        "field size not recorded; 30 x 35 cm at the receptor assumed (no exam type known)",
        "rectangular field taken as its equivalent square for backscatter",
    ]


def test_table_above_and_below() -> None:
    above = resolve_geometry(
        GeometryInputs(source_to_table_mm=950.0, body_part_thickness_mm=200.0, field_area_cm2=400)
    )
    assert above.fsd_mm == 750.0
    assert above.distance_source == "source_to_table"
    below = resolve_geometry(
        GeometryInputs(
            source_to_table_mm=600.0,
            tube_side="below",
            body_part_thickness_mm=200.0,
            field_area_cm2=400,
        )
    )
    assert below.fsd_mm == 600.0
    assert any("tabletop" in a for a in below.assumptions)


def test_isocentre_minus_half_thickness() -> None:
    geo = resolve_geometry(
        GeometryInputs(
            source_to_isocenter_mm=750.0,
            body_part_thickness_mm=240.0,
            sid_mm=1200.0,
            field_area_cm2=300.0,
        )
    )
    assert geo.fsd_mm == 630.0
    assert any("centred on the isocentre" in a for a in geo.assumptions)
    # u² = (1 % of 750)² + (10/2)² + 30² (rows of dose_defaults.csv)
    assert geo.fsd_standard_uncertainty_mm == pytest.approx(math.sqrt(7.5**2 + 5**2 + 30**2))


def test_magnification_factor() -> None:
    # M = SID / SOD (DICOM (0018,1114)); SID 1150, M 1.15 -> SOD 1000; minus 200 -> 800
    geo = resolve_geometry(
        GeometryInputs(
            sid_mm=1150.0,
            magnification_factor=1.15,
            body_part_thickness_mm=200.0,
            field_area_cm2=300.0,
        )
    )
    assert geo.fsd_mm == pytest.approx(800.0)
    assert geo.distance_source == "magnification"
    with pytest.raises(ModelError, match="at least 1"):
        resolve_geometry(GeometryInputs(sid_mm=1000.0, magnification_factor=0.8))


def test_sid_gap_thickness_with_room_gap() -> None:
    geo = resolve_geometry(
        GeometryInputs(
            sid_mm=1000.0,
            body_part_thickness_mm=200.0,
            table_to_detector_gap_mm=50.0,
            field_width_mm=300.0,
            field_height_mm=300.0,
        )
    )
    assert geo.fsd_mm == 750.0
    assert geo.distance_source == "sid_gap"
    assert geo.assumptions == []


def test_receptor_default_gap_is_assumed() -> None:
    geo = resolve_geometry(
        GeometryInputs(
            sid_mm=1800.0,
            body_part_thickness_mm=230.0,
            receptor="wall_bucky",
            field_area_cm2=1505.0,
        )
    )
    gap = dose_default("gap_wall_bucky_mm").value
    assert geo.fsd_mm == 1800.0 - gap - 230.0
    assert any("gap not known" in a for a in geo.assumptions)


def test_everything_from_exam_defaults() -> None:
    geo = resolve_geometry(GeometryInputs(exam="chest_pa"))
    row = exam_default("chest_pa")
    gap = dose_default("gap_wall_bucky_mm").value
    assert geo.sid_mm == row.sid_mm == 1800.0
    assert geo.thickness_mm == row.thickness_mm == 230.0  # NCRP 172 standard patient (memory)
    assert geo.fsd_mm == 1800.0 - gap - 230.0
    assert geo.field_source == "exam_default"
    assert geo.field_area_at_plane_cm2 == pytest.approx(35.0 * 43.0)
    notes = " | ".join(geo.assumptions)
    assert "SID not recorded" in notes and "thickness not recorded" in notes
    assert "field size not recorded" in notes


def test_field_from_collimator_edges() -> None:
    # edges 101..2100 columns, 201..2600 rows at 0.15 mm: w = 2000 · 0.15 = 300 mm,
    # h = 2400 · 0.15 = 360 mm (inclusive pixel count); area 1080 cm² at the SID
    geo = resolve_geometry(
        GeometryInputs(
            sid_mm=1000.0,
            body_part_thickness_mm=200.0,
            table_to_detector_gap_mm=50.0,
            collimator_edges_px=(101, 2100, 201, 2600),
            imager_pixel_spacing_mm=(0.15, 0.15),
        )
    )
    assert geo.field_source == "collimator_edges"
    assert geo.field_area_at_plane_cm2 == pytest.approx(1080.0)
    assert geo.field_plane_mm == 1000.0
    # at the entrance (750 mm): 1080 · 0.75² = 607.5 cm²; equivalent square 2·30·36/66 · 0.75
    assert geo.entrance_field_area_cm2 == pytest.approx(607.5)
    assert geo.entrance_field_side_cm == pytest.approx(2 * 30 * 36 / 66 * 0.75)


def test_implausible_collimator_edges_are_skipped() -> None:
    # vendors write centred values (DICOM notes: a CR sample has -184 / 184): not pixel positions
    geo = resolve_geometry(
        GeometryInputs(
            sid_mm=1000.0,
            body_part_thickness_mm=200.0,
            table_to_detector_gap_mm=50.0,
            collimator_edges_px=(-184, 184, 907, 1299),
            imager_pixel_spacing_mm=(0.1, 0.1),
            detector_dimensions_mm=(430.0, 430.0),
        )
    )
    assert geo.field_source == "detector_dimensions"
    notes = " | ".join(geo.assumptions)
    assert "collimator edges not used (negative edge values" in notes
    assert "whole detector" in notes


def test_reported_area_plane_defaults_to_sid() -> None:
    geo = resolve_geometry(
        GeometryInputs(sid_mm=1200.0, source_to_entrance_mm=900.0, field_area_cm2=400.0)
    )
    assert geo.field_plane_mm == 1200.0
    assert geo.entrance_field_area_cm2 == pytest.approx(400.0 * (900.0 / 1200.0) ** 2)
    assert geo.entrance_field_side_cm == pytest.approx(20.0 * 0.75)


def test_field_plane_given() -> None:
    geo = resolve_geometry(
        GeometryInputs(
            source_to_entrance_mm=500.0,
            field_width_mm=100.0,
            field_height_mm=100.0,
            field_plane_mm=1000.0,
        )
    )
    assert geo.entrance_field_area_cm2 == pytest.approx(25.0)


def test_impossible_geometry() -> None:
    with pytest.raises(ModelError, match="impossible geometry"):
        resolve_geometry(GeometryInputs(sid_mm=1000.0, body_part_thickness_mm=1200.0))
    with pytest.raises(ModelError, match="impossible geometry"):
        resolve_geometry(
            GeometryInputs(sid_mm=1000.0, body_part_thickness_mm=960.0, table_to_detector_gap_mm=50)
        )
    with pytest.raises(ModelError, match="field_width_mm must be a positive"):
        resolve_geometry(
            GeometryInputs(
                sid_mm=1000.0,
                body_part_thickness_mm=200.0,
                field_width_mm=0.0,
                field_height_mm=300.0,
            )
        )
    with pytest.raises(ModelError, match="sid_mm"):
        resolve_geometry(GeometryInputs(sid_mm=-5.0))


def test_unknown_exam_and_receptor() -> None:
    with pytest.raises(ModelError, match="unknown exam type 'foot_ap'"):
        resolve_geometry(GeometryInputs(exam="foot_ap"))
    with pytest.raises(ModelError, match="unknown receptor kind"):
        resolve_geometry(GeometryInputs(receptor="floor"))


def test_field_area_scales_with_distance_squared() -> None:
    # divergence from a point focus: A(d2) = A(d1) (d2/d1)²
    assert field_area_at_distance_cm2(
        field_area_cm2=1505.0, from_distance_mm=1800.0, to_distance_mm=900.0
    ) == pytest.approx(1505.0 / 4)


def test_exam_defaults_are_documented() -> None:
    rows = load_exam_defaults()
    assert {"chest_pa", "abdomen_ap", "lumbar_spine_ap", "generic_adult"} <= set(rows)
    # NCRP Report 172 (2012) standard patient thickness 23 cm (from memory, low confidence)
    for exam in ("chest_pa", "abdomen_ap", "lumbar_spine_ap"):
        assert rows[exam].thickness_mm == 230.0
        assert "NCRP Report 172" in rows[exam].thickness_source
    for row in rows.values():
        assert 0 < row.thickness_mm < row.sid_mm
        assert row.thickness_standard_uncertainty_mm > 0


def test_find_exam_by_dicom_terms() -> None:
    assert find_exam(body_part="CHEST", view_position="PA") == "chest_pa"
    assert find_exam(body_part="chest", view_position="ll") == "chest_lat"
    assert find_exam(body_part="ABDOMEN", view_position=None) == "abdomen_ap"
    assert find_exam(body_part="CHEST", view_position=None) is None  # ambiguous
    assert find_exam(body_part="FOOT", view_position="AP") is None
    assert find_exam(body_part=None, view_position="AP") is None


def test_trails_serialise() -> None:
    geo = resolve_geometry(GeometryInputs(exam="abdomen_ap"))
    assert geo.distance_trail.to_json().startswith("[")
    assert geo.field_trail.to_json().startswith("[")


def test_dose_defaults_are_documented() -> None:
    from beamaudit.model.defaults import load_dose_defaults

    rows = load_dose_defaults()
    for kind in ("table_bucky", "wall_bucky", "direct", "unknown"):
        gap = rows[f"gap_{kind}_mm"]
        assert gap.unit == "mm" and gap.value >= 0
        assert gap.standard_uncertainty is not None and gap.standard_uncertainty > 0
    for row in rows.values():
        assert row.source, row.key
        assert row.source.startswith(("assumed", "the ")), row.key  # assumptions say so
    with pytest.raises(ModelError, match="no dose default"):
        dose_default("nonexistent")


# -- without a trail: the same numbers and the same errors ------------------------------------


def figures(geo: ResolvedGeometry) -> dict[str, object]:
    """Everything of a resolved geometry but its trails."""
    return {f.name: getattr(geo, f.name) for f in fields(geo) if not f.name.endswith("_trail")}


def outcome(g: GeometryInputs, *, trail: bool) -> dict[str, object] | str:
    """The figures of resolve_geometry(g, trail=trail), or the message of its ModelError."""
    try:
        geo = resolve_geometry(g, trail=trail)
    except ModelError as exc:
        return str(exc)
    if not trail:
        assert len(geo.distance_trail) == 0 and len(geo.field_trail) == 0
    return figures(geo)


EDGES_PX = (0, 1000, 0, 800)
NUMPY_EDGES_PX: Any = tuple(np.float64(v) for v in EDGES_PX)
DECIMAL_EDGES_PX: Any = tuple(Decimal(v) for v in EDGES_PX)  # not JSON-ready
SPACING_MM = (0.15, 0.15)


@pytest.mark.parametrize(
    ("g", "message"),
    [
        # every rule of this module, with a trail that records every kind of input
        (GeometryInputs(sid_mm=1000.0, body_part_thickness_mm=200.0), None),
        (GeometryInputs(source_to_entrance_mm=700.0, field_area_cm2=600.0), None),
        (GeometryInputs(source_to_table_mm=900.0, tube_side="below", exam="chest_pa"), None),
        (GeometryInputs(source_to_isocenter_mm=750.0, receptor="direct"), None),
        (GeometryInputs(sid_mm=1200, magnification_factor=1.2, field_plane_mm=1000.0), None),
        (GeometryInputs(collimator_edges_px=EDGES_PX, imager_pixel_spacing_mm=SPACING_MM), None),
        (
            GeometryInputs(
                collimator_edges_px=NUMPY_EDGES_PX,
                imager_pixel_spacing_mm=SPACING_MM,
                detector_dimensions_mm=(430.0, 430.0),
            ),
            None,
        ),
        (GeometryInputs(collimator_edges_px=(-1, 9, 0, 9), imager_pixel_spacing_mm=(1, 1)), None),
        (GeometryInputs(sid_mm=1000.0, table_to_detector_gap_mm=np.float64(50.0)), None),
        # checks of the rules
        (GeometryInputs(sid_mm=1000.0, body_part_thickness_mm=1200.0), "impossible geometry"),
        (GeometryInputs(source_to_entrance_mm=math.nan), "source_to_entrance_mm must be"),
        (GeometryInputs(exam="foot_ap"), "unknown exam type"),
        (
            GeometryInputs(sid_mm=900.0, table_to_detector_gap_mm=-1.0),
            "table_to_detector_gap_mm must be >= 0",
        ),
        # inputs far outside any x-ray geometry, whose squares and ratios would overflow
        # (once an OverflowError in the FSD's uncertainty): refused with and without a trail
        (
            GeometryInputs(sid_mm=1000.0, field_width_mm=1e200, field_height_mm=1e200),
            "field_width_mm 1e+200 is beyond any x-ray geometry (from 1e-09 to 1e+09)",
        ),
        (
            GeometryInputs(
                source_to_entrance_mm=800.0, field_area_cm2=1e300, field_area_plane_mm=1e-9
            ),
            "field_area_cm2 1e+300 is beyond any x-ray geometry",
        ),
        (
            GeometryInputs(
                source_to_entrance_mm=800.0, field_area_cm2=100.0, field_area_plane_mm=1e-300
            ),
            "field_area_plane_mm 1e-300 is beyond any x-ray geometry",
        ),
        (GeometryInputs(detector_dimensions_mm=(1e200, 1e200)), "detector width 1e+200 is beyond"),
        (GeometryInputs(sid_mm=1e308, body_part_thickness_mm=220.0), "sid_mm 1e+308 is beyond"),
        (
            GeometryInputs(sid_mm=1800.0, table_to_detector_gap_mm=1e300),
            "table_to_detector_gap_mm must be >= 0 and at most 1e+09",
        ),
        (
            GeometryInputs(
                collimator_edges_px=(math.nan, 100.0, 0.0, 100.0),
                imager_pixel_spacing_mm=SPACING_MM,
            ),
            "why trail: field_area_cm2 is nan",
        ),
        (
            # edges skipped (a negative one), with the NaN one kept in the skipped step
            GeometryInputs(
                collimator_edges_px=(-1.0, math.nan, 0.0, 10.0),
                imager_pixel_spacing_mm=SPACING_MM,
            ),
            "why trail: collimator_edges_px.inputs.collimator_edges_px is nan",
        ),
        (
            GeometryInputs(
                collimator_edges_px=DECIMAL_EDGES_PX,
                imager_pixel_spacing_mm=SPACING_MM,
            ),
            "why trail: field_area_cm2.inputs.collimator_edges_px has type Decimal, not JSON-ready",
        ),
    ],
)
def test_without_a_trail_the_same_numbers_and_errors(
    g: GeometryInputs, message: str | None
) -> None:
    kept = outcome(g, trail=True)
    if message is None:
        assert isinstance(kept, dict), kept
    else:
        assert isinstance(kept, str) and kept.startswith(message)
        with pytest.raises(ModelError, match="^" + re.escape(message)):
            resolve_geometry(g, trail=False)
    assert outcome(g, trail=False) == kept


def test_without_a_trail_the_trails_are_empty() -> None:
    kept = resolve_geometry(GeometryInputs(exam="abdomen_ap"))
    geo = resolve_geometry(GeometryInputs(exam="abdomen_ap"), trail=False)
    assert figures(geo) == figures(kept) and kept.assumptions
    assert geo.distance_trail.steps == () and geo.field_trail.steps == ()
    assert geo.assumptions == []  # says nothing: no trail was kept
