"""The standard-built Digital Mammography X-Ray image (``tests/ingest/mg_standard.py``: PS3.3
A.27, checked by dciodvfy; no real MG file is reachable offline) through a folder scan into the
store, on both backends: its values stored, our mean glandular dose beside its Organ Dose, and the
exam type with the indication of its description."""

from __future__ import annotations

import pytest
from mg_standard import standard_mammogram
from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import load_or_create_key


def test_the_standard_built_mammogram_is_stored_with_our_dose(store, tmp_path) -> None:
    folder = tmp_path / "in"
    folder.mkdir()
    standard_mammogram().save_as(folder / "mg.dcm", enforce_file_format=True)
    summary = scan_paths(
        [folder],
        pipeline=Pipeline(store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    assert summary.errors == [] and summary.events == 1
    with store.session_factory() as s:
        (row,) = s.scalars(select(m.ExposureEventRow)).all()
        assert (row.kvp_kv, row.exposure_mas, row.body_part_thickness_mm) == (29.0, 87.5, 54.0)
        assert row.organ_dose_mgy == pytest.approx(1.48)  # 0.0148 dGy (PS3.3 C.8.7.8)
        assert (row.view_position, row.image_laterality) == ("CC", "R")
        # screening by the study description: the file carries no code that says it
        assert (row.exam_type, row.clinical_indication) == ("mammo_cc", "screening")
        assert row.mammography_intent is None
        assert row.recon_status == "ok" and row.recon_target_filter == "W/Rh"
        # EUREF typical clinical HVL with the paddle, W/Rh at 28 / 31 kV: 0.54 / 0.56 +- 0.03 mm
        # Al (European guidelines 4th ed. 2006; PUBLISHED-VALUES m, high)
        assert 0.51 <= row.recon_hvl1_mm_al <= 0.59
        assert row.recon_mgd_mgy > 0
        assert row.agd_ratio_reported_to_recon == pytest.approx(1.48 / row.recon_mgd_mgy)
