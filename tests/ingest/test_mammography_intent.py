"""Screening or diagnostic, from what DICOM says of a mammography view or examination.

Headers are built to PS3.3 (2024 editions, as highdicom 0.28.2's module map lists them): the
Mammography Image module (C.8.11.7) holds View Code Sequence (0054,0220, Type 1) with View
Modifier Code Sequence (0054,0222, Type 2) inside it; the General Study module holds Procedure
Code Sequence (0008,1032, Type 3); the General Series and Mammography Series modules hold Request
Attributes Sequence (0040,0275) with Requested Procedure Code Sequence (0032,1064) inside it.
Codes: CID 4015 View Modifier for Mammography and CID 3629 Procedure Intent as pydicom 3.0.2's
PS3.16 CID dictionary lists them; the SNOMED-RT spellings from pydicom's SRT-SCT mapping.
Procedure codes are a site's own (their meanings are what is read): invented here.
"""

from __future__ import annotations

import pytest
from ingest_samples import PSEUDONYMISER, header
from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from rdsr_builders import (
    DIAGNOSTIC_INTENT,
    IMPLANT_DISPLACED,
    SCREENING_INTENT,
    SPOT_COMPRESSION,
    MammoEvent,
    mammography_report,
)

from beamaudit.ingest import read_dataset
from beamaudit.ingest.codes import (
    MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS,
    MAMMOGRAPHY_VIEW_MODIFIERS,
    PROCEDURE_INTENTS,
    intent_from_words,
)
from beamaudit.ingest.events import ExposureEvent

MG_IMAGE = "1.2.840.10008.5.1.4.1.1.1.2"  # Digital Mammography X-Ray Image - For Presentation


def _code(value: str, scheme: str, meaning: str) -> Dataset:
    item = Dataset()
    item.CodeValue, item.CodingSchemeDesignator, item.CodeMeaning = value, scheme, meaning
    return item


def _view(*modifiers: Dataset) -> Sequence:
    """View Code Sequence: cranio-caudal (CID 4014) with its View Modifier Code Sequence
    (Type 2: present, empty when there is no modifier)."""
    view = _code("399162004", "SCT", "cranio-caudal")
    view.ViewModifierCodeSequence = Sequence(list(modifiers))
    return Sequence([view])


def _requested(meaning: str) -> Sequence:
    request = Dataset()
    request.RequestedProcedureID = "RP1"
    request.RequestedProcedureCodeSequence = Sequence([_code("MGR1", "99LOCAL", meaning)])
    return Sequence([request])


def _event(modality: str = "MG", sop_class: str = MG_IMAGE, **values: object) -> ExposureEvent:
    ds = header(sop_class, modality, KVP="28", ExposureInuAs="80000", **values)
    (event,) = read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="direct").events
    return event


def test_the_cid_4015_table_is_pydicoms() -> None:
    from pydicom.sr._cid_dict import cid_concepts
    from pydicom.sr._concepts_dict import concepts

    listed = {
        (code, "SCT"): meaning
        for names in cid_concepts[4015].values()
        for name in names
        for code, (meaning, _) in concepts["SCT"][name].items()
    }
    assert listed == MAMMOGRAPHY_VIEW_MODIFIERS
    assert set(listed) >= MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS


def test_the_cid_3629_intents_are_pydicoms() -> None:
    from pydicom.sr._cid_dict import cid_concepts
    from pydicom.sr._concepts_dict import concepts

    sct = cid_concepts[3629]["SCT"]
    assert concepts["SCT"]["ScreeningIntent"] == {"360156006": ("Screening Intent", [3629])}
    assert "ScreeningIntent" in sct and "DiagnosticIntent" in sct
    assert PROCEDURE_INTENTS == {
        ("360156006", "SCT"): "screening",
        ("261004008", "SCT"): "diagnostic",
    }


@pytest.mark.parametrize(
    ("text", "intent"),
    [
        ("Screening mammography, bilateral", "screening"),
        ("MAMMO DIAGNOSTIC LEFT", "diagnostic"),
        ("Symptomatic breast clinic", "diagnostic"),
        ("Assessment views after recall", "diagnostic"),
        ("Mammography bilateral", None),
        ("screening recall assessment", None),  # names both: says nothing
    ],
)
def test_intent_from_a_procedure_codes_meaning(text: str, intent: str | None) -> None:
    assert intent_from_words(text) == intent


def test_a_workup_view_modifier_says_diagnostic() -> None:
    event = _event(ViewCodeSequence=_view(_code("399163009", "SCT", "Magnification")))
    assert event.mammography_intent == "diagnostic"
    assert event.provenance["mammography_intent"] == (
        "(0054,0222) ViewModifierCodeSequence (399163009, SCT) Magnification"
    )
    assert event.view_position == "CC"


def test_a_snomed_rt_spelling_of_spot_compression_is_read() -> None:
    # R-102D7 is the SNOMED-RT code of Spot Compression (pydicom's SRT-SCT mapping)
    event = _event(ViewCodeSequence=_view(_code("R-102D7", "SRT", "Spot Compression")))
    assert event.mammography_intent == "diagnostic"
    assert "(399055006, SCT)" in event.provenance["mammography_intent"]


def test_a_modifier_taken_in_screening_too_says_nothing() -> None:
    event = _event(ViewCodeSequence=_view(_code("399209000", "SCT", "Implant Displaced")))
    assert event.mammography_intent is None
    assert "mammography_intent" not in event.provenance


def test_the_performed_procedure_code_decides_without_a_modifier() -> None:
    event = _event(
        ViewCodeSequence=_view(),
        ProcedureCodeSequence=Sequence([_code("MGS2", "99LOCAL", "Screening mammography")]),
    )
    assert event.mammography_intent == "screening"
    assert event.provenance["mammography_intent"] == (
        "(0008,1032) ProcedureCodeSequence (MGS2, 99LOCAL) Screening mammography"
    )


def test_a_workup_modifier_comes_before_the_procedure_code() -> None:
    event = _event(
        ViewCodeSequence=_view(_code("399055006", "SCT", "Spot Compression")),
        ProcedureCodeSequence=Sequence([_code("MGS2", "99LOCAL", "Screening mammography")]),
    )
    assert event.mammography_intent == "diagnostic"
    assert "ViewModifierCodeSequence" in event.provenance["mammography_intent"]


def test_the_performed_procedure_comes_before_the_requested_one() -> None:
    event = _event(
        ProcedureCodeSequence=Sequence([_code("MGD1", "99LOCAL", "Diagnostic mammogram")]),
        RequestAttributesSequence=_requested("Screening mammography"),
    )
    assert event.mammography_intent == "diagnostic"


def test_the_requested_procedure_code_in_the_request_attributes() -> None:
    event = _event(
        ProcedureCodeSequence=Sequence([_code("MG1", "99LOCAL", "Mammography bilateral")]),
        RequestAttributesSequence=_requested("Diagnostic mammography, left"),
    )
    assert event.mammography_intent == "diagnostic"
    assert event.provenance["mammography_intent"] == (
        "(0032,1064) RequestedProcedureCodeSequence (MGR1, 99LOCAL) Diagnostic mammography, left"
    )


def test_no_clue_no_intent() -> None:
    event = _event(ViewCodeSequence=_view(), StudyDescription="Screening mammography")
    assert event.mammography_intent is None  # the mapping rules read the description


def test_no_intent_for_other_modalities() -> None:
    event = _event(
        "DX",
        "1.2.840.10008.5.1.4.1.1.1.1",
        ProcedureCodeSequence=Sequence([_code("X1", "99LOCAL", "Screening chest")]),
    )
    assert event.mammography_intent is None


# ---- the mammography dose report (TID 10001 Has Intent, TID 10003 Image View Modifier)
def _report_events(**kwargs: object) -> list[ExposureEvent]:
    ds = mammography_report(**kwargs)  # type: ignore[arg-type]
    return read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="direct").events


def test_a_report_of_screening_intent_makes_its_views_screening() -> None:
    events = _report_events(intent=SCREENING_INTENT)
    assert [e.mammography_intent for e in events] == ["screening"] * 3
    assert events[0].provenance["mammography_intent"] == (
        "(363703001, SCT) Has Intent = (360156006, SCT) Screening Intent"
    )


def test_a_reports_diagnostic_intent_says_nothing() -> None:
    # TID 10001 row 3 is mandatory: Diagnostic Intent is what a device writes when it knows no
    # better, so it does not outvote a description saying screening
    events = _report_events(intent=DIAGNOSTIC_INTENT)
    assert [e.mammography_intent for e in events] == [None] * 3


def test_an_events_workup_view_modifier_comes_before_the_reports_intent() -> None:
    events = _report_events(
        events=[MammoEvent(view_modifiers=(SPOT_COMPRESSION,)),
                MammoEvent(view_modifiers=(IMPLANT_DISPLACED,))],
        intent=SCREENING_INTENT,
    )  # fmt: skip
    assert [e.mammography_intent for e in events] == ["diagnostic", "screening"]
    assert events[0].provenance["mammography_intent"] == (
        "(111032, DCM) Image View Modifier = (399055006, SCT) Spot Compression"
    )


def _report_with(**attributes: object) -> list[ExposureEvent]:
    ds = mammography_report(
        [MammoEvent(), MammoEvent(view_modifiers=(SPOT_COMPRESSION,), left=False)],
        intent=SCREENING_INTENT,
    )
    for keyword, value in attributes.items():
        setattr(ds, keyword, value)
    return read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="direct").events


def test_a_reports_performed_procedure_code_comes_before_its_has_intent() -> None:
    # SR Document General module (PS3.3 C.17.2): Performed Procedure Code Sequence (0040,A372)
    events = _report_with(
        PerformedProcedureCodeSequence=Sequence([_code("MGD1", "99LOCAL", "Diagnostic mammogram")])
    )
    assert [e.mammography_intent for e in events] == ["diagnostic", "diagnostic"]
    assert events[0].provenance["mammography_intent"] == (
        "(0040,A372) PerformedProcedureCodeSequence (MGD1, 99LOCAL) Diagnostic mammogram"
    )
    assert "Spot Compression" in events[1].provenance["mammography_intent"]  # its own clue


def test_a_reports_requested_procedure_in_its_referenced_request() -> None:
    # SR Document General: Referenced Request Sequence (0040,A370) > Requested Procedure Code
    # Sequence (0032,1064); Performed Procedure Code Sequence is Type 2 (present, empty)
    request = Dataset()
    request.StudyInstanceUID = "1.2.826.0.1.3680043.10.1407.9"
    request.AccessionNumber = "A1"
    request.RequestedProcedureDescription = "Mammography"
    request.RequestedProcedureID = "RP1"
    request.PlacerOrderNumberImagingServiceRequest = ""
    request.FillerOrderNumberImagingServiceRequest = ""
    request.RequestedProcedureCodeSequence = Sequence(
        [_code("MGS1", "99LOCAL", "Symptomatic breast imaging")]
    )
    events = _report_with(
        PerformedProcedureCodeSequence=Sequence([]),
        ReferencedRequestSequence=Sequence([request]),
    )
    assert events[0].mammography_intent == "diagnostic"
    assert (
        events[0]
        .provenance["mammography_intent"]
        .startswith("(0032,1064) RequestedProcedureCodeSequence (MGS1, 99LOCAL)")
    )


def test_a_non_mammography_report_keeps_no_intent() -> None:
    from rdsr_builders import radiography_report

    ds = radiography_report()
    ds.PerformedProcedureCodeSequence = Sequence([_code("X1", "99LOCAL", "Screening chest")])
    events = read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="direct").events
    assert events and all(e.mammography_intent is None for e in events)
    assert all("mammography_intent" not in e.provenance for e in events)
