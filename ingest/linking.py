"""Linking image-header events to dose reports, so no exposure is counted twice.

An irradiation can be described twice: by the headers of the images it made
and by the dose report of the study. The rule (applied by the caller before
anything is summed or reviewed):

1. **A study with a dose report takes its events from the report.** Report
   events are never superseded.
2. An image-header event is a ``superseded_by_report`` candidate when

   a. its Irradiation Event UID (0008,3010) equals the Irradiation Event UID
      (113769, DCM) of a report event (rule ``"irradiation_event_uid"``), or
   b. its study (Study Instance UID) has a dose report with at least one event
      of the same modality family, ``"projection"`` (CR, DX, MG, RF, XA,
      TID 10003) or ``"ct"`` (CT, TID 10013) (rule ``"study_modality_family"``).

3. Every other header event stands on its own (a study without a dose report,
   or whose report covers another modality family).

The function is pure: it decides from the events it is given and marks
nothing; the store records the decision. Uniqueness itself comes from the
keys: ``event_key`` (the Irradiation Event UID when present, otherwise
``"<SOP Instance UID>#<index>"``) and ``sop_instance_uid``; header and report
events of the same irradiation share the ``event_key`` when both carry the
UID, so the store must key on ``(event_key, source_kind)`` or apply this rule.
Not covered: a report filed in a study of its own (some vendors do this) only
links by rule 2a.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

from .events import ExposureEvent

__all__ = ["HeaderLink", "LinkRule", "link_header_events_to_reports"]

LinkRule = Literal["irradiation_event_uid", "study_modality_family"]


@dataclass(frozen=True, slots=True)
class HeaderLink:
    """One image-header event superseded by a dose report."""

    sop_instance_uid: str  # the image
    event_index: int
    event_key: str
    report_sop_instance_uid: str  # the dose report that supersedes it
    rule: LinkRule


def link_header_events_to_reports(events: Iterable[ExposureEvent]) -> list[HeaderLink]:
    """Which image-header events are superseded by a dose report (see module doc).

    Parameters
    ----------
    events
        Events of any sources (header and report events mixed, any studies).

    Returns
    -------
    list of HeaderLink
        One per superseded header event, in the order the events were given.
        When both rules apply, ``"irradiation_event_uid"`` is reported.
    """
    all_events = list(events)
    by_event_uid: dict[str, str] = {}
    by_study_family: dict[tuple[str, str], str] = {}
    for event in all_events:
        if event.source_kind != "rdsr":
            continue
        if event.irradiation_event_uid:
            by_event_uid.setdefault(event.irradiation_event_uid, event.sop_instance_uid)
        if event.study_instance_uid and event.modality_family:
            by_study_family.setdefault(
                (event.study_instance_uid, event.modality_family), event.sop_instance_uid
            )
    links: list[HeaderLink] = []
    for event in all_events:
        if event.source_kind != "image_header":
            continue
        report: str | None = None
        rule: LinkRule | None = None
        if event.irradiation_event_uid and event.irradiation_event_uid in by_event_uid:
            report, rule = by_event_uid[event.irradiation_event_uid], "irradiation_event_uid"
        elif event.study_instance_uid and event.modality_family:
            key = (event.study_instance_uid, event.modality_family)
            if key in by_study_family:
                report, rule = by_study_family[key], "study_modality_family"
        if report is not None and rule is not None:
            links.append(
                HeaderLink(event.sop_instance_uid, event.event_index, event.event_key, report, rule)
            )
    return links
