"""Skin-dose maps by hand-worked cases from the definitions (beamaudit.model.skin_dose).

D = K_a,r (d_ref / d_skin)^2 T_table B (mu_en/rho)_tissue/air at each skin cell (IAEA TRS 457
§7; ICRU 74), with the reference point 15 cm from the isocentre toward the focus (IEC
60601-2-43, from memory). The factors are given as numbers (FixedBeamFactors) so that every
expected value is worked by hand.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from skin_samples import SID, SOD, skin_event

from beamaudit.model import ModelError
from beamaudit.model.followup import FOLLOW_UP_LEVELS_MGY
from beamaudit.model.patient_model import patient_model
from beamaudit.model.skin_dose import skin_dose_map
from beamaudit.model.skin_events import SkinEvent, SkinRoom
from beamaudit.model.skin_factors import FixedBeamFactors
from beamaudit.model.skin_geometry import resolve_beams

T, B, F = 0.8, 1.35, 1.06
FACTORS = FixedBeamFactors(transmission=T, backscatter_factor=B, tissue_to_air_ratio=F)
ONES = FixedBeamFactors()
#: the back on the reference point: tabletop 150 mm below the isocentre, no pad
AT_REFERENCE = SkinRoom(table_top_below_isocenter_mm=150.0, mattress_thickness_mm=0.0)


def test_one_perpendicular_event_with_the_skin_at_the_reference_point() -> None:
    # PSD = K_a,r x T x B x f: 1000 x 0.8 x 1.35 x 1.06 = 1144.8 mGy. The peak cell's centre lies
    # 5 mm beside the central ray on the curved back (0.03 mm further from the focus): its dose
    # is 1.6e-4 lower, the mean over the cell 2.3e-4 lower; within 5e-4
    m = skin_dose_map([skin_event()], room=AT_REFERENCE, factors=FACTORS)
    assert m.peak_skin_dose_mgy == pytest.approx(1000.0 * T * B * F, rel=5e-4)
    assert m.peak_side == "back"
    assert m.events_used == 1 and not m.events_skipped


def test_two_events_at_the_same_spot_add() -> None:
    one = skin_dose_map([skin_event()], room=AT_REFERENCE, factors=FACTORS)
    two = skin_dose_map([skin_event(), skin_event()], room=AT_REFERENCE, factors=FACTORS)
    assert two.peak_skin_dose_mgy == pytest.approx(2.0 * one.peak_skin_dose_mgy, rel=1e-12)
    assert np.allclose(two.dose_mgy, 2.0 * one.dose_mgy)
    assert [c.share for c in two.contributors] == pytest.approx([0.5, 0.5])


def test_two_events_at_opposite_sides_do_not_add() -> None:
    # patient centred: back and front 100 mm from the isocentre, 710 mm from either focus.
    # PA (under the table): 1000 (660/710)^2 T B f on the back; AP (receptor behind the back,
    # focus above): 1000 (660/710)^2 B f on the front, no table in the way
    pa, ap = skin_event(), skin_event(positioner_primary_angle_deg=180.0)
    m = skin_dose_map([pa, ap], factors=FACTORS)
    front = 1000.0 * (660.0 / 710.0) ** 2 * B * F
    back = front * T
    assert m.peak_skin_dose_mgy == pytest.approx(front, rel=5e-4)
    assert m.peak_side == "front"
    half = m.grid.shape[1] // 2
    assert m.dose_mgy[:, :half].max() == pytest.approx(back, rel=5e-4)
    assert [c.event_index for c in m.contributors] == [1]


def test_inverse_square_when_the_table_rises() -> None:
    # height + downward (PS3.16, from memory): -100 raises the table 100 mm; the back moves
    # from 660 to 760 mm from the focus: PSD x (660/760)^2
    room = SkinRoom(
        table_top_below_isocenter_mm=150.0, mattress_thickness_mm=0.0, reference_height_mm=0.0
    )
    low = skin_dose_map([skin_event(table_height_position_mm=0.0)], room=room, factors=FACTORS)
    high = skin_dose_map([skin_event(table_height_position_mm=-100.0)], room=room, factors=FACTORS)
    ratio = high.peak_skin_dose_mgy / low.peak_skin_dose_mgy
    assert ratio == pytest.approx((660.0 / 760.0) ** 2, rel=3e-4)


def test_kerma_on_the_reference_point_is_k_ar_itself() -> None:
    # IEC 60601-2-43 reference point; with T = B = f = 1 the dose there is K_a,r
    m = skin_dose_map(
        [skin_event(reference_point_air_kerma_mgy=250.0)],
        room=AT_REFERENCE,
        factors=FixedBeamFactors(),
    )
    assert m.peak_skin_dose_mgy == pytest.approx(250.0, rel=5e-4)


def _flux_through_skin(m, ev: SkinEvent, room: SkinRoom) -> float:
    """sum over cells of K A cos(theta): the air kerma-area product through the skin, mGy cm2."""
    beams = resolve_beams([ev], patient=m.grid.patient, room=room)
    points, normals = m.grid.surface_points(m.grid.around_mm)
    src = beams.source[0]
    rl = points[None, :, 0] - src[0]
    ra = points[None, :, 1] - src[2]
    rs = -m.grid.along_mm[:, None] - src[1]
    dist = np.sqrt(rl**2 + ra**2 + rs**2)
    cos_theta = -(normals[None, :, 0] * rl + normals[None, :, 1] * ra) / dist
    return float(np.sum(m.dose_mgy * cos_theta) * m.grid.cell_area_cm2)


@pytest.mark.parametrize(("primary", "secondary"), [(0.0, 0.0), (40.0, 25.0), (-75.0, -10.0)])
def test_conservation_kerma_area_product_through_the_skin_equals_dap(primary, secondary) -> None:
    # ICRU 74: P_KA is the same in every plane; through any surface that takes the whole beam,
    # sum K A cos(theta) = K_a,r A(d_ref) = the event's DAP (here made consistent with K_a,r)
    area_ref_cm2 = (200.0 * 660.0 / SID) ** 2 / 100.0
    dap_gy_cm2 = 1000.0 * area_ref_cm2 / 1000.0
    ev = skin_event(
        positioner_primary_angle_deg=primary,
        positioner_secondary_angle_deg=secondary,
        dap_gy_cm2=dap_gy_cm2,
    )
    room = SkinRoom()
    m = skin_dose_map([ev], room=room, factors=ONES, subcells=4)
    assert _flux_through_skin(m, ev, room) == pytest.approx(dap_gy_cm2 * 1000.0, rel=0.01)


def test_area_above_a_level_is_the_field_at_the_skin() -> None:
    # 10 Gy in a field of 100 mm at the receptor: 57.4 mm square at the back (660 mm), 32.9 cm2;
    # cells on its edges hold a part of it
    ev = skin_event(
        reference_point_air_kerma_mgy=10_000.0, field_width_mm=100.0, field_height_mm=100.0
    )
    m = skin_dose_map([ev], room=AT_REFERENCE, factors=ONES)
    field_cm2 = (100.0 * 660.0 / SID) ** 2 / 100.0
    assert m.area_above_cm2[2000.0] == pytest.approx(field_cm2, rel=0.3)
    assert m.area_above_cm2[5000.0] <= m.area_above_cm2[3000.0] <= m.area_above_cm2[2000.0]
    assert tuple(m.area_above_cm2) == FOLLOW_UP_LEVELS_MGY
    low, high = m.area_above_range_cm2[3000.0]
    assert low <= m.area_above_cm2[3000.0] <= high


def test_lao_90_irradiates_the_right_side() -> None:
    m = skin_dose_map([skin_event(positioner_primary_angle_deg=90.0)], factors=ONES)
    around = m.grid.around_mm[m.peak_cell[1]]
    # the right side line: a quarter perimeter from the spine toward negative arc lengths (the
    # unrolled strip starts and ends on it)
    gap = (around + m.grid.perimeter_mm / 4.0) % m.grid.perimeter_mm
    assert min(gap, m.grid.perimeter_mm - gap) <= 15.0
    # the side lies 200 mm nearer the focus than the centre: K_a,r (660 / 610)^2
    assert m.peak_skin_dose_mgy == pytest.approx(1000.0 * (660.0 / 610.0) ** 2, rel=5e-3)


def test_cranial_tilt_moves_the_field_on_the_back_toward_the_feet() -> None:
    # CRA 30, patient centred (back 100 mm below the isocentre): the focus at -810 (0, sin 30,
    # cos 30) = 405 mm toward the feet, 701.5 mm below. The field's edges leave it at 30 +- 4.97
    # degrees (100 mm of 1150 at the receptor) and reach the back 601.5 tan(phi) - 405 from the
    # isocentre's plane: from 124.1 mm toward the feet to 15.6 mm toward the head
    m = skin_dose_map([skin_event(positioner_secondary_angle_deg=30.0)], factors=ONES, cell_mm=5.0)
    spine = m.grid.shape[1] // 4  # the first cell left of the spine
    column = m.dose_mgy[:, spine]
    inside = m.grid.along_mm[column >= 0.5 * column.max()]
    landmark = m.landmarks_mm["abdomen"]
    assert inside.min() - landmark == pytest.approx(-15.6, abs=5.0)
    assert inside.max() - landmark == pytest.approx(124.1, abs=5.0)


def test_prone_patient_pa_beam_enters_the_back_from_above() -> None:
    # angles relative to the patient: 0/0 puts the receptor in front of the (downward) chest,
    # the focus above the back, so no table in the way: T does not enter
    m = skin_dose_map(
        [skin_event(patient_orientation_modifier="prone")],
        factors=FixedBeamFactors(transmission=0.5),
    )
    assert m.peak_side == "back"
    assert m.peak_skin_dose_mgy == pytest.approx(1000.0 * (660.0 / 710.0) ** 2, rel=5e-4)


def test_oblique_ray_through_the_table_takes_the_longer_path() -> None:
    # RAO 30 through the table: path 1/cos30 -> T^(1.1547) at the cell under the central ray
    room = AT_REFERENCE
    straight = skin_dose_map(
        [skin_event(positioner_primary_angle_deg=-30.0)],
        room=room,
        factors=FixedBeamFactors(transmission=1.0),
    )
    through = skin_dose_map(
        [skin_event(positioner_primary_angle_deg=-30.0)],
        room=room,
        factors=FixedBeamFactors(transmission=0.8),
    )
    i, j = through.peak_cell
    ratio = through.dose_mgy[i, j] / straight.dose_mgy[i, j]
    assert ratio == pytest.approx(0.8 ** (1 / math.cos(math.radians(30.0))), rel=0.01)


def test_lateral_beam_passes_above_the_table() -> None:
    # LAO 90 from the right: rays reach the right side above the tabletop, T never applies
    with_table = skin_dose_map(
        [skin_event(positioner_primary_angle_deg=90.0)], factors=FixedBeamFactors(transmission=0.5)
    )
    without = skin_dose_map([skin_event(positioner_primary_angle_deg=90.0)], factors=ONES)
    assert np.allclose(with_table.dose_mgy, without.dose_mgy)


def test_spread_projections_keep_the_peak_low_and_overlap_raises_it() -> None:
    # the same total K_a,r (6 Gy): twelve projections 30 degrees apart, or two overlapping
    spread = [
        skin_event(reference_point_air_kerma_mgy=500.0, positioner_primary_angle_deg=a)
        for a in range(-180, 180, 30)
    ]
    overlap = [
        skin_event(reference_point_air_kerma_mgy=3000.0, positioner_primary_angle_deg=a)
        for a in (-5.0, 5.0)
    ]
    low = skin_dose_map(spread, factors=FACTORS)
    high = skin_dose_map(overlap, factors=FACTORS)
    assert low.peak_skin_dose_mgy < 3000.0 < high.peak_skin_dose_mgy
    assert low.peak_skin_dose_mgy < 0.5 * high.peak_skin_dose_mgy
    assert len(high.contributors) == 2


def test_uncertainty_is_stated_and_falls_with_a_calibrated_kar() -> None:
    default = skin_dose_map([skin_event()])
    calibrated = skin_dose_map(
        [skin_event()], room=SkinRoom(kar_relative_standard_uncertainty=0.05)
    )
    # published expanded uncertainties of skin-dose estimates: about 15 % to 60 %
    assert 15.0 <= calibrated.uncertainty.expanded_pct < default.uncertainty.expanded_pct <= 60.0
    budget = default.uncertainty.budget
    assert budget["reference_point_air_kerma"] == pytest.approx(0.2, abs=0.005)
    # inverse square of a 30 mm shift at 710 mm: 2 x 30 / 710
    assert budget["patient_position"] == pytest.approx(2 * 30 / 710, rel=0.02)
    assert budget["table_transmission"] == pytest.approx(0.10, rel=0.01)


def test_events_not_placed_make_the_peak_a_lower_bound() -> None:
    m = skin_dose_map([skin_event(), skin_event(reference_point_air_kerma_mgy=None)], factors=ONES)
    assert m.events_used == 1 and len(m.events_skipped) == 1
    assert any("lower bound" in a for a in m.assumptions)


def test_no_dose_on_the_skin_gives_a_zero_map() -> None:
    m = skin_dose_map([skin_event(reference_point_air_kerma_mgy=0.0)], factors=ONES)
    assert m.peak_skin_dose_mgy == 0.0 and m.peak_cell is None and not m.contributors


def test_record_holds_what_the_cli_and_the_figure_need() -> None:
    m = skin_dose_map([skin_event(label="1.2.3")], room=AT_REFERENCE, factors=FACTORS)
    record = m.as_record()
    for key in (
        "peak_skin_dose_mgy",
        "area_above_3gy_cm2",
        "events_used",
        "assumptions",
        "uncertainty_pct",
        "contributors",
        "map",
        "peak",
        "isodose_levels_mgy",
    ):
        assert key in record
    assert record["contributors"][0]["label"] == "1.2.3"
    grid = record["map"]
    assert len(grid["dose_mgy"]) == len(grid["along_mm"])
    assert len(grid["dose_mgy"][0]) == len(grid["around_mm"])
    assert record["peak"]["side"] == "back"
    assert json.loads(json.dumps(record))["events_used"] == 1


def test_bad_parameters_are_refused() -> None:
    with pytest.raises(ModelError, match="subcells"):
        skin_dose_map([skin_event()], subcells=0)
    with pytest.raises(ModelError, match="cell size"):
        skin_dose_map([skin_event()], cell_mm=0.5)
    with pytest.raises(ModelError, match="finite"):
        skin_event(reference_point_air_kerma_mgy=math.inf)


def test_patient_size_changes_the_skin_distance() -> None:
    # a thicker centred patient has the back nearer the under-table focus: more dose
    slim = skin_dose_map(
        [skin_event()], patient=patient_model(height_m=1.8, mass_kg=55.0), factors=ONES
    )
    broad = skin_dose_map(
        [skin_event()], patient=patient_model(height_m=1.7, mass_kg=120.0), factors=ONES
    )
    t_slim, t_broad = slim.grid.patient.half_thickness_mm, broad.grid.patient.half_thickness_mm
    assert broad.peak_skin_dose_mgy / slim.peak_skin_dose_mgy == pytest.approx(
        ((SOD - t_slim) / (SOD - t_broad)) ** 2, rel=2e-3
    )


class _FailingFor:
    """Beam factors that cannot be computed for one event (as a beam outside the model)."""

    def __init__(self, bad: int) -> None:
        self.bad = bad
        self.ok = FixedBeamFactors()

    def table_transmission(self, index, event, path):
        return self.ok.table_transmission(index, event, path)

    def backscatter(self, index, event, side):
        if index == self.bad:
            raise ModelError("HVL below the backscatter table")
        return self.ok.backscatter(index, event, side)

    def tissue_to_air(self, index, event):
        return self.ok.tissue_to_air(index, event)


def test_an_event_whose_factors_fail_is_listed_and_the_rest_mapped() -> None:
    events = [skin_event(), skin_event(label="odd", positioner_primary_angle_deg=180.0)]
    m = skin_dose_map(events, factors=_FailingFor(1))
    assert m.events_used == 1
    assert m.events_skipped == ((1, "odd", "beam factors: HVL below the backscatter table"),)
    assert m.peak_side == "back"


def test_a_filter_the_model_does_not_know_is_left_out_and_said() -> None:
    m = skin_dose_map([skin_event(filters=(("copper", 0.1), ("tantalum", 0.05)))])
    assert m.events_used == 1
    assert any("tantalum not in the model's materials" in s for s in m.factor_sources)
