"""CT localizer calibrations to water, stored per scanner (IEC 62985:2019's localizer method).

A localizer's pixel values mean nothing until a physicist relates them to water for the scanner,
tube voltage, view and (where it matters) filter: a table of (pixel value, mm of water) points
(:class:`beamaudit.model.ct_localizer.LocalizerCalibration`), measured with water phantoms on the
table. :func:`add_localizer_calibration` stores one (checked by the model, audited);
:func:`find_localizer_calibration` gives the newest one that applies to an image, or ``None``,
and then the localizer gives no size.
"""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING, Literal

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.errors import ApiError
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change

if TYPE_CHECKING:  # the model (SciPy) is imported when a calibration is used
    from beamaudit.model.ct_localizer import LocalizerCalibration

__all__ = ["KV_TOLERANCE", "add_localizer_calibration", "find_localizer_calibration"]

#: a calibration applies to an image whose tube voltage is within this many kV of its own
KV_TOLERANCE = 0.5
View = Literal["frontal", "lateral"]


def add_localizer_calibration(
    session: Session,
    *,
    device_id: int,
    kvp_kv: float,
    view: View,
    pixel_values: list[float],
    water_thickness_mm: list[float],
    source: str,
    measured_on: date,
    actor: str,
    filter_type: str = "",
) -> m.CtLocalizerCalibrationRow:
    """Store a scanner's localizer calibration (audited). Raises :class:`ApiError` with one
    line for an unknown device, a bad view or points the model refuses."""
    from beamaudit.model.ct_localizer import LocalizerCalibration
    from beamaudit.model.errors import ModelError

    if session.get(m.Device, device_id) is None:
        raise ApiError(f"no device {device_id}")
    if view not in ("frontal", "lateral"):
        raise ApiError(f"view must be frontal or lateral, not {view!r}")
    try:
        LocalizerCalibration(tuple(pixel_values), tuple(water_thickness_mm), source)
    except (ModelError, TypeError, ValueError) as exc:
        raise ApiError(f"localizer calibration: {exc}") from None
    row = m.CtLocalizerCalibrationRow(
        device_id=device_id,
        kvp_kv=float(kvp_kv),
        view=view,
        filter_type=filter_type,
        pixel_values=[float(v) for v in pixel_values],
        water_thickness_mm=[float(t) for t in water_thickness_mm],
        source=source,
        measured_on=measured_on,
        created_by=actor,
    )
    session.add(row)
    session.flush()
    record_change(
        session,
        actor=actor,
        action="create",
        entity="ct_localizer_calibration",
        entity_id=row.id,
        after={
            "device_id": device_id,
            "kvp_kv": row.kvp_kv,
            "view": view,
            "filter_type": filter_type,
            "points": len(row.pixel_values),
            "source": source,
            "measured_on": measured_on.isoformat(),
        },
    )
    return row


def find_localizer_calibration(
    session: Session, *, device_id: int, kvp_kv: float, view: str, filter_type: str = ""
) -> LocalizerCalibration | None:
    """The newest stored calibration of the device for the tube voltage and view (one for the
    image's filter, else one for any filter), or ``None``."""
    from beamaudit.model.ct_localizer import LocalizerCalibration

    table = m.CtLocalizerCalibrationRow
    rows = session.scalars(
        select(table)
        .where(table.device_id == device_id, table.view == view)
        .where(table.kvp_kv.between(kvp_kv - KV_TOLERANCE, kvp_kv + KV_TOLERANCE))
        .where(table.filter_type.in_({filter_type, ""}))
        .order_by(table.measured_on.desc(), table.id.desc())
    ).all()
    if not rows:
        return None
    row = next((r for r in rows if r.filter_type == filter_type), rows[0])
    source = (
        f"{row.source} (stored calibration {row.id}, measured {row.measured_on.isoformat()}, "
        f"{row.kvp_kv:g} kV, {row.view})"
    )
    return LocalizerCalibration(tuple(row.pixel_values), tuple(row.water_thickness_mm), source)
