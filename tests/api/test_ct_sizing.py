"""CT patient size from the images through the folder scan, onto the stored events.

Synthetic series of water ellipses whose Dw is known by construction (AAPM Report 220, eq. 2-3:
a water cross-section of area A has Dw = 2 sqrt(A / pi); the IEC 62985 phantom verification
method), a real head slice shipped by pydicom-data, and unreadable chosen images. Both backends.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from ct_phantoms import blank, ct_dataset, ellipse_fraction, paint
from ingest_samples import sample, to_bytes
from pydicom.uid import generate_uid
from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import load_or_create_key

N = 256
PIXEL_MM = 1.6


def _dw_at(z_mm: float) -> float:
    # half-axes a = 120 + 0.1 z and b = 0.7 a (mm): A = pi a b, Dw = 2 sqrt(A / pi) in cm
    return 2 * math.sqrt(0.7) * (120.0 + 0.1 * z_mm) / 10


def _series(folder: Path, *, ctdivol: float | None = 10.0, step_mm: float = 25.0) -> list[Path]:
    """Axial water ellipses every ``step_mm`` from z 0 to 400 mm, one acquisition."""
    study, series, frame = generate_uid(), generate_uid(), generate_uid()
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k, z in enumerate(np.arange(0.0, 400.0 + 1e-9, step_mm)):
        a = 120.0 + 0.1 * z
        image = blank(N)
        paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=a, b_mm=0.7 * a), 0.0)
        ds = ct_dataset(
            image, pixel_mm=PIXEL_MM, z_mm=float(z), instance_number=k + 1,
            study_uid=study, series_uid=series, frame_of_reference_uid=frame,
        )  # fmt: skip
        if ctdivol is not None:
            ds.CTDIvol = ctdivol
        path = folder / f"im{k:03d}.dcm"
        path.write_bytes(to_bytes(ds))
        paths.append(path)
    return paths


def _scan(store, folder: Path, tmp_path: Path):
    return scan_paths(
        [folder],
        pipeline=Pipeline(store.session_factory),
        key=load_or_create_key(tmp_path / "k.key"),
    )


def _events(store) -> list[m.ExposureEventRow]:
    with store.session_factory() as s:
        return list(s.scalars(select(m.ExposureEventRow).order_by(m.ExposureEventRow.id)))


def test_a_scanned_series_gets_its_dw_and_ssde_reading_only_the_chosen_images(
    store, tmp_path: Path
) -> None:
    paths = _series(tmp_path / "export")
    summary = _scan(store, tmp_path / "export", tmp_path)
    assert summary.objects == len(paths) == 17 and not summary.errors
    size = summary.ct_size
    assert size is not None
    # every 50 mm of 400 mm: 9 of the 17 images read, the others stay header-only
    assert size["images_read"] == 9 and size["images"] == 17
    assert size["pixel_data_bytes_read"] == 9 * N * N * 2
    assert size["pixel_data_bytes_all"] == 17 * N * N * 2
    events = _events(store)
    assert len(events) == 17 and size["events_sized"] == 17
    for event in events:
        # Dw linear in z: the mean over 0-400 mm is its value at the centre (AAPM 220 eq. 2-3)
        assert event.size_dw_mean_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
        assert event.size_dw_centre_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
        assert event.size_method == "axial_images"
        assert event.size_images_used == 9
        assert event.size_truncated_share == 0.0
        # AAPM Report 204 (2011), the 32 cm phantom fit: f = 3.704369 exp(-0.03671937 Dw)
        f = 3.704369 * math.exp(-0.03671937 * event.size_dw_mean_cm)
        assert event.size_ssde_mgy == pytest.approx(10.0 * f, rel=1e-6)
        assert event.size_ssde_report == "AAPM Report 204 (2011)"
        assert event.size_trail is not None and event.size_trail["steps"]
    # the REST detail and the exam page show Dw and SSDE with the method and the report
    from beamaudit.api.web.page_data import exam_record
    from beamaudit.api.web.routes.events import dose_breakdown, event_size

    with store.session_factory() as s:
        study_uid = s.scalar(select(m.Study.study_instance_uid))
        record = exam_record(s, study_uid)
    assert record is not None
    dose = record["exposures"][0]["dose"]
    assert dose["water_equivalent_diameter_cm"]["unit"] == "cm"
    assert "axial images: 9 used" in dose["water_equivalent_diameter_cm"]["source"]
    assert dose["ssde_mgy"]["source"].startswith("AAPM Report 204 (2011)")
    # uncertainties worked by hand (GUM eq. 5 and 10): the 9 samples' spread over sqrt(9) and
    # the axial method's 2 % in quadrature; the SSDE from b u(Dw) and the fit's 10 %
    dws = [_dw_at(z) for z in range(0, 401, 50)]
    mean = sum(dws) / 9
    s_dw = math.sqrt(sum((d - mean) ** 2 for d in dws) / 8)
    u_dw = math.hypot(s_dw / 3, 0.02 * events[0].size_dw_mean_cm)
    assert dose["water_equivalent_diameter_cm"]["uncertainty"] == pytest.approx(u_dw, rel=1e-2)
    u_ssde = math.hypot(0.03671937 * u_dw, 0.10) * events[0].size_ssde_mgy
    assert dose["ssde_mgy"]["uncertainty"] == pytest.approx(u_ssde, rel=1e-2)
    why = [step["quantity"] for step in record["exposures"][0]["why"]]
    assert "water_equivalent_diameter_mean_cm" in why and "ssde_mgy" in why  # the size's trail
    centre = dose["water_equivalent_diameter_centre_cm"]
    assert centre["uncertainty"] == pytest.approx(0.02 * centre["value"], rel=1e-9)
    size = event_size(events[0])
    assert size.method == "axial_images" and size.ssde_report == "AAPM Report 204 (2011)"
    (ssde,) = [c for c in dose_breakdown(events[0]) if c.quantity == "ssde_mgy"]
    assert ssde.reconstructed == events[0].size_ssde_mgy and ssde.reported is None


def test_an_unreadable_chosen_image_is_an_ingest_error_and_the_events_stay(
    store, tmp_path: Path
) -> None:
    paths = _series(tmp_path / "export", ctdivol=None)
    first = paths[0]  # always chosen (the first image of the scan)
    data = first.read_bytes()
    first.write_bytes(data[: len(data) - 1000])  # pixel data cut short
    summary = _scan(store, tmp_path / "export", tmp_path)
    with store.session_factory() as s:
        (error,) = s.scalars(select(m.IngestError))
    # the header parses, so the object and its event are stored; its pixels cannot be read
    assert error.source == str(first) and error.code == "bad_value"
    assert error.reason.startswith("patient size: cannot decode the pixel data")
    events = _events(store)
    assert len(events) == 17  # every object's events are kept
    assert summary.ct_size is not None and summary.ct_size["images_read"] == 8
    # the other 8 samples still give the acquisition its size; no CTDIvol, so no SSDE
    assert all(e.size_dw_mean_cm is not None and e.size_images_used == 8 for e in events)
    assert all(e.size_ssde_mgy is None for e in events)
    assert summary.errors == [{"source": str(first), "code": "bad_value", "reason": error.reason}]


def test_a_bad_pixel_record_is_an_ingest_error_with_the_reason(store, tmp_path: Path) -> None:
    paths = _series(tmp_path / "export", step_mm=200.0)  # 3 images, all chosen
    from pydicom import dcmread

    ds = dcmread(paths[1])
    ds.BitsAllocated = 12  # pixel data no decoder can read; the header still parses
    ds.save_as(paths[1])
    summary = _scan(store, tmp_path / "export", tmp_path)
    with store.session_factory() as s:
        errors = list(s.scalars(select(m.IngestError)))
    assert len(errors) == 1
    assert errors[0].reason.startswith("patient size: ") and errors[0].source == str(paths[1])
    assert len(_events(store)) == 3
    assert summary.ct_size is not None and summary.ct_size["errors"] == 1


def test_a_real_head_slice_scanned(store, tmp_path: Path) -> None:
    # pydicom-data's J2K_pixelrep_mismatch.dcm: a whole adult head (22 cm field, JPEG 2000);
    # Dw of an adult head lies around 15-19 cm (from memory: AAPM Report 293's head sizes)
    folder = tmp_path / "export"
    folder.mkdir()
    shutil.copy(sample("J2K_pixelrep_mismatch.dcm"), folder / "head.dcm")
    summary = _scan(store, folder, tmp_path)
    assert summary.objects == 1, summary.errors
    (event,) = _events(store)
    assert event.size_dw_mean_cm is not None and 15.0 < event.size_dw_mean_cm < 20.0
    assert event.size_images_used == 1 and event.size_truncated_share == 0.0


def _send_to_listener(store, paths: list[Path], sizer, *, wait_for_events: int = 0) -> None:
    """Send ``paths`` to a listener whose handler sizes with ``sizer``; with ``wait_for_events``,
    keep the listener up until that many events are sized (at most 30 s)."""
    import time

    from pydicom import dcmread
    from pynetdicom import AE
    from pynetdicom.sop_class import CTImageStorage

    from beamaudit.api.intake.receiving import make_store_handler
    from beamaudit.ingest.listener import ListenerConfig, start_listener
    from beamaudit.ingest.pseudonym import Pseudonymiser
    from beamaudit.ingest.sender import open_association

    handler = make_store_handler(
        Pipeline(store.session_factory), Pseudonymiser(b"k" * 32), sizer=sizer
    )
    with start_listener(ListenerConfig(port=0), handler) as listener:
        ae = AE(ae_title="CT_MAIN")
        ae.add_requested_context(CTImageStorage)
        assoc = open_association(ae, "127.0.0.1", listener.port, ae_title="BEAMAUDIT")
        assert assoc.is_established
        for path in paths:
            assert assoc.send_c_store(dcmread(path)).Status == 0x0000
        assoc.release()
        deadline = time.monotonic() + 30.0
        while sizer.summary.events_sized < wait_for_events and time.monotonic() < deadline:
            time.sleep(0.05)


def test_the_listener_measures_a_few_images_on_arrival_and_sizes_the_study(
    store, tmp_path: Path
) -> None:
    from beamaudit.api.intake.ct_sizing import ArrivalSizer, StudySizer

    sizer = ArrivalSizer(StudySizer(store.session_factory), quiet_s=60.0)
    _send_to_listener(store, _series(tmp_path / "export"), sizer)
    summary = sizer.close()
    # in order along the table, one image in two is measured (every 50 mm); the rest header-only
    assert summary.images_read == 9 and summary.events_sized == 17
    for event in _events(store):
        assert event.size_dw_mean_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
        assert event.size_ssde_report == "AAPM Report 204 (2011)"


def test_the_listener_sizes_a_study_after_its_quiet_time_without_a_stop(
    store, tmp_path: Path
) -> None:
    # the quiet time (setting `listener.size_quiet_s`) elapses: the study is sized before close()
    from beamaudit.api.intake.ct_sizing import ArrivalSizer, StudySizer

    sizer = ArrivalSizer(StudySizer(store.session_factory), quiet_s=3.0)
    _send_to_listener(store, _series(tmp_path / "export"), sizer, wait_for_events=17)
    assert sizer.summary.events_sized == 17
    for event in _events(store):
        assert event.size_dw_mean_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
    sizer.close()


def test_a_pull_fetches_the_frames_of_the_chosen_instances_only(store, tmp_path: Path) -> None:
    from peers import orthanc_missing, require_peer, start_orthanc

    from beamaudit.api.intake.pulling import pull_source
    from beamaudit.ingest.pseudonym import Pseudonymiser

    reason = orthanc_missing()
    require_peer("Orthanc with DICOMweb", reason is None, reason or "")
    paths = _series(tmp_path / "export")
    peer = start_orthanc(tmp_path / "orthanc")
    try:
        for path in paths:
            peer.upload(path.read_bytes())
        outcome = pull_source(
            store.session_factory,
            url=peer.dicomweb_url,
            since="2024-03-01",
            modalities=["CT"],
            pseudonymiser=Pseudonymiser(b"k" * 32),
        )
    finally:
        peer.stop()
    assert outcome.ct_size is not None, outcome.errors
    assert outcome.ct_size["images_read"] == 9, (outcome.ct_size, outcome.errors)
    assert outcome.ct_size["events_sized"] == 17
    assert not outcome.errors
    for event in _events(store):
        assert event.size_dw_mean_cm == pytest.approx(_dw_at(200.0), rel=3e-3)
        assert event.size_ssde_report == "AAPM Report 204 (2011)"
