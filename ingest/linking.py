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
      TID 10003) or ``"ct"`` (CT, TID 10013) (rule ``"study_modality_family"``);
      an event read without a family takes its modality's (CT: ``"ct"``,
      anything else: ``"projection"``).

3. Every other header event stands on its own (a study without a dose report,
   or whose report covers another modality family).

The function is pure: it decides from the events it is given and marks
nothing; the store (``beamaudit.api.pipeline``) gives it the stored events a
batch may link, its own and earlier ones, and records the decision. Uniqueness itself comes from the
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
from typing import Literal, Protocol

__all__ = [
    "HeaderLink",
    "LinkRule",
    "LinkableEvent",
    "link_header_events_to_reports",
    "modality_family_of",
    "report_covers",
]

LinkRule = Literal["irradiation_event_uid", "study_modality_family"]


class LinkableEvent(Protocol):
    """What the rule reads of an event: an :class:`~beamaudit.ingest.events.ExposureEvent`, or a
    stored event row with the same names."""

    @property
    def source_kind(self) -> str: ...
    @property
    def sop_instance_uid(self) -> str: ...
    @property
    def event_index(self) -> int: ...
    @property
    def event_key(self) -> str: ...
    @property
    def study_instance_uid(self) -> str | None: ...
    @property
    def modality(self) -> str | None: ...
    @property
    def modality_family(self) -> str | None: ...
    @property
    def irradiation_event_uid(self) -> str | None: ...


def _family(modality_family: str | None, modality: str | None) -> str:
    """The event's family, else its modality's: ``"ct"`` for CT, ``"projection"`` otherwise."""
    if modality_family:
        return modality_family
    return "ct" if modality == "CT" else "projection"


def modality_family_of(event: LinkableEvent) -> str:
    """``"ct"`` or ``"projection"``: the family the event was read as, else its modality's."""
    return _family(event.modality_family, event.modality)


def report_covers(report_modalities: Iterable[str | None], header_modality: str | None) -> bool:
    """Whether a dose report whose events have ``report_modalities`` covers a header's modality.

    Rule 2b by modality alone: a CT dose report (TID 10011) covers CT headers; a projection
    report (TID 10001) covers projection headers (CR, DX, MG, RF, XA); a report whose events
    name no modality is a projection report.
    """
    families = {_family(None, x) for x in report_modalities if x} or {"projection"}
    return _family(None, header_modality) in families


@dataclass(frozen=True, slots=True)
class HeaderLink:
    """One image-header event superseded by a dose report."""

    sop_instance_uid: str  # the image
    event_index: int
    event_key: str
    report_sop_instance_uid: str  # the dose report that supersedes it
    rule: LinkRule


def link_header_events_to_reports(events: Iterable[LinkableEvent]) -> list[HeaderLink]:
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
        if event.study_instance_uid:
            by_study_family.setdefault(
                (event.study_instance_uid, modality_family_of(event)), event.sop_instance_uid
            )
    links: list[HeaderLink] = []
    for event in all_events:
        if event.source_kind != "image_header":
            continue
        report: str | None = None
        rule: LinkRule | None = None
        if event.irradiation_event_uid and event.irradiation_event_uid in by_event_uid:
            report, rule = by_event_uid[event.irradiation_event_uid], "irradiation_event_uid"
        elif event.study_instance_uid:
            key = (event.study_instance_uid, modality_family_of(event))
            if key in by_study_family:
                report, rule = by_study_family[key], "study_modality_family"
        if report is not None and rule is not None:
            links.append(
                HeaderLink(event.sop_instance_uid, event.event_index, event.event_key, report, rule)
            )
    return links
