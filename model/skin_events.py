"""Inputs of the skin-dose model: one irradiation event's numbers, and the room's geometry.

:class:`SkinEvent` holds what one TID 10003 irradiation event of a fluoroscopy dose report says
about dose and geometry, in plain numbers and named as :mod:`beamaudit.ingest`'s event records
name them, so that ``SkinEvent.from_fields(event.as_dict())`` is all a caller needs (the model
imports nothing of ingest). :class:`SkinRoom` holds what the room must say because a report
cannot: its table's conventions and reference, its C-arm distances when events lack them, the
calibration of its K_a,r display. Every default is a row of ``data/skin_dose_defaults.csv`` and
is named in the map's assumptions when used.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any, Literal

from beamaudit.model.errors import ModelError

__all__ = ["SkinEvent", "SkinRoom"]

_FLOAT_FIELDS = (
    "reference_point_air_kerma_mgy",
    "dap_gy_cm2",
    "kvp_kv",
    "positioner_primary_angle_deg",
    "positioner_secondary_angle_deg",
    "positioner_primary_end_angle_deg",
    "positioner_secondary_end_angle_deg",
    "source_to_isocenter_mm",
    "sid_mm",
    "source_to_reference_point_mm",
    "source_to_table_mm",
    "field_area_cm2",
    "field_width_mm",
    "field_height_mm",
    "table_longitudinal_position_mm",
    "table_lateral_position_mm",
    "table_height_position_mm",
    "table_longitudinal_end_position_mm",
    "table_lateral_end_position_mm",
    "table_height_end_position_mm",
    "table_head_tilt_angle_deg",
    "table_cradle_tilt_angle_deg",
    "table_horizontal_rotation_angle_deg",
)


@dataclass(frozen=True, slots=True)
class SkinEvent:
    """One irradiation event for the skin-dose map; ``None`` = not recorded.

    Field names and units are those of :class:`beamaudit.ingest.ExposureEvent` (DICOM PS3.16
    TID 10003, 10003B and 10003C; see ``ingest/mapping.py`` for the concept of each).
    ``filters`` are the added filters as ``(material, thickness_mm)`` pairs; ``label`` names the
    event in the list of events that made the peak (the Irradiation Event UID, say).
    """

    reference_point_air_kerma_mgy: float | None = None
    dap_gy_cm2: float | None = None
    event_type: str | None = None
    acquisition_plane: str | None = None
    kvp_kv: float | None = None
    filters: tuple[tuple[str, float], ...] = ()
    positioner_primary_angle_deg: float | None = None
    positioner_secondary_angle_deg: float | None = None
    positioner_primary_end_angle_deg: float | None = None
    positioner_secondary_end_angle_deg: float | None = None
    source_to_isocenter_mm: float | None = None
    sid_mm: float | None = None
    source_to_reference_point_mm: float | None = None
    reference_point_definition: str | None = None
    source_to_table_mm: float | None = None
    field_area_cm2: float | None = None
    field_width_mm: float | None = None
    field_height_mm: float | None = None
    table_longitudinal_position_mm: float | None = None
    table_lateral_position_mm: float | None = None
    table_height_position_mm: float | None = None
    table_longitudinal_end_position_mm: float | None = None
    table_lateral_end_position_mm: float | None = None
    table_height_end_position_mm: float | None = None
    table_head_tilt_angle_deg: float | None = None
    table_cradle_tilt_angle_deg: float | None = None
    table_horizontal_rotation_angle_deg: float | None = None
    patient_table_relationship: str | None = None
    patient_orientation: str | None = None
    patient_orientation_modifier: str | None = None
    body_part: str | None = None
    label: str | None = None

    def __post_init__(self) -> None:
        for name in _FLOAT_FIELDS:
            value = getattr(self, name)
            if value is None:
                continue
            number = float(value)
            if not math.isfinite(number):
                raise ModelError(f"{name} must be a finite number, not {value!r}")
            object.__setattr__(self, name, number)
        layers = []
        for layer in self.filters:
            material, thickness = layer
            layers.append((str(material), float(thickness)))
        object.__setattr__(self, "filters", tuple(layers))

    @classmethod
    def from_fields(cls, values: Mapping[str, Any], *, label_field: str = "event_key") -> SkinEvent:
        """An event from a mapping named as ingest's event records (``ExposureEvent.as_dict()``).

        Keys it does not know are ignored; ``filters`` may be ``(material, thickness_mm)`` pairs,
        mappings with those keys or objects with those attributes (ingest's ``FilterLayer``);
        ``label`` is taken from ``values[label_field]``.
        """
        known = {f.name for f in fields(cls)} - {"filters", "label"}
        kwargs: dict[str, Any] = {k: values[k] for k in known if values.get(k) is not None}
        layers = []
        for layer in values.get("filters") or ():
            if isinstance(layer, Mapping):
                layers.append((layer["material"], layer["thickness_mm"]))
            elif hasattr(layer, "material") and hasattr(layer, "thickness_mm"):
                layers.append((layer.material, layer.thickness_mm))
            else:
                material, thickness = layer
                layers.append((material, thickness))
        label = values.get(label_field)
        return cls(filters=tuple(layers), label=None if label is None else str(label), **kwargs)


TableSign = Literal[1, -1]


@dataclass(frozen=True)
class SkinRoom:
    """What the room says about its geometry (every field optional; defaults documented).

    Table positions in a dose report are measured from a reference the device chooses
    (PS3.16 TID 10003C), so only their differences carry meaning until the room says where
    its reference lies. The signs say which way a reported increase moves the table in the
    room frame (see :mod:`beamaudit.model.skin_geometry`): from memory of the PS3.16 CID 10008
    definitions, lateral + toward the patient's left (LAO), height + downward, longitudinal +
    toward the head end; low-medium confidence, and devices differ: set them per room.

    Attributes
    ----------
    source_to_isocenter_mm, sid_mm : the C-arm's distances when an event lacks them.
    table_top_below_isocenter_mm : height of the tabletop below the isocentre at the reference
        table position. ``None``: the patient taken as centred on the isocentre there (assumed).
    reference_longitudinal_mm, reference_lateral_mm, reference_height_mm : the reported table
        positions that are the reference. ``None``: the median over the procedure's events.
    isocenter_landmark : body landmark at the isocentre at the reference table position
        (``"chest"``, ``"abdomen"``...). ``None``: from the events' target region.
    longitudinal_sign, lateral_sign, height_sign : see above.
    table_width_mm, mattress_thickness_mm : the table top and the pad under the patient.
    kar_calibration_factor : the room's measured K_a,r over the displayed one (1: none).
    kar_relative_standard_uncertainty : of the displayed K_a,r after that factor. ``None``: the
        uncalibrated default (IEC 60601-2-43's +-35 %, rectangular).
    """

    source_to_isocenter_mm: float | None = None
    sid_mm: float | None = None
    table_top_below_isocenter_mm: float | None = None
    reference_longitudinal_mm: float | None = None
    reference_lateral_mm: float | None = None
    reference_height_mm: float | None = None
    isocenter_landmark: str | None = None
    longitudinal_sign: TableSign = 1
    lateral_sign: TableSign = 1
    height_sign: TableSign = -1
    table_width_mm: float | None = None
    mattress_thickness_mm: float | None = None
    kar_calibration_factor: float = 1.0
    kar_relative_standard_uncertainty: float | None = None

    def __post_init__(self) -> None:
        for name in ("longitudinal_sign", "lateral_sign", "height_sign"):
            if getattr(self, name) not in (1, -1):
                raise ModelError(f"{name} must be 1 or -1")
        for name in ("source_to_isocenter_mm", "sid_mm", "table_width_mm"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                raise ModelError(f"{name} must be a positive number of mm, not {value!r}")
        for name in ("mattress_thickness_mm", "table_top_below_isocenter_mm"):
            value = getattr(self, name)
            if value is not None and not math.isfinite(value):
                raise ModelError(f"{name} must be a finite number of mm, not {value!r}")
        if not (math.isfinite(self.kar_calibration_factor) and self.kar_calibration_factor > 0):
            raise ModelError("kar_calibration_factor must be a positive number")
        u = self.kar_relative_standard_uncertainty
        if u is not None and not (math.isfinite(u) and 0 <= u < 1):
            raise ModelError("kar_relative_standard_uncertainty must lie in 0-1")
