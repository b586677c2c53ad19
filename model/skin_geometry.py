r"""Where each beam met the patient: the room frame, the C-arm's angles, the table and the patient.

**Room frame** (after the fixed system of IEC 61217, mm): origin at the isocentre; :math:`+Z`
up; :math:`+Y` horizontal along the table's long axis toward its head end (toward the gantry of
a C-arm standing at the head of the table); :math:`+X` completes a right-handed frame, to the
right of someone at the foot of the table looking toward its head (the left of a patient lying
supine, head first).

**Patient frame** (:mod:`beamaudit.model.patient_model`): :math:`l` to the patient's left,
:math:`s` toward the head, :math:`a` to the front, origin on the body's axis at the vertex. On
an untilted table the patient's registered position (DICOM PS3.16 TID 10003: Patient Table
Relationship, CID 21, and Patient Orientation Modifier, CID 20) gives the rotation :math:`M`
whose columns are the room directions of :math:`l, s, a`:

=========================  ========  ========  ========
position                   l         s         a
=========================  ========  ========  ========
supine, head first         +X        +Y        +Z
supine, feet first         -X        -Y        +Z
prone, head first          -X        +Y        -Z
prone, feet first          +X        -Y        -Z
left lateral decubitus     -Z        ±Y        ±X
right lateral decubitus    +Z        ±Y        ∓X
=========================  ========  ========  ========

(upper sign head first; every :math:`M` a proper rotation, :math:`l \times s = a`). Without a
recorded position the patient is taken supine, head first (noted).

**C-arm angles.** DICOM PS3.3 C.8.7.5.1.2 defines the positioner angles by where the image
receptor sits about the patient (from memory, medium-high confidence): the primary angle
:math:`\alpha` in the transverse plane, 0 in front of the chest, +90° at the patient's left
(LAO), -90° at the right (RAO); the secondary angle :math:`\beta` toward the head (cranial, +)
or the feet (caudal, -). The standard leaves the order of the two rotations unsaid; here the
primary turns about the patient's long axis and the secondary then tilts the receptor out of
the transverse plane, as the two axes of a C-arm whose primary axis runs along the table do.
The receptor's direction from the isocentre, in the patient frame:

.. math::

    \hat d(\alpha, \beta) = (\sin\alpha\cos\beta,\; \sin\beta,\; \cos\alpha\cos\beta)

The focal spot is at :math:`-D_{SI}\,\hat d` (focus to isocentre :math:`D_{SI}`), the central
ray runs along :math:`+\hat d` to the receptor at :math:`D_{SID}`. At 0°/0° a supine patient
is irradiated from below, entering the back. The receptor's axes: width along
:math:`\hat e_u = (\cos\alpha, 0, -\sin\alpha)` (across the patient), height along
:math:`\hat e_v = \hat d \times \hat e_u` (along the patient at 0°/0°). The angles are read as
the standard defines them, relative to the patient; a device that reports its gantry's angles
unchanged for a prone or feet-first patient would put the beam on the other side, and the map's
assumptions say so whenever the position is not supine, head first.

**Table.** The patient lies centred on the tabletop (plus the pad), the lowest point of the
cross-section on it. At the reference table position the tabletop lies
``table_top_below_isocenter_mm`` below the isocentre (default: the patient's axis through the
isocentre, i.e. the patient centred) and the body landmark ``isocenter_landmark`` lies in the
transverse plane of the isocentre. Reported table positions move table and patient by their
difference from the reference (signs per :class:`~beamaudit.model.skin_events.SkinRoom`). A
head tilt :math:`\theta` (head end up, +) turns table and patient about the room's :math:`X`
axis through the point of the tabletop under the isocentre. Where an event gives the Distance
Source to Table Plane and its central ray is within 45° of vertical, the tabletop lies at that
distance from the focus along the central ray, whatever the table positions say.

**Reference point** (where K_a,r is stated): the Distance Source to Reference Point when the
event gives it; else by its definition (CID 10025): for interventional equipment 15 cm from the
isocentre toward the focal spot (IEC 60601-2-43; from memory, high confidence), so
:math:`d_{ref} = D_{SI} - 150` mm, which is also taken when no definition is given (noted).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from beamaudit.model.defaults import dose_default
from beamaudit.model.errors import ModelError
from beamaudit.model.patient_model import (
    PatientModel,
    body_landmark_fraction,
    landmark_for_region,
    skin_default,
)
from beamaudit.model.skin_events import SkinEvent, SkinRoom

__all__ = [
    "IEC_REFERENCE_POINT_OFFSET_MM",
    "ResolvedBeams",
    "detector_axes",
    "detector_direction",
    "orientation_matrix",
    "reference_point_distance_mm",
    "resolve_beams",
]

FloatArray = NDArray[np.float64]

#: The interventional reference point lies this far from the isocentre toward the focal spot
#: (IEC 60601-2-43; from memory, high confidence; PUBLISHED-VALUES n).
IEC_REFERENCE_POINT_OFFSET_MM = 150.0
#: Central rays steeper than this from vertical do not place the tabletop from the Distance
#: Source to Table Plane.
_VERTICAL_WITHIN_DEG = 45.0
#: Tabletop-referenced reference points (CID 10025) and their height above the tabletop, mm.
_TABLETOP_REFERENCE_MM = {"tabletop_1cm_above": 10.0, "tabletop_30cm_above": 300.0}

_X, _Y, _Z = np.eye(3)
_POSITIONS: dict[tuple[str, str], tuple[FloatArray, FloatArray, FloatArray]] = {
    ("headfirst", "supine"): (_X, _Y, _Z),
    ("feetfirst", "supine"): (-_X, -_Y, _Z),
    ("headfirst", "prone"): (-_X, _Y, -_Z),
    ("feetfirst", "prone"): (_X, -_Y, -_Z),
    ("headfirst", "left_lateral_decubitus"): (-_Z, _Y, _X),
    ("feetfirst", "left_lateral_decubitus"): (-_Z, -_Y, -_X),
    ("headfirst", "right_lateral_decubitus"): (_Z, _Y, -_X),
    ("feetfirst", "right_lateral_decubitus"): (_Z, -_Y, _X),
}


def orientation_matrix(
    table_relationship: str | None, orientation_modifier: str | None
) -> tuple[FloatArray, list[str]]:
    """The rotation :math:`M` from the patient frame to the room frame (module docstring).

    Returns
    -------
    M : ndarray, shape (3, 3)
        Columns: the room directions of the patient's left, head and front.
    notes : list of str
        What was assumed (an unrecorded or unknown position is taken supine, head first).
    """
    notes = []
    relationship = table_relationship or "headfirst"
    modifier = orientation_modifier or "supine"
    if table_relationship is None or orientation_modifier is None:
        notes.append("patient position not fully recorded: taken as lying supine, head first")
    if (relationship, modifier) not in _POSITIONS:
        notes.append(
            f"patient position {relationship}, {modifier} not modelled: taken as lying supine, "
            "head first"
        )
        relationship, modifier = "headfirst", "supine"
    if (relationship, modifier) != ("headfirst", "supine"):
        notes.append(
            f"patient {modifier.replace('_', ' ')}, {relationship}: the C-arm angles read as "
            "DICOM defines them, relative to the patient (a device reporting its gantry's "
            "angles unchanged would put the beam on the other side)"
        )
    columns = _POSITIONS[(relationship, modifier)]
    return np.stack(columns, axis=1), notes


def detector_direction(
    primary_deg: float | FloatArray, secondary_deg: float | FloatArray
) -> FloatArray:
    """Unit vector from the isocentre toward the image receptor, patient frame (l, s, a).

    .. math::

        \\hat d = (\\sin\\alpha\\cos\\beta,\\; \\sin\\beta,\\; \\cos\\alpha\\cos\\beta)

    Examples
    --------
    >>> detector_direction(90.0, 0.0).round(12).tolist()  # LAO 90: receptor at the left
    [1.0, 0.0, 0.0]
    """
    a = np.radians(np.asarray(primary_deg, dtype=np.float64))
    b = np.radians(np.asarray(secondary_deg, dtype=np.float64))
    return np.stack((np.sin(a) * np.cos(b), np.sin(b), np.cos(a) * np.cos(b)), axis=-1)


def detector_axes(
    primary_deg: float | FloatArray, secondary_deg: float | FloatArray
) -> tuple[FloatArray, FloatArray]:
    """The receptor's width and height axes :math:`\\hat e_u, \\hat e_v` (patient frame)."""
    a = np.radians(np.asarray(primary_deg, dtype=np.float64))
    e_u = np.stack((np.cos(a), np.zeros_like(a), -np.sin(a)), axis=-1)
    e_v = np.cross(detector_direction(primary_deg, secondary_deg), e_u)
    return e_u, e_v


def reference_point_distance_mm(*, source_to_isocenter_mm: float) -> float:
    """Focus to the interventional reference point, mm: :math:`D_{SI} - 150` (IEC 60601-2-43).

    Examples
    --------
    >>> reference_point_distance_mm(source_to_isocenter_mm=810.0)
    660.0
    """
    if not (math.isfinite(source_to_isocenter_mm) and source_to_isocenter_mm > 150.0):
        raise ModelError(
            f"focus to isocentre {source_to_isocenter_mm!r} mm leaves no reference point "
            "15 cm toward the focus"
        )
    return source_to_isocenter_mm - IEC_REFERENCE_POINT_OFFSET_MM


def _tilt(theta_deg: float) -> FloatArray:
    """Rotation about the room's X axis by the head tilt (head end up for positive angles)."""
    t = math.radians(theta_deg)
    c, s = math.cos(t), math.sin(t)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


@dataclass
class ResolvedBeams:
    """Every beam of a procedure in the patient frame, one row per (sub-)event.

    A rotational or stepping acquisition is several rows sharing one ``parent``, its K_a,r
    shared equally. Arrays of shape (n,) or (n, 3); the table is fixed in the patient frame.
    """

    parent: NDArray[np.int64]
    source: FloatArray
    axis: FloatArray
    e_u: FloatArray
    e_v: FloatArray
    sid_mm: FloatArray
    half_width_mm: FloatArray
    half_height_mm: FloatArray
    reference_distance_mm: FloatArray
    kerma_at_reference_mgy: FloatArray
    table_point: FloatArray
    table_normal: FloatArray
    table_across: FloatArray
    table_half_width_mm: float
    vertical: FloatArray
    skipped: list[tuple[int, str | None, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def size(self) -> int:
        return int(self.parent.size)


class _Notes:
    """Assumptions, each said once, with the number of events it applied to."""

    def __init__(self) -> None:
        self.counts: dict[str, int] = {}
        self._event: set[str] = set()

    def next_event(self) -> None:
        self._event = set()

    def add(self, text: str) -> None:
        if text in self._event:
            return
        self._event.add(text)
        self.counts[text] = self.counts.get(text, 0) + 1

    def lines(self, total: int) -> list[str]:
        return [
            text if n == total or total == 1 else f"{text} ({n} of {total} events)"
            for text, n in self.counts.items()
        ]


def _median(values: Sequence[float | None]) -> float | None:
    present = [v for v in values if v is not None]
    return float(np.median(present)) if present else None


def _distance(
    event_value: float | None, room_value: float | None, key: str, notes: _Notes
) -> float:
    if event_value is not None:
        return event_value
    if room_value is not None:
        return room_value
    default = skin_default(key)
    notes.add(
        f"{key.removesuffix('_mm').replace('_', ' ')} not recorded: {default.value:g} mm "
        f"assumed ({default.source.split(':')[0]})"
    )
    return default.value


def _field_half_sides(
    ev: SkinEvent, sid: float, d_ref: float, notes: _Notes
) -> tuple[float, float]:
    """Half-width and half-height of the collimated field at the receptor, mm."""
    area_from_dose = None
    kar, dap = ev.reference_point_air_kerma_mgy, ev.dap_gy_cm2
    if kar and dap and kar > 0 and dap > 0:
        area_from_dose = dap * 1000.0 / kar * (sid / d_ref) ** 2  # cm2 at the receptor
    if ev.field_width_mm and ev.field_height_mm:
        half = (ev.field_width_mm / 2.0, ev.field_height_mm / 2.0)
        reported = ev.field_width_mm * ev.field_height_mm / 100.0
    elif ev.field_area_cm2:
        side = math.sqrt(ev.field_area_cm2) * 10.0
        half, reported = (side / 2.0, side / 2.0), ev.field_area_cm2
        notes.add("only the collimated field's area recorded: a square field assumed")
    elif area_from_dose is not None:
        side = math.sqrt(area_from_dose) * 10.0
        notes.add(
            "no collimated field recorded: a square field of area DAP / K_a,r at the "
            "reference point assumed"
        )
        return side / 2.0, side / 2.0
    else:
        default = skin_default("field_side_at_detector_mm")
        notes.add(
            f"no field, and no DAP with K_a,r: a {default.value:g} mm square field at the "
            "receptor assumed"
        )
        return default.value / 2.0, default.value / 2.0
    if area_from_dose is not None and not 0.7 <= area_from_dose / reported <= 1.0 / 0.7:
        notes.add(
            "DAP / K_a,r disagrees with the recorded collimated field by more than 30 % "
            "(field definition, DAP meter or table in the DAP differ): the recorded field used"
        )
    return half


def _reference_distance(
    ev: SkinEvent,
    sod: float,
    sid: float,
    source_z: float,
    axis_z: float,
    table_top_z: float,
    notes: _Notes,
) -> float | str:
    """Focus to the reference point along the central ray, mm, or the reason there is none."""
    if ev.source_to_reference_point_mm is not None:
        return ev.source_to_reference_point_mm
    definition = ev.reference_point_definition
    if definition in (None, "isocenter_15cm_toward_source"):
        if definition is None:
            notes.add(
                "reference point definition not recorded: 15 cm from the isocentre "
                "toward the focus assumed (IEC 60601-2-43)"
            )
        if sod <= IEC_REFERENCE_POINT_OFFSET_MM:
            return "focus to isocentre too short for a reference point 15 cm toward the focus"
        return reference_point_distance_mm(source_to_isocenter_mm=sod)
    if definition == "source_100cm":
        return 1000.0
    if definition == "detector_plane":
        return sid
    if definition == "image_input_30cm_in_front":
        return sid - 300.0
    if definition in _TABLETOP_REFERENCE_MM:
        if abs(axis_z) < 0.1:
            return "reference point above the tabletop, but the central ray runs along the table"
        height = table_top_z + _TABLETOP_REFERENCE_MM[definition]
        return (height - source_z) / axis_z
    return f"reference point {definition!r} not modelled"


def _steps(start: float | None, end: float | None, step: float) -> int:
    if start is None or end is None:
        return 1
    return max(1, math.ceil(abs(end - start) / step))


def _lerp(start: float | None, end: float | None, fraction: float) -> float | None:
    if start is None or end is None:
        return start
    return start + (end - start) * fraction


def _normalised_angle(deg: float) -> float:
    return (deg + 180.0) % 360.0 - 180.0


@dataclass(frozen=True)
class _ProcedureFrame:
    """What holds for every event of one procedure: the patient's position on the table, the
    landmark at the isocentre, the tabletop and the table's reference positions."""

    m: FloatArray  # columns: the room directions of the patient's l, s, a (untilted)
    p0: FloatArray  # the isocentre's point in the patient frame at the reference position
    vertical_patient: FloatArray  # room "up" in the patient frame, untilted
    half_vertical_mm: float  # the body's half-size along room "up"
    mattress_mm: float
    table_top_ref_mm: float  # the tabletop's height at the reference table position
    refs: dict[str, float | None]  # the table's reference positions (lateral, longitudinal, height)
    table_width_mm: float
    notes: list[str]


def _patient_position_notes(events: Sequence[SkinEvent]) -> tuple[FloatArray, list[str]]:
    """The patient's orientation matrix (from the first event that records a position), with
    notes on upright patients and on events that record different positions."""
    first = next((e for e in events if e.patient_table_relationship), None)
    relationship = first.patient_table_relationship if first else None
    first = next((e for e in events if e.patient_orientation_modifier), None)
    modifier = first.patient_orientation_modifier if first else None
    m, notes = orientation_matrix(relationship, modifier)
    upright = sorted({e.patient_orientation or "" for e in events} & {"erect", "semi_erect"})
    if upright:
        notes.append(
            f"patient recorded {' and '.join(upright).replace('_', '-')}: modelled lying on the "
            "table all the same (no standing or sitting patient model)"
        )
    positions = {
        (e.patient_table_relationship, e.patient_orientation_modifier)
        for e in events
        if e.patient_table_relationship or e.patient_orientation_modifier
    }
    if len(positions) > 1:
        notes.append("the events record different patient positions: the first used")
    return m, notes


def _isocentre_landmark(events: Sequence[SkinEvent], room: SkinRoom, notes: list[str]) -> str:
    """The body landmark taken to lie at the isocentre: the room's, else the target region's,
    else the middle of the trunk (noted)."""
    if room.isocenter_landmark is not None:
        return room.isocenter_landmark
    region = next((e.body_part for e in events if e.body_part), None)
    landmark = landmark_for_region(region)
    if landmark is None:
        notes.append(
            "no target region: the middle of the trunk taken to lie at the isocentre "
            "(placing the map along the body only)"
        )
        return "trunk"
    notes.append(
        f"the {landmark} (target region {region}) taken to lie at the isocentre "
        "at the reference table position (placing the map along the body only)"
    )
    return landmark


def _procedure_frame(
    events: Sequence[SkinEvent], patient: PatientModel, room: SkinRoom
) -> _ProcedureFrame:
    """The patient on the table for the whole procedure (module docstring, **Table**)."""
    m, notes = _patient_position_notes(events)
    landmark = _isocentre_landmark(events, room, notes)
    y_land = body_landmark_fraction(landmark) * patient.height_mm
    vertical_patient = m.T @ _Z
    half_vertical = (
        patient.half_thickness_mm if abs(vertical_patient[2]) > 0.5 else patient.half_width_mm
    )
    mattress = room.mattress_thickness_mm
    if mattress is None:
        default = skin_default("mattress_thickness_mm")
        mattress = default.value
        notes.append(
            f"table pad thickness {default.value:g} mm assumed under the skin "
            "(a thicker pad would lower the back's dose from an under-table tube)"
        )
    if room.table_top_below_isocenter_mm is None:
        table_top_ref = -(half_vertical + mattress)
        notes.append("patient taken as centred on the isocentre at the reference table position")
    else:
        table_top_ref = -room.table_top_below_isocenter_mm
    refs: dict[str, float | None] = {
        "longitudinal": room.reference_longitudinal_mm,
        "lateral": room.reference_lateral_mm,
        "height": room.reference_height_mm,
    }
    for axis, value in refs.items():
        if value is None:
            refs[axis] = _median([getattr(e, f"table_{axis}_position_mm") for e in events])
            if refs[axis] is not None:
                notes.append(
                    f"table {axis} reference: the median over the procedure (the room gives none)"
                )
    return _ProcedureFrame(
        m=m,
        p0=np.array([0.0, -y_land, 0.0]),
        vertical_patient=vertical_patient,
        half_vertical_mm=half_vertical,
        mattress_mm=mattress,
        table_top_ref_mm=table_top_ref,
        refs=refs,
        table_width_mm=room.table_width_mm or skin_default("table_width_mm").value,
        notes=notes,
    )


def _event_step_count(ev: SkinEvent, notes: _Notes) -> int:
    """Into how many beams an event is cut: by its table travel and, for a rotational
    acquisition, by its arc (the defaults' stepping and rotational steps)."""
    steps_mm = skin_default("stepping_step_mm").value
    n = max(
        _steps(
            getattr(ev, f"table_{a}_position_mm"),
            getattr(ev, f"table_{a}_end_position_mm"),
            steps_mm,
        )
        for a in ("longitudinal", "lateral", "height")
    )
    if ev.event_type == "rotational":
        steps_deg = skin_default("rotational_step_deg").value
        if ev.positioner_primary_end_angle_deg is None:
            notes.add("rotational acquisition without an end angle: taken at its start angle")
        for start, end in (
            (ev.positioner_primary_angle_deg, ev.positioner_primary_end_angle_deg),
            (ev.positioner_secondary_angle_deg, ev.positioner_secondary_end_angle_deg),
        ):
            n = max(n, _steps(start, end, steps_deg))
    return n


_Step = tuple[FloatArray, FloatArray, FloatArray, FloatArray, float]


def _event_beam_at(
    ev: SkinEvent,
    frac: float,
    *,
    frame: _ProcedureFrame,
    room: SkinRoom,
    sod: float,
    sid: float,
    notes: _Notes,
) -> _Step | str:
    """One beam of an event at ``frac`` of its travel, in the patient frame: the focus, the
    central ray, the receptor's axes and the focus to reference point distance; or the reason
    the reference point cannot be placed."""
    m = frame.m
    alpha = _normalised_angle(
        _lerp(ev.positioner_primary_angle_deg, ev.positioner_primary_end_angle_deg, frac) or 0.0
    )
    beta = (
        _lerp(ev.positioner_secondary_angle_deg, ev.positioner_secondary_end_angle_deg, frac) or 0.0
    )
    u = detector_direction(alpha, beta)
    e_u, e_v = detector_axes(alpha, beta)
    d_room = m @ u
    source_room = -sod * d_room
    shift = []
    for axis, sign in (
        ("lateral", room.lateral_sign),
        ("longitudinal", room.longitudinal_sign),
        ("height", room.height_sign),
    ):
        pos = _lerp(
            getattr(ev, f"table_{axis}_position_mm"),
            getattr(ev, f"table_{axis}_end_position_mm"),
            frac,
        )
        ref = frame.refs[axis]
        shift.append(0.0 if pos is None or ref is None else sign * (pos - ref))
    table_top = frame.table_top_ref_mm + shift[2]
    if ev.source_to_table_mm is not None and abs(d_room[2]) >= math.cos(
        math.radians(_VERTICAL_WITHIN_DEG)
    ):
        table_top = source_room[2] + ev.source_to_table_mm * d_room[2]
        notes.add("tabletop placed by the Distance Source to Table Plane (113792, DCM)")
    centre = np.array([shift[0], shift[1], table_top + frame.mattress_mm + frame.half_vertical_mm])
    pivot = np.array([shift[0], shift[1], table_top])
    tilt = _tilt(ev.table_head_tilt_angle_deg or 0.0)
    # room -> patient frame: p = M^T (R^T (X - pivot) + pivot - centre) + p0
    source_p = m.T @ (tilt.T @ (source_room - pivot) + pivot - centre) + frame.p0
    to_patient = m.T @ tilt.T @ m
    d_ref = _reference_distance(
        ev, sod, sid, float(source_room[2]), float(d_room[2]), table_top, notes
    )
    if isinstance(d_ref, str):
        return d_ref
    if not (0.0 < d_ref < sid):
        return (
            f"reference point {d_ref:g} mm from the focus is not between the focus and the receptor"
        )
    return source_p, to_patient @ u, to_patient @ e_u, to_patient @ e_v, d_ref


def _event_beams(
    ev: SkinEvent, *, frame: _ProcedureFrame, room: SkinRoom, notes: _Notes
) -> tuple[list[_Step], float, float, float] | str:
    """An event's beams (one per step of its travel) with its focus-to-receptor distance and
    field half-sides; or why the event cannot be placed."""
    sod = _distance(
        ev.source_to_isocenter_mm, room.source_to_isocenter_mm, "source_to_isocenter_mm", notes
    )
    sid = _distance(ev.sid_mm, room.sid_mm, "sid_mm", notes)
    if sid <= sod:
        return f"focus to receptor {sid:g} mm is not beyond the isocentre ({sod:g} mm)"
    if ev.reference_point_air_kerma_mgy is None and not ev.dap_gy_cm2:
        return "no K_a,r (113738, DCM) and no DAP"
    if ev.positioner_primary_angle_deg is None or ev.positioner_secondary_angle_deg is None:
        notes.add("positioner angles not recorded: 0° (receptor in front of the patient) assumed")
    if ev.table_cradle_tilt_angle_deg or ev.table_horizontal_rotation_angle_deg:
        notes.add("table cradle tilt and horizontal rotation not modelled")
    n = _event_step_count(ev, notes)
    steps: list[_Step] = []
    for k in range(n):
        frac = (k + 0.5) / n if n > 1 else 0.0
        step = _event_beam_at(ev, frac, frame=frame, room=room, sod=sod, sid=sid, notes=notes)
        if isinstance(step, str):
            return step
        steps.append(step)
    hw, hh = _field_half_sides(ev, sid, steps[0][4], notes)
    return steps, sid, hw, hh


def resolve_beams(
    events: Sequence[SkinEvent], *, patient: PatientModel, room: SkinRoom
) -> ResolvedBeams:
    """Every event's beam and the table, in the patient frame (module docstring).

    Events without a K_a,r (and without a DAP and a field to derive one), or whose reference
    point cannot be placed, are listed in ``skipped`` with the reason; never dropped silently.
    """
    notes = _Notes()
    frame = _procedure_frame(events, patient, room)
    rows: dict[str, list[object]] = {
        k: [] for k in ("parent", "source", "axis", "e_u", "e_v", "sid", "hw", "hh", "dref", "kref")
    }
    skipped: list[tuple[int, str | None, str]] = []
    for index, ev in enumerate(events):
        notes.next_event()
        beams = _event_beams(ev, frame=frame, room=room, notes=notes)
        if isinstance(beams, str):
            skipped.append((index, ev.label, beams))
            continue
        steps, sid, hw, hh = beams
        kar = ev.reference_point_air_kerma_mgy
        for source_p, axis_p, e_u_p, e_v_p, d_ref in steps:
            if kar is None:
                area_ref = 4.0 * hw * hh * (d_ref / sid) ** 2 / 100.0  # cm2
                kref = (ev.dap_gy_cm2 or 0.0) * 1000.0 / area_ref
                notes.add("K_a,r not recorded: DAP over the field at the reference point used")
            else:
                kref = kar
            kref *= room.kar_calibration_factor / len(steps)
            row = (index, source_p, axis_p, e_u_p, e_v_p, sid, hw, hh, d_ref, kref)
            for key, value in zip(rows, row, strict=True):
                rows[key].append(value)
    # the table in the patient frame: the plane under the patient, normal toward the patient
    table_normal = frame.vertical_patient
    table_point = frame.p0 - (frame.half_vertical_mm + frame.mattress_mm) * table_normal
    all_notes = [*frame.notes, *notes.lines(len(events))]
    if room.kar_calibration_factor != 1.0:
        all_notes.append(
            f"K_a,r multiplied by the room's calibration factor {room.kar_calibration_factor:g}"
        )

    def stack(key: str, width: int = 0) -> FloatArray:
        if not rows[key]:
            return np.zeros((0, width) if width else (0,))
        return np.asarray(rows[key], dtype=np.float64)

    return ResolvedBeams(
        parent=np.asarray(rows["parent"], dtype=np.int64),
        source=stack("source", 3),
        axis=stack("axis", 3),
        e_u=stack("e_u", 3),
        e_v=stack("e_v", 3),
        sid_mm=stack("sid"),
        half_width_mm=stack("hw"),
        half_height_mm=stack("hh"),
        reference_distance_mm=stack("dref"),
        kerma_at_reference_mgy=stack("kref"),
        table_point=table_point,
        table_normal=table_normal,
        table_across=frame.m.T @ _X,
        table_half_width_mm=frame.table_width_mm / 2.0,
        vertical=frame.vertical_patient,
        skipped=skipped,
        notes=all_notes,
    )


def vertical_uncertainty_mm() -> float:
    """Standard uncertainty of the patient's height on the table relative to the beams, mm."""
    return dose_default("isocentre_centring_uncertainty_mm").value
