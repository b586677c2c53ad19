"""A DICOMweb pull: find studies by date and modality, fetch their instances' metadata.

The pull asks a PACS (any DICOMweb origin server) with QIDO-RS for the studies of a date range,
one search per modality (servers differ in how they honour a list of values), lists each study's
series and instances, and retrieves the instances' metadata with WADO-RS (PS3.18 sections 10.6
and 10.4): the attributes as DICOM JSON, never pixel data or other bulk data
(:mod:`beamaudit.ingest.dicom_json`).

Searches are sent without ``limit``/``offset``; a server that holds back results says so in a
``Warning`` header (PS3.18 6.7.1.2, as dicomweb-client reads it), and only then are further pages
asked for. Orthanc 1.10 with its DICOMweb plugin 1.7 mishandles ``offset`` and ``limit`` together
with ``ModalitiesInStudy`` (the same page again, or none), so blind paging would loop or lose
studies there.

The pull is a pure library function: the caller hands each instance to its parser and store
through ``on_instance`` and keeps the watermark (the newest study date pulled) per source.
:func:`next_watermark` and :func:`resolve_since` hold the logic of ``--since last``: it
re-queries the watermark date itself, because more studies of that date may reach the PACS
after a pull (late sends, a modality's queue). Instances seen before are skipped through
``known_sop_instance_uids`` (and storing is idempotent anyway), so re-querying costs a few
searches, never a duplicate.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Collection, Container, Iterable, Sequence
from dataclasses import dataclass, field
from datetime import date, datetime
from typing import Any, NamedTuple, TypeVar
from urllib.parse import urlsplit

import requests
from dicomweb_client import DICOMwebClient
from pydicom.dataset import Dataset
from requests.adapters import HTTPAdapter

from .dicom_json import all_values, dataset_from_metadata, first_value
from .errors import IngestError

__all__ = [
    "DOSE_REPORT_MODALITY",
    "DicomwebSource",
    "PullError",
    "PullLimits",
    "PullProblem",
    "PullReport",
    "next_watermark",
    "parse_study_date",
    "pull",
    "resolve_since",
]

_LOG = logging.getLogger(__name__)

# Radiation Dose SRs sit in series of Modality "SR" (PS3.3 C.17.1 SR Document Series), inside
# studies found by the modality of their images.
DOSE_REPORT_MODALITY = "SR"

# DICOM JSON keys are 8-digit upper-case hex tags (PS3.18 F.2.1.1).
_STUDY_INSTANCE_UID = "0020000D"
_SERIES_INSTANCE_UID = "0020000E"
_SOP_INSTANCE_UID = "00080018"
_SOP_CLASS_UID = "00080016"
_STUDY_DATE = "00080020"
_MODALITY = "00080060"
_MODALITIES_IN_STUDY = "00080061"

InstanceCallback = Callable[[Dataset, str], None]
KnownUids = Container[str] | Callable[[str], bool]


class PullError(IngestError):
    """The pull cannot go on: the server cannot be reached, refuses or garbles a study search,
    or a setting is unusable."""

    def __init__(self, reason: str, source: str | None = None) -> None:
        super().__init__("unreadable", reason, source)

    def __reduce__(self) -> tuple[Any, ...]:
        return (type(self), (self.reason, self.source))


class PullTimeout(PullError):
    """The pull's own time (``pull_timeout_s``) is up."""


class PullProblem(NamedTuple):
    """One thing a pull could not do, or found odd: where (a DICOMweb URL) and why."""

    source: str
    reason: str


@dataclass(slots=True)
class PullReport:
    """What a pull did.

    Attributes
    ----------
    source : str
        The DICOMweb root URL.
    since, until : date, date or None
        The study date range asked for (``until`` None: open-ended).
    studies, series : int
        Studies and series looked into.
    instances : int
        Instances handed to ``on_instance`` without error.
    skipped_known : int
        Instances not fetched because ``known_sop_instance_uids`` knew them.
    skipped_sop_class : int
        Instances not fetched because their SOP class is not among ``sop_classes``.
    errors : list of PullProblem
        What failed (a study that could not be listed, an instance whose metadata is unusable,
        an instance ``on_instance`` refused); the pull went on past each.
    warnings : list of PullProblem
        What was odd but not fatal (an attribute left out because it came as bulk data, a
        study the server returned outside the asked range).
    newest_study_date : date or None
        The newest study date among studies pulled completely.
    oldest_incomplete_study_date : date or None
        The oldest study date among studies the server did not deliver completely (not counting
        unusable instances, which will not improve); the watermark stops there.
    """

    source: str
    since: date
    until: date | None
    studies: int = 0
    series: int = 0
    instances: int = 0
    skipped_known: int = 0
    skipped_sop_class: int = 0
    errors: list[PullProblem] = field(default_factory=list)
    warnings: list[PullProblem] = field(default_factory=list)
    newest_study_date: date | None = None
    oldest_incomplete_study_date: date | None = None

    def _incomplete(self, day: date | None) -> None:
        if day is not None and (
            self.oldest_incomplete_study_date is None or day < self.oldest_incomplete_study_date
        ):
            self.oldest_incomplete_study_date = day

    def _complete(self, day: date | None) -> None:
        if day is not None and (self.newest_study_date is None or day > self.newest_study_date):
            self.newest_study_date = day


@dataclass(slots=True)
class _Search:
    results: list[dict[str, Any]]
    complete: bool
    warnings: list[str]


def _says_more_results(warning: str) -> bool:
    """Whether a Warning header says results were held back. PS3.18 6.7.1.2 (from memory):
    ``299 {service}: The number of results exceeded the maximum supported by the server.
    Additional results can be requested.``"""
    text = warning.lower()
    return "additional results" in text or ("exceeded" in text and "result" in text)


@dataclass(frozen=True, slots=True)
class PullLimits:
    """What one pull may cost, against a slow, huge or failing server.

    Attributes
    ----------
    request_timeout_s : float
        Seconds to connect, and to wait for each piece of an answer.
    answer_timeout_s : float
        Seconds one whole answer may take (a server dripping a byte every few seconds is cut
        off then).
    pull_timeout_s : float
        Seconds the whole pull may take; then it stops, says so, and the watermark stays at
        the first study not pulled.
    max_answer_bytes : int
        Largest answer read (a search result, a series' metadata); a larger one is refused
        as it arrives, never held whole.
    retry_attempts : int
        Attempts per request when the server answers 408, 429, 500, 502, 503 or 504, with
        1 s, 2 s, 4 s... between them; then the request fails with one line.
    """

    request_timeout_s: float = 30.0
    answer_timeout_s: float = 120.0
    pull_timeout_s: float = 3600.0
    max_answer_bytes: int = 64 * 1024 * 1024
    retry_attempts: int = 3

    def __post_init__(self) -> None:
        for name in ("request_timeout_s", "answer_timeout_s", "pull_timeout_s"):
            if getattr(self, name) <= 0:
                raise PullError(f"{name} must be positive, not {getattr(self, name)}")
        if self.max_answer_bytes < 1 or self.retry_attempts < 1:
            raise PullError("max_answer_bytes and retry_attempts must be at least 1")


#: statuses worth asking again (PS3.18 8.7.3 and RFC 9110: timeout, too many requests, server
#: error, bad gateway, unavailable, gateway timeout)
RETRIED_STATUSES = frozenset({408, 429, 500, 502, 503, 504})


class AnswerRefused(requests.RequestException):
    """An answer the pull will not read: too large, too slow, or from another origin."""


def origin(url: str) -> str:
    """``scheme://host:port`` of a URL (the port made explicit)."""
    parts = urlsplit(url)
    port = parts.port or (443 if parts.scheme == "https" else 80)
    return f"{parts.scheme}://{(parts.hostname or '').lower()}:{port}"


def without_login(url: str) -> str:
    """``url`` with any ``user:password@`` taken out (for messages about a refused URL)."""
    parts = urlsplit(url)
    if "@" not in parts.netloc:
        return url
    return parts._replace(netloc=parts.netloc.rsplit("@", 1)[1]).geturl()


class _BoundedAdapter(HTTPAdapter):
    """Transport that reads every answer in pieces, under a size cap and a whole-answer time
    limit, and sends nothing to another origin than the configured one (a redirect elsewhere
    is refused, so no credentials or queries follow it)."""

    def __init__(self, allowed_origin: str, limits: PullLimits) -> None:
        super().__init__(max_retries=0)
        self._origin = allowed_origin
        self._limits = limits

    def send(  # type: ignore[override]
        self, request: Any, stream: bool = False, **kwargs: Any
    ) -> Any:
        if origin(request.url) != self._origin:
            raise AnswerRefused(
                f"the server sent the pull to another origin ({origin(request.url)}); "
                "only the configured one is followed"
            )
        response = super().send(request, stream=True, **kwargs)
        cap = self._limits.max_answer_bytes
        declared = response.headers.get("Content-Length", "")
        if declared.isdigit() and int(declared) > cap:
            response.close()
            raise AnswerRefused(f"the answer is {declared} bytes, over max_answer_bytes ({cap})")
        deadline = time.monotonic() + self._limits.answer_timeout_s
        chunks: list[bytes] = []
        size = 0
        try:
            while True:
                chunk = response.raw.read1(65536, decode_content=True)
                if not chunk:
                    break
                size += len(chunk)
                if size > cap:
                    raise AnswerRefused(f"the answer passed max_answer_bytes ({cap} bytes)")
                if time.monotonic() > deadline:
                    raise AnswerRefused(
                        f"the answer took longer than answer_timeout_s "
                        f"({self._limits.answer_timeout_s:g} s)"
                    )
                chunks.append(chunk)
        except BaseException:
            response.close()
            raise
        response._content = b"".join(chunks)
        response._content_consumed = True
        return response


_T = TypeVar("_T")


class DicomwebSource:
    """A DICOMweb origin server to pull from.

    Parameters
    ----------
    url : str
        The service root (``http://pacs:8042/dicom-web``), under which ``/studies`` lives.
    session : requests.Session, optional
        A session carrying authentication, certificates or proxies; a plain one by default. A
        response hook is added to it (to read ``Warning`` headers).
    timeout_s : float
        Seconds to wait for each response.
    headers : dict of str, optional
        Extra request headers.
    retry_attempts : int, optional
        Overrides ``limits.retry_attempts`` (1 for none).
    max_pages : int
        Pages asked for at most per search when the server keeps saying more results remain.
    auth : (str, str), optional
        User name and password, sent as HTTP Basic authentication (RFC 7617): the login of a
        PACS is given here, from the settings, never inside the URL.
    limits : PullLimits, optional
        Time limits, answer size cap and retries (defaults: :class:`PullLimits`).

    Raises
    ------
    PullError
        Not an http(s) URL, a URL holding a login (``user:password@``), a bad setting.
    """

    def __init__(
        self,
        url: str,
        *,
        session: requests.Session | None = None,
        timeout_s: float | None = None,
        headers: dict[str, str] | None = None,
        retry_attempts: int | None = None,
        max_pages: int = 100,
        auth: tuple[str, str] | None = None,
        limits: PullLimits | None = None,
    ) -> None:
        if not url.startswith(("http://", "https://")):
            raise PullError(
                f"a DICOMweb URL starts with http:// or https://, not {without_login(url)!r}"
            )
        parts = urlsplit(url)
        if parts.username is not None or parts.password is not None:
            raise PullError(
                "the DICOMweb URL holds a login (user:password@); give the login as pull "
                "credentials in the settings (pull.credentials.NAME) instead, never in a URL",
                without_login(url),
            )
        limits = limits or PullLimits()
        if timeout_s is not None or retry_attempts is not None:
            try:
                limits = PullLimits(
                    request_timeout_s=limits.request_timeout_s if timeout_s is None else timeout_s,
                    answer_timeout_s=limits.answer_timeout_s,
                    pull_timeout_s=limits.pull_timeout_s,
                    max_answer_bytes=limits.max_answer_bytes,
                    retry_attempts=(
                        limits.retry_attempts if retry_attempts is None else retry_attempts
                    ),
                )
            except PullError as exc:
                raise PullError(exc.reason, url) from None
        if max_pages < 1:
            raise PullError("retry_attempts and max_pages must be at least 1", url)
        self.url = url.rstrip("/")
        self.limits = limits
        self.timeout_s = limits.request_timeout_s
        self.max_pages = max_pages
        self.deadline: float | None = None  # monotonic time the current pull must end by
        self._header_warnings: list[str] = []
        self._session = session if session is not None else requests.Session()
        self._session.max_redirects = 5
        if auth is not None:
            self._session.auth = requests.auth.HTTPBasicAuth(*auth)
        adapter = _BoundedAdapter(origin(self.url), limits)
        self._session.mount("http://", adapter)
        self._session.mount("https://", adapter)
        self._session.hooks.setdefault("response", []).append(self._note_warning)
        self._client = DICOMwebClient(
            url=self.url, session=self._session, headers=headers, timeout=limits.request_timeout_s
        )
        # retries are ours (_call): bounded, within the pull's time, ending in one clear line
        self._client.set_http_retry_params(retry=True, max_attempts=1, retriable_error_codes=())

    @property
    def client(self) -> DICOMwebClient:
        """The underlying dicomweb-client client."""
        return self._client

    def instance_url(self, study_uid: str, series_uid: str, sop_instance_uid: str) -> str:
        """The WADO-RS URL of one instance: the ``source`` given to ``on_instance``."""
        return f"{self.url}/studies/{study_uid}/series/{series_uid}/instances/{sop_instance_uid}"

    def call(self, function: Callable[..., _T], *args: Any, **kwargs: Any) -> _T:
        """``function(*args, **kwargs)`` (a request), asked again on a retried status
        (:data:`RETRIED_STATUSES`) up to ``limits.retry_attempts`` times with 1 s, 2 s, 4 s...
        between, never past the pull's deadline; the last failure propagates."""
        attempt = 1
        while True:
            self.check_deadline()
            try:
                return function(*args, **kwargs)
            except requests.HTTPError as exc:
                status = exc.response.status_code if exc.response is not None else None
                if status not in RETRIED_STATUSES or attempt >= self.limits.retry_attempts:
                    raise
                pause = min(2.0 ** (attempt - 1), 30.0)
                if self.deadline is not None and time.monotonic() + pause > self.deadline:
                    raise
                _LOG.info("%s answered %s; asking again in %g s", self.url, status, pause)
                time.sleep(pause)
                attempt += 1

    def check_deadline(self) -> None:
        """Raise :class:`PullTimeout` once the pull's ``pull_timeout_s`` has passed."""
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise PullTimeout(
                f"the pull took longer than pull_timeout_s ({self.limits.pull_timeout_s:g} s); "
                "what was not pulled is asked for next time",
                self.url,
            )

    def _note_warning(self, response: requests.Response, *args: Any, **kwargs: Any) -> None:
        warning = response.headers.get("Warning")
        if warning and response.url.startswith(self.url):
            self._header_warnings.append(warning)

    def search(self, level: str, *, key_tag: str, **kwargs: Any) -> _Search:
        """A QIDO-RS search (``level``: studies, series or instances) with dicomweb-client's
        keyword arguments; pages on only while the server says more results remain."""
        method = getattr(self._client, f"search_for_{level}")
        results: list[dict[str, Any]] = []
        seen: set[Any] = set()
        notes: list[str] = []
        offset = 0
        for _ in range(self.max_pages):
            self._header_warnings.clear()
            page = self.call(method, **kwargs, offset=offset or None)
            said = list(self._header_warnings)
            more = any(_says_more_results(w) for w in said)
            notes.extend(w for w in said if not _says_more_results(w))
            new = 0
            for result in page:
                key = first_value(result, key_tag)
                if key is not None and key in seen:
                    continue
                seen.add(key)
                results.append(result)
                new += 1
            if not more:
                return _Search(results, True, notes)
            if new == 0:
                break  # the server says "more" but pages no further
            offset += len(page)
        return _Search(results, False, notes)

    def __repr__(self) -> str:
        return f"DicomwebSource({self.url!r})"


# --------------------------------------------------------------------------- watermark logic


def parse_study_date(value: str) -> date:
    """A date as DICOM writes it (``20240115``) or ISO 8601 (``2024-01-15``).

    Raises
    ------
    PullError
        When the text is neither.
    """
    text = value.strip()
    for pattern in ("%Y%m%d", "%Y-%m-%d"):
        try:
            return datetime.strptime(text, pattern).date()
        except ValueError:
            continue
    raise PullError(f"{value!r} is not a date (YYYY-MM-DD or YYYYMMDD)")


def resolve_since(value: str, watermark: date | None) -> date:
    """The first study date to pull, from ``--since``: a date, or ``last``.

    ``last`` resolves to the watermark date itself, not the day after: studies of that date may
    have reached the server after the last pull, and already-stored ones are skipped anyway.

    Raises
    ------
    PullError
        ``last`` with no watermark (first pull from this source), or not a date.
    """
    if value.strip().lower() == "last":
        if watermark is None:
            raise PullError(
                "--since last: nothing was pulled from this source yet; "
                "give a first date (--since YYYY-MM-DD)"
            )
        return watermark
    return parse_study_date(value)


def next_watermark(
    previous: date | None, report: PullReport, *, today: date | None = None
) -> date | None:
    """The watermark to keep after a pull.

    The newest study date pulled completely, held back to the oldest study the server failed
    to deliver (so the next ``--since last`` asks for it again), never later than ``today``
    (a study dated in the future by a wrong modality clock must not hide the days before it)
    and never earlier than ``previous`` (a backfill of old dates does not move it back).

    Parameters
    ----------
    previous : date or None
        The watermark before the pull.
    report : PullReport
        What the pull did.
    today : date, optional
        The current date (default: the local date now).
    """
    candidate = report.newest_study_date
    failed = report.oldest_incomplete_study_date
    if failed is not None:
        candidate = failed if candidate is None else min(candidate, failed)
    if candidate is None:
        return previous
    candidate = min(candidate, today or date.today())  # pull() already leaves future dates out
    if previous is None:
        return candidate
    return max(previous, candidate)


# --------------------------------------------------------------------------- the pull

_SERVER_FAILURES = (requests.RequestException, ValueError)  # HTTP, transport, JSON, UID checks


@dataclass(slots=True)
class _Study:
    uid: str
    study_date: date | None


@dataclass(slots=True)
class _Pull:
    """The state of one pull."""

    source: DicomwebSource
    report: PullReport
    on_instance: InstanceCallback
    known: KnownUids | None
    sop_classes: Collection[str] | None
    series_modalities: set[str] | None

    def is_known(self, uid: str) -> bool:
        if self.known is None:
            return False
        if callable(self.known):
            return bool(self.known(uid))
        return uid in self.known


def _date_filter(since: date, until: date | None) -> str:
    """A DA range matching key (PS3.4 C.2.2.2.5.1): ``since-until`` or open-ended ``since-``."""
    return f"{since:%Y%m%d}-{'' if until is None else f'{until:%Y%m%d}'}"


def _study_date(result: dict[str, Any]) -> date | None:
    raw = first_value(result, _STUDY_DATE)
    if not isinstance(raw, str) or not raw:
        return None
    try:
        return parse_study_date(raw)
    except PullError:
        return None


def _find_studies(
    source: DicomwebSource,
    since: date,
    until: date | None,
    modalities: list[str] | None,
    report: PullReport,
) -> list[_Study]:
    found: dict[str, _Study] = {}
    ignored = 0
    searches: list[str | None] = list(modalities) if modalities else [None]
    for modality in searches:
        filters = {"StudyDate": _date_filter(since, until)}
        if modality is not None:
            filters["ModalitiesInStudy"] = modality
        try:
            search = source.search(
                "studies",
                key_tag=_STUDY_INSTANCE_UID,
                fields=["StudyDate", "ModalitiesInStudy"],
                search_filters=filters,
            )
        except _SERVER_FAILURES as exc:
            raise PullError(
                f"study search failed ({type(exc).__name__}: {exc})", source.url
            ) from exc
        report.warnings.extend(PullProblem(source.url, w) for w in search.warnings)
        if not search.complete:
            report.errors.append(
                PullProblem(
                    source.url,
                    f"the server held back studies of {filters['StudyDate']} "
                    f"{modality or ''} past paging".replace("  ", " "),
                )
            )
            report._incomplete(since)
        for result in search.results:
            uid = first_value(result, _STUDY_INSTANCE_UID)
            if not isinstance(uid, str) or not uid:
                report.warnings.append(PullProblem(source.url, "a study result has no UID"))
                continue
            study_date = _study_date(result)
            in_study = {str(m).upper() for m in all_values(result, _MODALITIES_IN_STUDY)}
            # a server that ignores a matching key returns too much: check again here
            if study_date is not None and (
                study_date < since or (until is not None and study_date > until)
            ):
                ignored += 1
                continue
            if modality is not None and in_study and modality not in in_study:
                ignored += 1
                continue
            if study_date is None:
                report.warnings.append(
                    PullProblem(f"{source.url}/studies/{uid}", "study has no usable Study Date")
                )
            found.setdefault(uid, _Study(uid, study_date))
    if ignored:
        report.warnings.append(
            PullProblem(
                source.url,
                f"the server returned {ignored} studies outside the asked dates or modalities "
                "(ignored)",
            )
        )
    return sorted(found.values(), key=lambda s: (s.study_date or date.min, s.uid))


def pull(
    source: DicomwebSource,
    *,
    since: date,
    until: date | None = None,
    modalities: Sequence[str] | None = None,
    on_instance: InstanceCallback,
    known_sop_instance_uids: KnownUids | None = None,
    sop_classes: Collection[str] | None = None,
) -> PullReport:
    """Pull the instance metadata of the studies of ``since``-``until`` from a DICOMweb server.

    Parameters
    ----------
    source : DicomwebSource
        The server.
    since : date
        First study date (inclusive); see :func:`resolve_since` for ``--since last``.
    until : date, optional
        Last study date (inclusive); open-ended when None.
    modalities : sequence of str, optional
        Modalities in study to search for (``["CT", "DX"]``), one search each; within a found
        study, series of these modalities and dose report series (``SR``) are pulled. All
        studies and all series when None.
    on_instance : callable(Dataset, str)
        Called with each instance's dataset (no pixel data, no file meta) and its WADO-RS URL.
        An :class:`~beamaudit.ingest.errors.IngestError` it raises is recorded in the report and
        the pull goes on; any other exception (a store that is down) ends the pull and
        propagates, so that no watermark is written past it.
    known_sop_instance_uids : container of str, or callable(str) -> bool, optional
        SOP Instance UIDs already stored: these are not even fetched.
    sop_classes : collection of str, optional
        SOP Class UIDs worth fetching; instances of other classes are skipped. All when None.

    Returns
    -------
    PullReport
        Counts, errors and warnings, and the study dates for :func:`next_watermark`.

    Raises
    ------
    PullError
        When a study search fails (server unreachable, an error status, garbled JSON): nothing
        was delivered then.
    """
    if until is not None and until < since:
        raise PullError(f"until {until} is before since {since}", source.url)
    wanted = None
    if modalities is not None:
        wanted = list(dict.fromkeys(m.strip().upper() for m in modalities if m.strip())) or None
    report = PullReport(source=source.url, since=since, until=until)
    started = date.today()  # the watermark never moves past the pull's own start
    source.deadline = time.monotonic() + source.limits.pull_timeout_s
    try:
        studies = _find_studies(source, since, until, wanted, report)
    except BaseException:
        source.deadline = None
        raise
    _LOG.info(
        "pull from %s: %d studies from %s to %s", source.url, len(studies), since, until or "now"
    )
    state = _Pull(
        source=source,
        report=report,
        on_instance=on_instance,
        known=known_sop_instance_uids,
        sop_classes=sop_classes,
        series_modalities=None if wanted is None else {*wanted, DOSE_REPORT_MODALITY},
    )
    future = 0
    try:
        for index, study in enumerate(studies):
            try:
                source.check_deadline()
                complete = _pull_study(state, study)
            except PullTimeout as exc:
                report.errors.append(PullProblem(source.url, exc.reason))
                for rest in studies[index:]:
                    report._incomplete(rest.study_date)
                break
            report.studies += 1
            if not complete:
                report._incomplete(study.study_date)
            elif study.study_date is not None and study.study_date > started:
                future += 1  # a wrong modality clock: pulled, but the watermark stays behind
            else:
                report._complete(study.study_date)
    finally:
        source.deadline = None
    if future:
        report.warnings.append(
            PullProblem(
                source.url,
                f"{future} studies are dated after today ({started}); the watermark does not "
                "follow them",
            )
        )
    _LOG.info(
        "pull from %s: %d instances delivered, %d already known, %d errors",
        source.url,
        report.instances,
        report.skipped_known,
        len(report.errors),
    )
    return report


def _pull_study(state: _Pull, study: _Study) -> bool:
    """Pull one study; False when the server failed somewhere in it."""
    where = f"{state.source.url}/studies/{study.uid}"
    try:
        search = state.source.search(
            "series",
            key_tag=_SERIES_INSTANCE_UID,
            study_instance_uid=study.uid,
            fields=["Modality"],
        )
    except _SERVER_FAILURES as exc:
        state.report.errors.append(
            PullProblem(where, f"series search failed ({type(exc).__name__})")
        )
        return False
    complete = search.complete
    if not complete:
        state.report.errors.append(PullProblem(where, "the server held back series past paging"))
    for series in search.results:
        series_uid = first_value(series, _SERIES_INSTANCE_UID)
        if not isinstance(series_uid, str) or not series_uid:
            state.report.warnings.append(PullProblem(where, "a series result has no UID"))
            continue
        modality = first_value(series, _MODALITY)
        if (
            state.series_modalities is not None
            and isinstance(modality, str)
            and modality.upper() not in state.series_modalities
        ):
            continue
        state.report.series += 1
        complete &= _pull_series(state, study.uid, series_uid)
    return complete


def _pull_series(state: _Pull, study_uid: str, series_uid: str) -> bool:
    """Pull the wanted instances of one series; False when the server failed."""
    report = state.report
    where = f"{state.source.url}/studies/{study_uid}/series/{series_uid}"
    try:
        search = state.source.search(
            "instances",
            key_tag=_SOP_INSTANCE_UID,
            study_instance_uid=study_uid,
            series_instance_uid=series_uid,
            fields=["SOPClassUID"],
        )
    except _SERVER_FAILURES as exc:
        report.errors.append(PullProblem(where, f"instance search failed ({type(exc).__name__})"))
        return False
    if not search.complete:
        report.errors.append(PullProblem(where, "the server held back instances past paging"))
    wanted: list[str] = []
    for instance in search.results:
        uid = first_value(instance, _SOP_INSTANCE_UID)
        if not isinstance(uid, str) or not uid:
            report.warnings.append(PullProblem(where, "an instance result has no UID"))
            continue
        sop_class = first_value(instance, _SOP_CLASS_UID)
        if (
            state.sop_classes is not None
            and isinstance(sop_class, str)
            and sop_class not in state.sop_classes
        ):
            report.skipped_sop_class += 1
            continue
        if state.is_known(uid):
            report.skipped_known += 1
            continue
        wanted.append(uid)
    if wanted:
        client = state.source.client
        try:
            call = state.source.call
            if len(wanted) == len(search.results):  # the whole series: one request
                metadata = call(client.retrieve_series_metadata, study_uid, series_uid)
            else:
                metadata = [
                    call(client.retrieve_instance_metadata, study_uid, series_uid, uid)
                    for uid in wanted
                ]
        except _SERVER_FAILURES as exc:
            report.errors.append(
                PullProblem(where, f"metadata retrieval failed ({type(exc).__name__})")
            )
            return False
        _deliver(state, study_uid, series_uid, metadata, set(wanted))
    return search.complete


def _deliver(
    state: _Pull, study_uid: str, series_uid: str, metadata: Iterable[Any], wanted: set[str]
) -> None:
    report = state.report
    for obj in metadata:
        uid = first_value(obj, _SOP_INSTANCE_UID) if isinstance(obj, dict) else None
        if isinstance(uid, str) and uid not in wanted:
            continue  # arrived in the series after it was listed: the next pull takes it
        url = state.source.instance_url(study_uid, series_uid, uid if isinstance(uid, str) else "?")
        try:
            dataset, warnings = dataset_from_metadata(obj)
            report.warnings.extend(PullProblem(url, text) for text in warnings)
            state.on_instance(dataset, url)
        except IngestError as exc:
            report.errors.append(PullProblem(url, f"{exc.reason} [{exc.code}]"))
            continue
        report.instances += 1
