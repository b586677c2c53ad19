"""Invented fluoroscopy events for the skin-dose tests: a C-arm with 810 mm from the focus to the
isocentre and 1150 mm to the receptor, a 200 mm square field at the receptor, the IEC 60601-2-43
reference point, a supine patient lying head first."""

from __future__ import annotations

from beamaudit.model.skin_events import SkinEvent

SOD, SID = 810.0, 1150.0


def skin_event(**changes: object) -> SkinEvent:
    """One PA event of 1000 mGy K_a,r (80 kV, 0.3 mm Cu), with ``changes`` applied."""
    values: dict[str, object] = {
        "reference_point_air_kerma_mgy": 1000.0,
        "positioner_primary_angle_deg": 0.0,
        "positioner_secondary_angle_deg": 0.0,
        "source_to_isocenter_mm": SOD,
        "sid_mm": SID,
        "field_width_mm": 200.0,
        "field_height_mm": 200.0,
        "reference_point_definition": "isocenter_15cm_toward_source",
        "patient_table_relationship": "headfirst",
        "patient_orientation_modifier": "supine",
        "body_part": "ABDOMEN",
        "kvp_kv": 80.0,
        "filters": (("copper", 0.3),),
    }
    values.update(changes)
    return SkinEvent(**values)  # type: ignore[arg-type]
