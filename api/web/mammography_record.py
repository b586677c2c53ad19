"""A mammography exposure as the exam page shows it: our mean glandular dose per view beside the
device's AGD, and what it was made with (target/filter, HVL, thickness, glandularity, g, c, s, T,
which coefficient table). The record's contract is :mod:`beamaudit.dashboards.records`.
"""

from __future__ import annotations

from typing import Any

__all__ = ["mammography_exposure"]

_SIDES = {"L": "left", "R": "right", "B": "both"}
_ACQUISITIONS = {"2d": "2D", "tomosynthesis": "tomosynthesis"}


def _intent(event: Any) -> str | None:
    """Screening or diagnostic as ingest read it, with the clue that decided (the field's
    provenance: a view modifier, a procedure code, the dose report's intent)."""
    if not event.mammography_intent:
        return None
    clue = (event.provenance or {}).get("mammography_intent")
    return f"{event.mammography_intent}, from {clue}" if clue else str(event.mammography_intent)


def mammography_exposure(event: Any, trail: dict[str, Any]) -> dict[str, Any]:
    """The exam record's exposure of a reconstructed mammography ``event`` (``why`` aside: the
    caller turns ``trail["trail"]`` into steps)."""
    technique = {
        "view_position": event.view_position,
        "image_laterality": _SIDES.get(event.image_laterality or "", event.image_laterality),
        "mammography_acquisition": _ACQUISITIONS.get(
            event.mammography_acquisition or "", event.mammography_acquisition
        ),
        "mammography_intent": _intent(event),
        "target_filter": event.recon_target_filter,
        "kvp_kv": event.kvp_kv,
        "exposure_mas": event.exposure_mas,
        "compressed_thickness_mm": event.body_part_thickness_mm,
        "compression_force_n": event.compression_force_n,
        "hvl1_mm_al": event.recon_hvl1_mm_al,
        "glandularity_percent": (
            None
            if event.recon_glandularity_percent is None
            else round(event.recon_glandularity_percent)  # a typical value: no decimals
        ),
    }
    source = f"{event.recon_mgd_method}; coefficients: {event.recon_mgd_coefficients}"
    agd: dict[str, Any] = {"value": float(event.recon_mgd_mgy), "source": source}
    if event.recon_mgd_u_mgy:
        agd["uncertainty"] = float(event.recon_mgd_u_mgy)
    if event.organ_dose_mgy is not None and event.agd_ratio_reported_to_recon is not None:
        agd["reported"] = float(event.organ_dose_mgy)
        agd["ratio"] = float(event.agd_ratio_reported_to_recon)
    dose: dict[str, Any] = {"mgd_mgy": agd}
    if event.recon_incident_air_kerma_mgy is not None:
        dose["incident_air_kerma_mgy"] = {
            "value": float(event.recon_incident_air_kerma_mgy),
            "source": "beam model at the reference point (60 mm from the chest wall)",
        }
        u_k = trail.get("incident_air_kerma_uncertainty_mgy")
        if u_k:
            dose["incident_air_kerma_mgy"]["uncertainty"] = float(u_k)
    return {
        "event_id": str(event.id),
        "event_datetime": event.event_datetime or event.study_datetime,
        "technique": {k: v for k, v in technique.items() if v is not None},
        "dose": dose,
        "spectrum": None,
    }
