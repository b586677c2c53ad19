"""The header/report linking rule (ingest/linking.py module docstring)."""

from __future__ import annotations

from ingest_samples import PSEUDONYMISER, header, to_bytes
from pydicom.uid import generate_uid
from rdsr_builders import CtEvent, FluoroEvent, ct_report, fluoroscopy_report

from beamaudit.ingest import link_header_events_to_reports, read_bytes


def events_of(ds):
    return read_bytes(to_bytes(ds), pseudonymiser=PSEUDONYMISER, source="t").events


def test_header_with_the_reports_irradiation_event_uid_is_superseded() -> None:
    uid = generate_uid()
    report = ct_report([CtEvent(uid=uid)])
    image = header("1.2.840.10008.5.1.4.1.1.2", "CT", KVP="120", IrradiationEventUID=uid)
    headers = events_of(image)
    links = link_header_events_to_reports([*headers, *events_of(report)])
    assert [(link.event_key, link.rule) for link in links] == [(uid, "irradiation_event_uid")]
    assert links[0].report_sop_instance_uid == report.SOPInstanceUID


def test_header_in_a_study_with_a_report_of_the_same_family_is_superseded() -> None:
    study = generate_uid()
    report = fluoroscopy_report([FluoroEvent()], study_uid=study)
    image = header("1.2.840.10008.5.1.4.1.1.12.2", "RF", KVP="75", StudyInstanceUID=study)
    links = link_header_events_to_reports([*events_of(report), *events_of(image)])
    assert [(link.sop_instance_uid, link.rule) for link in links] == [
        (image.SOPInstanceUID, "study_modality_family")
    ]


def test_report_of_another_family_or_study_supersedes_nothing() -> None:
    study = generate_uid()
    report = ct_report(study_uid=study)
    radiograph = header(KVP="80", StudyInstanceUID=study)  # DX in a study whose report is CT
    elsewhere = header("1.2.840.10008.5.1.4.1.1.2", "CT", KVP="120")  # CT of another study
    assert (
        link_header_events_to_reports(
            [*events_of(report), *events_of(radiograph), *events_of(elsewhere)]
        )
        == []
    )


def test_report_events_are_never_superseded() -> None:
    report = fluoroscopy_report()
    assert link_header_events_to_reports(events_of(report) * 2) == []
