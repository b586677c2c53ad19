"""CT localizers received by the C-STORE listener: measured on arrival, as the folder scan does.

The calibrated frontal localizer of a water ellipse and the CT dose report of
``test_ct_sizing_merge`` (Dw known by construction, AAPM Report 220 eq. 2-3; IEC 62985's
localizer method with the calibration of the forward model that drew it), sent by pynetdicom
to the real listener: through the spool and its worker (``beamaudit listen``'s path) and
through the handler that stores before it answers. The sizes on the stored events must be the
folder scan's for the same files. Both backends.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from pydicom import dcmread
from sqlalchemy import func, select
from test_ct_sizing import _events, _scan
from test_ct_sizing_merge import LENGTH_MM, ROW_MM, _calibrate, _localizer_dw_cm, _localizer_study

from beamaudit.api.intake.ct_sizing import ArrivalSizer, SizingSummary, StudySizer
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.store import make_engine, make_session_factory, upgrade
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import Pseudonymiser

KEY = b"arrival-test-key-of-32-bytes-ok!"
SIZE_COLUMNS = (
    "ctdivol_mgy", "size_dw_mean_cm", "size_dw_centre_cm", "size_method", "size_images_used",
    "size_truncated_share", "size_ssde_mgy", "size_ssde_report",
)  # fmt: skip


class _Store:
    """A store on another SQLite file (the folder scan's, beside the listener's store)."""

    def __init__(self, url: str) -> None:
        self.engine = make_engine(url)
        upgrade(self.engine)
        self.session_factory = make_session_factory(self.engine)


def _sized(store) -> list[tuple]:
    return [
        tuple(getattr(e, c) for c in SIZE_COLUMNS)
        for e in _events(store)
        if e.size_dw_mean_cm is not None
    ]


def _folder_result(folder: Path, tmp_path: Path) -> list[tuple]:
    """The folder scan's sizes for the files of ``folder`` (the scanner calibrated)."""
    other = _Store(f"sqlite:///{tmp_path / 'folder.db'}")
    try:
        _calibrate(other)
        summary = _scan(other, folder, tmp_path)
        assert not summary.errors, summary.errors
        return _sized(other)
    finally:
        other.engine.dispose()


def _calibrated_study(store, tmp_path: Path) -> tuple[Path, list[tuple]]:
    """The scanner calibrated in ``store``, the localizer study's files, the folder scan's sizes."""
    _calibrate(store)
    folder = tmp_path / "export"
    _localizer_study(folder)
    return folder, _folder_result(folder, tmp_path)


def _send(
    store, *associations: list[Path], spooled: bool, tmp_path: Path, quiet_s: float = 60.0
) -> SizingSummary:
    """Send each list of paths on an association of its own to a listener that sizes on
    arrival, the next one once the study has been sized after the quiet time (``quiet_s``);
    then stop the listener (its worker stores what is spooled) and size what waits, as
    ``beamaudit listen`` stops."""
    import time

    from pynetdicom import AE

    from beamaudit.api.intake.receiving import make_store_handler
    from beamaudit.api.intake.spooling import Spool, SpoolWorker, make_spooling_handler
    from beamaudit.ingest.listener import ListenerConfig, start_listener
    from beamaudit.ingest.sender import open_association

    sizer = ArrivalSizer(StudySizer(store.session_factory), quiet_s=quiet_s)
    pipeline = Pipeline(store.session_factory)
    worker = spool = None
    if spooled:
        spool = Spool(tmp_path / "spool.sqlite")
        handler, store_batch, give_up = make_spooling_handler(
            spool, pipeline, Pseudonymiser(KEY), max_spooled=100, sizer=sizer
        )
        worker = SpoolWorker(spool, store_batch, give_up).start()
    else:
        handler = make_store_handler(pipeline, Pseudonymiser(KEY), sizer=sizer)
    try:
        with start_listener(ListenerConfig(port=0, decode_values=not spooled), handler) as lis:
            for k, paths in enumerate(associations):
                if k:  # the study sized after its quiet time before the next association
                    deadline = time.monotonic() + 30.0
                    while sizer.summary.studies < k and time.monotonic() < deadline:
                        time.sleep(0.05)
                    assert sizer.summary.studies == k
                datasets = [dcmread(p) for p in paths]
                ae = AE(ae_title="CT_MAIN")
                for uid in sorted({str(ds.SOPClassUID) for ds in datasets}):
                    ae.add_requested_context(uid)
                assoc = open_association(ae, "127.0.0.1", lis.port, ae_title="BEAMAUDIT")
                assert assoc.is_established
                for ds in datasets:
                    assert assoc.send_c_store(ds).Status == 0x0000
                assoc.release()
    finally:
        if worker is not None and spool is not None:
            worker.close()  # what is spooled is stored (and measured) now
            spool.close()
    return sizer.close()


@pytest.mark.parametrize("spooled", [True, False], ids=["spool", "store-then-answer"])
def test_a_calibrated_localizer_received_is_measured_on_arrival_as_the_folder_scan_does(
    store, tmp_path: Path, spooled: bool
) -> None:
    folder, expected = _calibrated_study(store, tmp_path)
    # the localizer first, as a scanner sends it: it arrives before the report's event exists
    summary = _send(
        store, [folder / "localizer.dcm", folder / "report.dcm"], spooled=spooled,
        tmp_path=tmp_path,
    )  # fmt: skip
    assert not summary.errors, summary.errors
    assert summary.localizers_uncalibrated == 0 and summary.images_read == 1
    assert summary.events_sized == 1
    sized = _sized(store)
    assert sized == expected  # the very numbers of the folder path
    ((ctdivol, dw_mean, _, method, used, *_),) = sized
    assert ctdivol == 10.0 and method == "localizer"
    # Dw linear in z: its mean over 0 to -400 mm is its value at -200 mm (AAPM 220 eq. 2-3)
    assert dw_mean == pytest.approx(_localizer_dw_cm(-200.0), rel=5e-3)
    assert used == round(LENGTH_MM / ROW_MM) + 1  # every localizer row
    with store.session_factory() as s:
        rows = s.scalars(select(m.CtSizeSampleRow).where(m.CtSizeSampleRow.method == "localizer"))
        kept = list(rows)
    assert len(kept) == used  # the rows kept in ct_size_samples, the pixels not
    assert sum(r.pixel_data_bytes for r in kept) == summary.pixel_data_bytes_read > 0


def test_a_localizer_received_without_a_calibration_is_counted_not_read(
    store, tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    folder = tmp_path / "export"
    _localizer_study(folder)
    caplog.set_level("INFO", logger="beamaudit.api.intake.ct_sizing")
    summary = _send(
        store, [folder / "localizer.dcm", folder / "report.dcm"], spooled=True, tmp_path=tmp_path
    )
    assert summary.localizers_uncalibrated == 1
    # the listener's log says why, and what a physicist can do about it
    assert "not measured: no calibration to water" in caplog.text
    assert "beamaudit ct-calibration add" in caplog.text
    assert summary.images_read == 0 and summary.pixel_data_bytes_read == 0
    assert not summary.errors and summary.events_sized == 0
    assert all(e.size_dw_mean_cm is None for e in _events(store))
    with store.session_factory() as s:
        assert s.scalar(select(func.count()).select_from(m.CtSizeSampleRow)) == 0


@pytest.mark.parametrize("spooled", [True, False], ids=["spool", "store-then-answer"])
def test_a_report_received_after_the_localizers_quiet_time_gets_its_size(
    store, tmp_path: Path, spooled: bool
) -> None:
    # the localizer sent when it is taken, the dose report at the end of the examination: the
    # study was sized (nothing to size yet) before the report came
    folder, expected = _calibrated_study(store, tmp_path)
    summary = _send(
        store, [folder / "localizer.dcm"], [folder / "report.dcm"], spooled=spooled,
        tmp_path=tmp_path, quiet_s=0.5,
    )  # fmt: skip
    assert not summary.errors, summary.errors
    assert summary.studies == 2 and summary.images_read == 1  # the localizer read once
    assert summary.events_sized == 1 and summary.events_resized == 0
    assert _sized(store) == expected


def test_a_scan_of_a_report_after_its_localizer_was_scanned_gets_its_size(
    store, tmp_path: Path
) -> None:
    folder, expected = _calibrated_study(store, tmp_path)
    first, later = tmp_path / "first", tmp_path / "later"
    first.mkdir()
    later.mkdir()
    (folder / "localizer.dcm").rename(first / "localizer.dcm")
    (folder / "report.dcm").rename(later / "report.dcm")
    assert _scan(store, first, tmp_path).ct_size["events_sized"] == 0  # type: ignore[index]
    summary = _scan(store, later, tmp_path).ct_size
    assert summary is not None and summary["images_read"] == 0  # the rows stored are used
    assert summary["events_sized"] == 1
    assert _sized(store) == expected


def test_the_demos_listener_node_measures_a_calibrated_localizer(tmp_path: Path) -> None:
    # the demo's ingest node (a process of its own, `beamaudit listen`'s handler), SQLite
    from beamaudit.api.demo.run import _Nodes, _send_all

    store = _Store(f"sqlite:///{tmp_path / 'node.db'}")
    try:
        folder, expected = _calibrated_study(store, tmp_path)
        files = [folder / "localizer.dcm", folder / "report.dcm"]
        classes = sorted({str(dcmread(p, stop_before_pixels=True).SOPClassUID) for p in files})
        spools = tmp_path / "spools"
        spools.mkdir()
        nodes = _Nodes(str(store.engine.url), KEY, 1, spools)
        try:
            sent = _send_all(files, nodes.ports, classes, dict.fromkeys(files, "CT"), per_port=1)
        except BaseException:
            nodes.close()
            raise
        nodes.stop()  # returns once the node's spool worker has stored everything received
        with store.session_factory() as session:
            stored = session.scalar(select(func.count()).select_from(m.ExposureEventRow))
        assert stored == 2 and sum(sent.values()) == 2  # one event each
        assert _sized(store) == expected
    finally:
        store.engine.dispose()
