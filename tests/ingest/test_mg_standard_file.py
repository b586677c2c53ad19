"""A standard-built Digital Mammography X-Ray image (``mg_standard.py``): conformance to the IOD,
and what ingest reads from it.

No real MG file is reachable offline (pydicom 3.0.2's test files with pydicom-data 1.0.0 hold
none, nor does highdicom's wheel; DICOM-NOTES section 4), so the object is built to PS3.3 A.27
and checked two ways: against highdicom 0.28.2's tables of the standard (its IOD-module and
module-attribute maps, generated from the standard's text), and by dciodvfy of dicom3tools
(Debian's package ``dicom3tools``), which must find neither error nor warning. Then the values
it carries are read back by name through a folder scan.
"""

from __future__ import annotations

import json
import subprocess
from importlib import resources
from pathlib import Path

import pytest
from ingest_samples import PSEUDONYMISER
from mg_standard import MG_FOR_PRESENTATION, VALUES, standard_mammogram
from peers import require_peer, which_or_none
from pydicom.dataset import Dataset

from beamaudit.ingest import scan
from beamaudit.ingest.events import FilterLayer


def _standard_table(name: str) -> object:
    base = resources.files("highdicom") / "_standard"
    return json.loads((base / name).read_text(encoding="utf-8"))


def _mandatory_attributes() -> list[tuple[str, str, str, tuple[str, ...]]]:
    """``(module, keyword, type, path)`` of every Type 1 and 2 attribute of the IOD's mandatory
    modules, at the top level or one sequence down."""
    iod = _standard_table("sop_class_iod_map.json")[MG_FOR_PRESENTATION]  # type: ignore[index]
    modules = [m["key"] for m in _standard_table("iod_module_map.json")[iod] if m["usage"] == "M"]  # type: ignore[index]
    table = _standard_table("module_attribute_map.json")
    out = []
    for module in modules:
        for attr in table[module]:  # type: ignore[index]
            if attr["type"] in ("1", "2") and len(attr["path"]) <= 1:
                out.append((module, attr["keyword"], attr["type"], tuple(attr["path"])))
    return out


def test_the_iod_is_the_digital_mammography_image_with_its_modules() -> None:
    iod = _standard_table("sop_class_iod_map.json")[MG_FOR_PRESENTATION]  # type: ignore[index]
    assert iod == "digital-mammography-x-ray-image"
    mandatory = {m["key"] for m in _standard_table("iod_module_map.json")[iod] if m["usage"] == "M"}  # type: ignore[index]
    assert {"mammography-series", "mammography-image", "dx-image", "dx-detector"} <= mandatory


@pytest.mark.parametrize(
    ("module", "keyword", "kind", "path"),
    _mandatory_attributes(),
    ids=lambda v: v if isinstance(v, str) else "/".join(v) or "top",
)
def test_every_type_1_and_2_attribute_is_there(
    module: str, keyword: str, kind: str, path: tuple[str, ...]
) -> None:
    ds = standard_mammogram()
    holders: list[Dataset] = [ds]
    if path:
        if path[0] not in ds:
            # a Type 3 sequence the object leaves out: its items' attributes need nothing
            return
        holders = list(ds[path[0]].value)
    for holder in holders:
        assert keyword in holder, f"{module}: {keyword} (Type {kind}) missing"
        if kind == "1":
            assert holder[keyword].value not in (None, "", []), f"{module}: {keyword} empty"


def test_dciodvfy_finds_no_error_and_no_warning(tmp_path: Path) -> None:
    program = which_or_none("dciodvfy")
    require_peer("dicom3tools", program is not None, "dciodvfy (Debian dicom3tools) not installed")
    path = tmp_path / "mg.dcm"
    standard_mammogram().save_as(path, enforce_file_format=True)
    run = subprocess.run([str(program), str(path)], capture_output=True, text=True, timeout=60)
    said = (run.stdout + run.stderr).splitlines()
    assert run.returncode == 0, said
    assert said == ["MammographyImageForPresentation"], said  # the IOD it checked, nothing else


def test_dciodvfy_does_fail_a_broken_one(tmp_path: Path) -> None:
    # the check above would pass a tool that says nothing: without View Code Sequence (Type 1 of
    # the Mammography Image module) the same tool must complain
    program = which_or_none("dciodvfy")
    require_peer("dicom3tools", program is not None, "dciodvfy (Debian dicom3tools) not installed")
    ds = standard_mammogram()
    del ds.ViewCodeSequence
    path = tmp_path / "broken.dcm"
    ds.save_as(path, enforce_file_format=True)
    run = subprocess.run([str(program), str(path)], capture_output=True, text=True, timeout=60)
    assert run.returncode != 0
    assert "ViewCodeSequence" in run.stderr and "Error" in run.stderr


def test_ingest_reads_the_values_the_file_carries(tmp_path: Path) -> None:
    folder = tmp_path / "in"
    folder.mkdir()
    standard_mammogram().save_as(folder / "mg.dcm", enforce_file_format=True)
    (outcome,) = list(scan([folder], pseudonymiser=PSEUDONYMISER))
    assert outcome.error is None
    (event,) = outcome.result.events
    assert VALUES["KVP"] == "29" and event.kvp_kv == 29.0
    # (0018,1153) Exposure in uAs before the integer (0018,1152) Exposure in mAs
    assert VALUES["ExposureInuAs"] == 87500 and event.exposure_mas == pytest.approx(87.5)
    assert event.provenance["exposure_mas"] == "(0018,1153) ExposureInuAs"
    # (0040,0316) Organ Dose in dGy (PS3.3 C.8.7.8): 0.0148 dGy = 1.48 mGy
    assert VALUES["OrganDose"] == "0.0148" and event.organ_dose_mgy == pytest.approx(1.48)
    assert event.organ_exposed == "BREAST"
    assert event.entrance_dose_mgy == pytest.approx(5.9)
    assert event.hvl_mm_al == pytest.approx(0.53)
    assert event.body_part_thickness_mm == 54.0 and event.compression_force_n == 112.0
    assert event.image_laterality == "R" and event.breast_implant_present is False
    # no View Position: the view comes from View Code Sequence (0054,0220), CID 4014
    assert event.view_position == "CC"
    assert event.provenance["view_position"] == "(0054,0220) ViewCodeSequence"
    assert event.anode_material == "tungsten"
    assert event.filters == (FilterLayer("rhodium", 0.05),)
    assert event.sid_mm == 650.0
    assert event.patient_age_years == 57.0
    assert event.mammography_acquisition == "2d"
    assert event.mammography_intent is None  # no modifier, no procedure code
    assert event.modality == "MG" and event.sop_class_uid == MG_FOR_PRESENTATION
