"""Writing the simulated studies as files: DICOM objects, the broken files and the truth table.

Layout under the output folder: ``<delivery>/<room key>/<YYYY-MM>/<accession>_<n>.dcm`` for
images, ``<accession>_SR.dcm`` for dose reports, ``<accession>_CT<n>.dcm`` for CT images;
``broken/`` for the three files ingest must reject.
"""

from __future__ import annotations

import csv
import math
from dataclasses import replace
from pathlib import Path
from typing import Any

from beamaudit.api.demo.context import SimulationContext
from beamaudit.api.demo.ct_fluoro import SIZE_IMAGE_SPACING_MM
from beamaudit.api.demo.dicom_objects import (
    Dataset,
    ct_dose_report,
    ct_image,
    ct_localizer,
    fluoro_dose_report,
    part10_bytes,
    radiograph,
    write_part10,
)
from beamaudit.api.demo.expected import Generated
from beamaudit.api.demo.manifest import PlantedFinding
from beamaudit.api.demo.records import RadiographStudy
from beamaudit.api.demo.scenario import RoomSpec

__all__ = ["TRUTH_COLUMNS", "Writer"]

TRUTH_COLUMNS = (
    "room_key",
    "delivery",
    "path",
    "study_instance_uid",
    "accession",
    "sop_instance_uid",
    "event_uid",
    "event_datetime",
    "exam_type",
    "protocol_name",
    "kvp_kv",
    "exposure_mas",
    "sid_mm",
    "field_area_cm2",
    "output_ugy_per_mas_1m",
    "dap_true_gy_cm2",
    "dap_reported_gy_cm2",
    "reference_point_air_kerma_mgy",
    "ctdivol_mgy",
    "dlp_mgy_cm",
    "deviation_index",
    "mgd_reported_mgy",
    "thickness_mm",
    "planted",
)


def _view_ids(study: Any, view: Any) -> dict[str, Any]:
    """The truth table's identification of one image: its study, object, event and time."""
    return {
        "study_instance_uid": study.study_uid,
        "accession": study.accession,
        "sop_instance_uid": view.sop_uid,
        "event_uid": view.event_uid,
        "event_datetime": view.acquired.isoformat(),
    }


def _derived_uid(*parts: object) -> str:
    """A UID made from ``parts`` (the same parts give the same UID)."""
    from pydicom.uid import PYDICOM_ROOT_UID, generate_uid

    return str(generate_uid(prefix=PYDICOM_ROOT_UID, entropy_srcs=[str(p) for p in parts]))


def _blank(value: Any) -> Any:
    return "" if value is None else value


class Writer:
    """Writes the objects of every room; keeps the truth table and the file and event counts."""

    def __init__(self, output_dir: Path, gen: Generated) -> None:
        self.output_dir = output_dir
        self.gen = gen
        self.truth: list[dict[str, Any]] = []
        self.files: dict[str, int] = {}
        self.events: dict[str, int] = {}

    def _write(self, room: RoomSpec, ds: Dataset, name: str, month: str) -> str:
        relative = f"{room.delivery}/{room.key}/{month}/{name}"
        write_part10(self.output_dir / relative, ds)
        self.gen.paths[ds["SOPInstanceUID"]] = relative
        self.files[room.key] = self.files.get(room.key, 0) + 1
        return relative

    def _truth(self, room: RoomSpec, path: str, **row: Any) -> None:
        self.events[room.key] = self.events.get(room.key, 0) + 1
        full = {c: "" for c in TRUTH_COLUMNS}
        full.update(room_key=room.key, delivery=room.delivery, path=path)
        full.update({k: _blank(v) for k, v in row.items()})
        self.truth.append(full)

    def radiography(self, room: RoomSpec) -> None:
        """Every image of a radiography room."""
        for s in self.gen.radiography[room.key]:
            month = f"{s.start:%Y-%m}"
            for v in s.views:
                name = f"{s.accession}_{v.index + 1}.dcm"
                path = self._write(room, radiograph(room, s, v), name, month)
                technique = v.technique_recorded
                self._truth(
                    room,
                    path,
                    **_view_ids(s, v),
                    exam_type=v.exam_type,
                    protocol_name=v.protocol_name,
                    kvp_kv=v.kvp_kv if technique else None,
                    exposure_mas=v.exposure_mas if technique else None,
                    sid_mm=v.sid_mm,
                    field_area_cm2=round(v.field_area_cm2, 2),
                    output_ugy_per_mas_1m=round(v.output_ugy_per_mas_1m, 3),
                    dap_true_gy_cm2=round(v.dap_true_gy_cm2, 6),
                    dap_reported_gy_cm2=round(v.dap_reported_gy_cm2, 6)
                    if v.dose_recorded
                    else None,
                    deviation_index=(
                        round(v.deviation_index, 2) if v.deviation_index is not None else None
                    ),
                    planted=";".join(v.planted),
                )

    def mammography(self, room: RoomSpec) -> None:
        """Every image of the mammography room."""
        from beamaudit.api.demo.mammography import mammogram

        for s in self.gen.mammography[room.key]:
            month = f"{s.start:%Y-%m}"
            for v in s.views:
                name = f"{s.accession}_{v.index + 1}.dcm"
                path = self._write(room, mammogram(room, s, v), name, month)
                self._truth(
                    room,
                    path,
                    **_view_ids(s, v),
                    exam_type=v.exam_type,
                    protocol_name=f"{v.laterality}{v.view_position}",
                    kvp_kv=v.kvp_kv,
                    exposure_mas=v.exposure_mas,
                    mgd_reported_mgy=v.mgd_mgy,
                    thickness_mm=v.thickness_mm,
                    planted=";".join(v.planted),
                )

    def ct(self, room: RoomSpec, device_uid: str) -> None:
        """Every dose report and image of the CT scanner."""
        for s in self.gen.ct[room.key]:
            month = f"{s.start:%Y-%m}"
            report_ds = ct_dose_report(room, s, device_uid=device_uid)
            report = self._write(room, report_ds, f"{s.accession}_SR.dcm", month)
            if s.size_images:
                uid = _derived_uid(s.acquisitions[0].series_uid, "localizer")
                self._write(room, ct_localizer(room, s, uid), f"{s.accession}_LOC.dcm", month)
            for i, a in enumerate(s.acquisitions):
                if a.image_sop_uid is not None:
                    self._write(room, ct_image(room, s, i), f"{s.accession}_CT{i}.dcm", month)
                    if s.size_images == "series":
                        self._size_series(room, s, i, month)
                self._truth(
                    room,
                    report,
                    study_instance_uid=s.study_uid,
                    accession=s.accession,
                    sop_instance_uid=s.report_sop_uid,
                    event_uid=a.event_uid,
                    event_datetime=a.started.isoformat(),
                    exam_type=s.exam_type,
                    protocol_name=a.protocol,
                    kvp_kv=a.kvp_kv,
                    ctdivol_mgy=a.ctdivol_mgy,
                    dlp_mgy_cm=a.dlp_mgy_cm,
                    planted=";".join(s.planted),
                )

    def _size_series(self, room: RoomSpec, s: Any, index: int, month: str) -> None:
        """Axial images every 50 mm of one helical acquisition, its first and last included
        (the centre image is written apart, with the acquisition's own UID)."""
        length = s.acquisitions[index].scanning_length_mm
        steps = max(1, math.ceil(length / SIZE_IMAGE_SPACING_MM))
        for k in range(steps + 1):
            z = -min(k * SIZE_IMAGE_SPACING_MM, length)
            uid = _derived_uid(s.acquisitions[index].series_uid, k)
            ds = ct_image(room, s, index, sop_uid=uid, z_mm=z, instance_number=k + 2)
            self._write(room, ds, f"{s.accession}_CT{index}_{k + 2}.dcm", month)

    def fluoro(self, room: RoomSpec, device_uid: str) -> None:
        """Every dose report of the fluoroscopy room."""
        for s in self.gen.fluoro[room.key]:
            month = f"{s.start:%Y-%m}"
            report_ds = fluoro_dose_report(room, s, device_uid=device_uid)
            report = self._write(room, report_ds, f"{s.accession}_SR.dcm", month)
            for e in s.events:
                self._truth(
                    room,
                    report,
                    study_instance_uid=s.study_uid,
                    accession=s.accession,
                    sop_instance_uid=s.report_sop_uid,
                    event_uid=e.event_uid,
                    event_datetime=e.started.isoformat(),
                    exam_type=s.exam_type,
                    protocol_name=s.protocol_name,
                    kvp_kv=e.kvp_kv,
                    exposure_mas=round(e.exposure_mas, 3),
                    sid_mm=e.sid_mm,
                    field_area_cm2=round(e.field_width_mm * e.field_height_mm / 100.0, 2),
                    output_ugy_per_mas_1m=round(e.output_ugy_per_mas_1m, 3),
                    dap_true_gy_cm2=round(e.dap_true_gy_cm2, 6),
                    dap_reported_gy_cm2=round(e.dap_reported_gy_cm2, 6),
                    reference_point_air_kerma_mgy=round(e.dose_rp_reported_mgy, 4),
                    planted=";".join(s.planted),
                )

    def truth_table(self, path: Path) -> None:
        """Write the truth table (one row per irradiation event) as CSV."""
        with path.open("w", encoding="utf-8", newline="") as handle:
            writer = csv.DictWriter(handle, fieldnames=TRUTH_COLUMNS, lineterminator="\n")
            writer.writeheader()
            writer.writerows(self.truth)

    def broken(
        self, room: RoomSpec, model: RadiographStudy, ctx: SimulationContext
    ) -> list[PlantedFinding]:
        """Three files ingest must reject, made from copies of ``model`` with their own UIDs."""
        folder = self.output_dir / "broken"
        folder.mkdir(parents=True, exist_ok=True)

        def copy(tag: str) -> tuple[RadiographStudy, Dataset]:
            view = replace(
                model.views[0],
                sop_uid=ctx.uids.uid("broken-image", tag),
                event_uid=ctx.uids.uid("broken-event", tag),
                planted=["ingest_error"],
            )
            study = replace(
                model,
                study_uid=ctx.uids.uid("broken-study", tag),
                series_uid=ctx.uids.uid("broken-series", tag),
                accession=f"HBX{tag.upper()}",
                views=[view],
            )
            return study, radiograph(room, study, view)

        truncated, ds = copy("trunc")
        data = part10_bytes(ds)
        pixel_data_tag = b"\xe0\x7f\x10\x00"  # (7FE0,0010) in little endian
        (folder / "truncated_dx.dcm").write_bytes(data[: data.find(pixel_data_tag) // 2])
        (folder / "not_dicom.dcm").write_text(
            "This file belongs to the beamaudit demo and is deliberately not a DICOM object: "
            "an export log saved under a .dcm name.\n" * 3,
            encoding="utf-8",
        )
        high_kv, ds = copy("kvp180")
        ds["KVP"] = "180"
        write_part10(folder / "kvp_180.dcm", ds)
        return [
            _broken_finding(
                "truncated",
                "truncated_dx.dcm",
                truncated,
                "a DX image cut off in the middle of its header (a copy interrupted in transfer)",
            ),
            _broken_finding(
                "not_dicom", "not_dicom.dcm", None, "a text file named like a DICOM file"
            ),
            _broken_finding(
                "out_of_range",
                "kvp_180.dcm",
                high_kv,
                "a DX image whose KVP (0018,0060) says 180 kV, outside 20-150 kV",
            ),
        ]


def _broken_finding(
    code: str, name: str, study: RadiographStudy | None, what: str
) -> PlantedFinding:
    return PlantedFinding(
        id=f"broken_{name.removesuffix('.dcm')}",
        kind="ingest_error",
        room=None,
        room_key=None,
        station_name=None,
        exam_type=None,
        quantity=None,
        date=None,
        month=None,
        description=what,
        expected={"code": code},
        study_instance_uids=[study.study_uid] if study else [],
        sop_instance_uids=[study.views[0].sop_uid] if study else [],
        paths=[f"broken/{name}"],
    )
