"""A mammography event's own fields: the breast and its compression as the device recorded them,
and our mean glandular dose by the Dance method beside the device's AGD."""

from __future__ import annotations

from pydantic import Field

from beamaudit.api.web.schemas.base import ReadModel

__all__ = ["EventMammography"]


class EventMammography(ReadModel):
    """One view of one breast: as recorded, and D_G = K g c s (x T) as beamaudit made it."""

    view_position: str | None = Field(description="CC, MLO, ... (View Code Sequence, 0018,5101)")
    image_laterality: str | None = Field(description="L, R or B (both)")
    acquisition: str | None = Field(description="2d or tomosynthesis")
    intent: str | None = Field(
        default=None,
        description="screening or diagnostic as ingest read it (null: not recorded; the "
        "mapping rules then read the descriptions)",
    )
    intent_from: str | None = Field(
        default=None,
        description="the clue that decided: a View Modifier Code Sequence item of a workup "
        "view, a procedure code's meaning, or the dose report's Has Intent",
    )
    compressed_thickness_mm: float | None = Field(description="(0018,11A0) or (111633, DCM)")
    compression_force_n: float | None
    compression_pressure_kpa: float | None
    compression_contact_area_mm2: float | None
    paddle_description: str | None
    breast_implant_present: bool | None
    organ_exposed: str | None = Field(description="what the reported organ dose is of")
    tomo_scan_arc_deg: float | None
    tomo_projections: int | None
    reported_mgd_mgy: float | None = Field(
        description="the device's average glandular dose (Organ Dose (0040,0316) is in dGy, "
        "converted; or TID 10003 Average Glandular Dose)"
    )
    mgd_mgy: float | None = Field(description="our mean glandular dose D_G")
    mgd_u_mgy: float | None = Field(description="its standard uncertainty as the model states it")
    ratio_reported_to_reconstructed: float | None = Field(description="the device's AGD / ours")
    target_filter: str | None = Field(description="anode / added filter, e.g. W/Rh")
    hvl1_mm_al: float | None = Field(description="first HVL of the beam with the paddle")
    incident_air_kerma_mgy: float | None = Field(
        description="K at the reference point (upper breast surface, 60 mm from the chest wall)"
    )
    glandularity_percent: float | None = Field(description="the glandularity used")
    glandularity_assumed: bool | None = Field(
        description="true: typical for the thickness and age (Dance et al. 2000), not measured"
    )
    g: float | None
    c: float | None
    s: float | None
    t: float | None = Field(description="tomosynthesis factor T; null for a 2D view")
    coefficients: str | None = Field(description="which g, c, s, T table was used")
    method: str | None
