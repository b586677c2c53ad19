"""Every dose figure of one projection exposure, with its uncertainty and its why trail.

:func:`compute_exposure_dose` takes the technique (kVp, mAs, filtration, anode), whatever
geometry the exposure carries (see :mod:`beamaudit.model.geometry`) and, optionally, a room
calibration; it runs the beam model (:func:`beamaudit.model.compute_beam`) and returns an
:class:`ExposureDose` with:

- the DAP (:math:`P_{KA} = K(d) A(d)` at the plane the field is known at),
- the incident air kerma :math:`K_{a,i}` at the focus-to-skin distance,
- the backscatter factor and the entrance surface air kerma :math:`K_{a,e} = B K_{a,i}`,
- the entrance surface dose to tissue, :math:`D = K_{a,e} (\\mu_{en}/\\rho)_{t,a}`,
- the air kerma at the reference point of a dose report, where its distance is known,

each as a :class:`DoseFigure` (value, unit, standard uncertainty, trail), and the values the
device reported beside the reconstructed ones with their ratio. :func:`dose_from_beam` does the
same from plain beam numbers, so the dose chain can be used and tested without the beam model.
Its numbers come from the one dose chain of :mod:`beamaudit.model._chain` (equations there),
the same that :func:`beamaudit.model.dose_from_beams` runs over many exposures at once; this
module writes the why trail of one exposure around them.

Uncertainty: relative standard uncertainties of the beam output, the distances, the field and
the backscatter factor are combined in quadrature (first order, inputs treated as
uncorrelated, JCGM 100:2008 eq. 12); the exponent of a distance is 2 (inverse-square law).
Every figure is an estimate for quality assurance and optimisation, not a patient's measured
dose.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from beamaudit.model._chain import (
    BEAM_NUMBERS,
    GEOMETRY_NUMBERS,
    ChainFigures,
    Failures,
    run_chain,
)
from beamaudit.model.backscatter import backscatter_estimate
from beamaudit.model.dose import ReportedVsReconstructed, compare_reported
from beamaudit.model.errors import ModelError
from beamaudit.model.geometry import GeometryInputs, ResolvedGeometry, resolve_geometry
from beamaudit.model.trail import WhyTrail

if TYPE_CHECKING:
    from beamaudit.model.beam import BeamResult, RoomCalibration
    from beamaudit.model.filtration import FilterSpec

__all__ = [
    "ESTIMATE_NOTICE",
    "BeamInputs",
    "DoseFigure",
    "ExposureDose",
    "compute_exposure_dose",
    "dose_from_beam",
]

#: Said once beside every set of figures.
ESTIMATE_NOTICE = (
    "estimate for quality assurance and optimisation; clinical decisions need a qualified "
    "medical physicist, and local regulations and licensed practice take precedence"
)


@dataclass(frozen=True)
class BeamInputs:
    """The beam quantities the dose chain needs, as plain numbers.

    Attributes
    ----------
    kvp_kv : tube voltage, kV.
    output_ugy_per_mas_1m, output_standard_uncertainty_ugy_per_mas_1m : tube output at 1 m.
    hvl1_mm_al, hvl1_standard_uncertainty_mm_al : first half-value layer.
    tissue_to_air_ratio : spectrum-averaged (μen/ρ) soft tissue / air.
    calibrated : True when the output comes from a room calibration (QA measurement).
    assumptions : the beam model's own assumptions (default filtration, ...).
    source : what produced these numbers (for the trail).
    """

    kvp_kv: float
    output_ugy_per_mas_1m: float
    output_standard_uncertainty_ugy_per_mas_1m: float
    hvl1_mm_al: float
    hvl1_standard_uncertainty_mm_al: float
    tissue_to_air_ratio: float
    calibrated: bool
    assumptions: tuple[str, ...] = ()
    source: str = "beamaudit beam model (beamaudit.model.compute_beam)"

    @classmethod
    def from_beam_result(
        cls, beam: BeamResult, *, tissue_to_air_ratio: float, source: str | None = None
    ) -> BeamInputs:
        """Take the numbers from a :class:`beamaudit.model.BeamResult`."""
        u = dict(beam.uncertainty)
        assumptions = list(beam.assumptions)
        for key in ("output_ugy_per_mas_1m", "hvl1_mm_al"):
            if key not in u:
                assumptions.append(f"the beam model gave no uncertainty for {key}; taken as 0")
        return cls(
            kvp_kv=float(beam.kv),
            output_ugy_per_mas_1m=float(beam.output_ugy_per_mas_1m),
            output_standard_uncertainty_ugy_per_mas_1m=float(u.get("output_ugy_per_mas_1m", 0.0)),
            hvl1_mm_al=float(beam.hvl1_mm_al),
            hvl1_standard_uncertainty_mm_al=float(u.get("hvl1_mm_al", 0.0)),
            tissue_to_air_ratio=float(tissue_to_air_ratio),
            calibrated=bool(beam.calibrated),
            assumptions=tuple(assumptions),
            source=source or cls.source,
        )


@dataclass(frozen=True)
class DoseFigure:
    """One reconstructed figure: value, unit, standard uncertainty and how it was made."""

    quantity: str
    value: float
    unit: str
    standard_uncertainty: float
    trail: WhyTrail

    @property
    def relative_uncertainty(self) -> float:
        """Standard uncertainty over value (0 for a zero value)."""
        return self.standard_uncertainty / self.value if self.value else 0.0

    @property
    def assumed(self) -> bool:
        """True when any step that made the figure used a default or an assumption."""
        return any(step.assumed for step in self.trail)

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready dict: value, unit, uncertainty, assumed and the trail's steps."""
        return {
            "quantity": self.quantity,
            "value": self.value,
            "unit": self.unit,
            "standard_uncertainty": self.standard_uncertainty,
            "relative_uncertainty": self.relative_uncertainty,
            "assumed": self.assumed,
            "assumptions": self.trail.assumptions,
            "trail": self.trail.as_list(),
        }


@dataclass(frozen=True)
class ExposureDose:
    """All figures of one exposure (see the module docstring).

    ``esak``, ``entrance_dose`` and ``backscatter_factor`` are None when no backscatter factor
    could be found for the beam (an HVL below the table); ``reference_point_air_kerma`` is None
    when the reference point's distance is not known. ``assumptions`` collects, once each, every
    assumption any figure rests on.
    """

    kvp_kv: float
    exposure_mas: float
    hvl1_mm_al: float
    output_ugy_per_mas_1m: float
    calibrated: bool
    geometry: ResolvedGeometry
    dap: DoseFigure
    incident_air_kerma: DoseFigure
    backscatter_factor: DoseFigure | None
    esak: DoseFigure | None
    entrance_dose: DoseFigure | None
    reference_point_air_kerma: DoseFigure | None
    fsd: DoseFigure
    comparisons: list[ReportedVsReconstructed] = field(default_factory=list)
    assumptions: list[str] = field(default_factory=list)

    def figures(self) -> dict[str, DoseFigure]:
        """The figures present, by quantity name."""
        candidates = (
            self.dap,
            self.incident_air_kerma,
            self.backscatter_factor,
            self.esak,
            self.entrance_dose,
            self.reference_point_air_kerma,
            self.fsd,
        )
        return {f.quantity: f for f in candidates if f is not None}

    def as_dict(self) -> dict[str, Any]:
        """One JSON-ready object: flat headline values, then every figure with its trail."""

        def value(f: DoseFigure | None) -> float | None:
            return f.value if f is not None else None

        def u(f: DoseFigure | None) -> float | None:
            return f.standard_uncertainty if f is not None else None

        g = self.geometry
        return {
            "kvp_kv": self.kvp_kv,
            "exposure_mas": self.exposure_mas,
            "dap_gy_cm2": self.dap.value,
            "dap_standard_uncertainty_gy_cm2": self.dap.standard_uncertainty,
            "incident_air_kerma_mgy": self.incident_air_kerma.value,
            "incident_air_kerma_standard_uncertainty_mgy": (
                self.incident_air_kerma.standard_uncertainty
            ),
            "esak_mgy": value(self.esak),
            "esak_standard_uncertainty_mgy": u(self.esak),
            "entrance_dose_mgy": value(self.entrance_dose),
            "entrance_dose_standard_uncertainty_mgy": u(self.entrance_dose),
            "backscatter_factor": value(self.backscatter_factor),
            "backscatter_factor_standard_uncertainty": u(self.backscatter_factor),
            "reference_point_air_kerma_mgy": value(self.reference_point_air_kerma),
            "fsd_mm": self.fsd.value,
            "fsd_standard_uncertainty_mm": self.fsd.standard_uncertainty,
            "sid_mm": g.sid_mm,
            "body_part_thickness_mm": g.thickness_mm,
            "entrance_field_area_cm2": g.entrance_field_area_cm2,
            "distance_source": g.distance_source,
            "field_source": g.field_source,
            "hvl1_mm_al": self.hvl1_mm_al,
            "output_ugy_per_mas_1m": self.output_ugy_per_mas_1m,
            "calibrated": self.calibrated,
            "assumptions": list(self.assumptions),
            "comparisons": [c.as_dict() for c in self.comparisons],
            "figures": {name: f.as_dict() for name, f in self.figures().items()},
            "notice": ESTIMATE_NOTICE,
        }


def _beam_trail(beam: BeamInputs, exposure_mas: float) -> WhyTrail:
    trail = WhyTrail()
    trail.add("kvp_kv", beam.kvp_kv, "kV", equation="recorded", source="technique")
    trail.add("exposure_mas", exposure_mas, "mAs", equation="recorded", source="technique")
    for assumption in beam.assumptions:
        trail.add(
            "beam_model",
            None,
            "",
            equation="assumption of the beam model",
            source=beam.source,
            assumed=True,
            note=assumption,
        )
    trail.add(
        "output_ugy_per_mas_1m",
        beam.output_ugy_per_mas_1m,
        "µGy/mAs at 1 m",
        equation="room calibration" if beam.calibrated else "computed from the spectrum model",
        source=beam.source,
        inputs={"standard_uncertainty": beam.output_standard_uncertainty_ugy_per_mas_1m},
        # an uncalibrated beam is already an assumption of the beam model's step above
        assumed=not beam.calibrated and not beam.assumptions,
        note=(
            None
            if beam.calibrated or beam.assumptions
            else "tube output from the spectrum model, not calibrated against a measurement "
            "of this room"
        ),
    )
    return trail


def _check_mas(exposure_mas: float) -> float:
    mas = float(exposure_mas)
    if not (math.isfinite(mas) and mas > 0):
        raise ModelError(
            f"exposure_mas must be a positive finite number of mAs, not {exposure_mas!r}"
        )
    return mas


def dose_from_beam(
    beam: BeamInputs,
    *,
    exposure_mas: float,
    geometry: GeometryInputs,
    reported_dap_gy_cm2: float | None = None,
    reported_entrance_dose_mgy: float | None = None,
    entrance_dose_derivation: str | None = None,
    reported_reference_point_air_kerma_mgy: float | None = None,
    reported_source: str = "reported by the device",
) -> ExposureDose:
    """Every figure of one exposure from plain beam numbers (no beam model call).

    Parameters
    ----------
    beam : BeamInputs
        Output, HVL, tissue/air ratio and their uncertainties.
    exposure_mas : float
        Tube current-exposure time product, mAs.
    geometry : GeometryInputs
        What the exposure carries about its geometry.
    reported_dap_gy_cm2, reported_entrance_dose_mgy, reported_reference_point_air_kerma_mgy
        Values the device reported, kept beside the reconstructed ones with their ratio.
    entrance_dose_derivation : str, optional
        Entrance Dose Derivation (0040,8303): ``"IAK"`` (incident air kerma) compares the
        reported entrance dose with :math:`K_{a,i}`; when absent the same is assumed (IAK is what
        devices report in practice) and noted.
    reported_source : str
        Where the reported values came from.

    Raises
    ------
    ModelError
        Bad technique or impossible geometry (see :func:`resolve_geometry`).
    """
    mas = _check_mas(exposure_mas)
    geo = resolve_geometry(geometry)
    failures = Failures(1)
    chain = run_chain(
        failures,
        beam_numbers=np.array([BEAM_NUMBERS(beam)], dtype=np.float64),
        mas=np.array([mas]),
        geometry_numbers=np.array([GEOMETRY_NUMBERS(geo)], dtype=np.float64),
        d_ref_raw=[geometry.source_to_reference_point_mm],
    )
    if failures.errors[0] is not None:
        raise ModelError(failures.errors[0])
    c = _Scalars(chain)
    beam_trail = _beam_trail(beam, mas)
    notes: list[str] = []
    fsd = DoseFigure(
        "fsd_mm", geo.fsd_mm, "mm", geo.fsd_standard_uncertainty_mm, geo.distance_trail.copy()
    )
    incident = _incident_figure(beam, geo, beam_trail, c)
    dap = _dap_figure(beam, geo, beam_trail, c)
    bsf, esak, esd = _entrance_figures(beam, geo, incident, c, notes)
    reference = _reference_figure(beam_trail, geometry, c)
    comparisons = _comparisons(
        dap=dap,
        incident=incident,
        reference=reference,
        reported_dap_gy_cm2=reported_dap_gy_cm2,
        reported_entrance_dose_mgy=reported_entrance_dose_mgy,
        entrance_dose_derivation=entrance_dose_derivation,
        reported_reference_point_air_kerma_mgy=reported_reference_point_air_kerma_mgy,
        reported_source=reported_source,
        notes=notes,
    )
    figures = [f for f in (dap, incident, bsf, esak, esd, reference, fsd) if f is not None]
    assumptions: dict[str, None] = {}
    for f in figures:
        for note in f.trail.assumptions:
            assumptions.setdefault(note, None)
    for note in notes:
        assumptions.setdefault(note, None)
    return ExposureDose(
        kvp_kv=beam.kvp_kv,
        exposure_mas=mas,
        hvl1_mm_al=beam.hvl1_mm_al,
        output_ugy_per_mas_1m=beam.output_ugy_per_mas_1m,
        calibrated=beam.calibrated,
        geometry=geo,
        dap=dap,
        incident_air_kerma=incident,
        backscatter_factor=bsf,
        esak=esak,
        entrance_dose=esd,
        reference_point_air_kerma=reference,
        fsd=fsd,
        comparisons=comparisons,
        assumptions=list(assumptions),
    )


class _Scalars:
    """The chain's numbers of its only exposure, as Python floats (``c.k_i``, ``c.dap``...)."""

    def __init__(self, chain: ChainFigures) -> None:
        self._chain = chain

    def __getattr__(self, name: str) -> Any:
        value = getattr(self._chain, name)
        return float(value[0]) if isinstance(value, np.ndarray) else value

    def has(self, name: str) -> bool:
        return bool(getattr(self._chain, name)[0])


_INVERSE_SQUARE = "inverse-square law; IAEA TRS 457 (2007) §7"


def _incident_figure(
    beam: BeamInputs, geo: ResolvedGeometry, beam_trail: WhyTrail, c: _Scalars
) -> DoseFigure:
    """K_a,i = Y(1 m) P_It (1 m / FSD)^2, with its trail."""
    trail = beam_trail.copy()
    trail.merge(geo.distance_trail)
    trail.add(
        "incident_air_kerma_mgy",
        c.k_i,
        "mGy",
        equation="K_a,i = Y(1 m) · P_It · (1 m / FSD)²",
        source=_INVERSE_SQUARE,
        inputs={
            "output_ugy_per_mas_1m": beam.output_ugy_per_mas_1m,
            "exposure_mas": c.mas,
            "fsd_mm": geo.fsd_mm,
        },
    )
    return DoseFigure("incident_air_kerma_mgy", c.k_i, "mGy", c.k_i * c.k_i_rel, trail)


def _dap_figure(
    beam: BeamInputs, geo: ResolvedGeometry, beam_trail: WhyTrail, c: _Scalars
) -> DoseFigure:
    """P_KA = K(d) A(d) at the plane the field is known at, with its trail."""
    trail = beam_trail.copy()
    trail.merge(geo.field_trail)
    trail.add(
        "air_kerma_at_field_plane_mgy",
        c.k_plane,
        "mGy",
        equation="K(d) = Y(1 m) · P_It · (1 m / d)²",
        source=_INVERSE_SQUARE,
        inputs={"distance_mm": geo.field_plane_mm},
    )
    trail.add(
        "dap_gy_cm2",
        c.dap,
        "Gy·cm²",
        equation="P_KA = K(d) · A(d), the same at every plane",
        source="ICRU Report 74 (2005); IAEA TRS 457 (2007)",
        inputs={"air_kerma_mgy": c.k_plane, "field_area_cm2": geo.field_area_at_plane_cm2},
    )
    return DoseFigure("dap_gy_cm2", c.dap, "Gy·cm²", c.dap * c.dap_rel, trail)


def _backscatter_figure(
    beam: BeamInputs, geo: ResolvedGeometry, c: _Scalars, notes: list[str]
) -> DoseFigure | None:
    """B with its trail, or None (and the reason in ``notes``) when the beam has none."""
    try:
        b = backscatter_estimate(
            hvl_mm_al=beam.hvl1_mm_al,
            field_side_cm=geo.entrance_field_side_cm,
            hvl_standard_uncertainty_mm_al=beam.hvl1_standard_uncertainty_mm_al,
            field_side_standard_uncertainty_cm=geo.entrance_field_side_standard_uncertainty_cm,
            out_of_range="nearest",
        )
    except ModelError as exc:
        notes.append(f"no entrance surface air kerma or dose: {exc}")
        return None
    trail = WhyTrail()
    trail.add(
        "hvl1_mm_al",
        beam.hvl1_mm_al,
        "mm Al",
        equation="computed from the spectrum model"
        if not beam.calibrated
        else "beam model with the room calibration",
        source=beam.source,
        inputs={"standard_uncertainty": beam.hvl1_standard_uncertainty_mm_al},
    )
    trail.merge(geo.distance_trail)
    trail.merge(geo.field_trail)
    for note in (
        *b.notes,
        "backscatter factor of a water phantom used for soft tissue (they differ by less "
        "than 1 %, Ma & Seuntjens, Phys Med Biol 44:131, 1999)",
    ):
        trail.add(
            "backscatter_table",
            None,
            "",
            equation="table choice",
            source=b.source,
            assumed=True,
            note=note,
        )
    trail.add(
        "backscatter_factor",
        c.b,
        "1",
        equation="bilinear interpolation in HVL and equivalent-square field side",
        source=b.source,
        inputs={
            "hvl1_mm_al": beam.hvl1_mm_al,
            "entrance_field_side_cm": geo.entrance_field_side_cm,
            "standard_uncertainty": c.u_b,
        },
    )
    return DoseFigure("backscatter_factor", c.b, "1", c.u_b, trail)


def _entrance_figures(
    beam: BeamInputs,
    geo: ResolvedGeometry,
    incident: DoseFigure,
    c: _Scalars,
    notes: list[str],
) -> tuple[DoseFigure | None, DoseFigure | None, DoseFigure | None]:
    """B, K_a,e = K_a,i B and D = K_a,e (mu_en/rho)_t,a, with their trails (or three Nones)."""
    if not c.has("has_b"):
        _backscatter_figure(beam, geo, c, notes)  # says why there is none
        return None, None, None
    bsf = _backscatter_figure(beam, geo, c, notes)
    assert bsf is not None
    esak_trail = incident.trail.copy()
    esak_trail.merge(bsf.trail)
    esak_trail.add(
        "esak_mgy",
        c.k_e,
        "mGy",
        equation="K_a,e = K_a,i · B",
        source="ICRU Report 74 (2005); IAEA TRS 457 (2007)",
        inputs={"incident_air_kerma_mgy": c.k_i, "backscatter_factor": c.b},
    )
    esak = DoseFigure("esak_mgy", c.k_e, "mGy", c.k_e * c.k_e_rel, esak_trail)
    esd_trail = esak_trail.copy()
    esd_trail.add(
        "tissue_to_air_ratio",
        beam.tissue_to_air_ratio,
        "1",
        equation="spectrum-averaged (μen/ρ) soft tissue / air",
        source=f"{beam.source}; tissue ICRU-44 soft tissue",
        inputs={"relative_standard_uncertainty": c.ratio_rel},
    )
    esd_trail.add(
        "entrance_dose_mgy",
        c.d,
        "mGy",
        equation="D = K_a,e · (μen/ρ)_tissue,air",
        source="IAEA TRS 457 (2007) §7",
        inputs={"esak_mgy": c.k_e, "tissue_to_air_ratio": beam.tissue_to_air_ratio},
    )
    esd = DoseFigure("entrance_dose_mgy", c.d, "mGy", c.d * c.d_rel, esd_trail)
    return bsf, esak, esd


def _reference_figure(
    beam_trail: WhyTrail, geometry: GeometryInputs, c: _Scalars
) -> DoseFigure | None:
    """K_a,r at the reference point, where its distance is known."""
    if not c.has("has_ref"):
        return None
    trail = beam_trail.copy()
    trail.add(
        "reference_point_air_kerma_mgy",
        c.k_r,
        "mGy",
        equation="K_a,r = Y(1 m) · P_It · (1 m / d_ref)²",
        source="inverse-square law; reference point per IEC 60601-2-43",
        inputs={"source_to_reference_point_mm": c.d_ref},
    )
    return DoseFigure("reference_point_air_kerma_mgy", c.k_r, "mGy", c.k_r * c.k_r_rel, trail)


def _comparisons(
    *,
    dap: DoseFigure,
    incident: DoseFigure,
    reference: DoseFigure | None,
    reported_dap_gy_cm2: float | None,
    reported_entrance_dose_mgy: float | None,
    entrance_dose_derivation: str | None,
    reported_reference_point_air_kerma_mgy: float | None,
    reported_source: str,
    notes: list[str],
) -> list[ReportedVsReconstructed]:
    out = []

    def keep(quantity: str, reported: float, figure: DoseFigure, note: str | None = None) -> None:
        if reported <= 0 or figure.value <= 0:
            notes.append(f"reported {quantity} {reported:g} not compared (not positive)")
            return
        out.append(
            compare_reported(
                quantity=quantity,
                unit=figure.unit,
                reported=reported,
                reconstructed=figure.value,
                reconstructed_relative_uncertainty=figure.relative_uncertainty,
                reported_source=reported_source,
                note=note,
            )
        )

    if reported_dap_gy_cm2 is not None:
        keep("dap_gy_cm2", reported_dap_gy_cm2, dap)
    if reported_entrance_dose_mgy is not None:
        derivation = (entrance_dose_derivation or "").strip().upper()
        if derivation == "IAK":
            note = "reported entrance dose is an incident air kerma (derivation IAK)"
        elif not derivation:
            note = "derivation not recorded; compared with the incident air kerma (IAK)"
            notes.append(
                "reported entrance dose taken as an incident air kerma (derivation absent)"
            )
        else:
            note = f"derivation {derivation!r} not known here; compared with the incident air kerma"
            notes.append(note)
        keep("incident_air_kerma_mgy", reported_entrance_dose_mgy, incident, note)
    if reported_reference_point_air_kerma_mgy is not None:
        if reference is None:
            notes.append(
                "reported reference-point air kerma not compared: the reference point's distance "
                "is not known"
            )
        else:
            keep("reference_point_air_kerma_mgy", reported_reference_point_air_kerma_mgy, reference)
    return out


def compute_exposure_dose(
    *,
    kvp_kv: float,
    exposure_mas: float,
    filters: Sequence[FilterSpec] | None = None,
    anode: str = "W",
    anode_angle_deg: float = 12.0,
    ripple_percent: float = 0.0,
    calibration: RoomCalibration | None = None,
    kv_uncertainty_kv: float | None = None,
    filtration_uncertainty_mm_al: float | None = None,
    geometry: GeometryInputs | None = None,
    tissue: str = "soft_tissue",
    reported_dap_gy_cm2: float | None = None,
    reported_entrance_dose_mgy: float | None = None,
    entrance_dose_derivation: str | None = None,
    reported_reference_point_air_kerma_mgy: float | None = None,
    reported_source: str = "reported by the device",
    **geometry_fields: Any,
) -> ExposureDose:
    """Every dose figure of one projection exposure, from technique, geometry and calibration.

    Runs :func:`beamaudit.model.compute_beam` for the technique (and the room calibration, if
    given), computes the spectrum-averaged tissue/air ratio of its spectrum, then
    :func:`dose_from_beam`.

    Parameters
    ----------
    kvp_kv, exposure_mas : float
        Technique.
    filters : sequence of FilterSpec, optional
        Total filtration, one layer each; None takes the beam model's default (assumed).
    anode, anode_angle_deg, ripple_percent
        Tube, as for :class:`beamaudit.model.BeamSpec`.
    calibration : RoomCalibration, optional
        The room's calibration from QA measurements.
    kv_uncertainty_kv, filtration_uncertainty_mm_al : float, optional
        Standard uncertainties of the tube voltage and total filtration, passed to the beam
        model (None: as the beam model takes them).
    geometry : GeometryInputs, optional
        Geometry; or pass its fields as keyword arguments (``sid_mm=1800``,
        ``body_part_thickness_mm=220``, ``field_width_mm=350``...), not both.
    tissue : str
        Tissue for the entrance dose (the beam model's tissue name).
    reported_dap_gy_cm2, reported_entrance_dose_mgy, entrance_dose_derivation,
    reported_reference_point_air_kerma_mgy, reported_source
        As for :func:`dose_from_beam`.

    Examples
    --------
    >>> result = compute_exposure_dose(kvp_kv=81, exposure_mas=10, sid_mm=1800,
    ...                                body_part_thickness_mm=220, field_width_mm=350,
    ...                                field_height_mm=430)  # doctest: +SKIP
    >>> result.dap.value, result.esak.value  # doctest: +SKIP
    """
    from beamaudit.model.beam import BeamSpec, compute_beam, tissue_to_air_ratio

    _check_mas(exposure_mas)
    if geometry is not None and geometry_fields:
        raise ModelError("give the geometry either as GeometryInputs or as keywords, not both")
    if geometry is None:
        unknown = sorted(set(geometry_fields) - set(GeometryInputs.field_names()))
        if unknown:
            raise ModelError(f"unknown geometry input(s): {', '.join(unknown)}")
        geometry = GeometryInputs(**_geometry_kwargs(geometry_fields))
    spec = BeamSpec(
        kv=kvp_kv,
        filters=None if filters is None else tuple(filters),
        anode=anode,
        anode_angle_deg=anode_angle_deg,
        ripple_percent=ripple_percent,
    )
    result = compute_beam(
        spec,
        calibration=calibration,
        kv_uncertainty_kv=kv_uncertainty_kv,
        filtration_uncertainty_mm_al=filtration_uncertainty_mm_al,
    )
    ratio = tissue_to_air_ratio(result, tissue=tissue)
    beam = BeamInputs.from_beam_result(result, tissue_to_air_ratio=float(ratio))
    return dose_from_beam(
        beam,
        exposure_mas=exposure_mas,
        geometry=geometry,
        reported_dap_gy_cm2=reported_dap_gy_cm2,
        reported_entrance_dose_mgy=reported_entrance_dose_mgy,
        entrance_dose_derivation=entrance_dose_derivation,
        reported_reference_point_air_kerma_mgy=reported_reference_point_air_kerma_mgy,
        reported_source=reported_source,
    )


def _geometry_kwargs(values: Mapping[str, Any]) -> dict[str, Any]:
    """Keyword values for GeometryInputs, with sequences turned into tuples."""
    out: dict[str, Any] = {}
    for key, value in values.items():
        out[key] = tuple(value) if isinstance(value, list) else value
    return out
