"""The room frame, the C-arm's angles, the table and the reference point, by hand-worked cases.

Conventions as written in beamaudit.model.skin_geometry: room frame after IEC 61217's fixed
system (origin at the isocentre, +Z up, +Y toward the head end of the table); positioner angles
as DICOM PS3.3 C.8.7.5.1.2 defines them (from memory): the receptor's place about the patient,
primary + toward the patient's left (LAO), secondary + toward the head (cranial).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from skin_samples import SOD, skin_event

from beamaudit.model import ModelError
from beamaudit.model.patient_model import body_landmark_fraction, patient_model
from beamaudit.model.skin_events import SkinRoom
from beamaudit.model.skin_geometry import (
    detector_axes,
    detector_direction,
    orientation_matrix,
    reference_point_distance_mm,
    resolve_beams,
)


@pytest.mark.parametrize(
    ("primary", "secondary", "expected"),
    [
        (0.0, 0.0, (0.0, 0.0, 1.0)),  # receptor in front of the chest
        (90.0, 0.0, (1.0, 0.0, 0.0)),  # LAO 90: receptor at the patient's left
        (-90.0, 0.0, (-1.0, 0.0, 0.0)),  # RAO 90
        (0.0, 30.0, (0.0, 0.5, math.sqrt(3) / 2)),  # CRA 30: receptor toward the head
        (0.0, -30.0, (0.0, -0.5, math.sqrt(3) / 2)),  # CAU 30
        (180.0, 0.0, (0.0, 0.0, -1.0)),  # receptor behind the back
        # LAO 30 CRA 20, by hand: (sin30 cos20, sin20, cos30 cos20)
        (30.0, 20.0, (0.5 * 0.9396926, 0.3420201, 0.8660254 * 0.9396926)),
    ],
)
def test_receptor_direction_by_hand(primary: float, secondary: float, expected: tuple) -> None:
    assert detector_direction(primary, secondary) == pytest.approx(expected, abs=1e-7)


def test_receptor_axes_are_orthonormal_with_the_beam() -> None:
    for a, b in [(0, 0), (35, -20), (-120, 40), (90, 89)]:
        d = detector_direction(a, b)
        e_u, e_v = detector_axes(a, b)
        frame = np.stack([e_u, e_v, d])
        assert frame @ frame.T == pytest.approx(np.eye(3), abs=1e-12)
        assert np.cross(e_u, e_v) == pytest.approx(d, abs=1e-12)  # right-handed
    e_u, e_v = detector_axes(0.0, 0.0)
    assert e_u == pytest.approx([1, 0, 0]) and e_v == pytest.approx([0, 1, 0])


@pytest.mark.parametrize(
    ("relationship", "modifier", "left", "head", "front"),
    [
        ("headfirst", "supine", (1, 0, 0), (0, 1, 0), (0, 0, 1)),
        ("feetfirst", "supine", (-1, 0, 0), (0, -1, 0), (0, 0, 1)),
        ("headfirst", "prone", (-1, 0, 0), (0, 1, 0), (0, 0, -1)),
        ("feetfirst", "prone", (1, 0, 0), (0, -1, 0), (0, 0, -1)),
        ("headfirst", "left_lateral_decubitus", (0, 0, -1), (0, 1, 0), (1, 0, 0)),
        ("headfirst", "right_lateral_decubitus", (0, 0, 1), (0, 1, 0), (-1, 0, 0)),
    ],
)
def test_patient_positions_are_proper_rotations(relationship, modifier, left, head, front) -> None:
    m, _ = orientation_matrix(relationship, modifier)
    assert m[:, 0] == pytest.approx(left) and m[:, 1] == pytest.approx(head)
    assert m[:, 2] == pytest.approx(front)
    assert np.linalg.det(m) == pytest.approx(1.0)


def test_unrecorded_position_is_supine_head_first_and_noted() -> None:
    m, notes = orientation_matrix(None, None)
    assert m == pytest.approx(np.eye(3))
    assert notes and "supine, head first" in notes[0]


def test_iec_60601_2_43_reference_point_is_15_cm_toward_the_focus() -> None:
    # IEC 60601-2-43: 15 cm from the isocentre toward the focal spot (from memory, high)
    assert reference_point_distance_mm(source_to_isocenter_mm=810.0) == 660.0
    beams = resolve_beams([skin_event()], patient=patient_model(), room=SkinRoom())
    assert beams.reference_distance_mm[0] == 660.0
    with pytest.raises(ModelError, match="15 cm"):
        reference_point_distance_mm(source_to_isocenter_mm=100.0)


def _patient_origin() -> tuple[float, float]:
    """Landmark depth below the vertex (abdomen) of the reference patient, mm; half-thickness."""
    p = patient_model()
    return body_landmark_fraction("abdomen") * p.height_mm, p.half_thickness_mm


def test_pa_beam_of_a_centred_supine_patient_comes_from_below_the_back() -> None:
    y_land, t = _patient_origin()
    beams = resolve_beams([skin_event()], patient=patient_model(), room=SkinRoom())
    # patient centred on the isocentre: the focus 810 mm below the body's axis, at the landmark
    assert beams.source[0] == pytest.approx([0.0, -y_land, -SOD])
    assert beams.axis[0] == pytest.approx([0.0, 0.0, 1.0])
    # the table under the back (a = -t), its normal pointing up into the patient
    assert beams.table_normal == pytest.approx([0, 0, 1])
    assert beams.table_point[2] == pytest.approx(-t)


def test_lao_90_source_sits_at_the_patients_right_whichever_way_the_patient_lies() -> None:
    for relationship in ("headfirst", "feetfirst"):
        beams = resolve_beams(
            [
                skin_event(
                    positioner_primary_angle_deg=90.0, patient_table_relationship=relationship
                )
            ],
            patient=patient_model(),
            room=SkinRoom(),
        )
        assert beams.source[0][0] == pytest.approx(-SOD)  # l = -810: the patient's right
        assert beams.axis[0] == pytest.approx([1.0, 0.0, 0.0])


def test_table_travel_moves_the_patient_relative_to_the_beams() -> None:
    # PS3.16 CID 10008 signs (from memory): lateral + toward LAO, height + downward;
    # longitudinal + toward the head end (our default). References: the room's values.
    room = SkinRoom(
        reference_longitudinal_mm=0.0,
        reference_lateral_mm=0.0,
        reference_height_mm=0.0,
        table_top_below_isocenter_mm=150.0,
    )
    y_land, t = _patient_origin()
    moved = skin_event(
        table_longitudinal_position_mm=100.0,
        table_lateral_position_mm=30.0,
        table_height_position_mm=-50.0,
    )
    beams = resolve_beams([skin_event(), moved], patient=patient_model(), room=room)
    base, shifted = beams.source
    # the table toward the head by 100 mm: the fixed focus lies 100 mm further toward the feet
    assert shifted[1] - base[1] == pytest.approx(-100.0)
    # toward the patient's left by 30 mm: the focus 30 mm further to the right
    assert shifted[0] - base[0] == pytest.approx(-30.0)
    # height -50 (downward positive): the table 50 mm up, the focus 50 mm further below
    assert shifted[2] - base[2] == pytest.approx(-50.0)
    # tabletop 150 mm below the isocentre: the body's axis 50 mm below it, focus 760 mm under
    assert base == pytest.approx([0.0, -y_land, -(SOD - (150.0 - t))])


def test_median_table_position_is_the_reference_when_the_room_gives_none() -> None:
    events = [skin_event(table_height_position_mm=h) for h in (100.0, 120.0, 200.0)]
    beams = resolve_beams(events, patient=patient_model(), room=SkinRoom())
    # reference 120 (the median): the first event's table 20 mm above it (height + downward)
    assert beams.source[0][2] - beams.source[1][2] == pytest.approx(-20.0)
    assert any("median" in n for n in beams.notes)


def test_head_tilt_turns_table_and_patient_about_the_point_under_the_isocentre() -> None:
    # hand-worked: focus 660 mm below the pivot (tabletop 150 mm below the isocentre); tilted
    # 10 degrees head up, the focus lies 660 sin 10 toward the feet and 660 cos 10 below the
    # tabletop in the patient's frame; the body's axis is t = 100 mm above the tabletop
    y_land, t = _patient_origin()
    room = SkinRoom(table_top_below_isocenter_mm=150.0)
    beams = resolve_beams(
        [skin_event(table_head_tilt_angle_deg=10.0)], patient=patient_model(), room=room
    )
    s, c = math.sin(math.radians(10.0)), math.cos(math.radians(10.0))
    assert beams.source[0] == pytest.approx([0.0, -y_land - 660.0 * s, -(660.0 * c + t)])
    assert beams.axis[0] == pytest.approx([0.0, s, c])  # up, and toward the head


def test_distance_source_to_table_plane_places_the_tabletop() -> None:
    # a vertical central ray: the tabletop 600 mm from the focus, i.e. 210 mm below the
    # isocentre; the body's axis 100 mm above it
    beams = resolve_beams(
        [skin_event(source_to_table_mm=600.0)], patient=patient_model(), room=SkinRoom()
    )
    assert beams.source[0][2] == pytest.approx(-(600.0 + 100.0))
    assert any("Distance Source to Table Plane" in n for n in beams.notes)


def test_rotational_acquisition_is_spread_over_its_arc() -> None:
    rot = skin_event(
        event_type="rotational",
        positioner_primary_angle_deg=-100.0,
        positioner_primary_end_angle_deg=100.0,
        reference_point_air_kerma_mgy=400.0,
    )
    beams = resolve_beams([rot], patient=patient_model(), room=SkinRoom())
    assert beams.size == 100  # 200 degrees in steps of at most 2
    assert beams.kerma_at_reference_mgy.sum() == pytest.approx(400.0)
    assert beams.axis[0] == pytest.approx(detector_direction(-99.0, 0.0))


def test_stepping_acquisition_is_spread_over_its_travel() -> None:
    step = skin_event(
        event_type="stepping",
        table_longitudinal_position_mm=0.0,
        table_longitudinal_end_position_mm=300.0,
    )
    beams = resolve_beams(
        [step], patient=patient_model(), room=SkinRoom(reference_longitudinal_mm=0.0)
    )
    assert beams.size == 30
    assert np.ptp(beams.source[:, 1]) == pytest.approx(290.0)


@pytest.mark.parametrize(
    ("kwargs", "reason"),
    [
        ({"reference_point_air_kerma_mgy": None, "dap_gy_cm2": None}, "no K_a,r"),
        ({"sid_mm": 700.0}, "not beyond the isocentre"),
        ({"reference_point_definition": "table_centerline_15cm"}, "not modelled"),
    ],
)
def test_events_that_cannot_be_placed_are_listed_with_the_reason(kwargs, reason) -> None:
    beams = resolve_beams(
        [skin_event(), skin_event(label="uid-2", **kwargs)],
        patient=patient_model(),
        room=SkinRoom(),
    )
    assert beams.size == 1
    ((index, label, why),) = beams.skipped
    assert (index, label) == (1, "uid-2") and reason in why


def test_kar_from_dap_over_the_reference_field_when_not_recorded() -> None:
    # field 200 x 200 mm at 1150 mm: at the reference point (660 mm) 114.78 mm square,
    # 131.74 cm2; DAP 10 Gy cm2 = 10,000 mGy cm2 -> K_a,r 75.9 mGy
    ev = skin_event(reference_point_air_kerma_mgy=None, dap_gy_cm2=10.0)
    beams = resolve_beams([ev], patient=patient_model(), room=SkinRoom())
    area = (200.0 * 660.0 / 1150.0) ** 2 / 100.0
    assert beams.kerma_at_reference_mgy[0] == pytest.approx(10_000.0 / area)


def test_field_from_dap_over_kar_when_no_field_is_recorded() -> None:
    # DAP / K_a,r = 5000 mGy cm2 / 50 mGy = 100 cm2 at 660 mm: 10 cm square, 17.42 cm at 1150
    ev = skin_event(
        field_width_mm=None,
        field_height_mm=None,
        dap_gy_cm2=5.0,
        reference_point_air_kerma_mgy=50.0,
    )
    beams = resolve_beams([ev], patient=patient_model(), room=SkinRoom())
    assert 2 * beams.half_width_mm[0] == pytest.approx(100.0 * 1150.0 / 660.0)


def test_tabletop_reference_point_from_the_table_height() -> None:
    # 1 cm above the tabletop, tabletop 150 mm below the isocentre, vertical ray from 810 below
    room = SkinRoom(table_top_below_isocenter_mm=150.0)
    ev = skin_event(reference_point_definition="tabletop_1cm_above")
    beams = resolve_beams([ev], patient=patient_model(), room=room)
    assert beams.reference_distance_mm[0] == pytest.approx(810.0 - 150.0 + 10.0)


def test_an_upright_patient_is_modelled_lying_and_said_so() -> None:
    beams = resolve_beams(
        [skin_event(patient_orientation="erect")], patient=patient_model(), room=SkinRoom()
    )
    assert any("erect" in n and "lying" in n for n in beams.notes)
