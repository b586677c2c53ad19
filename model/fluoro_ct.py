"""Accumulations over the irradiation events of fluoroscopy, interventional and CT studies.

Fluoroscopy and interventional procedures (dose reports, DICOM PS3.16 TID 10001-10004) are
audited on totals over all irradiation events: the cumulative air kerma-area product, the
cumulative air kerma at the patient entrance reference point (K_a,r, IEC 60601-2-43; the
reference point is a fixed point of the gantry, so K_a,r is not the peak skin dose), the total
fluoroscopy time and the number of events (NCRP Report 168 sets follow-up levels on all four).
CT studies (TID 10011-10013) are audited per acquisition on CTDIvol and DLP and per study on the
total DLP, with the size-specific dose estimate (AAPM Reports 204 and 220) where the patient's
size is known.

An event without a value is never counted as zero: the total is taken over the events that
have the value, the count of those that lack it is kept, and the trail says the total is a
lower bound. Where the report also states its own totals, both are kept side by side with
their ratio.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

from beamaudit.model.dose import ReportedVsReconstructed, compare_reported
from beamaudit.model.errors import ModelError
from beamaudit.model.ssde import SizeSpecificDose, size_specific_dose_estimate
from beamaudit.model.trail import WhyTrail

__all__ = [
    "CtAcquisition",
    "CtAcquisitionDose",
    "CtStudyDose",
    "ProjectionAccumulation",
    "ProjectionEvent",
    "accumulate_projection_events",
    "ct_acquisition_dose",
    "ct_study_dose",
]

#: Event types (as ingest names them) that count as fluoroscopy; every other type is an
#: acquisition (DICOM PS3.16 CID 10002: Fluoroscopy vs Stationary/Stepping/Rotational Acquisition).
FLUORO_EVENT_TYPES = frozenset({"fluoroscopy"})
#: CT acquisition types (as ingest names them) that are localisers (scout views).
CT_LOCALIZER_TYPES = frozenset({"ct_localizer", "constant_angle"})


def _value(name: str, value: float | None) -> float | None:
    if value is None:
        return None
    number = float(value)
    if not (math.isfinite(number) and number >= 0):
        raise ModelError(f"{name} must be zero or a positive finite number, not {value!r}")
    return number


@dataclass(frozen=True, slots=True)
class ProjectionEvent:
    """One irradiation event of a projection dose report (plain numbers, already in our units).

    ``event_type`` as ingest names it (``"fluoroscopy"``, ``"stationary"``, ``"stepping"``,
    ``"rotational"``); ``None`` when not recorded (counted as an acquisition, noted).
    """

    event_type: str | None = None
    dap_gy_cm2: float | None = None
    reference_point_air_kerma_mgy: float | None = None
    irradiation_duration_s: float | None = None


@dataclass(frozen=True)
class ProjectionAccumulation:
    """Totals over the events of one procedure (one plane of a biplane system).

    Totals are over the events that carry the value; ``missing`` counts, per quantity, the
    events that do not (a total with missing events is a lower bound).
    """

    number_of_events: int
    number_of_fluoro_events: int
    number_of_acquisition_events: int
    dap_total_gy_cm2: float | None
    fluoro_dap_total_gy_cm2: float | None
    acquisition_dap_total_gy_cm2: float | None
    reference_point_air_kerma_total_mgy: float | None
    fluoro_reference_point_air_kerma_total_mgy: float | None
    acquisition_reference_point_air_kerma_total_mgy: float | None
    fluoro_time_total_s: float | None
    acquisition_time_total_s: float | None
    missing: dict[str, int]
    comparisons: list[ReportedVsReconstructed]
    trail: WhyTrail

    @property
    def complete(self) -> bool:
        """True when every event carried every quantity totalled."""
        return not any(self.missing.values())


def _sum(values: list[float | None]) -> tuple[float | None, int]:
    """Sum of the values present (None when none is) and the count of those missing."""
    present = [v for v in values if v is not None]
    return (math.fsum(present) if present else None), len(values) - len(present)


def accumulate_projection_events(
    events: Sequence[ProjectionEvent],
    *,
    reported_dap_total_gy_cm2: float | None = None,
    reported_reference_point_air_kerma_total_mgy: float | None = None,
    reported_fluoro_time_total_s: float | None = None,
    reported_source: str = "dose report accumulation (TID 10002)",
) -> ProjectionAccumulation:
    """Cumulative DAP, K_a,r and times over the events of a procedure.

    .. math::

        P_{KA,\\text{total}} = \\sum_i P_{KA,i}, \\qquad
        K_{a,r,\\text{total}} = \\sum_i K_{a,r,i}, \\qquad
        t_\\text{fluoro} = \\sum_{i \\in \\text{fluoro}} t_i

    Parameters
    ----------
    events : sequence of ProjectionEvent
        The irradiation events of one procedure and one plane.
    reported_dap_total_gy_cm2, reported_reference_point_air_kerma_total_mgy,
    reported_fluoro_time_total_s : float, optional
        The report's own totals, kept beside the sums with their ratio.
    reported_source : str
        Where those totals came from (for the comparison records).
    """
    trail = WhyTrail()
    checked = [
        ProjectionEvent(
            event_type=e.event_type,
            dap_gy_cm2=_value("dap_gy_cm2", e.dap_gy_cm2),
            reference_point_air_kerma_mgy=_value(
                "reference_point_air_kerma_mgy", e.reference_point_air_kerma_mgy
            ),
            irradiation_duration_s=_value("irradiation_duration_s", e.irradiation_duration_s),
        )
        for e in events
    ]
    fluoro = [e for e in checked if e.event_type in FLUORO_EVENT_TYPES]
    acquisition = [e for e in checked if e.event_type not in FLUORO_EVENT_TYPES]
    untyped = sum(1 for e in checked if e.event_type is None)
    if untyped:
        trail.add(
            "untyped_events",
            untyped,
            "events",
            equation="counted as acquisitions",
            source="event type not recorded",
            assumed=True,
            note=f"{untyped} event(s) without an event type counted as acquisitions",
        )
    totals, missing = _event_totals(trail, checked, fluoro, acquisition)
    comparisons = _compare_totals(
        totals,
        {
            "dap_total_gy_cm2": reported_dap_total_gy_cm2,
            "reference_point_air_kerma_total_mgy": reported_reference_point_air_kerma_total_mgy,
            "fluoro_time_total_s": reported_fluoro_time_total_s,
        },
        reported_source,
    )
    return ProjectionAccumulation(
        number_of_events=len(checked),
        number_of_fluoro_events=len(fluoro),
        number_of_acquisition_events=len(acquisition),
        **totals,
        missing=missing,
        comparisons=comparisons,
        trail=trail,
    )


def _event_totals(
    trail: WhyTrail,
    checked: list[ProjectionEvent],
    fluoro: list[ProjectionEvent],
    acquisition: list[ProjectionEvent],
) -> tuple[dict[str, float | None], dict[str, int]]:
    """Each total of :class:`ProjectionAccumulation` over the events that carry its value, with
    the number of events that lack it (a total with missing events is a lower bound)."""
    missing: dict[str, int] = {}
    totals: dict[str, float | None] = {}
    kar = "reference_point_air_kerma_mgy"
    specs = (
        ("dap_total_gy_cm2", checked, "dap_gy_cm2", "Gy·cm²"),
        ("fluoro_dap_total_gy_cm2", fluoro, "dap_gy_cm2", "Gy·cm²"),
        ("acquisition_dap_total_gy_cm2", acquisition, "dap_gy_cm2", "Gy·cm²"),
        ("reference_point_air_kerma_total_mgy", checked, kar, "mGy"),
        ("fluoro_reference_point_air_kerma_total_mgy", fluoro, kar, "mGy"),
        ("acquisition_reference_point_air_kerma_total_mgy", acquisition, kar, "mGy"),
        ("fluoro_time_total_s", fluoro, "irradiation_duration_s", "s"),
        ("acquisition_time_total_s", acquisition, "irradiation_duration_s", "s"),
    )
    for name, group, attribute, unit in specs:
        total, n_missing = _sum([getattr(e, attribute) for e in group])
        totals[name] = total
        missing[name] = n_missing
        if total is None:
            continue
        trail.add(
            name,
            total,
            unit,
            equation="sum over the events that carry the value",
            source="irradiation events of the dose report (TID 10003)",
            inputs={"events_summed": len(group) - n_missing, "events_missing": n_missing},
            assumed=n_missing > 0,
            note=(
                f"{n_missing} of {len(group)} events lack {attribute}: {name} is a lower bound"
                if n_missing
                else None
            ),
        )
    return totals, missing


_TOTAL_UNITS = {
    "dap_total_gy_cm2": "Gy·cm²",
    "reference_point_air_kerma_total_mgy": "mGy",
    "fluoro_time_total_s": "s",
}


def _compare_totals(
    totals: dict[str, float | None],
    reported_totals: dict[str, float | None],
    reported_source: str,
) -> list[ReportedVsReconstructed]:
    """The report's own totals beside the sums over its events, where both are positive."""
    comparisons = []
    for quantity, reported in reported_totals.items():
        ours = totals[quantity]
        if reported is not None and ours is not None and reported > 0 and ours > 0:
            comparisons.append(
                compare_reported(
                    quantity=quantity,
                    unit=_TOTAL_UNITS[quantity],
                    reported=reported,
                    reconstructed=ours,
                    reported_source=reported_source,
                    note="reconstructed = sum over the events",
                )
            )
    return comparisons


@dataclass(frozen=True, slots=True)
class CtAcquisition:
    """One CT acquisition (TID 10013), plain numbers in our units; ``None`` = not recorded."""

    ctdivol_mgy: float | None = None
    dlp_mgy_cm: float | None = None
    scan_length_mm: float | None = None
    phantom_diameter_cm: float | None = None
    water_equivalent_diameter_mm: float | None = None
    effective_diameter_cm: float | None = None
    acquisition_type: str | None = None
    label: str | None = None
    body_region: str | None = None  # "head" or "body" (the SSDE fit: AAPM 293 or AAPM 204)


@dataclass(frozen=True)
class CtAcquisitionDose:
    """CTDIvol, DLP and (where the size is known) SSDE of one acquisition, with its trail."""

    label: str | None
    acquisition_type: str | None
    ctdivol_mgy: float | None
    dlp_mgy_cm: float | None
    dlp_source: str | None
    phantom_diameter_cm: float | None
    ssde: SizeSpecificDose | None
    comparisons: list[ReportedVsReconstructed]
    trail: WhyTrail

    @property
    def ssde_mgy(self) -> float | None:
        """The SSDE, mGy, or None when the patient size or phantom was not known."""
        return self.ssde.ssde_mgy if self.ssde is not None else None


_MM_PER_CM = 10.0


def ct_acquisition_dose(acquisition: CtAcquisition) -> CtAcquisitionDose:
    """CTDIvol, DLP and SSDE of one acquisition.

    The DLP is the reported one; without it, :math:`DLP = \\mathrm{CTDI_{vol}} \\cdot L` with the
    scan length :math:`L` (an underestimate for helical scans, which irradiate beyond the
    imaged length; noted). With both, the report's DLP is kept beside the product. SSDE follows
    :func:`beamaudit.model.ssde.size_specific_dose_estimate`, preferring the water-equivalent
    diameter (AAPM 220) over the effective diameter (AAPM 204), with the fit of the acquisition's
    body region: AAPM 293 for the head, AAPM 204 for the body (assumed, and noted for a 16 cm
    phantom, when the region is not recorded).
    """
    a = acquisition
    trail = WhyTrail()
    ctdivol = _value("ctdivol_mgy", a.ctdivol_mgy)
    dlp = _value("dlp_mgy_cm", a.dlp_mgy_cm)
    length_mm = _value("scan_length_mm", a.scan_length_mm)
    comparisons: list[ReportedVsReconstructed] = []
    if ctdivol is not None:
        trail.add("ctdivol_mgy", ctdivol, "mGy", equation="recorded", source="CT acquisition")
    dlp_source: str | None = None
    product = None
    if ctdivol is not None and length_mm is not None:
        product = ctdivol * length_mm / _MM_PER_CM
    if dlp is not None:
        dlp_source = "reported"
        trail.add("dlp_mgy_cm", dlp, "mGy·cm", equation="recorded", source="CT acquisition")
        if product is not None and product > 0 and dlp > 0:
            comparisons.append(
                compare_reported(
                    quantity="dlp_mgy_cm",
                    unit="mGy·cm",
                    reported=dlp,
                    reconstructed=product,
                    reported_source="CT acquisition (TID 10013)",
                    note="reconstructed = CTDIvol x scan length",
                )
            )
    elif product is not None:
        dlp, dlp_source = product, "ctdivol_x_length"
        trail.add(
            "dlp_mgy_cm",
            product,
            "mGy·cm",
            equation="DLP = CTDIvol · L",
            source="definition of the CT air kerma-length product (IEC 60601-2-44)",
            inputs={"ctdivol_mgy": ctdivol, "scan_length_cm": (length_mm or 0.0) / _MM_PER_CM},
            assumed=True,
            note="DLP not reported; CTDIvol x scan length used (misses helical over-ranging)",
        )
    ssde = None
    phantom = a.phantom_diameter_cm
    size_cm, kind = None, None
    if a.water_equivalent_diameter_mm is not None:
        size_cm, kind = a.water_equivalent_diameter_mm / _MM_PER_CM, "water_equivalent"
    elif a.effective_diameter_cm is not None:
        size_cm, kind = a.effective_diameter_cm, "effective"
    if ctdivol is not None and size_cm is not None and kind is not None:
        if phantom is None:
            trail.add(
                "ssde_mgy",
                None,
                "mGy",
                equation="not computed",
                source="AAPM Report 204",
                assumed=True,
                note="SSDE not computed: the CTDIvol phantom (16 or 32 cm) is not recorded",
            )
        else:
            ssde = _ssde(trail, a, ctdivol=ctdivol, size_cm=size_cm, kind=kind, phantom=phantom)
    return CtAcquisitionDose(
        label=a.label,
        acquisition_type=a.acquisition_type,
        ctdivol_mgy=ctdivol,
        dlp_mgy_cm=dlp,
        dlp_source=dlp_source,
        phantom_diameter_cm=phantom,
        ssde=ssde,
        comparisons=comparisons,
        trail=trail,
    )


def _ssde(
    trail: WhyTrail,
    a: CtAcquisition,
    *,
    ctdivol: float,
    size_cm: float,
    kind: str,
    phantom: float,
) -> SizeSpecificDose | None:
    """The SSDE of one acquisition by the fit of its body region (AAPM 293 head, AAPM 204 body),
    its steps added to ``trail``; None (with the reason) when no fit applies."""
    region = a.body_region
    if region is None:
        region = "body"
        if round(phantom) == 16:
            trail.add(
                "body_region", "body", "", equation="assumed", source="CT acquisition",
                assumed=True, note="body region not recorded: the AAPM 204 body fit is used for "
                "a CTDIvol of the 16 cm phantom (a head would take the AAPM 293 head fit)",
            )  # fmt: skip
    if region == "head" and round(phantom) != 16:
        trail.add(
            "ssde_mgy", None, "mGy", equation="not computed", source="AAPM Report 293",
            assumed=True, note=f"SSDE not computed: a head CTDIvol of the {phantom:g} cm phantom "
            "(the AAPM 293 head fit refers to the 16 cm phantom)",
        )  # fmt: skip
        return None
    ssde = size_specific_dose_estimate(
        ctdivol_mgy=ctdivol,
        diameter_cm=size_cm,
        phantom_diameter_cm=phantom,
        diameter_kind=kind,
        body_region=region,
    )
    trail.extend(ssde.trail)
    return ssde


@dataclass(frozen=True)
class CtStudyDose:
    """Per-acquisition doses and study totals of one CT study.

    ``dlp_total_mgy_cm`` sums the acquisitions that have a DLP; ``dlp_subtotals_mgy_cm`` splits
    it by phantom (``"16"``, ``"32"``, ``"unknown"``), as a dose report does for mixed phantoms
    (TID 10012). CTDIvol is never summed; ``ctdivol_max_mgy`` is the highest of the
    non-localiser acquisitions.
    """

    acquisitions: list[CtAcquisitionDose]
    number_of_acquisitions: int
    dlp_total_mgy_cm: float | None
    dlp_subtotals_mgy_cm: dict[str, float]
    dlp_missing: int
    ctdivol_max_mgy: float | None
    ssde_max_mgy: float | None
    comparisons: list[ReportedVsReconstructed] = field(default_factory=list)
    trail: WhyTrail = field(default_factory=WhyTrail)


def ct_study_dose(
    acquisitions: Sequence[CtAcquisition],
    *,
    reported_dlp_total_mgy_cm: float | None = None,
    reported_source: str = "CT accumulated dose data (TID 10012)",
) -> CtStudyDose:
    """Per-acquisition CT doses and the study's total DLP.

    .. math::

        DLP_\\text{study} = \\sum_i DLP_i
    """
    doses = [ct_acquisition_dose(a) for a in acquisitions]
    trail = WhyTrail()
    dlps = [d.dlp_mgy_cm for d in doses]
    total, missing = _sum(dlps)
    subtotals: dict[str, float] = {}
    for d in doses:
        if d.dlp_mgy_cm is None:
            continue
        key = str(round(d.phantom_diameter_cm)) if d.phantom_diameter_cm else "unknown"
        subtotals[key] = subtotals.get(key, 0.0) + d.dlp_mgy_cm
    if total is not None:
        trail.add(
            "dlp_total_mgy_cm",
            total,
            "mGy·cm",
            equation="sum of the acquisitions' DLP",
            source="TID 10012 definition of CT Dose Length Product Total",
            inputs={"acquisitions_summed": len(doses) - missing, "acquisitions_missing": missing},
            assumed=missing > 0,
            note=(
                f"{missing} of {len(doses)} acquisitions have no DLP: the total is a lower bound"
                if missing
                else None
            ),
        )
    scanning = [
        d
        for d in doses
        if d.ctdivol_mgy is not None and (d.acquisition_type or "") not in CT_LOCALIZER_TYPES
    ]
    ctdivol_max = max((d.ctdivol_mgy for d in scanning if d.ctdivol_mgy is not None), default=None)
    ssde_max = max((d.ssde_mgy for d in doses if d.ssde_mgy is not None), default=None)
    comparisons = []
    if reported_dlp_total_mgy_cm is not None and reported_dlp_total_mgy_cm > 0 and total:
        comparisons.append(
            compare_reported(
                quantity="dlp_total_mgy_cm",
                unit="mGy·cm",
                reported=reported_dlp_total_mgy_cm,
                reconstructed=total,
                reported_source=reported_source,
                note="reconstructed = sum over the acquisitions",
            )
        )
    return CtStudyDose(
        acquisitions=doses,
        number_of_acquisitions=len(doses),
        dlp_total_mgy_cm=total,
        dlp_subtotals_mgy_cm=subtotals,
        dlp_missing=missing,
        ctdivol_max_mgy=ctdivol_max,
        ssde_max_mgy=ssde_max,
        comparisons=comparisons,
        trail=trail,
    )
