r"""Skin-dose maps and peak skin dose of fluoroscopy and interventional procedures.

The reference-point air kerma K_a,r a dose report gives is not the skin dose: the beam moves,
the table moves, and the patient is not at the reference point. Here each irradiation event's
beam (:mod:`beamaudit.model.skin_geometry`) is projected onto the skin of an elliptical-cylinder
patient (:mod:`beamaudit.model.patient_model`), and at each skin cell of about 1 cm

.. math::

    D_c = \sum_{e} K_{a,r,e} \left(\frac{d_{ref,e}}{d_{c,e}}\right)^2 T_{table,e}\; B_e\;
          \overline{\left(\frac{\mu_{en}}{\rho}\right)}^{tissue}_{air,e}\; \chi_{c,e}

with :math:`d_{ref}` the focus-to-reference-point distance, :math:`d_c` the focus-to-cell
distance (inverse-square law from a point focus), :math:`T_{table}` the transmission of table
and pad where the ray crosses them (else 1), :math:`B` the backscatter factor for the event's
beam quality and its field at the skin, the ratio of mass energy-absorption coefficients of
soft tissue to air for the event's spectrum (IAEA TRS 457, 2007, §7; ICRU Report 74, 2005),
and :math:`\chi_{c,e}` the fraction of the cell inside the event's collimated field and facing
the focus (the entrance skin; the body is convex, so a surface point is an entrance point
exactly when its outward normal faces the focus). The fraction is found on ``subcells`` x
``subcells`` points of each cell near the field, so a field edge splits a cell rather than
taking it whole; each cell's value is its mean dose. The factors come from a
:class:`~beamaudit.model.skin_factors.BeamFactors` (default
:class:`~beamaudit.model.skin_factors.SpectrumBeamFactors`).

Air kerma at a point does not depend on the surface's tilt, so no cosine enters the dose; it
enters the conservation of energy fluence instead: for any surface that takes the whole beam,
:math:`\sum_c K_c A_c \cos\theta_c = K_{a,r} A(d_{ref}) = P_{KA}` (the air kerma-area product is
the same in every plane, ICRU 74).

The peak skin dose (PSD) is the highest cell; the area above the follow-up levels
(:data:`beamaudit.model.followup.FOLLOW_UP_LEVELS_MGY`) counts whole cells; the events that made
the peak are each event's dose at the peak cell.

**Uncertainty.** The PSD's relative standard uncertainty combines in quadrature (first order,
JCGM 100:2008): the K_a,r display (IEC 60601-2-43 allows +-35 %, 20 % standard uncertainty when
the room has no calibration; the room's own value otherwise), the table transmission of the
dose that crossed the table, B and the tissue-to-air ratio (each summed over the events at the
peak, as fully correlated), the patient's height on the table (30 mm, carried through the
inverse-square law of each event at the peak), and the patient model itself (10 %). The map
states it expanded with a coverage factor of 2; published expanded uncertainties of skin-dose
estimates run from about 15 % to 60 % with how well the inputs are known.

Every figure is an estimate for quality assurance and optimisation; a clinical decision about
a patient needs a qualified medical physicist.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from beamaudit.model.errors import ModelError
from beamaudit.model.followup import FOLLOW_UP_LEVELS_MGY
from beamaudit.model.patient_model import (
    BODY_LANDMARKS,
    PatientModel,
    SkinGrid,
    body_landmark_fraction,
    patient_model,
    skin_default,
    skin_grid,
)
from beamaudit.model.skin_events import SkinEvent, SkinRoom
from beamaudit.model.skin_factors import BeamFactors, SpectrumBeamFactors
from beamaudit.model.skin_geometry import ResolvedBeams, resolve_beams, vertical_uncertainty_mm

__all__ = [
    "COVERAGE_FACTOR",
    "PeakContributor",
    "SkinDoseMap",
    "SkinDoseUncertainty",
    "skin_dose_map",
]

FloatArray = NDArray[np.float64]

#: Coverage factor of the stated expanded uncertainty (about 95 %, JCGM 100:2008 §6).
COVERAGE_FACTOR = 2.0


@dataclass(frozen=True)
class PeakContributor:
    """One event's dose at the peak cell."""

    event_index: int
    label: str | None
    dose_mgy: float
    share: float


@dataclass(frozen=True)
class SkinDoseUncertainty:
    """The PSD's uncertainty: relative standard uncertainty, its budget, and expanded (k = 2)."""

    relative_standard: float
    budget: dict[str, float]
    coverage_factor: float = COVERAGE_FACTOR

    @property
    def relative_expanded(self) -> float:
        return self.coverage_factor * self.relative_standard

    @property
    def expanded_pct(self) -> float:
        return 100.0 * self.relative_expanded


@dataclass(frozen=True)
class SkinDoseMap:
    """A procedure's skin dose over the unrolled skin, and what it rests on.

    Attributes
    ----------
    grid : SkinGrid
    dose_mgy : ndarray, shape grid.shape (along, around)
        Mean absorbed dose to the skin of each cell, mGy.
    peak_skin_dose_mgy : float
    peak_cell : (int, int) or None
        (along, around) index of the peak; None when no dose reached the skin.
    area_above_cm2 : dict of float to float
        Area of skin at or above each follow-up level (mGy), cm².
    area_above_range_cm2 : dict of float to (float, float)
        The same area with the whole map lowered, then raised, by the expanded uncertainty.
    contributors : tuple of PeakContributor
        Events with dose at the peak cell, largest first.
    events_used : int
    events_skipped : tuple of (index, label, reason)
    uncertainty : SkinDoseUncertainty
    assumptions : tuple of str
    factor_sources : tuple of str
    """

    grid: SkinGrid
    dose_mgy: FloatArray
    peak_skin_dose_mgy: float
    peak_cell: tuple[int, int] | None
    area_above_cm2: dict[float, float]
    area_above_range_cm2: dict[float, tuple[float, float]]
    contributors: tuple[PeakContributor, ...]
    events_used: int
    events_skipped: tuple[tuple[int, str | None, str], ...]
    uncertainty: SkinDoseUncertainty
    assumptions: tuple[str, ...]
    factor_sources: tuple[str, ...] = ()
    landmarks_mm: dict[str, float] = field(default_factory=dict)

    @property
    def peak_side(self) -> str | None:
        """``"back"`` or ``"front"`` (the first half of the cells around is the back)."""
        if self.peak_cell is None:
            return None
        return "back" if self.peak_cell[1] < self.grid.shape[1] // 2 else "front"

    def as_record(self) -> dict[str, Any]:
        """A JSON-ready record (the CLI's ``--json``, the API, the dashboards' map figure)."""
        grid = self.grid
        peak: dict[str, Any] | None = None
        if self.peak_cell is not None:
            i, j = self.peak_cell
            peak = {
                "side": self.peak_side,
                "along_mm": float(grid.along_mm[i]),
                "around_mm": float(grid.around_mm[j]),
                "along_index": i,
                "around_index": j,
            }
        u = self.uncertainty
        return {
            "peak_skin_dose_mgy": self.peak_skin_dose_mgy,
            "area_above_3gy_cm2": self.area_above_cm2.get(3000.0, 0.0),
            "area_above_cm2": {f"{k:g}": v for k, v in self.area_above_cm2.items()},
            "area_above_range_cm2": {
                f"{k:g}": list(v) for k, v in self.area_above_range_cm2.items()
            },
            "isodose_levels_mgy": list(self.area_above_cm2),
            "peak": peak,
            "events_used": self.events_used,
            "events_skipped": [
                {"event_index": i, "label": label, "reason": reason}
                for i, label, reason in self.events_skipped
            ],
            "contributors": [
                {
                    "event_index": c.event_index,
                    "label": c.label,
                    "dose_mgy": c.dose_mgy,
                    "share": c.share,
                }
                for c in self.contributors
            ],
            "uncertainty_pct": u.expanded_pct,
            "uncertainty": {
                "coverage_factor": u.coverage_factor,
                "relative_standard": u.relative_standard,
                "budget_relative_standard": dict(u.budget),
            },
            "assumptions": list(self.assumptions),
            "factor_sources": list(self.factor_sources),
            "patient": grid.patient.as_dict(),
            "map": {
                "around_mm": grid.around_mm.tolist(),
                "along_mm": grid.along_mm.tolist(),
                "cell_around_mm": grid.cell_around_mm,
                "cell_along_mm": grid.cell_along_mm,
                "perimeter_mm": grid.perimeter_mm,
                "dose_mgy": np.round(self.dose_mgy, 3).tolist(),
                "landmarks_mm": dict(self.landmarks_mm),
            },
        }


@dataclass
class _EventAtCells:
    """One (sub-)event's dose at the cells it reached, kept to read it at the peak."""

    parent: int
    cells: NDArray[np.int64]
    dose: FloatArray
    distance_mm: FloatArray
    vertical_cosine: FloatArray
    crossed_table: NDArray[np.bool_]
    u_backscatter: float
    u_tissue: float
    u_table: float


def _subpoint_offsets(n: int) -> FloatArray:
    return (np.arange(n) + 0.5) / n - 0.5


def _entrance_distance(beams: ResolvedBeams, e: int, patient: PatientModel) -> float:
    """Focus to the skin along the central ray (the reference distance if the ray misses)."""
    s, d = beams.source[e], beams.axis[e]
    w, t = patient.half_width_mm, patient.half_thickness_mm
    qa = (d[0] / w) ** 2 + (d[2] / t) ** 2
    qb = 2.0 * (s[0] * d[0] / w**2 + s[2] * d[2] / t**2)
    qc = (s[0] / w) ** 2 + (s[2] / t) ** 2 - 1.0
    disc = qb * qb - 4.0 * qa * qc
    if qa <= 0 or disc < 0:
        return float(beams.reference_distance_mm[e])
    root = (-qb - math.sqrt(disc)) / (2.0 * qa)
    return float(root) if root > 0 else float(beams.reference_distance_mm[e])


@dataclass(frozen=True)
class _SkinPoints:
    """The skin cells' centres and sub-points in the patient frame: around the body (l, a and
    the outward normal) and along it (s = -depth below the vertex)."""

    grid: SkinGrid
    centre_xy: FloatArray
    centre_s: FloatArray
    sub_xy: FloatArray
    sub_normal: FloatArray
    sub_s: FloatArray
    half_diagonal_mm: float


def _skin_points(grid: SkinGrid, subcells: int) -> _SkinPoints:
    centre_xy, _ = grid.surface_points(grid.around_mm)
    offsets = _subpoint_offsets(subcells)
    sub_xy, sub_normal = grid.surface_points(
        grid.around_mm[:, None] + offsets[None, :] * grid.cell_around_mm
    )
    return _SkinPoints(
        grid=grid,
        centre_xy=centre_xy,
        centre_s=-grid.along_mm,
        sub_xy=sub_xy,
        sub_normal=sub_normal,
        sub_s=-(grid.along_mm[:, None] + offsets[None, :] * grid.cell_along_mm),
        half_diagonal_mm=0.5 * math.hypot(grid.cell_around_mm, grid.cell_along_mm),
    )


@dataclass(frozen=True)
class _BeamAtSkin:
    """The cells a beam may reach (rows ``ia`` along, columns ``ja`` around) and their
    sub-points relative to the focus, shape (cells, around sub, along sub)."""

    ia: NDArray[np.intp]
    ja: NDArray[np.intp]
    pl: FloatArray
    pa: FloatArray
    ps: FloatArray
    inside: NDArray[np.bool_]  # in the field and on the side of the skin facing the focus
    dist2: FloatArray  # focus to sub-point, squared
    n_around: int  # the grid's cells around the body (a cell's flat index: ia * n_around + ja)


def _beam_at_skin(beams: ResolvedBeams, e: int, points: _SkinPoints) -> _BeamAtSkin | None:
    """Where beam ``e`` meets the skin: the field projected from the focus onto the receptor
    plane (a point is in the field when its projection is), cells first by their centres with
    a margin, then by sub-points; ``None`` when no cell is near the field."""
    src, axis, e_u, e_v = beams.source[e], beams.axis[e], beams.e_u[e], beams.e_v[e]
    sid, hw, hh = beams.sid_mm[e], beams.half_width_mm[e], beams.half_height_mm[e]
    # centres: distance along the axis and the projection onto the receptor
    rl = points.centre_xy[:, 0] - src[0]
    ra = points.centre_xy[:, 1] - src[2]
    rs = points.centre_s - src[1]
    r_d = rs[:, None] * axis[1] + (rl * axis[0] + ra * axis[2])[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(r_d > 0, sid / r_d, np.inf)
        u = (rs[:, None] * e_u[1] + (rl * e_u[0] + ra * e_u[2])[None, :]) * scale
        v = (rs[:, None] * e_v[1] + (rl * e_v[0] + ra * e_v[2])[None, :]) * scale
        margin = 2.0 * points.half_diagonal_mm * scale
        near = (r_d > 0) & (np.abs(u) <= hw + margin) & (np.abs(v) <= hh + margin)
    ia, ja = np.nonzero(near)
    if ia.size == 0:
        return None
    pl = points.sub_xy[ja, :, 0][:, :, None] - src[0]
    pa = points.sub_xy[ja, :, 1][:, :, None] - src[2]
    ps = points.sub_s[ia][:, None, :] - src[1]
    nl = points.sub_normal[ja, :, 0][:, :, None]
    na = points.sub_normal[ja, :, 1][:, :, None]
    pd = pl * axis[0] + ps * axis[1] + pa * axis[2]
    with np.errstate(divide="ignore", invalid="ignore"):
        sc = np.where(pd > 0, sid / pd, np.inf)
        pu = (pl * e_u[0] + ps * e_u[1] + pa * e_u[2]) * sc
        pv = (pl * e_v[0] + ps * e_v[1] + pa * e_v[2]) * sc
        inside = (pd > 0) & (np.abs(pu) <= hw) & (np.abs(pv) <= hh) & (nl * pl + na * pa < 0)
    dist2 = pl * pl + pa * pa + ps * ps
    return _BeamAtSkin(ia, ja, pl, pa, ps, inside, dist2, points.grid.shape[1])


def _table_crossing(
    beams: ResolvedBeams, e: int, at: _BeamAtSkin
) -> tuple[NDArray[np.bool_], FloatArray]:
    """Which sub-points beam ``e`` reaches through the table top (a focus beyond the table
    plane, the ray crossing the plane within the table's width), and the ray's path length
    through the top relative to the perpendicular one (1 where it does not cross)."""
    n_t, q, src = beams.table_normal, beams.table_point, beams.source[e]
    pl, ps, pa = at.pl, at.ps, at.pa
    if float((src - q) @ n_t) >= 0:
        return np.zeros_like(at.inside), np.ones_like(at.dist2)
    r_n = pl * n_t[0] + ps * n_t[1] + pa * n_t[2]
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = float((q - src) @ n_t) / r_n
        across = beams.table_across
        lateral = (
            (src[0] - q[0] + lam * pl) * across[0]
            + (src[1] - q[1] + lam * ps) * across[1]
            + (src[2] - q[2] + lam * pa) * across[2]
        )
        crossed = at.inside & (r_n > 0) & (np.abs(lateral) <= beams.table_half_width_mm)
        path = np.where(crossed, np.sqrt(at.dist2) / np.abs(r_n), 1.0)
    return crossed, path


def _event_dose(
    beams: ResolvedBeams,
    e: int,
    at: _BeamAtSkin,
    event: SkinEvent,
    patient: PatientModel,
    factors: BeamFactors,
    sources: dict[str, None],
) -> _EventAtCells | None:
    """Beam ``e``'s dose at the cells it reaches (module docstring's equation): the kerma at
    each sub-point by the inverse square from the reference point, through the table where it
    crosses it, times backscatter and the tissue-to-air ratio, averaged over each cell's
    sub-points; ``None`` when it reaches none. The factors' sources are added to ``sources``.

    Raises
    ------
    ModelError
        The event's beam factors cannot be computed.
    """
    parent = int(beams.parent[e])
    sid, hw, hh = beams.sid_mm[e], beams.half_width_mm[e], beams.half_height_mm[e]
    kerma = beams.kerma_at_reference_mgy[e] * beams.reference_distance_mm[e] ** 2 / at.dist2
    crossed, path = _table_crossing(beams, e, at)
    transmission = np.ones_like(kerma)
    u_table = 0.0
    field_side_cm = (
        2.0 * (2 * hw) * (2 * hh) / (2 * hw + 2 * hh)
        * _entrance_distance(beams, e, patient) / sid / 10.0
    )  # fmt: skip
    if np.any(crossed):
        t_values = factors.table_transmission(parent, event, path[crossed])
        transmission[crossed] = t_values.values
        u_table = t_values.relative_standard_uncertainty
        sources[t_values.source] = None
    b = factors.backscatter(parent, event, field_side_cm)
    f = factors.tissue_to_air(parent, event)
    sources[b.source] = None
    sources[f.source] = None
    per_point = np.where(at.inside, kerma * transmission, 0.0) * (b.value * f.value)
    cell_dose = per_point.mean(axis=(1, 2))
    hit = cell_dose > 0
    if not np.any(hit):
        return None
    dist = np.sqrt(at.dist2)
    vert = beams.vertical
    cos_v = -(at.pl * vert[0] + at.ps * vert[1] + at.pa * vert[2]) / dist
    weight = np.where(at.inside, kerma, 0.0)
    wsum = weight.sum(axis=(1, 2))[hit]
    return _EventAtCells(
        parent=parent,
        cells=(at.ia * at.n_around + at.ja)[hit],
        dose=cell_dose[hit],
        distance_mm=(weight * dist).sum(axis=(1, 2))[hit] / wsum,
        vertical_cosine=(weight * cos_v).sum(axis=(1, 2))[hit] / wsum,
        crossed_table=np.any(crossed, axis=(1, 2))[hit],
        u_backscatter=b.relative_standard_uncertainty,
        u_tissue=f.relative_standard_uncertainty,
        u_table=u_table,
    )


def skin_dose_map(
    events: Sequence[SkinEvent],
    *,
    patient: PatientModel | None = None,
    room: SkinRoom | None = None,
    factors: BeamFactors | None = None,
    cell_mm: float = 10.0,
    subcells: int = 3,
) -> SkinDoseMap:
    """The skin-dose map of one procedure (module docstring for the equation and sources).

    Parameters
    ----------
    events : sequence of SkinEvent
        The procedure's irradiation events (both planes of a biplane system together).
    patient : PatientModel, optional
        Default: :func:`~beamaudit.model.patient_model.patient_model` with nothing known.
    room : SkinRoom, optional
        The room's geometry; default: every room default, each noted.
    factors : BeamFactors, optional
        Table transmission, backscatter and tissue-to-air factors; default
        :class:`~beamaudit.model.skin_factors.SpectrumBeamFactors`.
    cell_mm : float
        Nominal skin cell side, mm (2-50).
    subcells : int
        Points per cell side for the part of a cell inside a field (1-8).

    Returns
    -------
    SkinDoseMap

    Raises
    ------
    ModelError
        Bad parameters, or an event whose beam factors cannot be computed.
    """
    if not 1 <= subcells <= 8:
        raise ModelError(f"subcells {subcells!r} is outside 1-8")
    patient = patient or patient_model()
    room = room or SkinRoom()
    factors = factors or SpectrumBeamFactors()
    grid = skin_grid(patient, cell_mm=cell_mm)
    beams = resolve_beams(events, patient=patient, room=room)
    points = _skin_points(grid, subcells)
    dose = np.zeros(grid.shape[0] * grid.shape[1])
    records: list[_EventAtCells] = []
    sources: dict[str, None] = {}
    failed: dict[int, str] = {}
    for e in range(beams.size):
        parent = int(beams.parent[e])
        if parent in failed:
            continue
        at = _beam_at_skin(beams, e, points)
        if at is None:
            continue
        try:
            record = _event_dose(beams, e, at, events[parent], patient, factors, sources)
        except ModelError as exc:
            # the event's beam factors do not compute: the event is listed, never dropped
            failed.setdefault(parent, f"beam factors: {exc}")
            continue
        if record is not None:
            np.add.at(dose, record.cells, record.dose)
            records.append(record)
    for parent, reason in failed.items():
        beams.skipped.append((parent, events[parent].label, reason))
    beams.skipped.sort()
    return _summarise(events, grid, dose.reshape(grid.shape), beams, records, room, sources)


def _at_the_peak(
    records: list[_EventAtCells], peak_flat: int | None
) -> tuple[dict[int, float], dict[str, float]]:
    """Each event's dose at the peak cell, and the absolute uncertainty terms (mGy) of the
    factors carried through it, added linearly over the events (fully correlated)."""
    per_event: dict[int, float] = {}
    terms = dict.fromkeys(
        ("table_transmission", "backscatter", "tissue_to_air", "patient_position"), 0.0
    )
    if peak_flat is None:
        return per_event, terms
    u_z = vertical_uncertainty_mm()
    for rec in records:
        at = np.nonzero(rec.cells == peak_flat)[0]
        if at.size == 0:
            continue
        d = float(rec.dose[at[0]])
        per_event[rec.parent] = per_event.get(rec.parent, 0.0) + d
        if rec.crossed_table[at[0]]:
            terms["table_transmission"] += d * rec.u_table
        terms["backscatter"] += d * rec.u_backscatter
        terms["tissue_to_air"] += d * rec.u_tissue
        # inverse square: dD/D = 2 dz cos / d for a shift dz of the patient along "up"
        cosine, distance = float(rec.vertical_cosine[at[0]]), float(rec.distance_mm[at[0]])
        terms["patient_position"] += d * 2.0 * abs(cosine) * u_z / distance
    return per_event, terms


def _peak_uncertainty(psd: float, terms: dict[str, float], room: SkinRoom) -> SkinDoseUncertainty:
    """The peak's relative standard uncertainty: K_a,r's, each factor's term relative to the
    peak, and the patient model's, added in quadrature."""
    u_kar = room.kar_relative_standard_uncertainty
    if u_kar is None:
        u_kar = skin_default("kar_relative_uncertainty_uncalibrated").value
    budget = {"reference_point_air_kerma": u_kar}
    for name, value in terms.items():
        budget[name] = value / psd if psd > 0 else 0.0
    budget["patient_model"] = skin_default("patient_model_relative_uncertainty").value
    return SkinDoseUncertainty(math.sqrt(sum(v * v for v in budget.values())), budget)


def _areas_above(
    dose: FloatArray, cell_area: float, big_u: float
) -> tuple[dict[float, float], dict[float, tuple[float, float]]]:
    """The skin area at or above each follow-up level (cm2), and its range when every cell's
    dose moves by the expanded uncertainty down and up."""
    areas = {}
    ranges = {}
    for level in FOLLOW_UP_LEVELS_MGY:
        areas[level] = float(np.count_nonzero(dose >= level)) * cell_area
        low = (
            float(np.count_nonzero(dose * (1.0 - big_u) >= level)) * cell_area if big_u < 1 else 0.0
        )
        high = float(np.count_nonzero(dose * (1.0 + big_u) >= level)) * cell_area
        ranges[level] = (low, high)
    return areas, ranges


def _summarise(
    events: Sequence[SkinEvent],
    grid: SkinGrid,
    dose: FloatArray,
    beams: ResolvedBeams,
    records: list[_EventAtCells],
    room: SkinRoom,
    sources: dict[str, None],
) -> SkinDoseMap:
    peak_flat = int(np.argmax(dose))
    psd = float(dose.flat[peak_flat])
    peak_cell = None if psd <= 0 else divmod(peak_flat, grid.shape[1])
    per_event, terms = _at_the_peak(records, peak_flat if peak_cell is not None else None)
    uncertainty = _peak_uncertainty(psd, terms, room)
    areas, ranges = _areas_above(dose, grid.cell_area_cm2, uncertainty.relative_expanded)
    contributors = tuple(
        sorted(
            (
                PeakContributor(i, events[i].label, d, d / psd)
                for i, d in per_event.items()
                if d > 0
            ),
            key=lambda c: -c.dose_mgy,
        )
    )
    used = len(set(beams.parent.tolist()) - {index for index, _, _ in beams.skipped})
    assumptions = [*grid.patient.assumptions, *beams.notes]
    if room.kar_relative_standard_uncertainty is None:
        assumptions.append(
            "K_a,r taken as displayed, uncalibrated: IEC 60601-2-43 allows +-35 % "
            "(20 % standard uncertainty)"
        )
    if beams.skipped:
        assumptions.append(
            f"{len(beams.skipped)} of {len(events)} events could not be placed and are not in "
            "the map: the peak skin dose is a lower bound"
        )
    landmarks = {
        name: body_landmark_fraction(name) * grid.patient.height_mm
        for name in BODY_LANDMARKS
        if name != "trunk"
    }
    return SkinDoseMap(
        grid=grid,
        dose_mgy=dose,
        peak_skin_dose_mgy=psd,
        peak_cell=peak_cell,
        area_above_cm2=areas,
        area_above_range_cm2=ranges,
        contributors=contributors,
        events_used=used,
        events_skipped=tuple(beams.skipped),
        uncertainty=uncertainty,
        assumptions=tuple(assumptions),
        factor_sources=tuple(sources),
        landmarks_mm=landmarks,
    )
