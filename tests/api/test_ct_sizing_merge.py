"""CT patient size from a calibrated localizer, and images that arrive after a study was sized.

A frontal localizer of a water ellipse whose half-axes grow along the table (the chords of the
ellipse are exact, IEC 62985's localizer method with the calibration to water of the forward
model that drew it: ``ct_phantoms.signal_calibration_points``), a CT dose report whose spiral
acquisition carries its TID 10014 scan range in the localizer's frame of reference; an axial
series scanned in two halves. Dw is known by construction (AAPM Report 220, eq. 2-3). Both
backends.
"""

from __future__ import annotations

import math
from datetime import date
from pathlib import Path

import numpy as np
import pytest
from ct_phantoms import ct_dataset, detector_signal, row_profile, signal_calibration_points
from ingest_samples import to_bytes
from pydicom.uid import generate_uid
from rdsr_builders import CtEvent, ct_report
from sqlalchemy import select
from test_ct_sizing import _dw_at, _events, _scan, _series

from beamaudit.api.errors import ApiError
from beamaudit.api.store import models as m
from beamaudit.api.store.ct_calibrations import (
    add_localizer_calibration,
    find_localizer_calibration,
)

COLUMNS, COLUMN_MM, ROW_MM = 200, 2.5, 5.0
LENGTH_MM = 400.0
MANUFACTURER = "Hollowbrook Test Phantoms"  # ct_dataset's


def _half_width_mm(z_mm: float) -> float:
    return 120.0 - 0.1 * z_mm  # z from 0 down to -400 mm: 120 to 160 mm


def _localizer_dw_cm(z_mm: float) -> float:
    # a water ellipse of half-axes a and 0.7 a: A = pi a (0.7 a), Dw = 2 sqrt(A / pi)
    return 2 * math.sqrt(0.7) * _half_width_mm(z_mm) / 10


def _localizer_study(folder: Path) -> tuple[str, str]:
    """A frontal localizer over z 0 to -400 mm and a dose report whose spiral acquisition
    covers the same range; returns the study and the frame of reference UIDs."""
    study, frame = generate_uid(), generate_uid()
    folder.mkdir(parents=True, exist_ok=True)
    z = -np.arange(0.0, LENGTH_MM + 1e-9, ROW_MM)
    values = np.array(
        [
            detector_signal(
                row_profile(
                    COLUMNS, COLUMN_MM, [(_half_width_mm(zz), 0.7 * _half_width_mm(zz), 0.0)]
                )
            )
            for zz in z
        ]
    )
    ds = ct_dataset(
        values, pixel_mm=(ROW_MM, COLUMN_MM), intercept=0.0, localizer=True,
        orientation=(1, 0, 0, 0, 0, -1), position=(-COLUMNS * COLUMN_MM / 2, 0.0, 0.0),
        study_uid=study, frame_of_reference_uid=frame,
    )  # fmt: skip
    (folder / "localizer.dcm").write_bytes(to_bytes(ds))
    report = ct_report(
        [
            CtEvent(
                z_top_bottom_mm=(0.0, -LENGTH_MM), frame_of_reference_uid=frame, ctdivol_mgy=10.0
            )
        ],
        study_uid=study,
    )
    (folder / "report.dcm").write_bytes(to_bytes(report))
    return study, frame


def _calibrate(store, *, view: str = "frontal", kvp_kv: float = 120.0) -> int:
    values, water = signal_calibration_points()
    with store.session_factory.begin() as s:
        device = m.Device(manufacturer=MANUFACTURER)
        s.add(device)
        s.flush()
        add_localizer_calibration(
            s, device_id=device.id, kvp_kv=kvp_kv, view=view,  # type: ignore[arg-type]
            pixel_values=list(values), water_thickness_mm=list(water),
            source="water cylinders on the table (test forward model)",
            measured_on=date(2026, 11, 2), actor="physicist",
        )  # fmt: skip
        return device.id


def test_a_calibrated_localizer_sizes_the_acquisition_over_its_scan_range(
    store, tmp_path: Path
) -> None:
    _calibrate(store)
    _localizer_study(tmp_path / "export")
    summary = _scan(store, tmp_path / "export", tmp_path)
    assert not summary.errors, summary.errors
    assert summary.ct_size is not None and summary.ct_size["localizers_uncalibrated"] == 0
    sized = [e for e in _events(store) if e.size_dw_mean_cm is not None]
    (spiral,) = sized
    assert spiral.ctdivol_mgy == 10.0 and spiral.size_method == "localizer"
    # Dw linear in z: its mean over 0 to -400 mm is its value at -200 mm (AAPM 220 eq. 2-3)
    assert spiral.size_dw_mean_cm == pytest.approx(_localizer_dw_cm(-200.0), rel=5e-3)
    assert spiral.size_images_used == round(LENGTH_MM / ROW_MM) + 1  # every localizer row
    # AAPM Report 204 (2011), the 32 cm phantom fit: f = 3.704369 exp(-0.03671937 Dw)
    f = 3.704369 * math.exp(-0.03671937 * spiral.size_dw_mean_cm)
    assert spiral.size_ssde_mgy == pytest.approx(10.0 * f, rel=1e-6)
    steps = spiral.size_trail["steps"]
    assert any("stored calibration" in str(step) for step in steps) or any(
        "localizer" in str(step) for step in steps
    )
    with store.session_factory() as s:
        audit = s.scalars(
            select(m.AuditLogEntry).where(m.AuditLogEntry.entity == "ct_localizer_calibration")
        ).all()
    assert len(audit) == 1 and audit[0].actor == "physicist"


def test_without_a_calibration_the_localizer_is_not_read(store, tmp_path: Path) -> None:
    _localizer_study(tmp_path / "export")
    summary = _scan(store, tmp_path / "export", tmp_path)
    assert summary.ct_size is not None
    assert summary.ct_size["localizers_uncalibrated"] == 1
    assert summary.ct_size["images_read"] == 0 and summary.ct_size["pixel_data_bytes_read"] == 0
    assert all(e.size_dw_mean_cm is None for e in _events(store))


def test_a_calibration_for_another_view_or_voltage_does_not_apply(store) -> None:
    device = _calibrate(store, view="lateral", kvp_kv=100.0)
    with store.session_factory() as s:
        assert find_localizer_calibration(s, device_id=device, kvp_kv=120.0, view="frontal") is None
        assert find_localizer_calibration(s, device_id=device, kvp_kv=120.0, view="lateral") is None
        found = find_localizer_calibration(s, device_id=device, kvp_kv=100.0, view="lateral")
    assert found is not None and "stored calibration" in found.source


@pytest.mark.parametrize(
    ("change", "match"),
    [
        ({"view": "oblique"}, "frontal or lateral"),
        ({"pixel_values": [3.0, 2.0, 1.0]}, "must increase"),
        ({"device_id": 999_999}, "no device"),
    ],
)
def test_a_bad_calibration_is_refused_with_one_line(store, change: dict, match: str) -> None:
    values, water = signal_calibration_points()
    with store.session_factory.begin() as s:
        device = m.Device(manufacturer=MANUFACTURER)
        s.add(device)
        s.flush()
        arguments = {
            "device_id": device.id, "kvp_kv": 120.0, "view": "frontal",
            "pixel_values": list(values)[:3], "water_thickness_mm": list(water)[:3],
            "source": "test", "measured_on": date(2026, 11, 2), "actor": "physicist",
        }  # fmt: skip
        arguments.update(change)
        with pytest.raises(ApiError, match=match):
            add_localizer_calibration(s, **arguments)


def test_images_arriving_after_the_study_was_sized_are_merged_and_audited(
    store, tmp_path: Path
) -> None:
    paths = _series(tmp_path / "all")
    first, later = tmp_path / "first", tmp_path / "later"
    first.mkdir()
    later.mkdir()
    for p in paths:  # z 0 to 200 mm first, the rest in a later scan
        z = float(p.stem[2:]) * 25.0
        p.rename((first if z <= 200.0 else later) / p.name)
    _scan(store, first, tmp_path)
    before = {e.id: e.size_dw_mean_cm for e in _events(store)}
    assert len(before) == 9
    # sized over the images it had: 0 to 200 mm, Dw linear in z
    assert all(v == pytest.approx(_dw_at(100.0), rel=3e-3) for v in before.values())
    summary = _scan(store, later, tmp_path)
    assert summary.ct_size is not None and summary.ct_size["events_resized"] == 9
    events = _events(store)
    assert len(events) == 17
    for event in events:  # every event, earlier ones included, over the whole 0-400 mm
        assert event.size_dw_mean_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
        assert event.size_images_used >= 9
    with store.session_factory() as s:
        audit = s.scalars(select(m.AuditLogEntry).where(m.AuditLogEntry.action == "resize")).all()
    assert sorted(int(a.entity_id) for a in audit) == sorted(before)
    for entry in audit:
        assert entry.before["size_dw_mean_cm"] == pytest.approx(_dw_at(100.0), rel=3e-3)
        assert entry.after["size_dw_mean_cm"] == pytest.approx(_dw_at(200.0), rel=3e-3)


def test_localizer_rows_are_kept_5_mm_apart_with_the_last() -> None:
    # a localizer row every millimetre: samples kept every 5 mm (a project choice), the rows
    # without a size (no patient) left out, the last row with a size always kept
    from beamaudit.api.intake.ct_sizing import LOCALIZER_ROW_SPACING_MM, _rows_apart

    z = -np.arange(0.0, 23.0, 1.0)
    dw = np.full(z.shape, 25.0)
    dw[:2] = np.nan
    kept = _rows_apart(zip(z, dw, [False] * z.size, strict=True), LOCALIZER_ROW_SPACING_MM)
    assert [k[0] for k in kept] == [-2.0, -7.0, -12.0, -17.0, -22.0]
    kept = _rows_apart(zip(z[:21], dw[:21], [False] * 21, strict=True), 5.0)
    assert [k[0] for k in kept] == [-2.0, -7.0, -12.0, -17.0, -20.0]
    assert _rows_apart(iter([]), 5.0) == []
