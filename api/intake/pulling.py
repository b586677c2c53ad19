"""DICOMweb pulls into the store, with a watermark per source.

``pull_source`` resolves ``--since`` (a date, or ``last`` = the source's
watermark), pulls the instance metadata of the matching studies
(:func:`beamaudit.ingest.dicomweb.pull`, metadata only), parses and stores
each instance, records every unusable one as an ingest error, reconstructs the
new events, measures CT patients' size from the few chosen images' frames
(:mod:`beamaudit.api.intake.ct_sizing`, WADO-RS frames of those instances only), then
moves the source's watermark (held back to the oldest study
the server failed to deliver). Instances already stored are not even fetched.

A source's login is named, never stored: ``dicomweb_sources.credentials`` holds the name of a
``[pull.credentials.NAME]`` entry of the settings (user name and password, or a password file),
sent as HTTP Basic authentication (:func:`source_login`). A URL holding ``user:password@`` is
refused. The pull's time limits, answer cap and retries come from ``[pull]`` (:func:`pull_limits`).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from datetime import date
from typing import TYPE_CHECKING, Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.intake.ct_sizing import (
    CT_IMAGE_CLASSES,
    SizingSummary,
    StudySizer,
    is_ct_report,
    keep_frame_header,
)
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow
from beamaudit.ingest.errors import IngestError

if TYPE_CHECKING:
    from beamaudit.ingest.dicomweb import PullReport

__all__ = ["PullOutcome", "get_or_create_source", "pull_limits", "pull_source", "source_login"]


@dataclass
class PullOutcome:
    source: str
    since: date
    studies: int = 0
    instances: int = 0
    events: int = 0
    duplicates: int = 0
    skipped_known: int = 0
    errors: list[dict[str, str]] = field(default_factory=list)
    watermark: date | None = None
    #: what measuring CT patients' size did (``SizingSummary.as_dict``)
    ct_size: dict[str, Any] | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "source": self.source,
            "since": self.since.isoformat(),
            "studies": self.studies,
            "instances": self.instances,
            "events": self.events,
            "duplicates": self.duplicates,
            "skipped_known": self.skipped_known,
            "errors": self.errors,
            "watermark": self.watermark.isoformat() if self.watermark else None,
            **({"ct_size": self.ct_size} if self.ct_size is not None else {}),
        }


def source_login(settings: Any, name: str | None) -> tuple[str, str] | None:
    """The (user, password) of the login ``name`` in ``[pull.credentials]``; None for no name.

    Raises
    ------
    IngestError
        No login of that name in the settings, or its password file cannot be read.
    """
    from beamaudit.api.settings import SettingsError

    if not name:
        return None
    # names are matched without case: environment variables reach the settings lower-cased
    logins = {key.casefold(): value for key, value in settings.pull.credentials.items()}
    login = logins.get(name.casefold())
    if login is None:
        raise IngestError(
            "unreadable",
            f"no login named {name!r} in the settings (pull.credentials.{name}: username and "
            "password or password_file)",
        )
    try:
        return login.username, login.secret()
    except SettingsError as exc:
        raise IngestError("unreadable", str(exc)) from None


def pull_limits(settings: Any) -> Any:
    """The ``[pull]`` settings as :class:`beamaudit.ingest.dicomweb.PullLimits`."""
    from beamaudit.ingest.dicomweb import PullLimits

    p = settings.pull
    return PullLimits(
        request_timeout_s=p.request_timeout_s,
        answer_timeout_s=p.answer_timeout_s,
        pull_timeout_s=p.pull_timeout_s,
        max_answer_bytes=p.max_answer_bytes,
        retry_attempts=p.retry_attempts,
    )


def get_or_create_source(
    session: Session,
    url: str,
    *,
    name: str | None = None,
    modalities: list[str] | None = None,
    credentials: str | None = None,
) -> m.DicomwebSource:
    """The source row for ``url`` (made on first use, named after the URL); a login name given
    is kept on it."""
    row = session.scalar(select(m.DicomwebSource).where(m.DicomwebSource.url == url))
    if row is None:
        row = m.DicomwebSource(
            name=name or url, url=url, modalities=modalities or [], credentials=credentials
        )
        session.add(row)
        session.flush()
    elif credentials:
        row.credentials = credentials
    return row


def pull_source(
    sessions: sessionmaker[Session],
    *,
    url: str,
    since: str,
    modalities: list[str] | None,
    pseudonymiser: Any,
    until: date | None = None,
    settings: Any = None,
    credentials: str | None = None,
) -> PullOutcome:
    """Pull one DICOMweb source into the store (see the module docstring).

    ``settings`` gives the logins and limits (``[pull]``; defaults when None); ``credentials``
    names the source's login (kept on the source; else the one already kept is used).

    Raises
    ------
    IngestError
        ``--since`` cannot be resolved (``last`` before any pull, not a date), the URL holds a
        login, the login named is not in the settings, or the server cannot be searched.
    """
    from beamaudit.ingest.dicomweb import (
        DicomwebSource,
        PullLimits,
        pull,
        resolve_since,
    )
    from beamaudit.ingest.reader import ACCEPTED_SOP_CLASSES, read_dataset

    started = time.monotonic()
    client_source = DicomwebSource(url, limits=PullLimits())  # refuses a URL with a login
    with sessions.begin() as session:
        row = get_or_create_source(session, url, modalities=modalities, credentials=credentials)
        source_id, watermark, login_name = row.id, row.watermark_date, row.credentials
        mods = modalities or list(row.modalities or []) or None
    if settings is not None:
        client_source = DicomwebSource(
            url, auth=source_login(settings, login_name), limits=pull_limits(settings)
        )
    since_date = resolve_since(since, watermark)
    pipeline = Pipeline(sessions, completion=Completion())  # exam types and figures too
    outcome = PullOutcome(source=url, since=since_date)

    def known(uid: str) -> bool:
        with sessions() as s:
            return (
                s.scalar(
                    select(m.SourceObjectRow.id).where(m.SourceObjectRow.sop_instance_uid == uid)
                )
                is not None
            )

    sizer = StudySizer(sessions)

    def on_instance(ds: Any, wado_url: str) -> None:
        result = read_dataset(ds, pseudonymiser=pseudonymiser, source=wado_url)
        stored = pipeline.store(result, received_via="pull", received_from=wado_url)
        if stored.status == "stored":
            outcome.events += stored.events
            if result.source.sop_class_uid in CT_IMAGE_CLASSES:
                keep_frame_header(sizer, client_source, ds, wado_url)
            elif is_ct_report(result):  # its study sized again from the samples stored before
                sizer.add_report(result.source.study_instance_uid)
        elif stored.status == "duplicate":
            outcome.duplicates += 1
        else:
            raise IngestError(
                "bad_value", stored.reason or "conflicts with a stored object", wado_url
            )

    try:
        report = pull(
            client_source,
            since=since_date,
            until=until,
            modalities=mods,
            on_instance=on_instance,
            known_sop_instance_uids=known,
            sop_classes=set(ACCEPTED_SOP_CLASSES),
        )
    except IngestError as exc:
        # the source could not be searched: the failure is kept on the source (the admin page
        # and /metrics show it) and the watermark stays where it was
        _record_failed_pull(sessions, source_id, exc, time.monotonic() - started, watermark)
        raise
    sized = sizer.finish_all(received_via="pull")
    _record_pull(sessions, source_id, outcome, report, sized, watermark, started, pipeline)
    return outcome


def _record_pull(
    sessions: sessionmaker[Session],
    source_id: int,
    outcome: PullOutcome,
    report: PullReport,
    sized: SizingSummary,
    watermark: date | None,
    started: float,
    pipeline: Pipeline,
) -> None:
    """Complete ``outcome`` from the pull's report and the CT sizing, record what could not be
    used as ingest errors, and keep the pull on its source (watermark, time, report)."""
    from beamaudit.ingest.dicomweb import next_watermark

    outcome.ct_size = sized.as_dict()
    outcome.studies = report.studies
    outcome.instances = report.instances
    outcome.skipped_known = report.skipped_known
    outcome.errors = [{"source": p.source, "reason": p.reason} for p in report.errors]
    outcome.errors += [{"source": e.source or "", "reason": e.reason} for e in sized.errors]
    if report.errors:
        pipeline.record_errors(
            [(IngestError("unreadable", p.reason, p.source), p.source) for p in report.errors],
            received_via="pull",
        )
    with sessions.begin() as session:
        source = session.get(m.DicomwebSource, source_id)
        assert source is not None
        source.watermark_date = next_watermark(watermark, report)
        source.last_pull_at = utcnow()
        source.last_pull_report = outcome.as_dict() | {
            "warnings": len(report.warnings),
            "duration_s": round(time.monotonic() - started, 3),  # /metrics shows it
        }
        outcome.watermark = source.watermark_date
        source.last_pull_report["watermark"] = (
            source.watermark_date.isoformat() if source.watermark_date else None
        )


def _record_failed_pull(
    sessions: sessionmaker[Session],
    source_id: int,
    exc: IngestError,
    duration_s: float,
    watermark: date | None,
) -> None:
    """Keep a pull that failed as a whole on its source: when, why, and that nothing moved."""
    with sessions.begin() as session:
        source = session.get(m.DicomwebSource, source_id)
        if source is None:  # removed while the pull ran
            return
        source.last_pull_at = utcnow()
        source.last_pull_report = {
            "source": source.url,
            "failed": exc.reason,
            "events": 0,
            "errors": [{"source": exc.source or source.url, "reason": exc.reason}],
            "duration_s": round(duration_s, 3),
            "watermark": watermark.isoformat() if watermark else None,
        }
