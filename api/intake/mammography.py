"""Mammography events: the mean glandular dose of each view, beside the device's AGD.

For every MG event (and every event of a mammography dose report) that records its technique,
:func:`mammography_figures` writes the Dance-method mean glandular dose
(:func:`beamaudit.model.glandular_dose.mean_glandular_dose`: :math:`D_G = K g c s`, times
:math:`T` for tomosynthesis) and how it was made: the first HVL with the paddle
(``recon_hvl1_mm_al``), the incident air kerma at the reference point (``recon_incident_air_kerma
_mgy``), the glandularity used and whether it was assumed, the target/filter, g, c, s, T, which
coefficient table and which method, and the ratio of the device's reported AGD (Organ Dose
(0040,0316) or TID 10003 Average Glandular Dose) to ours. Vendors use different methods, so the
ratio is a property of the room: one that moves is a finding.

What an event gives, and what is assumed when it does not (every assumption is in the trail):

* **tube voltage, mAs**: (0018,0060), (0018,1153) or the report's rows; without them
  ``no_technique``.
* **target**: Anode Target Material of the event, else the room's ``anode_material`` (noted).
* **filter**: the event's filters (Filter Material and thickness), else the room's configured
  filtration (noted); without either the model refuses (a K-edge filter is never guessed).
* **compressed thickness**: Body Part Thickness (0018,11A0) or Compression Thickness (111633,
  DCM); without it the event ``failed`` with that reason.
* **glandularity**: typical for the thickness and the patient's age (Dance et al. 2000), assumed.
* **tomosynthesis**: the sweep's arc and number of projections, equal tube loading assumed; a
  tomosynthesis event without them ``failed`` with that reason.
* window, paddle and focus-to-support distance: the model's documented defaults, assumed.

**Coefficients**: the project's Monte Carlo tables, unless the settings name an official table
(``mammography_coefficients_file``, the layout of
:func:`beamaudit.model.dance_coefficients.load_official_coefficients`): the process loads it once
(:func:`use_official_coefficients`, called where the settings are read: the commands that open
the store, the web application), and its g, c, s and T take precedence wherever it covers an
exposure; ``recon_mgd_coefficients`` then names it (title, source, sha256).

One dose per distinct beam and breast is computed for 1 mAs and scaled by each event's mAs
(:math:`K` and :math:`D_G` are proportional to it). The per-event trail is not stored: like the
other figures, ``recon_trail`` keeps the recipe and :func:`mammography_trail` makes the full
trail again. Every figure is an estimate for quality assurance and optimisation.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import Any

__all__ = [
    "MAMMOGRAPHY_FIGURES_CLEARED",
    "is_mammography",
    "mammography_beam",
    "mammography_figures",
    "mammography_trail",
    "official_coefficients",
    "use_official_coefficients",
]

#: the columns this module writes (beside recon_status, recon_calibrated and recon_trail)
MAMMOGRAPHY_FIGURES_CLEARED: dict[str, Any] = {
    "recon_mgd_mgy": None,
    "recon_mgd_u_mgy": None,
    "recon_glandularity_percent": None,
    "recon_glandularity_assumed": None,
    "recon_target_filter": None,
    "recon_mgd_g": None,
    "recon_mgd_c": None,
    "recon_mgd_s": None,
    "recon_mgd_t": None,
    "recon_mgd_coefficients": None,
    "recon_mgd_method": None,
    "agd_ratio_reported_to_recon": None,
}

#: the method, as stored in ``recon_mgd_method``
METHOD = "Dance method (Dance 1990; Dance et al. 2000, 2009, 2011): D_G = K g c s"
METHOD_TOMO = METHOD + " T"

_ANODES = {"tungsten": "W", "molybdenum": "Mo", "rhodium": "Rh", "silver": "Ag"}
#: organs a reported Organ Dose of an MG image may be of; another (a phantom's) is no AGD
_BREAST = frozenset({None, "", "BREAST"})


#: the official coefficient table of this process (None: the Monte Carlo's), by its sha256
_OFFICIAL: dict[str, Any] = {}


def use_official_coefficients(path: Any) -> Any:
    """Take the official coefficient table at ``path`` for every mammography dose this process
    makes from now on (None: the Monte Carlo's tables again); returns the table (or None).

    Raises
    ------
    beamaudit.model.ModelError
        The file cannot be read or breaks the layout (one line, with the line number).
    """
    _OFFICIAL.clear()
    if path is None:
        return None
    from beamaudit.model.dance_coefficients import load_official_coefficients

    table = load_official_coefficients(path)
    _OFFICIAL[table.sha256] = table
    return table


def official_coefficients() -> Any:
    """The official coefficient table in use, or None (the Monte Carlo's)."""
    return next(iter(_OFFICIAL.values()), None)


def is_mammography(event: Any) -> bool:
    """Whether ``event`` is a mammography exposure (MG, or an event with mammography fields)."""
    return (event.modality or "").upper() == "MG" or event.mammography_acquisition is not None


def _anode(event: Any, room: Any) -> tuple[str, str | None]:
    if event.anode_material:
        name = str(event.anode_material).lower()
        return _ANODES.get(name, str(event.anode_material)), None
    name = (room.anode_material if room is not None else None) or "tungsten"
    symbol = _ANODES.get(name.lower(), name)
    return symbol, f"target not recorded by the event: the room's {name} anode taken"


def _layers(event: Any, room: Any) -> tuple[tuple[Any, ...], str | None]:
    from beamaudit.model import FilterSpec

    own = tuple(
        FilterSpec(f["material"], float(f["thickness_mm"]))
        for f in (event.filters or [])
        if float(f.get("thickness_mm") or 0) > 0
    )
    if own or room is None or not room.filtration:
        return own, None
    layers = tuple(FilterSpec(f["material"], float(f["thickness_mm"])) for f in room.filtration)
    text = ", ".join(f"{f.thickness_mm:g} mm {f.material}" for f in layers)
    return layers, f"filter not recorded by the event: the room's filtration taken ({text})"


def _inputs(event: Any, room: Any) -> tuple[Any, Any, list[str]]:
    """The model's technique and tomosynthesis acquisition of ``event``, and what was taken."""
    from beamaudit.model import ModelError
    from beamaudit.model.glandular_dose import TomosynthesisAcquisition
    from beamaudit.model.mammography import MammographyTechnique

    if not event.body_part_thickness_mm:
        raise ModelError("no compressed breast thickness recorded (0018,11A0 or 111633, DCM)")
    anode, anode_note = _anode(event, room)
    layers, layers_note = _layers(event, room)
    notes = [n for n in (anode_note, layers_note) if n]
    technique = MammographyTechnique(
        kv=round(float(event.kvp_kv), 1),
        anode=anode,
        filters=layers,
        thickness_mm=round(float(event.body_part_thickness_mm), 1),
    )
    tomo = None
    if event.mammography_acquisition == "tomosynthesis":
        if event.tomo_scan_arc_deg is None or not event.tomo_projections:
            raise ModelError(
                "tomosynthesis without the sweep's arc and number of projections: T cannot be made"
            )
        tomo = TomosynthesisAcquisition.uniform(
            float(event.tomo_scan_arc_deg), int(event.tomo_projections)
        )
        notes.append("tomosynthesis: equal tube loading of every projection assumed")
    return technique, tomo, notes


def _dose_per_mas(technique: Any, tomo: Any, age_years: float | None, calibration: Any) -> Any:
    table = official_coefficients()
    return _dose_per_mas_with(
        technique, tomo, age_years, calibration, table.sha256 if table is not None else None
    )


@lru_cache(maxsize=2048)
def _dose_per_mas_with(
    technique: Any, tomo: Any, age_years: float | None, calibration: Any, table: str | None
) -> Any:
    from beamaudit.model.glandular_dose import mean_glandular_dose

    return mean_glandular_dose(
        technique, exposure_mas=1.0, age_years=age_years, tomosynthesis=tomo,
        calibration=calibration, official=_OFFICIAL.get(table) if table else None,
    )  # fmt: skip


def _age(event: Any) -> float | None:
    age = event.patient_age_years
    return float(age) if age is not None and math.isfinite(age) and 0 < age < 130 else None


def _age_class(age: float | None) -> float | None:
    """An age standing for the typical-glandularity class of ``age`` (under 40, 40-49, 50-64,
    65 and over: the figures depend on the age only through that class), so one dose serves
    every woman of a class."""
    if age is None:
        return None
    return 39.0 if age < 40 else 45.0 if age < 50 else 57.0 if age < 65 else 65.0


def mammography_figures(event: Any, room: Any, calibration: Any, recipe: dict[str, Any]) -> dict:
    """The reconstruction columns of one mammography event with kV and mAs.

    Returns ``recon_status`` ``ok`` with the figures, or raises the model's error (the caller
    records it as the event's failure).

    Raises
    ------
    beamaudit.model.ModelError
        Input the model refuses (no thickness, no filter, a voltage outside 20-40 kV...).
    """
    technique, tomo, notes = _inputs(event, room)
    unit = _dose_per_mas(technique, tomo, _age_class(_age(event)), calibration)
    mas = float(event.exposure_mas)
    mgd = unit.mgd_mgy * mas
    reported = event.organ_dose_mgy
    ratio = (
        reported / mgd
        if reported and mgd and (event.organ_exposed or "").upper() in _BREAST
        else None
    )
    return {
        "recon_status": "ok",
        "recon_hvl1_mm_al": unit.hvl1_mm_al,
        "recon_output_ugy_per_mas_1m": unit.beam.beam.output_ugy_per_mas_1m,
        "recon_incident_air_kerma_mgy": unit.incident_air_kerma_mgy * mas,
        "recon_calibrated": bool(unit.beam.beam.calibrated),
        "recon_mgd_mgy": mgd,
        "recon_mgd_u_mgy": unit.mgd_uncertainty_mgy * mas,
        "recon_glandularity_percent": 100.0 * unit.glandularity,
        "recon_glandularity_assumed": True,
        "recon_target_filter": technique.target_filter,
        "recon_mgd_g": unit.g,
        "recon_mgd_c": unit.c,
        "recon_mgd_s": unit.s,
        "recon_mgd_t": unit.tomo_factor,
        "recon_mgd_coefficients": unit.coefficients,
        "recon_mgd_method": METHOD_TOMO if tomo is not None else METHOD,
        "agd_ratio_reported_to_recon": ratio,
        "recon_trail": recipe | ({"mammography": notes} if notes else {}),
    }


def mammography_beam(event: Any, room: Any, calibration: Any) -> Any:
    """The beam at the breast's upper surface (window, filters and paddle) the event's D_G was
    made with, for ``room`` and ``calibration`` as the stored recipe keeps them.

    Raises
    ------
    beamaudit.model.ModelError
        As :func:`mammography_figures`.
    """
    from beamaudit.model.mammography import breast_beam

    technique, _, _ = _inputs(event, room)
    return breast_beam(technique, calibration=calibration).beam


def mammography_trail(event: Any, room: Any, calibration: Any) -> dict[str, Any]:
    """The full why trail of an event's mean glandular dose, made again (``as_dict()`` of the
    model's :class:`~beamaudit.model.glandular_dose.GlandularDose`, with what the event did not
    record listed in ``assumptions``)."""
    from beamaudit.model.glandular_dose import mean_glandular_dose

    technique, tomo, notes = _inputs(event, room)
    dose = mean_glandular_dose(
        technique, exposure_mas=float(event.exposure_mas), age_years=_age(event),
        tomosynthesis=tomo, calibration=calibration, official=official_coefficients(),
    )  # fmt: skip
    out: dict[str, Any] = dose.as_dict()
    out["assumptions"] = [*notes, *out["assumptions"]]
    out["reported_mgd_mgy"] = event.organ_dose_mgy
    return out
