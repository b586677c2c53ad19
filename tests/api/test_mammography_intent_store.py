"""Screening or diagnostic through the store: ingest's reading kept with its clue, and the mapping
rules on it before any description, on both backends.

The objects are built to PS3.3 / PS3.16 (``tests/ingest/test_mammography_intent.py`` says how);
procedure codes are a site's own, invented here.
"""

from __future__ import annotations

from pathlib import Path

from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from rdsr_builders import SCREENING_INTENT, SPOT_COMPRESSION, MammoEvent, mammography_report
from sqlalchemy import select
from test_mammography_paths import _mg_header

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import load_or_create_key


def _code(value: str, scheme: str, meaning: str) -> Dataset:
    item = Dataset()
    item.CodeValue, item.CodingSchemeDesignator, item.CodeMeaning = value, scheme, meaning
    return item


def _objects(folder: Path) -> None:
    folder.mkdir()
    # a screening procedure code; the description says otherwise and is not asked
    screening = _mg_header()
    screening.StudyDescription = "Diagnostic mammogram"
    screening.ProcedureCodeSequence = Sequence([_code("MGS2", "99LOCAL", "Screening mammography")])
    screening.save_as(folder / "screening.dcm", enforce_file_format=True)
    # a magnification view (CID 4015) of a study described as screening
    magnified = _mg_header()
    magnified.StudyDescription = "Screening mammography"
    magnified.ViewCodeSequence[0].ViewModifierCodeSequence = Sequence(
        [_code("399163009", "SCT", "Magnification")]
    )
    magnified.save_as(folder / "magnified.dcm", enforce_file_format=True)
    # a report of Screening Intent whose second view is a spot compression
    report = mammography_report(
        [MammoEvent(), MammoEvent(view_modifiers=(SPOT_COMPRESSION,), left=False)],
        intent=SCREENING_INTENT,
    )
    report.save_as(folder / "report.dcm", enforce_file_format=True)


def test_intent_stored_with_its_clue_and_mapped_before_descriptions(store, tmp_path) -> None:
    folder = tmp_path / "in"
    _objects(folder)
    summary = scan_paths(
        [folder],
        pipeline=Pipeline(store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    assert summary.errors == [] and summary.events == 4
    with store.session_factory() as s:
        rows = s.scalars(select(m.ExposureEventRow).order_by(m.ExposureEventRow.id)).all()
        got = sorted(
            (
                r.source_kind,
                r.study_description or "",
                r.mammography_intent,
                r.exam_type,
                r.clinical_indication,
                r.provenance.get("mammography_intent"),
            )
            for r in rows
        )
    assert got == [
        ("image_header", "Diagnostic mammogram", "screening", "mammo_cc", "screening",
         "(0008,1032) ProcedureCodeSequence (MGS2, 99LOCAL) Screening mammography"),
        ("image_header", "Screening mammography", "diagnostic", "mammo_cc", "diagnostic",
         "(0054,0222) ViewModifierCodeSequence (399163009, SCT) Magnification"),
        ("rdsr", "", "diagnostic", "mammo_cc", "diagnostic",
         "(111032, DCM) Image View Modifier = (399055006, SCT) Spot Compression"),
        ("rdsr", "", "screening", "mammo_cc", "screening",
         "(363703001, SCT) Has Intent = (360156006, SCT) Screening Intent"),
    ]  # fmt: skip
