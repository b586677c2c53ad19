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

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from beamaudit import CAUTION
from beamaudit.model._chain import (
    GEOMETRY_NUMBERS,
    ChainFigures,
    Failures,
    collect_curves,
    run_chain,
)
from beamaudit.model.attenuation import mu_en_ratio
from beamaudit.model.backscatter import load_backscatter_table
from beamaudit.model.backscatter_kernels import (
    BY_HVL_TABLE,
    BackscatterCurve,
    backscatter_curve,
    load_backscatter_kernels,
)
from beamaudit.model.dose import ReportedVsReconstructed, compare_reported
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec
from beamaudit.model.geometry import GeometryInputs, ResolvedGeometry, resolve_geometry
from beamaudit.model.patient_support import (
    PatientSupport,
    SupportTransmission,
    support_transmission,
)
from beamaudit.model.trail import WhyTrail

if TYPE_CHECKING:
    from beamaudit.model.beam import BeamResult, RoomCalibration

__all__ = [
    "ESTIMATE_NOTICE",
    "BeamInputs",
    "DoseFigure",
    "ExposureDose",
    "compute_exposure_dose",
    "dose_from_beam",
]

#: Said once beside every set of figures.
ESTIMATE_NOTICE = CAUTION


@dataclass(frozen=True)
class BeamInputs:
    """The beam quantities the dose chain needs, as plain numbers.

    Attributes
    ----------
    kvp_kv : tube voltage, kV.
    output_ugy_per_mas_1m, output_standard_uncertainty_ugy_per_mas_1m : tube output at 1 m.
    hvl1_mm_al, hvl1_standard_uncertainty_mm_al : first half-value layer.
    tissue_to_air_ratio : spectrum-averaged (μen/ρ) soft tissue / air at the skin.
    calibrated : True when the output comes from a room calibration (QA measurement).
    assumptions : the beam model's own assumptions (default filtration, ...).
    source : what produced these numbers (for the trail).
    backscatter_curve : B of this beam's spectrum at the skin against field side
        (:func:`beamaudit.model.backscatter_kernels.backscatter_curve`); None: B from the HVL
        (kernels weighted by a reference tungsten spectrum of that HVL, noted).
    entrance_transmission, entrance_transmission_standard_uncertainty : air-kerma transmission
        of what lies between the tube and the skin (1 for nothing), and its uncertainty.
    support : how that transmission was made, for the trail: a table top and mattress
        (:mod:`beamaudit.model.patient_support`); None: nothing in the beam.
    hvl1_uncertainty_method : how the HVL's uncertainty was made, for the trail
        (:func:`beamaudit.model.beam_quality.beam_quality_uncertainty`); empty: the beam
        model's own budget.
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
    backscatter_curve: BackscatterCurve | None = None
    entrance_transmission: float = 1.0
    entrance_transmission_standard_uncertainty: float = 0.0
    support: SupportTransmission | None = None
    hvl1_uncertainty_method: str = ""

    @classmethod
    def from_beam_result(
        cls,
        beam: BeamResult,
        *,
        tissue_to_air_ratio: float | None = None,
        source: str | None = None,
        patient_support: PatientSupport | None = None,
        assumptions: Sequence[str] = (),
        tissue: str = "soft_tissue",
    ) -> BeamInputs:
        """Take the numbers from a :class:`beamaudit.model.BeamResult`.

        Parameters
        ----------
        beam : BeamResult
        tissue_to_air_ratio : float, optional
            As given; None: computed from the spectrum at the skin (behind a table, if any).
        source : str, optional
            What produced the beam (for the trail).
        patient_support : PatientSupport, optional
            A table top and mattress between the tube and the skin (tube below the table).
        assumptions : sequence of str
            Further assumptions that entered the beam (the caller's defaults), for the trail.
        tissue : str
            Tissue of the tissue/air ratio (:func:`beamaudit.model.attenuation.material`).
        """
        u = dict(beam.uncertainty)
        notes = [*beam.assumptions, *assumptions]
        for key in ("output_ugy_per_mas_1m", "hvl1_mm_al"):
            if key not in u:
                notes.append(f"the beam model gave no uncertainty for {key}; taken as 0")
        energies, fluence = beam.energies_kev, beam.fluence_per_mas_1m
        support = None
        if patient_support is not None:
            support, fluence = support_transmission(energies, fluence, patient_support)
        if tissue_to_air_ratio is None:
            tissue_to_air_ratio = mu_en_ratio(energies, energies * fluence, tissue, "air")
        return cls(
            kvp_kv=float(beam.kv),
            output_ugy_per_mas_1m=float(beam.output_ugy_per_mas_1m),
            output_standard_uncertainty_ugy_per_mas_1m=float(u.get("output_ugy_per_mas_1m", 0.0)),
            hvl1_mm_al=float(beam.hvl1_mm_al),
            hvl1_standard_uncertainty_mm_al=float(u.get("hvl1_mm_al", 0.0)),
            tissue_to_air_ratio=float(tissue_to_air_ratio),
            calibrated=bool(beam.calibrated),
            assumptions=tuple(notes),
            source=source or cls.source,
            backscatter_curve=backscatter_curve(energies, fluence),
            entrance_transmission=1.0 if support is None else support.value,
            entrance_transmission_standard_uncertainty=(
                0.0 if support is None else support.standard_uncertainty
            ),
            support=support,
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
    assumption any figure rests on. ``backscatter_source`` says where B comes from (None without
    B), ``table_transmission`` the table top and mattress's transmission (None: no table in the
    beam), ``filters`` the beam's total filtration when it is known here
    (:func:`compute_exposure_dose`) and ``filtration_assumed`` whether it is the default.
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
    backscatter_source: str | None = None
    table_transmission: float | None = None
    filters: tuple[FilterSpec, ...] = ()
    filtration_assumed: bool = False

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
            "backscatter_factor_source": self.backscatter_source,
            "table_transmission": self.table_transmission,
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
    beam_numbers, curves = collect_curves([beam])
    chain = run_chain(
        failures,
        beam_numbers=beam_numbers,
        mas=np.array([mas]),
        geometry_numbers=np.array([GEOMETRY_NUMBERS(geo)], dtype=np.float64),
        d_ref_raw=[geometry.source_to_reference_point_mm],
        curves=curves,
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
        backscatter_source=None if bsf is None else backscatter_source(beam),
        table_transmission=None if beam.support is None else beam.entrance_transmission,
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
    """K_a,i = Y(1 m) P_It (1 m / FSD)^2 [T], with its trail."""
    trail = beam_trail.copy()
    trail.merge(geo.distance_trail)
    inputs: dict[str, Any] = {
        "output_ugy_per_mas_1m": beam.output_ugy_per_mas_1m,
        "exposure_mas": c.mas,
        "fsd_mm": geo.fsd_mm,
    }
    equation = "K_a,i = Y(1 m) · P_It · (1 m / FSD)²"
    support = beam.support
    if support is not None:
        trail.add(
            "table_transmission",
            beam.entrance_transmission,
            "1",
            equation=support.equation,
            source=support.source,
            inputs={
                "table_and_mattress": support.description,
                "standard_uncertainty": beam.entrance_transmission_standard_uncertainty,
            },
            assumed=support.assumed,
            note=support.note,
        )
        inputs["table_transmission"] = beam.entrance_transmission
        equation += " · T (tube below the table: table top and mattress in the beam)"
    trail.add(
        "incident_air_kerma_mgy",
        c.k_i,
        "mGy",
        equation=equation,
        source=_INVERSE_SQUARE,
        inputs=inputs,
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
        equation="P_KA = K(d) · A(d) · f, the same at every plane; f = mean of d²/(d² + x² + "
        "y²) over the field (off-axis inverse-square law; heel effect not included)",
        source="ICRU Report 74 (2005); IAEA TRS 457 (2007)",
        inputs={
            "air_kerma_mgy": c.k_plane,
            "field_area_cm2": geo.field_area_at_plane_cm2,
            "off_axis_factor": c.off_axis,
        },
    )
    return DoseFigure("dap_gy_cm2", c.dap, "Gy·cm²", c.dap * c.dap_rel, trail)


def _no_backscatter_reason(beam: BeamInputs, c: _Scalars) -> str:
    """Why the chain found no backscatter factor (the checks of backscatter_from_curves)."""
    h, u_h = beam.hvl1_mm_al, beam.hvl1_standard_uncertainty_mm_al
    if not (math.isfinite(h) and h > 0):
        return "HVL must be a positive finite number of mm Al"
    if u_h < 0 or c.u_side < 0:
        return "standard uncertainties must not be negative"
    lowest = float(load_backscatter_table(BY_HVL_TABLE).hvl_mm_al[0])
    return (
        f"HVL {h:.3g} mm Al is below the backscatter table by HVL (from {lowest:g} mm Al) and "
        "the beam's spectrum is not known; B is never extrapolated there"
    )


def _backscatter_notes(beam: BeamInputs, c: _Scalars) -> list[str]:
    """One sentence per assumption behind B (module docstring of backscatter_kernels)."""
    kernels = load_backscatter_kernels()
    sides = kernels.field_side_cm
    g = kernels.metadata.get("geometry", "").split(";")[0]
    notes = [f"patient taken as the kernels' ICRU-44 soft-tissue phantom ({g})"]
    curve = beam.backscatter_curve
    if curve is None:
        table = load_backscatter_table(BY_HVL_TABLE)
        shape = table.metadata.get("spectrum_shape_relative_standard_uncertainty", "?")
        notes.append(
            "beam given without its spectrum: B from the kernels weighted by a reference "
            f"tungsten spectrum of the same HVL (spectrum shape uncertainty {shape} relative)"
        )
    elif curve.kerma_fraction_below_kernels > 0.01:
        notes.append(
            f"{curve.kerma_fraction_below_kernels:.0%} of the incident air kerma lies below the "
            f"lowest kernel energy ({kernels.energies_kev[0]:g} keV) and takes its B"
        )
    if c.has("b_above_fields"):
        notes.append(
            f"field side {c.side:.3g} cm at the entrance is above the kernels' largest field "
            f"({sides[-1]:g} cm); B taken there"
        )
    if c.has("b_below_fields"):
        notes.append(
            f"field side {c.side:.3g} cm is below the kernels' smallest field ({sides[0]:g} cm); "
            "B interpolated toward the pencil-beam limit B = 1"
        )
    if c.has("b_above_hvls"):
        notes.append(f"HVL {c.hvl:.3g} mm Al is above the backscatter table by HVL; edge row")
    if beam.support is not None and beam.support.note is None and beam.support.description:
        notes.append("B and the tissue/air ratio are those of the beam behind the table")
    return notes


def _backscatter_figure(
    beam: BeamInputs, geo: ResolvedGeometry, c: _Scalars, notes: list[str]
) -> DoseFigure | None:
    """B with its trail, or None (and the reason in ``notes``) when the beam has none."""
    if not c.has("has_b"):
        notes.append(f"no entrance surface air kerma or dose: {_no_backscatter_reason(beam, c)}")
        return None
    kernels = load_backscatter_kernels()
    trail = WhyTrail()
    trail.add(
        "hvl1_mm_al",
        beam.hvl1_mm_al,
        "mm Al",
        equation="computed from the spectrum model"
        if not beam.calibrated
        else "beam model with the room calibration",
        source=beam.source,
        inputs={"standard_uncertainty": beam.hvl1_standard_uncertainty_mm_al}
        | (
            {
                "expanded_uncertainty_k2": 2.0 * beam.hvl1_standard_uncertainty_mm_al,
                "uncertainty_method": beam.hvl1_uncertainty_method,
            }
            if beam.hvl1_uncertainty_method
            else {}
        ),
    )
    trail.merge(geo.distance_trail)
    trail.merge(geo.field_trail)
    source = backscatter_source(beam)
    for note in _backscatter_notes(beam, c):
        trail.add(
            "backscatter_kernels", None, "", equation="kernel choice", source=source,
            assumed=True, note=note,
        )  # fmt: skip
    trail.add(
        "backscatter_factor",
        c.b,
        "1",
        equation="B(s) = Σ_E w(E) B(E, s), w = the beam's incident air-kerma spectrum, "
        "linear in the equivalent-square side s"
        if beam.backscatter_curve is not None
        else "bilinear interpolation in HVL and equivalent-square field side",
        source=source,
        inputs={
            "hvl1_mm_al": beam.hvl1_mm_al,
            "entrance_field_side_cm": geo.entrance_field_side_cm,
            "standard_uncertainty": c.u_b,
            "statistical_uncertainty": c.b_statistical,
            "model_relative_uncertainty": kernels.model_relative_uncertainty,
        },
    )
    return DoseFigure("backscatter_factor", c.b, "1", c.u_b, trail)


def backscatter_source(beam: BeamInputs) -> str:
    """Where a beam's backscatter factor comes from, in one line (trail, exam page)."""
    kernels = load_backscatter_kernels()
    if beam.backscatter_curve is None:
        return load_backscatter_table(BY_HVL_TABLE).citation + f" ({kernels.source})"
    return f"{kernels.source}, weighted by this beam's incident air-kerma spectrum"


def _entrance_figures(
    beam: BeamInputs,
    geo: ResolvedGeometry,
    incident: DoseFigure,
    c: _Scalars,
    notes: list[str],
) -> tuple[DoseFigure | None, DoseFigure | None, DoseFigure | None]:
    """B, K_a,e = K_a,i B and D = K_a,e (mu_en/rho)_t,a, with their trails (or three Nones)."""
    bsf = _backscatter_figure(beam, geo, c, notes)
    if bsf is None:
        return None, None, None
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
        equation="spectrum-averaged (μen/ρ) soft tissue / air at the skin",
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
    patient_support: PatientSupport | None = None,
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
    patient_support : PatientSupport, optional
        Table top and mattress between the tube and the skin (a tube below the table).
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
    from beamaudit.model.beam import BeamSpec, compute_beam

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
    beam = BeamInputs.from_beam_result(result, patient_support=patient_support, tissue=tissue)
    dose = dose_from_beam(
        beam,
        exposure_mas=exposure_mas,
        geometry=geometry,
        reported_dap_gy_cm2=reported_dap_gy_cm2,
        reported_entrance_dose_mgy=reported_entrance_dose_mgy,
        entrance_dose_derivation=entrance_dose_derivation,
        reported_reference_point_air_kerma_mgy=reported_reference_point_air_kerma_mgy,
        reported_source=reported_source,
    )
    return dataclasses.replace(
        dose, filters=tuple(result.filters), filtration_assumed=result.filtration_assumed
    )


def _geometry_kwargs(values: Mapping[str, Any]) -> dict[str, Any]:
    """Keyword values for GeometryInputs, with sequences turned into tuples."""
    out: dict[str, Any] = {}
    for key, value in values.items():
        out[key] = tuple(value) if isinstance(value, list) else value
    return out
