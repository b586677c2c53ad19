"""CT patient size from the images, joined to the stored events (issue #27).

The intake keeps, per study, the *headers* of its CT images (:class:`~beamaudit.ingest.
ct_images.CtImageHeader`, a few numbers each) with a way to read each image's pixels later
(a path, a WADO-RS frame, or nothing when the pixels were measured on arrival: the C-STORE
listener, :class:`ArrivalSizer`). Once a study's
images are in (the end of a folder scan, a pull, the listener's association), :meth:`StudySizer.
finish` chooses the images worth reading (``select_size_images``: every 50 mm of one series per
acquisition, with its first, last and centre image), reads only those, one at a time, computes
each one's water-equivalent diameter Dw (AAPM Report 220, eq. 2-3, ``model/ct_size.py``) and drops
the pixels at once. Per acquisition it then writes onto the study's CT events:

- ``size_dw_mean_cm`` (Dw averaged over the event's scan range: TID 10014's Top/Bottom Z Location
  of Scanning Length when the event carries them in the images' frame of reference, else the range
  of the acquisition's images) and ``size_dw_centre_cm`` (Dw at its centre), ``size_method``
  (``axial_images``), ``size_images_used``, ``size_truncated_share`` (the share of the images used
  whose patient touched the edge of the field of view), ``size_trail`` (the why trail);
- ``size_ssde_mgy``: SSDE from that Dw (the scan-range average) and the event's CTDIvol, by AAPM
  Report 204's body fit, or AAPM Report 293's head fit for a CTDIvol referred to the 16 cm phantom
  (``size_ssde_report`` names which), and ``ssde_ratio_reported_to_size`` where the scanner's
  own SSDE is known.

Which events an acquisition's size goes to: the events whose Irradiation Event UID is the
acquisition's, the image-header events of the acquisition's own images, and dose-report events
whose scan range lies in the images' frame of reference and overlaps them.

**Localizers** (IEC 62985:2019's localizer method, ``model/ct_localizer.py``): a chosen localizer
is read only when its scanner (the study's device) has a stored calibration to water for the
image's tube voltage and view (``api/store/ct_calibrations.py``); each of its rows then gives a Dw
at its table position (kept as samples :data:`LOCALIZER_ROW_SPACING_MM` apart). An acquisition
with axial samples at two or more table positions is sized from them (``size_method``
``axial_images``); one with fewer, or an event with only its
TID 10014 scan range, from the localizer rows within its range (``localizer``). The folder scan
and the pull read a localizer when its study is sized; the listener, which keeps no pixels,
when it arrives (:meth:`StudySizer.add_localizer_now`, after the localizer's own object is
stored, so its device is known): its rows go into ``ct_size_samples`` at once and are used when
the study is sized. Either way a localizer without a calibration is not read and counts in
``localizers_uncalibrated``.

**Late images.** Every sample (an axial image's Dw, a localizer row's) is kept in
``ct_size_samples``; sizing a study uses all its samples, earlier ones included, so images
that arrive after the study was sized (another scan, another association after the listener's
quiet time) are merged: the acquisition is sized again, and each event whose size changes gets
an audit entry (``resize``, before and after). So is a CT dose report that comes after its study's
images (:meth:`StudySizer.add_report`): the study is sized again from its stored samples.

An image that cannot be read or measured becomes an ingest error with the reason; the study's
events stay as they are stored.
"""

from __future__ import annotations

import logging
import math
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import partial
from typing import Any

import numpy as np
from pydicom import dcmread
from pydicom.dataset import Dataset
from pydicom.errors import InvalidDicomError
from sqlalchemy import delete, insert, select, update
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.base import utcnow
from beamaudit.api.store.ct_calibrations import find_localizer_calibration
from beamaudit.ingest.ct_images import (
    AxialImage,
    CtImageHeader,
    CtSizeImage,
    LocalizerImage,
    ct_image_header,
    ct_size_image_from_frame,
    read_ct_size_image,
    select_size_images,
)
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import ParseResult
from beamaudit.model.ct_localizer import localizer_sizes
from beamaudit.model.ct_size import axial_sizes, scan_range_dw_uncertainty, scan_range_size
from beamaudit.model.errors import ModelError
from beamaudit.model.ssde import size_specific_dose_estimate, ssde_standard_uncertainty
from beamaudit.model.trail import WhyTrail

__all__ = [
    "CT_IMAGE_CLASSES",
    "ArrivalSizer",
    "ImageSample",
    "SizingSummary",
    "StudySizer",
    "file_header",
    "is_ct_report",
    "keep_frame_header",
    "measure_image",
]

#: the SOP classes whose images may carry a patient's size (CT, enhanced CT, legacy converted)
CT_IMAGE_CLASSES = frozenset(
    {"1.2.840.10008.5.1.4.1.1.2", "1.2.840.10008.5.1.4.1.1.2.1", "1.2.840.10008.5.1.4.1.1.2.2"}
)

log = logging.getLogger(__name__)

#: reads one image's pixels when called (a path read, a WADO-RS frame fetched)
PixelReader = Callable[[], CtSizeImage]


@dataclass(frozen=True, slots=True)
class ImageSample:
    """One image's size, the pixels already dropped."""

    sop_instance_uid: str
    z_mm: float
    dw_cm: float
    truncated: bool
    pixel_data_bytes: int


@dataclass(slots=True)
class SizingSummary:
    """What sizing did: studies, images read and their pixel bytes, events given a size."""

    studies: int = 0
    images: int = 0
    images_read: int = 0
    pixel_data_bytes_read: int = 0
    pixel_data_bytes_all: int = 0
    events_sized: int = 0
    #: events sized again because images came after their study was sized (audited)
    events_resized: int = 0
    #: localizers chosen but not read: no calibration stored for their scanner, kV and view
    localizers_uncalibrated: int = 0
    seconds: float = 0.0
    errors: list[IngestError] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {
            "studies": self.studies,
            "images": self.images,
            "images_read": self.images_read,
            "pixel_data_bytes_read": self.pixel_data_bytes_read,
            "pixel_data_bytes_all": self.pixel_data_bytes_all,
            "events_sized": self.events_sized,
            "events_resized": self.events_resized,
            "localizers_uncalibrated": self.localizers_uncalibrated,
            "seconds": round(self.seconds, 3),
            "errors": len(self.errors),
        }


def is_ct_report(result: ParseResult) -> bool:
    """An object with CT irradiation events that is no CT image (a CT dose report)."""
    return result.source.sop_class_uid not in CT_IMAGE_CLASSES and any(
        e.modality_family == "ct" for e in result.events
    )


def file_header(path: str) -> CtImageHeader:
    """A CT image file's size header, read without its pixel data."""
    try:
        ds = dcmread(path, stop_before_pixels=True, force=True)
    except (OSError, ValueError, TypeError, EOFError, InvalidDicomError) as exc:
        raise IngestError(
            "unreadable", f"patient size: cannot read the header: {exc}", path
        ) from None
    return ct_image_header(ds, source=path)


def keep_frame_header(sizer: StudySizer, source: Any, metadata: Dataset, wado_url: str) -> None:
    """A pulled CT image's size header (from its metadata), its pixels to be fetched only if
    chosen: frame 1 by WADO-RS (PS3.18 10.4.1.1.3), uncompressed (``application/octet-stream``)
    through ``source`` (an ``ingest.dicomweb.DicomwebSource``: its limits and login)."""
    try:
        header = ct_image_header(metadata, source=wado_url)
    except IngestError as exc:
        sizer.record_errors([_sized_error(exc, wado_url)], "pull")
        return
    uids = (header.study_instance_uid, header.series_instance_uid, header.sop_instance_uid)

    def read() -> CtSizeImage:
        try:
            frames = source.call(
                source.client.retrieve_instance_frames, *uids, frame_numbers=[1],
                media_types=("application/octet-stream",),
            )  # fmt: skip
        except IngestError:
            raise
        except Exception as exc:  # HTTP and decoding failures of the peer, one image
            raise IngestError(
                "unreadable", f"frame retrieval failed ({type(exc).__name__})", wado_url
            ) from None
        # dicomweb-client gives a bytearray, which pydicom would take for a list of values
        return ct_size_image_from_frame(metadata, bytes(frames[0]), source=wado_url)

    sizer.add(header, read, wado_url)


def measure_image(image: CtSizeImage, header: CtImageHeader) -> ImageSample | None:
    """Dw of one axial image (None for a localizer: no calibration to water here)."""
    if not isinstance(image, AxialImage):
        return None
    if image.z_mm is None:
        raise IngestError("missing_attribute", "an axial image without a table position")
    try:
        sizes = axial_sizes(image.ct_numbers_hu, pixel_spacing_mm=image.pixel_spacing_mm)
    except ModelError as exc:
        raise IngestError("bad_value", f"patient size not measurable: {exc}") from None
    dw = float(sizes.water_equivalent_diameter_cm[0])
    if not math.isfinite(dw):
        raise IngestError("bad_value", "patient size not measurable: no patient in the image")
    return ImageSample(
        header.sop_instance_uid,
        float(image.z_mm),
        dw,
        bool(sizes.truncated_fraction[0] > 0.0),
        header.pixel_data_bytes,
    )


class StudySizer:
    """Collects CT image headers per study; sizes a study when asked (module docstring)."""

    def __init__(self, sessions: sessionmaker[Session], *, axial_spacing_mm: float = 50.0) -> None:
        self._sessions = sessions
        self._spacing = axial_spacing_mm
        self._headers: dict[str, list[tuple[CtImageHeader, PixelReader | None, str]]] = {}
        self._measured: dict[str, ImageSample] = {}
        #: studies to size even without new image headers: localizer rows kept on arrival
        #: (:meth:`add_localizer_now`), a dose report stored after its images (:meth:`add_report`)
        self._again: set[str] = set()
        self.summary = SizingSummary()

    @property
    def studies(self) -> list[str]:
        """Studies with headers (or a new report) waiting to be sized."""
        return [*self._headers, *(s for s in self._again if s not in self._headers)]

    def add(self, header: CtImageHeader, reader: PixelReader | None, source: str) -> None:
        """Keep one image's header and how to read its pixels (``source`` names it in errors)."""
        if header.study_instance_uid and header.kind != "other":
            self._headers.setdefault(header.study_instance_uid, []).append((header, reader, source))

    def add_measured(self, header: CtImageHeader, sample: ImageSample | None, source: str) -> None:
        """Keep a header whose pixels were measured on arrival, or not at all (the listener).

        Measured samples all count at :meth:`finish`; no pixel data is kept."""
        if sample is not None:
            self._measured[header.sop_instance_uid] = sample
        self.add(header, None, source)

    def add_report(self, study_instance_uid: str | None) -> None:
        """A stored CT object that is no image (a dose report): its study is sized again at
        :meth:`finish` from the samples stored before, if it has any, so that a report that
        comes after its images (a localizer sent when it was taken, the report at the end of
        the examination) gets their size."""
        if study_instance_uid:
            self._again.add(study_instance_uid)

    def _with_samples(self, studies: Sequence[str]) -> set[str]:
        """Which of ``studies`` have size samples stored."""
        table = m.CtSizeSampleRow
        found: set[str] = set()
        with self._sessions() as session:
            for i in range(0, len(studies), 500):
                found.update(
                    session.scalars(
                        select(table.study_instance_uid)
                        .where(table.study_instance_uid.in_(studies[i : i + 500]))
                        .distinct()
                    )
                )
        return found

    def add_localizer_now(
        self, header: CtImageHeader, reader: PixelReader, source: str, *, received_via: str
    ) -> None:
        """Measure a localizer on arrival (the listener, which keeps no pixels): read it only
        when its scanner (its stored event's device) has a calibration for its tube voltage
        and view, keep its rows in ``ct_size_samples`` at once, and its header for
        :meth:`finish`; without a calibration it counts in ``localizers_uncalibrated``."""
        study = header.study_instance_uid
        if not study:  # no study to size it in (as :meth:`add`)
            return
        errors: list[IngestError] = []
        with self._sessions.begin() as session:
            scanner = _scanner_of(_study_ct_events(session, study), header)
            new = self._localizer_rows(session, study, scanner, header, reader, source, errors)
            _keep_samples(session, new)
        if new:
            self._again.add(study)
        if errors:
            self.record_errors(errors, received_via)
        self.add(header, None, source)

    def finish(self, study_instance_uid: str, *, received_via: str) -> int:
        """Size one study: read the chosen images, store the sizes. Returns events sized."""
        entries = self._headers.pop(study_instance_uid, [])
        again = study_instance_uid in self._again
        self._again.discard(study_instance_uid)
        if not entries and not (again and self._with_samples([study_instance_uid])):
            return 0  # nothing new, or a report of a study none of whose images came
        started = time.perf_counter()
        by_uid = {h.sop_instance_uid: (h, reader, source) for h, reader, source in entries}
        selection = select_size_images([h for h, _, _ in entries], axial_spacing_mm=self._spacing)
        self.summary.studies += 1
        self.summary.images += selection.images
        self.summary.pixel_data_bytes_all += selection.pixel_data_bytes_all
        errors: list[IngestError] = []
        samples: dict[str, list[ImageSample]] = {}
        for h, _, _ in entries:  # measured on arrival (the listener): every one counts
            measured = self._measured.pop(h.sop_instance_uid, None)
            if measured is not None:
                samples.setdefault(h.acquisition_group, []).append(measured)
        localizers: list[tuple[CtImageHeader, PixelReader, str]] = []
        for chosen in selection.selected:
            header, reader, source = by_uid[chosen.sop_instance_uid]
            if chosen.kind == "localizer":
                if reader is not None:  # read only if a calibration is stored (_store)
                    localizers.append((header, reader, source))
                continue
            if chosen.kind != "axial":
                continue
            sample = None
            if reader is not None:
                try:
                    sample = measure_image(reader(), header)
                except IngestError as exc:
                    errors.append(
                        IngestError(exc.code, f"patient size: {exc.reason}", exc.source or source)
                    )
                    continue
                self.summary.images_read += 1
                self.summary.pixel_data_bytes_read += header.pixel_data_bytes
            if sample is not None:
                samples.setdefault(chosen.acquisition_group, []).append(sample)
        sized = 0
        if samples or localizers or again:
            sized = self._store(study_instance_uid, entries, samples, localizers, errors)
        self.summary.events_sized += sized
        if errors:
            self.record_errors(errors, received_via)
        self.summary.seconds += time.perf_counter() - started
        return sized

    def finish_all(self, *, received_via: str) -> SizingSummary:
        """Size every study collected so far."""
        reports_only = [s for s in self._again if s not in self._headers]
        if reports_only:  # one look-up for all: most CT reports come without images
            self._again.difference_update(set(reports_only) - self._with_samples(reports_only))
        for study in self.studies:
            try:
                self.finish(study, received_via=received_via)
            except Exception:  # one study's failure never stops the others; events stay
                log.exception("sizing a CT study failed")
        return self.summary

    # -- storing ---------------------------------------------------------------------------
    @property
    def axial_spacing_mm(self) -> float:
        """The sampling spacing along the table."""
        return self._spacing

    def record_errors(self, errors: list[IngestError], received_via: str) -> None:
        """Store ingest errors of sizing (one transaction)."""
        self.summary.errors.extend(errors)
        with self._sessions.begin() as session:
            for error in errors:
                session.add(
                    m.IngestError(
                        received_via=received_via,
                        source=error.source or "(unknown)",
                        code=error.code,
                        reason=error.reason,
                    )
                )

    def _store(
        self,
        study_uid: str,
        entries: list[tuple[CtImageHeader, PixelReader | None, str]],
        samples: dict[str, list[ImageSample]],
        localizers: list[tuple[CtImageHeader, PixelReader, str]],
        errors: list[IngestError],
    ) -> int:
        """Keep the new samples, then size every CT event of the study from all its samples,
        earlier ones included (images that arrive after a study was sized are merged: the
        acquisition is sized again, and an event whose size changes is audited)."""
        headers_of: dict[str, list[CtImageHeader]] = {}
        for h, _, _ in entries:
            headers_of.setdefault(h.acquisition_group, []).append(h)
        with self._sessions.begin() as session:
            rows = _study_ct_events(session, study_uid)
            new = [
                _sample_row(study_uid, group, "axial_images", s, headers_of.get(group, []))
                for group, group_samples in samples.items()
                for s in group_samples
            ]
            measured = {r["sop_instance_uid"] for r in new}
            new += [  # the images left header-only: where they lie, for a later merge
                _header_row(study_uid, h)
                for h, _, _ in entries
                if h.kind == "axial" and h.z_mm is not None and h.sop_instance_uid not in measured
            ]
            for header, reader, source in localizers:
                new += self._localizer_rows(
                    session, study_uid, _scanner_of(rows, header), header, reader, source, errors
                )
            _keep_samples(session, new)
            stored = session.execute(
                select(*_SAMPLE_COLUMNS).where(m.CtSizeSampleRow.study_instance_uid == study_uid)
            ).all()
            return self._size_events(session, study_uid, rows, stored, headers_of, errors)

    def _localizer_rows(
        self,
        session: Session,
        study_uid: str,
        device_id: int | None,
        header: CtImageHeader,
        reader: PixelReader,
        source: str,
        errors: list[IngestError],
    ) -> list[dict[str, Any]]:
        """One localizer's rows as samples, when its scanner has a stored calibration for the
        image's tube voltage (its view is read from the image)."""
        view = _localizer_view(header)
        calibration = (
            find_localizer_calibration(
                session, device_id=device_id, kvp_kv=header.kvp_kv, view=view
            )
            if device_id is not None and header.kvp_kv is not None and view is not None
            else None
        )
        if calibration is None:
            self.summary.localizers_uncalibrated += 1
            log.info(
                "CT localizer %s not measured: no calibration to water stored for its scanner "
                "(device %s) at %s kV, %s view (beamaudit ct-calibration add)",
                header.sop_instance_uid, device_id, _g(header.kvp_kv), view or "unknown",
            )  # fmt: skip
            return []  # pixels not read: nothing to calibrate them with
        try:
            image = reader()
        except IngestError as exc:
            errors.append(_sized_error(exc, source))
            return []
        self.summary.images_read += 1
        self.summary.pixel_data_bytes_read += header.pixel_data_bytes
        if not isinstance(image, LocalizerImage) or image.row_z_mm is None:
            return []
        try:
            sizes = localizer_sizes(
                image.values, column_spacing_mm=image.column_spacing_mm, calibration=calibration
            )
        except ModelError as exc:
            errors.append(IngestError("bad_value", f"patient size: localizer: {exc}", source))
            return []
        out = []
        rows = zip(image.row_z_mm, sizes.water_equivalent_diameter_cm, sizes.truncated, strict=True)
        for z, dw, cut in _rows_apart(rows, LOCALIZER_ROW_SPACING_MM):
            sample = ImageSample(header.sop_instance_uid, z, dw, cut, 0)
            out.append(
                _sample_row(study_uid, header.acquisition_group, "localizer", sample, [header])
            )
        if out:
            out[0]["pixel_data_bytes"] = header.pixel_data_bytes
        return out

    def _size_events(
        self,
        session: Session,
        study_uid: str,
        rows: Sequence[Any],
        stored: Sequence[Any],
        headers_of: dict[str, list[CtImageHeader]],
        errors: list[IngestError],
    ) -> int:
        axial: dict[str, list[Any]] = {}
        localizer: list[Any] = []
        for row in stored:
            if row.method == "localizer":
                localizer.append(row)
            else:  # measured axial images and those left header-only
                axial.setdefault(row.acquisition_group, []).append(row)
        sized = 0
        for event in rows:
            values = None
            scan_range = None
            for group, members in axial.items():
                own = {s.sop_instance_uid for s in members}
                frames = {s.frame_of_reference_uid for s in members if s.frame_of_reference_uid}
                z_lo, z_hi = min(s.z_mm for s in members), max(s.z_mm for s in members)
                group_samples = [s for s in members if s.dw_cm is not None]
                if not group_samples:
                    continue
                scan_range = _scan_range(event, frames)
                if not (
                    event.irradiation_event_uid == group
                    or event.sop_instance_uid in own
                    or (scan_range and scan_range[0] <= z_hi and scan_range[1] >= z_lo)
                ):
                    continue
                lo, hi = scan_range or (z_lo, z_hi)
                if len({s.z_mm for s in group_samples}) < 2 and localizer:
                    values = self._from_localizer(localizer, lo, hi, event, errors, study_uid)
                if values is None:  # two or more table positions, or no localizer rows there
                    values = _event_size(
                        group_samples, lo, hi, event, errors, study_uid, "axial_images"
                    )
                break
            if values is None and localizer:  # no axial images: the event's own scan range
                frames = {s.frame_of_reference_uid for s in localizer if s.frame_of_reference_uid}
                scan_range = _scan_range(event, frames)
                if scan_range is not None:
                    values = self._from_localizer(localizer, *scan_range, event, errors, study_uid)
            if values is None or not _changed(event, values):
                continue
            session.execute(
                update(m.ExposureEventRow).where(m.ExposureEventRow.id == event.id).values(**values)
            )
            if event.size_dw_mean_cm is not None:  # sized before: later images merged in
                record_change(
                    session,
                    actor="ct-sizing",
                    action="resize",
                    entity="exposure_event",
                    entity_id=event.id,
                    before={
                        "size_dw_mean_cm": event.size_dw_mean_cm,
                        "size_method": event.size_method,
                        "size_images_used": event.size_images_used,
                    },
                    after={
                        k: values[k] for k in ("size_dw_mean_cm", "size_method", "size_images_used")
                    },
                )
                self.summary.events_resized += 1
            sized += 1
        return sized

    @staticmethod
    def _from_localizer(
        localizer: list[Any],
        lo: float,
        hi: float,
        event: Any,
        errors: list[IngestError],
        study_uid: str,
    ) -> dict[str, Any] | None:
        """Dw over ``lo``..``hi`` from the localizer rows that lie in it (two or more)."""
        inside = [s for s in localizer if lo - 1e-6 <= s.z_mm <= hi + 1e-6]
        if len(inside) < 2:
            return None
        return _event_size(inside, lo, hi, event, errors, study_uid, "localizer")


def _study_ct_events(session: Session, study_uid: str) -> Sequence[Any]:
    """The study's stored CT events, with what sizing reads and writes of each."""
    return session.execute(
        select(
            m.ExposureEventRow.id,
            m.ExposureEventRow.device_id,
            m.ExposureEventRow.irradiation_event_uid,
            m.ExposureEventRow.ctdivol_mgy,
            m.ExposureEventRow.ct_phantom_diameter_cm,
            m.ExposureEventRow.ssde_mgy,
            m.ExposureEventRow.ct_scan_z_top_mm,
            m.ExposureEventRow.ct_scan_z_bottom_mm,
            m.ExposureEventRow.frame_of_reference_uid,
            m.ExposureEventRow.size_dw_mean_cm,
            m.ExposureEventRow.size_method,
            m.ExposureEventRow.size_images_used,
            m.SourceObjectRow.sop_instance_uid,
        )
        .join(m.SourceObjectRow, m.SourceObjectRow.id == m.ExposureEventRow.source_object_id)
        .join(m.Study, m.Study.id == m.ExposureEventRow.study_id)
        .where(m.Study.study_instance_uid == study_uid)
        .where(m.ExposureEventRow.modality == "CT")
    ).all()


def _scanner_of(rows: Sequence[Any], header: CtImageHeader) -> int | None:
    """The device of an image: its own event's, else the first of its study's CT events."""
    own = next((r.device_id for r in rows if r.sop_instance_uid == header.sop_instance_uid), None)
    return own or next((r.device_id for r in rows if r.device_id is not None), None)


def _localizer_view(header: CtImageHeader) -> str | None:
    """``frontal`` or ``lateral`` from the image plane (as ``ingest.ct_images`` turns it)."""
    if header.image_orientation is None:
        return None
    normal = np.abs(np.cross(header.image_orientation[:3], header.image_orientation[3:]))
    return "frontal" if normal[1] >= normal[0] else "lateral"


#: the columns of ``ct_size_samples`` sizing reads
_SAMPLE_COLUMNS = (
    m.CtSizeSampleRow.acquisition_group,
    m.CtSizeSampleRow.sop_instance_uid,
    m.CtSizeSampleRow.method,
    m.CtSizeSampleRow.frame_of_reference_uid,
    m.CtSizeSampleRow.z_mm,
    m.CtSizeSampleRow.dw_cm,
    m.CtSizeSampleRow.truncated,
)


def _header_row(study_uid: str, header: CtImageHeader) -> dict[str, Any]:
    assert header.z_mm is not None
    return {
        "study_instance_uid": study_uid,
        "acquisition_group": header.acquisition_group,
        "sop_instance_uid": header.sop_instance_uid,
        "method": "header",
        "frame_of_reference_uid": header.frame_of_reference_uid,
        "z_mm": header.z_mm,
        "dw_cm": None,
        "truncated": False,
        "pixel_data_bytes": header.pixel_data_bytes,
        "measured_at": utcnow(),
    }


def _sample_row(
    study_uid: str, group: str, method: str, sample: ImageSample, headers: list[CtImageHeader]
) -> dict[str, Any]:
    frame = next(
        (
            h.frame_of_reference_uid
            for h in headers
            if h.sop_instance_uid == sample.sop_instance_uid and h.frame_of_reference_uid
        ),
        next((h.frame_of_reference_uid for h in headers if h.frame_of_reference_uid), None),
    )
    return {
        "study_instance_uid": study_uid,
        "acquisition_group": group,
        "sop_instance_uid": sample.sop_instance_uid,
        "method": method,
        "frame_of_reference_uid": frame,
        "z_mm": sample.z_mm,
        "dw_cm": sample.dw_cm,
        "truncated": sample.truncated,
        "pixel_data_bytes": sample.pixel_data_bytes,
        "measured_at": utcnow(),
    }


def _keep_samples(session: Session, new: list[dict[str, Any]]) -> None:
    """Store new samples; an image measured again replaces its earlier rows."""
    sops = {r["sop_instance_uid"] for r in new}
    if not sops:
        return
    table = m.CtSizeSampleRow
    session.execute(delete(table).where(table.sop_instance_uid.in_(sops)))
    session.execute(insert(table), new)


def _changed(event: Any, values: dict[str, Any]) -> bool:
    before = event.size_dw_mean_cm
    return (
        before is None
        or abs(before - values["size_dw_mean_cm"]) > 1e-9
        or event.size_method != values["size_method"]
        or event.size_images_used != values["size_images_used"]
    )


def _scan_range(row: Any, frames: set[str]) -> tuple[float, float] | None:
    """An event's own scan range (TID 10014) when it lies in the images' frame of reference."""
    top, bottom = row.ct_scan_z_top_mm, row.ct_scan_z_bottom_mm
    if top is None or bottom is None or row.frame_of_reference_uid not in frames:
        return None
    return (min(top, bottom), max(top, bottom))


def _event_size(
    samples: Sequence[Any],
    z_start: float,
    z_end: float,
    row: Any,
    errors: list[IngestError],
    study_uid: str,
    method: str = "axial_images",
) -> dict[str, Any] | None:
    """An event's size columns from samples (``z_mm``, ``dw_cm``, ``truncated`` each)."""
    z = np.array([s.z_mm for s in samples])
    dw = np.array([s.dw_cm for s in samples])
    truncated = np.array([s.truncated for s in samples])
    try:
        size = scan_range_size(
            z_mm=z, dw_cm=dw, z_start_mm=z_start, z_end_mm=z_end, truncated=truncated
        )
    except ModelError as exc:
        errors.append(IngestError("bad_value", f"patient size: {exc}", f"study {study_uid}"))
        return None
    u_dw, u_parts = scan_range_dw_uncertainty(dw_cm=dw, mean_dw_cm=size.mean_dw_cm, method=method)
    steps = WhyTrail()
    steps.add(
        "water_equivalent_diameter_mean_standard_uncertainty_cm", u_dw, "cm",
        equation="u = sqrt((s / sqrt(n))^2 + (r_method Dw)^2)",
        source="JCGM 100:2008 (GUM) eq. 5 and 10; method share from memory (model/ct_size.py)",
        inputs=u_parts | {"samples": int(dw.size)},
    )  # fmt: skip
    u_centre, _ = scan_range_dw_uncertainty(
        dw_cm=[size.centre_dw_cm], mean_dw_cm=size.centre_dw_cm, method=method
    )
    steps.add(
        "water_equivalent_diameter_centre_standard_uncertainty_cm", u_centre, "cm",
        equation="u = r_method Dw (one position)",
        source="the method share of model/ct_size.py (from memory)",
    )  # fmt: skip
    trail = [step.as_dict() for step in (*size.trail.steps, *steps.steps)]
    values: dict[str, Any] = {
        "size_dw_mean_cm": size.mean_dw_cm,
        "size_dw_centre_cm": size.centre_dw_cm,
        "size_method": method,
        "size_images_used": size.n_samples,
        "size_truncated_share": size.truncated_samples / size.n_samples,
        "size_ssde_mgy": None,
        "size_ssde_report": None,
        "ssde_ratio_reported_to_size": None,
    }
    if row.ctdivol_mgy is not None:
        phantom = row.ct_phantom_diameter_cm or 32.0
        region = "head" if phantom == 16.0 else "body"
        try:
            ssde = size_specific_dose_estimate(
                ctdivol_mgy=row.ctdivol_mgy,
                diameter_cm=size.mean_dw_cm,
                phantom_diameter_cm=phantom,
                diameter_source=(
                    "Dw from the localizer rows (a stored calibration to water)"
                    if method == "localizer"
                    else "Dw from the images"
                )
                + ", averaged over the scan range",
                body_region=region,
            )
        except ModelError as exc:
            trail.append({"quantity": "ssde_mgy", "value": None, "note": str(exc)})
        else:
            values["size_ssde_mgy"] = ssde.ssde_mgy
            values["size_ssde_report"] = ssde.report
            trail.extend(step.as_dict() for step in ssde.trail.steps)
            trail.append(_ssde_uncertainty_step(ssde, u_dw))
            if row.ssde_mgy and ssde.ssde_mgy > 0:
                values["ssde_ratio_reported_to_size"] = row.ssde_mgy / ssde.ssde_mgy
    values["size_trail"] = {"steps": trail}
    return values


def _ssde_uncertainty_step(ssde: Any, u_dw_cm: float) -> dict[str, Any]:
    """The trail step of an SSDE's standard uncertainty (size and fit, ``model/ssde.py``)."""
    steps = WhyTrail()
    steps.add(
        "ssde_standard_uncertainty_mgy", ssde_standard_uncertainty(ssde, u_dw_cm), "mGy",
        equation="u(SSDE) / SSDE = sqrt((b u(Dw))^2 + u_f^2)",
        source=f"{ssde.report} fit f = a exp(-b Dw); JCGM 100:2008 (GUM) eq. 10",
        inputs={"dw_standard_uncertainty_cm": u_dw_cm},
    )  # fmt: skip
    return steps.steps[0].as_dict()


class ArrivalSizer:
    """CT patient size for objects that arrive one by one (the C-STORE listener).

    The listener holds each received dataset only while its handler runs, and the images of a
    study come in no known order, so the choice is made on arrival: an axial image is measured
    (its pixels decoded, its Dw computed, the pixels dropped before the handler returns) when
    no image of its series measured so far lies closer than the sampling spacing (50 mm), so
    a series sent in order is sampled every 50 mm from its first image (the range beyond the
    last sample is held at its Dw, which the trail records); every other image stays
    header-only. A localizer is measured on arrival when its scanner has a stored calibration
    for it (:meth:`StudySizer.add_localizer_now`: its rows kept, its pixels dropped), else
    counted as uncalibrated. A study is sized ``quiet_s`` seconds after its last image or CT
    dose report (:meth:`report_stored`: a report that comes after the study was sized is given
    the size of what came before), and at :meth:`close`; thread-safe (one handler thread per
    association).
    """

    def __init__(
        self, sizer: StudySizer, *, quiet_s: float = 30.0, received_via: str = "listen"
    ) -> None:
        self._sizer = sizer
        self._quiet_s = quiet_s
        self._via = received_via
        self._lock = threading.Lock()
        self._timers: dict[str, threading.Timer] = {}
        self._taken: dict[str, list[float]] = {}

    @property
    def summary(self) -> SizingSummary:
        return self._sizer.summary

    def received(self, ds: Dataset, *, encoded: bytes | str, source: str) -> None:
        """One stored CT image: keep its header (``ds``, read without pixels), and measure it
        now, when it is worth it, from ``encoded``: the object as received (Part 10 bytes, or
        the listener's file of it, which exists while the handler runs)."""
        try:
            header = ct_image_header(ds, source=source)
        except IngestError as exc:
            self._sizer.record_errors([_sized_error(exc, source)], self._via)
            return
        study = header.study_instance_uid
        if not study or header.kind == "other":
            return
        sample = None
        if self._worth_measuring(header):  # axial images; a localizer is measured below
            try:
                image = read_ct_size_image(encoded)
                sample = measure_image(image, header)
                del image  # the pixels go now; only the numbers stay
            except IngestError as exc:
                self._sizer.record_errors([_sized_error(exc, source)], self._via)
            else:
                with self._lock:
                    summary = self._sizer.summary
                    summary.images_read += 1
                    summary.pixel_data_bytes_read += header.pixel_data_bytes
        with self._lock:
            if header.kind == "localizer":
                self._sizer.add_localizer_now(
                    header, partial(read_ct_size_image, encoded), source, received_via=self._via
                )
            else:
                self._sizer.add_measured(header, sample, source)
            self._size_after_quiet_time(study)

    def report_stored(self, result: ParseResult) -> None:
        """One stored object that is no CT image: a CT dose report's study is sized again after
        the quiet time (:meth:`StudySizer.add_report`), so that the report, sent at the end of
        the examination, gets the size of the localizer or images that came before it."""
        study = result.source.study_instance_uid
        if not study or not is_ct_report(result):
            return
        with self._lock:
            self._sizer.add_report(study)
            self._size_after_quiet_time(study)

    def _size_after_quiet_time(self, study: str) -> None:
        """(Re)start the study's quiet time (the caller holds the lock)."""
        timer = self._timers.pop(study, None)
        if timer is not None:
            timer.cancel()
        timer = threading.Timer(self._quiet_s, self._finish, args=(study,))
        timer.daemon = True
        self._timers[study] = timer
        timer.start()

    def _worth_measuring(self, header: CtImageHeader) -> bool:
        if header.kind != "axial" or header.z_mm is None:
            return False
        key = header.series_instance_uid or header.acquisition_group
        with self._lock:
            taken = self._taken.setdefault(key, [])
            if any(abs(z - header.z_mm) < self._sizer.axial_spacing_mm for z in taken):
                return False
            taken.append(header.z_mm)
            return True

    def _finish(self, study: str) -> None:
        with self._lock:
            self._timers.pop(study, None)
            try:
                self._sizer.finish(study, received_via=self._via)
            except Exception:  # the events are stored; sizing can be redone
                log.exception("sizing a CT study failed")

    def close(self) -> SizingSummary:
        """Size every study still waiting (the listener stops)."""
        with self._lock:
            for timer in self._timers.values():
                timer.cancel()
            studies = list(self._timers)
            self._timers.clear()
        for study in studies:
            self._finish(study)
        return self._sizer.summary


#: Localizer rows kept as samples at least this far apart along the table (mm; a project
#: choice): a localizer has a row every millimetre or so, a patient's Dw changes over
#: centimetres, and each kept row is a stored sample (ct_size_samples); the axial images are
#: sampled every 50 mm. The first and the last row with a size are always kept.
LOCALIZER_ROW_SPACING_MM = 5.0


def _rows_apart(rows: Any, spacing_mm: float) -> list[tuple[float, float, bool]]:
    """The localizer rows (``z``, ``dw``, ``truncated``) with a size, each at least
    ``spacing_mm`` from the one kept before it, and the last one."""
    sized = [(float(z), float(dw), bool(cut)) for z, dw, cut in rows if math.isfinite(dw)]
    kept: list[tuple[float, float, bool]] = []
    for row in sized:
        if not kept or abs(row[0] - kept[-1][0]) >= spacing_mm - 1e-6:
            kept.append(row)
    if sized and kept[-1] is not sized[-1]:
        kept.append(sized[-1])
    return kept


def _g(value: float | None) -> str:
    return "unknown" if value is None else f"{value:g}"


def _sized_error(exc: IngestError, source: str) -> IngestError:
    reason = exc.reason if exc.reason.startswith("patient size") else f"patient size: {exc.reason}"
    return IngestError(exc.code, reason, exc.source or source)
