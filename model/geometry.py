"""Exposure geometry: focus-to-skin distance and field size from what the exposure carries.

An entrance dose needs the distance from the focus to the patient's entrance surface (FSD) and
the field there; a DAP needs the field at any one plane and the distance of that plane. Exposures
carry these in many ways, and often not at all. :func:`resolve_geometry` takes every geometry
value an exposure may carry (all optional, named as in :mod:`beamaudit.ingest`'s event records)
and uses them in a fixed order of preference, recording which one it used:

Entrance distance (FSD), first that applies:

1. ``source_to_entrance_mm`` (Distance Source to Entrance (0040,0306), or a dose report's);
2. ``source_to_patient_mm`` minus the thickness: for DX, CR and MG, Distance Source to Patient
   (0018,1111) is to the table, support or bucky side nearest the patient (DICOM PS3.3
   C.8.11.7), i.e. the exit side of a patient between tube and support;
3. ``source_to_table_mm``: with the tube above the table the patient's entrance is the table
   distance minus the thickness; with the tube below, the patient lies on the tabletop and the
   entrance is at the table (the mattress's thickness neglected, noted; the table top and
   mattress's attenuation belongs to the beam, :mod:`beamaudit.model.patient_support`);
4. ``source_to_isocenter_mm`` minus half the thickness (CT, XA and XRF, whose (0018,1111) is to
   the isocentre: the patient taken as centred on the isocentre, assumed, with an extra centring
   uncertainty);
5. ``sid_mm / magnification_factor`` minus the thickness: Estimated Radiographic Magnification
   Factor (0018,1114) is SID over source-object distance; the object plane is taken as the
   support plane of (0018,1111) (assumed);
6. ``sid_mm`` minus the receptor gap minus the thickness (gap from the room, else the default
   for the receptor kind, assumed);
7. the exam type's default SID, then as 6 (assumed).

Thickness: ``body_part_thickness_mm`` (Body Part Thickness (0018,11A0)), else the exam type's
default, else the generic adult default (assumed).

Field, first that applies (at the plane given, else at the image receptor, the SID):

1. ``field_area_cm2`` (a dose report's Collimated Field Area (113790, DCM), defined at the image
   receptor, DICOM PS3.16; from memory);
2. ``field_width_mm`` x ``field_height_mm`` (Collimated Field Width / Height, or Exposed Area
   (0040,0303), at the detector plane);
3. collimator edges in pixels x Imager Pixel Spacing (0018,1164), at the receptor's front plane;
   edges that are not plausible pixel positions are skipped with a note;
4. ``detector_dimensions_mm`` (Detector Active Dimensions (0018,7026)): the collimation taken as
   fully open, an upper bound (assumed);
5. the exam type's default field at the receptor (assumed).

Fields scale with distance from the focus, the basis of the inverse-square law:
:math:`A(d) = A(d_0)\\,(d/d_0)^2`.

Uncertainties are standard uncertainties (JCGM 100:2008), combined in quadrature for the sums
and differences above; the assumed ones are rows of ``data/dose_defaults.csv``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, fields
from typing import Any, Literal, Protocol

from beamaudit.model.defaults import GENERIC_EXAM, dose_default, exam_default
from beamaudit.model.errors import ModelError
from beamaudit.model.trail import TrailStep, WhyTrail

__all__ = [
    "GeometryInputs",
    "ResolvedGeometry",
    "field_area_at_distance_cm2",
    "resolve_geometry",
]

TubeSide = Literal["above", "below"]
_MM2_PER_CM2 = 100.0
_MM_PER_CM = 10.0


def field_area_at_distance_cm2(
    *, field_area_cm2: float, from_distance_mm: float, to_distance_mm: float
) -> float:
    """Field area at another distance from the focus (beam divergence from a point focus).

    .. math::

        A(d_2) = A(d_1) \\left(\\frac{d_2}{d_1}\\right)^2

    Raises
    ------
    ModelError
        If an area or distance is not positive and finite.
    """
    for name, value in (
        ("field area", field_area_cm2),
        ("distance", from_distance_mm),
        ("distance", to_distance_mm),
    ):
        if not (math.isfinite(value) and value > 0):
            raise ModelError(f"{name} must be a positive finite number, not {value!r}")
    return field_area_cm2 * (to_distance_mm / from_distance_mm) ** 2


@dataclass(frozen=True, slots=True)
class GeometryInputs:
    """Geometry an exposure may carry; every field optional (``None`` = not recorded).

    Distances in mm from the focus. ``provenance`` maps a field name to where it was read
    (``"(0018,1110) DistanceSourceToDetector"``), copied into the why trail.

    Attributes
    ----------
    sid_mm : focus to image receptor (SID).
    source_to_patient_mm : DX/CR/MG meaning of (0018,1111), to the support side nearest the
        patient. (For CT, XA and XRF, where (0018,1111) is to the isocentre, pass
        ``source_to_isocenter_mm`` instead.)
    source_to_entrance_mm : focus to the patient's entrance surface.
    source_to_isocenter_mm : focus to the isocentre.
    source_to_table_mm, tube_side : focus to the tabletop, and whether the tube is above or below
        the table (default above).
    source_to_reference_point_mm : focus to the dose report's reference point (for K_a,r).
    body_part_thickness_mm : patient thickness along the beam.
    magnification_factor : SID over source-object distance.
    field_width_mm, field_height_mm, field_plane_mm : field sides, and the distance of the plane
        they are given at (default the SID).
    field_area_cm2, field_area_plane_mm : field area and its plane (default the SID).
    collimator_edges_px : (left, right, upper, lower) edges, pixel columns and rows.
    imager_pixel_spacing_mm : (row, column) spacing at the receptor.
    detector_dimensions_mm : (width, height) of the active detector area.
    exam : exam type of ``data/exam_defaults.csv`` (e.g. ``"chest_pa"``) for defaults.
    receptor : receptor kind (``table_bucky``, ``wall_bucky``, ``direct``, ``unknown``).
    table_to_detector_gap_mm : the room's patient-exit-surface-to-receptor gap, if known.
    """

    sid_mm: float | None = None
    source_to_patient_mm: float | None = None
    source_to_entrance_mm: float | None = None
    source_to_isocenter_mm: float | None = None
    source_to_table_mm: float | None = None
    tube_side: TubeSide = "above"
    source_to_reference_point_mm: float | None = None
    body_part_thickness_mm: float | None = None
    magnification_factor: float | None = None
    field_width_mm: float | None = None
    field_height_mm: float | None = None
    field_plane_mm: float | None = None
    field_area_cm2: float | None = None
    field_area_plane_mm: float | None = None
    collimator_edges_px: tuple[float, float, float, float] | None = None
    imager_pixel_spacing_mm: tuple[float, float] | None = None
    detector_dimensions_mm: tuple[float, float] | None = None
    exam: str | None = None
    receptor: str | None = None
    table_to_detector_gap_mm: float | None = None
    provenance: Mapping[str, str] = field(default_factory=dict)

    @classmethod
    def field_names(cls) -> tuple[str, ...]:
        """Names of all the fields (for building one from keyword arguments)."""
        return tuple(f.name for f in fields(cls))


@dataclass(frozen=True)
class ResolvedGeometry:
    """The geometry used for one exposure, with uncertainties and the trail of how it was made.

    Attributes
    ----------
    fsd_mm, fsd_standard_uncertainty_mm : focus to the entrance surface.
    distance_source : which rule of the module docstring gave the FSD (e.g. ``"sid_gap"``).
    sid_mm : SID used (recorded or default; None when neither was needed).
    thickness_mm : patient thickness used (None when the FSD did not need one).
    field_plane_mm, field_plane_standard_uncertainty_mm : distance of the plane the field is at.
    field_area_at_plane_cm2, field_area_relative_uncertainty : the field there.
    field_width_at_plane_cm, field_height_at_plane_cm : its sides, when known.
    field_source : which rule gave the field (e.g. ``"collimator_edges"``).
    entrance_field_area_cm2 : the field at the entrance surface.
    entrance_field_side_cm, entrance_field_side_standard_uncertainty_cm : side of its equivalent
        square, :math:`2ab/(a+b)` (or :math:`\\sqrt{A}` when only the area is known).
    distance_trail, field_trail : the steps that made the FSD and the field; both empty when
        resolved with ``trail=False`` (then :attr:`assumptions` is empty too, which says
        nothing about what was assumed).
    """

    fsd_mm: float
    fsd_standard_uncertainty_mm: float
    distance_source: str
    sid_mm: float | None
    thickness_mm: float | None
    field_plane_mm: float
    field_plane_standard_uncertainty_mm: float
    field_area_at_plane_cm2: float
    field_area_relative_uncertainty: float
    field_width_at_plane_cm: float | None
    field_height_at_plane_cm: float | None
    field_source: str
    entrance_field_area_cm2: float
    entrance_field_side_cm: float
    entrance_field_side_standard_uncertainty_cm: float
    distance_trail: WhyTrail
    field_trail: WhyTrail

    @property
    def assumptions(self) -> list[str]:
        """Notes of every assumed step of both trails, each once."""
        merged = self.distance_trail.copy()
        merged.merge(self.field_trail)
        return merged.assumptions


#: the largest and the smallest distance (mm), area (cm2) or factor a geometry input may carry:
#: far beyond any x-ray room (a SID of 1e9 mm is 1000 km, 1e-9 mm a thousandth of a micron),
#: and far enough inside the floating-point range that the squares, ratios and products of the
#: rules above stay finite
INPUT_CEILING = 1e9
INPUT_FLOOR = 1e-9


def _positive(name: str, value: float | None) -> float | None:
    if value is None:
        return None
    number = float(value)
    if not (math.isfinite(number) and number > 0):
        raise ModelError(f"{name} must be a positive finite number, not {value!r}")
    if not INPUT_FLOOR <= number <= INPUT_CEILING:
        raise ModelError(
            f"{name} {number:g} is beyond any x-ray geometry "
            f"(from {INPUT_FLOOR:g} to {INPUT_CEILING:g})"
        )
    return number


#: a field as :meth:`_Resolver.field` gives it: (area cm², relative u, width cm, height cm,
#: plane mm, u plane mm, rule)
_Field = tuple[float, float, float | None, float | None, float, float, str]


class _Trail(Protocol):
    """What :class:`_Resolver` needs of a trail: a :class:`WhyTrail`, or one that keeps nothing."""

    @property
    def steps(self) -> tuple[TrailStep, ...]: ...

    def add(
        self,
        quantity: str,
        value: Any,
        unit: str,
        *,
        equation: str,
        source: str,
        inputs: Mapping[str, Any] | None = None,
        assumed: bool = False,
        note: str | None = None,
    ) -> TrailStep | None: ...

    def extend(self, other: Iterable[TrailStep]) -> None: ...


_AS_IS = frozenset({int, str, bool, type(None)})


def _recordable_as_is(value: object) -> bool:
    """True for a value a why trail records unchanged: None, bool, int, str, a finite float,
    or a list of those. False means "not sure", not "refused".

    (``v - v == 0`` holds exactly for a finite float; cheaper than ``math.isfinite``.)
    """
    kind = type(value)
    if kind is float:
        return value - value == 0.0  # type: ignore[operator]
    if kind in _AS_IS:
        return True
    if kind is list:
        return all(
            type(v) in _AS_IS or (type(v) is float and v - v == 0.0)
            for v in value  # type: ignore[attr-defined]
        )
    return False


class _UnkeptTrail:
    """Stands in for a :class:`WhyTrail` when no trail is wanted: keeps no step.

    It still refuses what :meth:`WhyTrail.add` refuses (a number JSON cannot carry: NaN, an
    infinity, a type that is not JSON-ready), with the same :class:`ModelError`, so that a
    resolution without a trail fails exactly where one with a trail does. The common case (the
    value and every input a finite float, an int, a str, a bool, None or a list of those) is
    checked here; a step with any other value is made as a real :class:`TrailStep`, which
    accepts or refuses it as a trail would, and is then dropped.
    """

    __slots__ = ()

    @property
    def steps(self) -> tuple[TrailStep, ...]:
        return ()

    def add(
        self,
        quantity: str,
        value: Any,
        unit: str,
        *,
        equation: str,
        source: str,
        inputs: Mapping[str, Any] | None = None,
        assumed: bool = False,
        note: str | None = None,
    ) -> None:
        if quantity and (note or not assumed) and _recordable_as_is(value):
            if inputs is None:
                return
            for v in inputs.values():
                if not _recordable_as_is(v):
                    break
            else:
                return
        TrailStep(
            quantity=quantity,
            value=value,
            unit=unit,
            equation=equation,
            source=source,
            inputs=dict(inputs or {}),
            assumed=assumed,
            note=note,
        )

    def extend(self, other: Iterable[TrailStep]) -> None:
        return


#: The one trail that keeps nothing (it holds no state, so it can be shared).
_UNKEPT = _UnkeptTrail()


class _Resolver:
    """One resolution: writes the trails and resolves SID and thickness at most once each.

    The trails are :class:`WhyTrail` objects, or both :data:`_UNKEPT` for a resolution without
    a trail (the same steps taken, with the same checks, errors and numbers; none kept).
    """

    def __init__(self, g: GeometryInputs, distance_trail: _Trail, field_trail: _Trail) -> None:
        self.g = g
        self.distance_trail = distance_trail
        self.field_trail = field_trail
        self._exam = exam_default(g.exam) if g.exam else None
        self._sid: tuple[float, float] | None = None
        self._sid_step: TrailStep | None = None
        self._thickness: tuple[float, float] | None = None
        self._thickness_step: TrailStep | None = None
        self.recorded_rel = dose_default("recorded_distance_relative_uncertainty").value

    def source_of(self, *names: str) -> str:
        """Where the named inputs were read (their provenance, else "as given"), each once."""
        found = dict.fromkeys(self.g.provenance.get(name, "as given") for name in names)
        return "; ".join(found)

    def exam(self) -> tuple[str, bool]:
        """The exam row to take defaults from and whether it is the generic fallback."""
        if self._exam is not None:
            return self._exam.exam, False
        return GENERIC_EXAM, True

    def _share(self, trail: _Trail, step: TrailStep) -> None:
        """Put an already-made step into another trail that also depends on it."""
        if step not in trail.steps:
            trail.extend([step])

    def sid(self, trail: _Trail) -> tuple[float, float]:
        """SID and its standard uncertainty (recorded, else the exam default)."""
        if self._sid is None:
            sid = _positive("sid_mm", self.g.sid_mm)
            if sid is not None:
                self._sid = (sid, self.recorded_rel * sid)
                self._sid_step = trail.add(
                    "sid_mm", sid, "mm", equation="recorded", source=self.source_of("sid_mm")
                )
            else:
                exam, generic = self.exam()
                row = exam_default(exam)
                rel = dose_default("default_sid_relative_uncertainty").value
                self._sid = (row.sid_mm, rel * row.sid_mm)
                self._sid_step = trail.add(
                    "sid_mm",
                    row.sid_mm,
                    "mm",
                    equation="exam-type default",
                    source=f"beamaudit data/exam_defaults.csv, exam {exam}",
                    assumed=True,
                    note=f"SID not recorded; {row.sid_mm:g} mm assumed "
                    f"({'no exam type known' if generic else 'default for ' + exam})",
                )
        elif self._sid_step is not None:
            self._share(trail, self._sid_step)
        return self._sid

    def thickness(self, trail: _Trail) -> tuple[float, float]:
        """Patient thickness and its standard uncertainty (recorded, else the exam default)."""
        if self._thickness is None:
            t = _positive("body_part_thickness_mm", self.g.body_part_thickness_mm)
            if t is not None:
                u = dose_default("recorded_thickness_uncertainty_mm").value
                self._thickness = (t, u)
                self._thickness_step = trail.add(
                    "body_part_thickness_mm",
                    t,
                    "mm",
                    equation="recorded",
                    source=self.source_of("body_part_thickness_mm"),
                )
            else:
                exam, generic = self.exam()
                row = exam_default(exam)
                self._thickness = (row.thickness_mm, row.thickness_standard_uncertainty_mm)
                self._thickness_step = trail.add(
                    "body_part_thickness_mm",
                    row.thickness_mm,
                    "mm",
                    equation="exam-type default",
                    source=(
                        f"beamaudit data/exam_defaults.csv, exam {exam} ({row.thickness_source})"
                    ),
                    assumed=True,
                    note=f"patient thickness not recorded; {row.thickness_mm:g} mm assumed "
                    f"({'no exam type known' if generic else 'standard patient for ' + exam})",
                )
        elif self._thickness_step is not None:
            self._share(trail, self._thickness_step)
        return self._thickness

    def gap(self, trail: _Trail) -> tuple[float, float]:
        """Patient exit surface to image receptor: the room's, else the receptor default."""
        room_gap = self.g.table_to_detector_gap_mm
        if room_gap is not None:
            if not (math.isfinite(room_gap) and 0 <= room_gap <= INPUT_CEILING):
                raise ModelError(
                    f"table_to_detector_gap_mm must be >= 0 and at most {INPUT_CEILING:g}, "
                    f"not {room_gap!r}"
                )
            u = self.recorded_rel * float(room_gap)
            trail.add(
                "table_to_detector_gap_mm",
                float(room_gap),
                "mm",
                equation="room value",
                source=self.source_of("table_to_detector_gap_mm"),
            )
            return float(room_gap), u
        receptor = self.g.receptor
        if receptor is None:
            receptor = exam_default(self.exam()[0]).receptor
        row = dose_default(f"gap_{receptor}_mm")
        trail.add(
            "table_to_detector_gap_mm",
            row.value,
            "mm",
            equation="receptor-kind default",
            source=f"beamaudit data/dose_defaults.csv, {row.key}",
            assumed=True,
            note=f"patient-to-receptor gap not known; {row.value:g} mm assumed "
            f"({'receptor kind not known' if receptor == 'unknown' else receptor})",
        )
        return row.value, row.standard_uncertainty or 0.0

    def fsd(self) -> tuple[float, float, str]:
        """Focus-to-skin distance, its standard uncertainty and the rule that gave it."""
        g, trail, rel = self.g, self.distance_trail, self.recorded_rel
        entrance = _positive("source_to_entrance_mm", g.source_to_entrance_mm)
        if entrance is not None:
            trail.add(
                "fsd_mm",
                entrance,
                "mm",
                equation="recorded focus-to-entrance distance",
                source=self.source_of("source_to_entrance_mm"),
            )
            return entrance, rel * entrance, "source_to_entrance"
        support = _positive("source_to_patient_mm", g.source_to_patient_mm)
        if support is not None:
            return self._minus_thickness(support, rel * support, "source_to_patient_mm")
        table = _positive("source_to_table_mm", g.source_to_table_mm)
        if table is not None:
            return self._fsd_from_table(table)
        iso = _positive("source_to_isocenter_mm", g.source_to_isocenter_mm)
        if iso is not None:
            return self._fsd_from_isocentre(iso)
        m = _positive("magnification_factor", g.magnification_factor)
        sid_recorded = _positive("sid_mm", g.sid_mm)
        if m is not None and sid_recorded is not None:
            return self._fsd_from_magnification(m)
        return self._fsd_from_sid_gap()

    def _fsd_from_table(self, table: float) -> tuple[float, float, str]:
        """FSD from the focus-to-tabletop distance: minus the thickness with the tube above the
        table, the tabletop itself with the tube below it."""
        g, rel = self.g, self.recorded_rel
        if g.tube_side == "above":
            return self._minus_thickness(table, rel * table, "source_to_table_mm")
        if g.tube_side != "below":
            raise ModelError(f"tube_side must be 'above' or 'below', not {g.tube_side!r}")
        self.distance_trail.add(
            "fsd_mm",
            table,
            "mm",
            equation="FSD = focus to tabletop (tube below the table, patient on the tabletop)",
            source=self.source_of("source_to_table_mm"),
            inputs={"source_to_table_mm": table},
            assumed=True,
            note="tube below the table: entrance taken at the tabletop (the mattress's "
            "thickness neglected)",
        )
        return table, rel * table, "source_to_table"

    def _fsd_from_isocentre(self, iso: float) -> tuple[float, float, str]:
        """FSD = d_iso - t/2, the patient taken as centred on the isocentre; the centring's
        uncertainty adds in quadrature to the distance's and half the thickness's."""
        trail = self.distance_trail
        t, u_t = self.thickness(trail)
        centring = dose_default("isocentre_centring_uncertainty_mm").value
        fsd = iso - t / 2.0
        self._check_fsd(fsd, f"source_to_isocenter_mm {iso:g} minus half the thickness {t:g}")
        trail.add(
            "fsd_mm",
            fsd,
            "mm",
            equation="FSD = d_iso - t/2",
            source=self.source_of("source_to_isocenter_mm"),
            inputs={"source_to_isocenter_mm": iso, "body_part_thickness_mm": t},
            assumed=True,
            note="patient taken as centred on the isocentre",
        )
        u = math.sqrt((self.recorded_rel * iso) ** 2 + (u_t / 2.0) ** 2 + centring**2)
        return fsd, u, "source_to_isocenter"

    def _fsd_from_magnification(self, m: float) -> tuple[float, float, str]:
        """FSD from the magnification factor: SOD = SID / M, the object plane taken as the patient
        support, minus the thickness."""
        if m < 1.0:
            raise ModelError(f"magnification_factor must be at least 1, not {m:g}")
        trail = self.distance_trail
        sid, u_sid = self.sid(trail)
        sod = sid / m
        trail.add(
            "source_to_object_mm",
            sod,
            "mm",
            equation="SOD = SID / M",
            source=self.source_of("magnification_factor"),
            inputs={"sid_mm": sid, "magnification_factor": m},
            assumed=True,
            note="object plane of the magnification factor taken as the patient support",
        )
        return self._minus_thickness(sod, u_sid / m, "source_to_object_mm", rule="magnification")

    def _fsd_from_sid_gap(self) -> tuple[float, float, str]:
        """FSD = SID - gap - t: a patient in front of the image receptor."""
        trail = self.distance_trail
        sid, u_sid = self.sid(trail)
        gap, u_gap = self.gap(trail)
        t, u_t = self.thickness(trail)
        fsd = sid - gap - t
        self._check_fsd(fsd, f"SID {sid:g} mm minus gap {gap:g} mm minus thickness {t:g} mm")
        trail.add(
            "fsd_mm",
            fsd,
            "mm",
            equation="FSD = SID - gap - t",
            source="geometry of a patient in front of the image receptor",
            inputs={"sid_mm": sid, "table_to_detector_gap_mm": gap, "body_part_thickness_mm": t},
        )
        return fsd, math.sqrt(u_sid**2 + u_gap**2 + u_t**2), "sid_gap"

    def _check_fsd(self, fsd: float, how: str) -> None:
        if not fsd > 0:
            raise ModelError(f"impossible geometry: {how} leaves no distance to the patient")

    def _minus_thickness(
        self, distance: float, u_distance: float, name: str, *, rule: str | None = None
    ) -> tuple[float, float, str]:
        t, u_t = self.thickness(self.distance_trail)
        fsd = distance - t
        self._check_fsd(fsd, f"{name} {distance:g} mm minus thickness {t:g} mm")
        self.distance_trail.add(
            "fsd_mm",
            fsd,
            "mm",
            equation=f"FSD = {name} - t (patient between the focus and that plane)",
            source=self.source_of(name),
            inputs={name: distance, "body_part_thickness_mm": t},
        )
        return fsd, math.sqrt(u_distance**2 + u_t**2), rule or name.removesuffix("_mm")

    def plane(self, given: float | None, name: str) -> tuple[float, float]:
        """Distance of the plane a field is given at: as given, else the SID."""
        d = _positive(name, given)
        if d is not None:
            self.field_trail.add(name, d, "mm", equation="recorded", source=self.source_of(name))
            return d, self.recorded_rel * d
        return self.sid(self.field_trail)

    def field(self) -> _Field:
        """(area cm², relative u, width cm, height cm, plane mm, u plane mm, rule)."""
        g = self.g
        area = _positive("field_area_cm2", g.field_area_cm2)
        if area is not None:
            return self._reported_area(area)
        w = _positive("field_width_mm", g.field_width_mm)
        h = _positive("field_height_mm", g.field_height_mm)
        if w is not None and h is not None:
            return self._reported_sides(w, h)
        from_edges = self._field_from_edges()
        if from_edges is not None:
            return self._collimator_field(*from_edges)
        if g.detector_dimensions_mm is not None:
            return self._detector_field(g.detector_dimensions_mm)
        return self._exam_default_field()

    def _reported_area(self, area: float) -> _Field:
        """The recorded field area, at its recorded plane (else the SID)."""
        plane, u_plane = self.plane(self.g.field_area_plane_mm, "field_area_plane_mm")
        rel = dose_default("reported_field_relative_uncertainty").value
        self.field_trail.add(
            "field_area_cm2",
            area,
            "cm²",
            equation="recorded",
            source=self.source_of("field_area_cm2"),
            inputs={"plane_mm": plane},
        )
        return area, rel, None, None, plane, u_plane, "reported_area"

    def _reported_sides(self, w: float, h: float) -> _Field:
        """A = w · h of the recorded field sides (mm), at their recorded plane (else the SID)."""
        plane, u_plane = self.plane(self.g.field_plane_mm, "field_plane_mm")
        rel = dose_default("reported_field_relative_uncertainty").value
        area = w * h / _MM2_PER_CM2
        self.field_trail.add(
            "field_area_cm2",
            area,
            "cm²",
            equation="A = w · h",
            source=self.source_of("field_width_mm", "field_height_mm"),
            inputs={"field_width_mm": w, "field_height_mm": h, "plane_mm": plane},
        )
        return area, rel, w / _MM_PER_CM, h / _MM_PER_CM, plane, u_plane, "reported_sides"

    def _collimator_field(self, w_mm: float, h_mm: float) -> _Field:
        """A = w · h of the sides the collimator edges give (:meth:`_field_from_edges`), at the
        image receptor."""
        g, trail = self.g, self.field_trail
        plane, u_plane = self.sid(trail)
        rel = dose_default("collimator_edge_field_relative_uncertainty").value
        area = w_mm * h_mm / _MM2_PER_CM2
        trail.add(
            "field_area_cm2",
            area,
            "cm²",
            equation="w = (right - left + 1) · column spacing; h = (lower - upper + 1) · row "
            "spacing; A = w · h",
            source=self.source_of("collimator_edges_px", "imager_pixel_spacing_mm"),
            inputs={
                "collimator_edges_px": list(g.collimator_edges_px or ()),
                "imager_pixel_spacing_mm": list(g.imager_pixel_spacing_mm or ()),
                "plane_mm": plane,
            },
        )
        return area, rel, w_mm / 10, h_mm / 10, plane, u_plane, "collimator_edges"

    def _detector_field(self, dimensions_mm: tuple[float, float]) -> _Field:
        """The whole detector as the field (collimation fully open): an upper bound."""
        trail = self.field_trail
        dw = _positive("detector width", dimensions_mm[0])
        dh = _positive("detector height", dimensions_mm[1])
        assert dw is not None and dh is not None
        plane, u_plane = self.sid(trail)
        rel = dose_default("detector_field_relative_uncertainty").value
        area = dw * dh / _MM2_PER_CM2
        trail.add(
            "field_area_cm2",
            area,
            "cm²",
            equation="A = detector width · height",
            source=self.source_of("detector_dimensions_mm"),
            inputs={"detector_dimensions_mm": [dw, dh], "plane_mm": plane},
            assumed=True,
            note="field taken as the whole detector (collimation fully open): an upper bound",
        )
        return area, rel, dw / 10, dh / 10, plane, u_plane, "detector_dimensions"

    def _exam_default_field(self) -> _Field:
        """The exam type's default field at the image receptor (data/exam_defaults.csv)."""
        trail = self.field_trail
        exam, generic = self.exam()
        row = exam_default(exam)
        plane, u_plane = self.sid(trail)
        rel = dose_default("exam_default_field_relative_uncertainty").value
        area = row.field_width_cm * row.field_height_cm
        trail.add(
            "field_area_cm2",
            area,
            "cm²",
            equation="exam-type default field at the image receptor",
            source=f"beamaudit data/exam_defaults.csv, exam {exam}",
            inputs={"field_width_cm": row.field_width_cm, "field_height_cm": row.field_height_cm},
            assumed=True,
            note=f"field size not recorded; {row.field_width_cm:g} x {row.field_height_cm:g} cm "
            f"at the receptor assumed ({'no exam type known' if generic else exam})",
        )
        return area, rel, row.field_width_cm, row.field_height_cm, plane, u_plane, "exam_default"

    def _field_from_edges(self) -> tuple[float, float] | None:
        """Field sides (mm) from collimator edges and imager pixel spacing, if plausible."""
        g = self.g
        if g.collimator_edges_px is None or g.imager_pixel_spacing_mm is None:
            return None
        left, right, upper, lower = (float(v) for v in g.collimator_edges_px)
        row_mm, col_mm = (float(v) for v in g.imager_pixel_spacing_mm)
        why = None
        if min(left, right, upper, lower) < 0:
            why = "negative edge values are not pixel positions"
        elif right <= left or lower <= upper:
            why = "edges out of order"
        elif not (row_mm > 0 and col_mm > 0 and math.isfinite(row_mm * col_mm)):
            why = "imager pixel spacing not positive"
        if why is None:
            w_mm = (right - left + 1.0) * col_mm
            h_mm = (lower - upper + 1.0) * row_mm
            det = g.detector_dimensions_mm
            if det is not None and (w_mm * h_mm > 1.05 * float(det[0]) * float(det[1])):
                why = "field from the edges is larger than the detector"
            else:
                return w_mm, h_mm
        self.field_trail.add(
            "collimator_edges_px",
            None,
            "px",
            equation="skipped",
            source=self.source_of("collimator_edges_px"),
            inputs={"collimator_edges_px": [left, right, upper, lower]},
            assumed=True,
            note=f"collimator edges not used ({why})",
        )
        return None


def resolve_geometry(inputs: GeometryInputs, *, trail: bool = True) -> ResolvedGeometry:
    """Resolve FSD and field for one exposure, in the order of preference of this module.

    Parameters
    ----------
    inputs : GeometryInputs
        What the exposure carries (all optional).
    trail : bool
        Keep the why trails (default). With False the same rules are applied and the same
        checks made (a why trail's refusal of a number it cannot record included, so the same
        inputs raise the same :class:`ModelError`), giving the same numbers, but no step is
        kept: ``distance_trail`` and ``field_trail`` are empty. For many exposures at once
        (:func:`beamaudit.model.bulk.dose_from_beams`), whose trails are made again on demand.

    Returns
    -------
    ResolvedGeometry
        FSD, field at its plane and at the entrance, their standard uncertainties, and the
        trails that made them (empty with ``trail=False``).

    Raises
    ------
    ModelError
        Impossible geometry (a patient thicker than the distance to the receptor, a field of
        zero area), non-positive values, an unknown exam type or receptor kind, a number the
        why trail cannot record.

    Examples
    --------
    >>> geo = resolve_geometry(GeometryInputs(sid_mm=1000, body_part_thickness_mm=200,
    ...                                       table_to_detector_gap_mm=50,
    ...                                       field_width_mm=300, field_height_mm=300))
    >>> geo.fsd_mm, round(geo.entrance_field_area_cm2, 1)
    (750.0, 506.2)
    """
    if inputs.receptor is not None and f"gap_{inputs.receptor}_mm" not in _receptor_keys():
        raise ModelError(
            f"unknown receptor kind {inputs.receptor!r} (known: table_bucky, wall_bucky, "
            "direct, unknown)"
        )
    distance_trail, field_trail = WhyTrail(), WhyTrail()
    if trail:
        r = _Resolver(inputs, distance_trail, field_trail)
    else:
        r = _Resolver(inputs, _UNKEPT, _UNKEPT)
    fsd, u_fsd, distance_source = r.fsd()
    area, rel_area, w_cm, h_cm, plane, u_plane, field_source = r.field()
    scale = fsd / plane
    entrance_area = area * scale**2
    if w_cm is not None and h_cm is not None:
        side_at_plane = 2.0 * w_cm * h_cm / (w_cm + h_cm)
        side_rule = "s = 2ab/(a+b) (Sterling, Perry & Katz, Br J Radiol 37:544, 1964)"
    else:
        side_at_plane = math.sqrt(area)
        side_rule = "s = sqrt(A) (only the area is known)"
    side = side_at_plane * scale
    u_side = side * math.sqrt((rel_area / 2.0) ** 2 + (u_fsd / fsd) ** 2 + (u_plane / plane) ** 2)
    r.field_trail.add(
        "entrance_field_area_cm2",
        entrance_area,
        "cm²",
        equation="A_e = A(d) · (FSD / d)²",
        source="beam divergence from a point focus (inverse-square geometry)",
        inputs={"field_area_cm2": area, "plane_mm": plane, "fsd_mm": fsd},
    )
    r.field_trail.add(
        "entrance_field_side_cm",
        side,
        "cm",
        equation=f"equivalent square side at the entrance, {side_rule}",
        source="Sterling, Perry & Katz 1964 equivalent square",
        inputs={"side_at_plane_cm": side_at_plane, "fsd_mm": fsd, "plane_mm": plane},
        assumed=w_cm is not None and h_cm is not None and abs(w_cm - h_cm) > 1e-9,
        note="rectangular field taken as its equivalent square for backscatter",
    )
    sid_used = r._sid[0] if r._sid is not None else None
    thickness_used = r._thickness[0] if r._thickness is not None else None
    return ResolvedGeometry(
        fsd_mm=fsd,
        fsd_standard_uncertainty_mm=u_fsd,
        distance_source=distance_source,
        sid_mm=sid_used,
        thickness_mm=thickness_used,
        field_plane_mm=plane,
        field_plane_standard_uncertainty_mm=u_plane,
        field_area_at_plane_cm2=area,
        field_area_relative_uncertainty=rel_area,
        field_width_at_plane_cm=w_cm,
        field_height_at_plane_cm=h_cm,
        field_source=field_source,
        entrance_field_area_cm2=entrance_area,
        entrance_field_side_cm=side,
        entrance_field_side_standard_uncertainty_cm=u_side,
        distance_trail=distance_trail,
        field_trail=field_trail,
    )


def _receptor_keys() -> set[str]:
    from beamaudit.model.defaults import load_dose_defaults

    return {key for key in load_dose_defaults() if key.startswith("gap_")}
