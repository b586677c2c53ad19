"""A mammography image header and a mammography dose report through every ingest path.

No MG object ships in pydicom, pydicom-data or highdicom's wheel (DICOM-NOTES section 4), so
the objects are built here (synthetic, to PS3.3 and PS3.16): a Digital Mammography X-Ray
header and a TID 10001 mammography report (``rdsr_builders.mammography_report``). Each path
(folder scan, DICOM JSON as a DICOMweb pull receives it, C-STORE from dcmtk's storescu) must
give the same mammography fields.
"""

from __future__ import annotations

import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest
from ingest_samples import PSEUDONYMISER, header
from peers import require_peer, which_or_none
from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from rdsr_builders import mammography_report

from beamaudit.ingest import read_dataset, scan
from beamaudit.ingest.dicom_json import dataset_from_metadata
from beamaudit.ingest.events import ExposureEvent, ParseResult
from beamaudit.ingest.listener import ListenerConfig, ReceivedObject, StoreOutcome, start_listener

MG_FIELDS = (
    "kvp_kv", "exposure_mas", "organ_dose_mgy", "entrance_dose_mgy", "hvl_mm_al",
    "body_part_thickness_mm", "compression_force_n", "image_laterality",
    "breast_implant_present", "view_position", "anode_material", "filters",
    "mammography_acquisition", "patient_age_years",
)  # fmt: skip


def _mg_header() -> Dataset:
    view = Dataset()
    view.CodeValue, view.CodingSchemeDesignator = "399162004", "SCT"
    view.CodeMeaning = "cranio-caudal"
    return header("1.2.840.10008.5.1.4.1.1.1.2", "MG", KVP="28", ExposureInuAs="81000",
                  OrganDose="0.0131", EntranceDoseInmGy="5.4", HalfValueLayer="0.51",
                  BodyPartThickness="49", CompressionForce="104", ImageLaterality="L",
                  BreastImplantPresent="NO", PatientAge="061Y", AnodeTargetMaterial="TUNGSTEN",
                  FilterMaterial="RHODIUM", FilterThicknessMinimum="0.05",
                  ViewCodeSequence=Sequence([view]))  # fmt: skip


def _fields(event: ExposureEvent) -> dict[str, object]:
    return {name: getattr(event, name) for name in MG_FIELDS}


def _direct(ds: Dataset) -> ParseResult:
    return read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="direct")


@pytest.fixture
def objects(tmp_path: Path) -> dict[str, Path]:
    paths = {}
    for name, ds in (("header", _mg_header()), ("report", mammography_report())):
        path = tmp_path / "in" / f"{name}.dcm"
        path.parent.mkdir(exist_ok=True)
        ds.save_as(path, enforce_file_format=True)
        paths[name] = path
    return paths


def test_header_values_read_directly() -> None:
    (event,) = _direct(_mg_header()).events
    assert _fields(event) == {
        "kvp_kv": 28.0, "exposure_mas": 81.0, "organ_dose_mgy": pytest.approx(1.31),
        "entrance_dose_mgy": 5.4, "hvl_mm_al": 0.51, "body_part_thickness_mm": 49.0,
        "compression_force_n": 104.0, "image_laterality": "L", "breast_implant_present": False,
        "view_position": "CC", "anode_material": "tungsten", "filters": event.filters,
        "mammography_acquisition": "2d", "patient_age_years": 61.0,
    }  # fmt: skip


def test_folder_scan_gives_the_direct_events(objects: dict[str, Path]) -> None:
    outcomes = list(scan([objects["header"].parent], pseudonymiser=PSEUDONYMISER))
    assert all(o.error is None for o in outcomes)
    by_kind = {o.result.source.kind: o.result for o in outcomes if o.result is not None}
    (event,) = by_kind["image_header"].events
    assert _fields(event) == _fields(_direct(_mg_header()).events[0])
    report = by_kind["rdsr"]
    assert [e.mammography_acquisition for e in report.events] == ["2d", "tomosynthesis", "2d"]
    (acc,) = report.accumulated
    assert acc.agd_left_mgy == pytest.approx(3.13) and acc.agd_right_mgy == pytest.approx(1.30)


def test_dicom_json_gives_the_direct_events() -> None:
    # a DICOMweb pull receives WADO-RS metadata (PS3.18 F.2) and parses the dataset built from it
    for ds in (_mg_header(), mammography_report()):
        rebuilt, warnings = dataset_from_metadata(ds.to_json_dict())
        assert warnings == []
        pulled = read_dataset(rebuilt, pseudonymiser=PSEUDONYMISER, source="json")
        direct = _direct(ds)
        assert [_fields(e) for e in pulled.events] == [_fields(e) for e in direct.events]
        assert [repr(a) for a in pulled.accumulated] == [repr(a) for a in direct.accumulated]


@pytest.fixture
def received() -> Iterator[tuple[int, list[ReceivedObject]]]:
    got: list[ReceivedObject] = []

    def handler(obj: ReceivedObject) -> StoreOutcome:
        got.append(obj)
        return StoreOutcome.stored()

    running = start_listener(ListenerConfig(port=0), handler)
    try:
        yield running.port, got
    finally:
        running.stop()


@pytest.mark.peer
def test_c_store_from_storescu_gives_the_direct_events(
    objects: dict[str, Path], received: tuple[int, list[ReceivedObject]]
) -> None:
    storescu = which_or_none("storescu")
    require_peer("dcmtk", storescu is not None, "storescu not on PATH (apt-get install dcmtk)")
    assert storescu is not None
    port, got = received
    files = [str(objects["header"]), str(objects["report"])]
    run = subprocess.run(
        [storescu, "-aec", "BEAMAUDIT", "-R", "127.0.0.1", str(port), *files],
        capture_output=True, text=True, timeout=30, check=False,
        env={"TCP_NODELAY": "1", "PATH": "/usr/bin:/bin"},
    )  # fmt: skip
    assert run.returncode == 0, run.stderr
    results = {
        r.source.kind: r
        for r in (read_dataset(o.dataset, pseudonymiser=PSEUDONYMISER, source="c-store")
                  for o in got)
    }  # fmt: skip
    (event,) = results["image_header"].events
    assert _fields(event) == _fields(_direct(_mg_header()).events[0])
    assert [e.image_laterality for e in results["rdsr"].events] == ["L", "L", "R"]
