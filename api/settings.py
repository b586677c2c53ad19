"""One typed settings object for the whole application.

Sources, lowest precedence first: defaults, a TOML file (``--config PATH`` or
``BEAMAUDIT_CONFIG``), ``BEAMAUDIT_*`` environment variables. Nothing is read
at import time: call :func:`load`.

Example ``beamaudit.toml``::

    database_url = "postgresql+psycopg://beamaudit@db.example.org/beamaudit"
    secret_key_path = "/etc/beamaudit/pseudonym.key"

    [listener]
    ae_title = "BEAMAUDIT"
    port = 11112
    allowed_calling_aets = ["DR_ROOM1", "CT_MAIN"]
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, Field, SecretStr, ValidationError, field_validator, model_validator
from pydantic_settings import (
    BaseSettings,
    PydanticBaseSettingsSource,
    SettingsConfigDict,
    TomlConfigSettingsSource,
)

from beamaudit.api.errors import ApiError

__all__ = [
    "OUTBOX_NAME",
    "ApiSettings",
    "ListenerSettings",
    "MetricsSettings",
    "NotifyRecipient",
    "NotifySettings",
    "PullCredentials",
    "PullSettings",
    "Settings",
    "SettingsError",
    "SmtpSettings",
    "WebhookSettings",
    "load",
]


class SettingsError(ApiError, ValueError):
    """The configuration cannot be used; the message says which setting and why."""


class ListenerSettings(BaseModel):
    """The C-STORE listener (``beamaudit listen``)."""

    ae_title: str = Field(default="BEAMAUDIT", min_length=1, max_length=16)
    host: str = "0.0.0.0"
    port: int = Field(default=11112, ge=1, le=65535)
    allowed_calling_aets: list[str] = Field(default_factory=list)
    #: associations at once (counted from the association request on)
    max_associations: int = Field(default=10, ge=1, le=1000)
    #: associations at once from one calling AE title
    max_associations_per_ae: int = Field(default=4, ge=1, le=1000)
    #: TCP connections at once, associated or not yet
    max_connections: int = Field(default=64, ge=1, le=10000)
    #: received objects decoded and spooled at once
    max_objects_in_flight: int = Field(default=4, ge=1, le=100)
    #: largest object accepted (1 GiB: a breast tomosynthesis object fits; its pixels stay on disk)
    max_object_bytes: int = Field(default=1024 * 1024 * 1024, ge=1024)
    #: seconds a new connection has to ask for an association
    request_timeout_s: float = Field(default=10.0, gt=0, le=3600)
    #: seconds an association may stay silent
    idle_timeout_s: float = Field(default=30.0, gt=0, le=86400)
    #: seconds an association may last in all
    association_timeout_s: float = Field(default=3600.0, gt=0, le=7 * 86400)
    #: seconds after a CT study's last image before its patient size (Dw) is computed from the
    #: images received (``beamaudit listen``; at its stop, every waiting study is sized)
    size_quiet_s: float = Field(default=30.0, gt=0, le=3600)
    #: folder of the listener's spool (objects acknowledged, not yet stored); empty: beside the
    #: SQLite database file, or beside the pseudonymisation key for PostgreSQL
    spool_dir: Path | None = None
    #: the spool's commits: "normal" keeps an acknowledged object through a crash of the
    #: process (as the SQLite store's own commits), "full" through a crash of the machine too
    spool_synchronous: Literal["normal", "full"] = "normal"
    #: objects waiting in the spool past which new ones are refused (0xA700, sent again later)
    max_spooled: int = Field(default=100_000, ge=1)


class ApiSettings(BaseModel):
    """The REST API and the pages."""

    max_upload_bytes: int = Field(default=512 * 1024 * 1024, gt=0)
    cors_origins: list[str] = Field(default_factory=list)  # empty: CORS off
    #: hours a browser session lasts after signing in
    session_hours: float = Field(default=12.0, gt=0, le=24 * 30)
    #: origins besides the service's own whose pages may make changes with the session cookie
    #: (a reverse proxy that rewrites Host); empty: only the service's own
    trusted_origins: list[str] = Field(default_factory=list)
    #: serve the interactive API docs at /api/v1/docs (assets served by the service itself)
    docs: bool = False
    #: largest CSV import (level sets, exam types, rules), its widest row and most columns
    max_csv_bytes: int = Field(default=8 * 1024 * 1024, ge=1024)
    max_csv_columns: int = Field(default=64, ge=2, le=10000)
    max_csv_row_chars: int = Field(default=16384, ge=256)
    #: threads per serving process for the routes' blocking work (the database, parsing): more
    #: than a few only make them wait on each other (one interpreter lock, one SQLite writer)
    worker_threads: int = Field(default=8, ge=1, le=200)


class PullCredentials(BaseModel):
    """A login for DICOMweb sources (``[pull.credentials.NAME]``), sent as HTTP Basic auth.

    Give ``password`` (better through the environment:
    ``BEAMAUDIT_PULL__CREDENTIALS__NAME__PASSWORD``) or ``password_file`` (a file readable by the
    service only, holding the password); never a password inside a URL.
    """

    username: str = Field(min_length=1)
    password: SecretStr | None = None
    password_file: Path | None = None

    @model_validator(mode="after")
    def _one_password(self) -> PullCredentials:
        if (self.password is None) == (self.password_file is None):
            raise ValueError("give exactly one of password and password_file")
        return self

    def secret(self) -> str:
        """The password (read from ``password_file`` when given that way).

        Raises
        ------
        SettingsError
            The password file cannot be read.
        """
        if self.password is not None:
            return self.password.get_secret_value()
        assert self.password_file is not None
        try:
            return self.password_file.read_text(encoding="utf-8").strip()
        except OSError as exc:
            raise SettingsError(
                f"cannot read the password file {self.password_file}: {exc.strerror}"
            ) from None


class PullSettings(BaseModel):
    """DICOMweb pulls (``beamaudit pull``, ``nightly``)."""

    #: logins by name; a source names its login with ``--credentials NAME``
    credentials: dict[str, PullCredentials] = Field(default_factory=dict)
    #: seconds to connect and between two reads of one answer
    request_timeout_s: float = Field(default=30.0, gt=0, le=3600)
    #: seconds one whole answer may take (a server dripping bytes is cut off then)
    answer_timeout_s: float = Field(default=120.0, gt=0, le=86400)
    #: seconds one pull of one source may take in all
    pull_timeout_s: float = Field(default=3600.0, gt=0, le=7 * 86400)
    #: largest answer read (a search or a series' metadata)
    max_answer_bytes: int = Field(default=64 * 1024 * 1024, ge=1024)
    #: attempts per request when the server answers 408, 429, 500, 502, 503 or 504
    retry_attempts: int = Field(default=3, ge=1, le=10)


def _read_secret(value: SecretStr | None, path: Path | None, what: str) -> str:
    """A secret given in the settings (or environment), else read from its file."""
    if value is not None:
        return value.get_secret_value()
    assert path is not None
    try:
        return path.read_text(encoding="utf-8").strip()
    except OSError as exc:
        raise SettingsError(f"cannot read the {what} file {path}: {exc.strerror}") from None


class SmtpSettings(BaseModel):
    """The mail server notifications go through (``[notify.smtp]``).

    ``security`` ``starttls`` (port 587, the default) upgrades the connection before logging in;
    ``tls`` speaks TLS from the start (port 465); ``none`` only for a relay on this machine. The
    password comes from ``password`` (better: ``BEAMAUDIT_NOTIFY__SMTP__PASSWORD``) or
    ``password_file``; it is never logged nor stored in a table.
    """

    host: str = Field(min_length=1)
    port: int = Field(default=587, ge=1, le=65535)
    security: Literal["starttls", "tls", "none"] = "starttls"
    username: str | None = None
    password: SecretStr | None = None
    password_file: Path | None = None
    #: the From address
    sender: str = Field(min_length=3)
    #: a CA certificate file to trust besides the system's (a hospital's own CA)
    ca_file: Path | None = None
    timeout_s: float = Field(default=30.0, gt=0, le=600)

    @model_validator(mode="after")
    def _login(self) -> SmtpSettings:
        if self.username and self.password is None and self.password_file is None:
            raise ValueError("a username needs password or password_file")
        if self.password is not None and self.password_file is not None:
            raise ValueError("give password or password_file, not both")
        if self.security == "none" and self.username:
            raise ValueError("security none would send the password in clear; use starttls")
        return self

    def secret(self) -> str | None:
        """The password (None without a login)."""
        if self.password is None and self.password_file is None:
            return None
        return _read_secret(self.password, self.password_file, "SMTP password")


class WebhookSettings(BaseModel):
    """A webhook a recipient's digests are POSTed to, signed with HMAC-SHA256.

    ``secret`` (better: ``BEAMAUDIT_NOTIFY__RECIPIENTS__NAME__WEBHOOK__SECRET``) or
    ``secret_file``; never logged nor stored in a table. The URL is HTTPS; plain HTTP only to a
    loopback address (a relay on this machine).
    """

    url: str = Field(min_length=8)
    secret: SecretStr | None = None
    secret_file: Path | None = None
    ca_file: Path | None = None
    timeout_s: float = Field(default=10.0, gt=0, le=600)

    @field_validator("url")
    @classmethod
    def _https(cls, value: str) -> str:
        from urllib.parse import urlsplit

        parts = urlsplit(value)
        loopback = parts.hostname in {"127.0.0.1", "::1", "localhost"}
        if parts.scheme != "https" and not (parts.scheme == "http" and loopback):
            raise ValueError("a webhook URL must be https:// (http:// only to a loopback address)")
        if parts.username or parts.password:
            raise ValueError("no login inside a webhook URL; the body is signed with the secret")
        return value

    @model_validator(mode="after")
    def _one_secret(self) -> WebhookSettings:
        if (self.secret is None) == (self.secret_file is None):
            raise ValueError("give exactly one of secret and secret_file")
        return self

    def key(self) -> bytes:
        """The HMAC key."""
        return _read_secret(self.secret, self.secret_file, "webhook secret").encode("utf-8")


class NotifyRecipient(BaseModel):
    """Who is told of new findings, how, and of which (``[notify.recipients.NAME]``)."""

    #: a word for the role (``physicist``, ``committee``, ``room lead``...), shown in the digest
    role: str | None = None
    emails: list[str] = Field(default_factory=list)
    webhook: WebhookSettings | None = None
    #: only these kinds of finding (empty: every kind)
    kinds: list[str] = Field(default_factory=list)
    #: the least severe finding sent
    min_severity: Literal["info", "warning", "action"] = "warning"
    #: only findings of these rooms (empty: every room, and findings about no room)
    rooms: list[str] = Field(default_factory=list)
    #: send a short "nothing new" digest when nothing is new
    quiet_digest: bool = False


#: the digest outbox's file name, in the store's folder unless ``notify.outbox`` names a file
OUTBOX_NAME = "beamaudit-outbox.jsonl"


class NotifySettings(BaseModel):
    """Notifications of new findings after ``nightly`` and after a review (``[notify]``).

    A recipient with e-mail addresses is mailed through ``smtp``; with a ``webhook``, POSTed to.
    Without a mail server (or without any recipient) the digest is written to ``outbox``, a file
    of JSON lines, so it is never lost.
    """

    enabled: bool = True
    #: the service's address as users reach it; links in the digest start with it
    public_base_url: str = "http://127.0.0.1:8000"
    smtp: SmtpSettings | None = None
    recipients: dict[str, NotifyRecipient] = Field(default_factory=dict)
    #: where digests go when no server is configured for them (default: beamaudit-outbox.jsonl
    #: in the store's folder, :meth:`Settings.store_folder`, not wherever a command was started)
    outbox: Path | None = None
    #: attempts per delivery, waiting backoff_s, 2 x backoff_s, ... between them
    attempts: int = Field(default=4, ge=1, le=10)
    backoff_s: float = Field(default=2.0, ge=0, le=600)
    #: findings listed in one digest (the rest counted, with a link)
    max_items: int = Field(default=50, ge=1, le=1000)


class MetricsSettings(BaseModel):
    """``/metrics`` in the Prometheus text format (``[metrics]``).

    Off by default. On, the service answers ``/metrics`` to an admin token; ``bind``
    (``host:port``) serves it instead, without token, on an address of its own (``serve``), and
    ``listener_bind`` the listener process's own (``listen``, with its association counts):
    bind those to a private interface a scraper reaches.
    """

    enabled: bool = False
    bind: str | None = None
    listener_bind: str | None = None

    @field_validator("bind", "listener_bind")
    @classmethod
    def _host_port(cls, value: str | None) -> str | None:
        if value is None:
            return None
        host, sep, port = value.rpartition(":")
        if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
            raise ValueError(f"{value!r} is not host:port")
        return value


class Settings(BaseSettings):
    """All of beamaudit's settings, validated when loaded."""

    model_config = SettingsConfigDict(
        env_prefix="BEAMAUDIT_", env_nested_delimiter="__", extra="forbid"
    )

    database_url: str = "sqlite:///beamaudit.db"
    secret_key_path: Path = Path("beamaudit-secret.key")
    listener: ListenerSettings = Field(default_factory=ListenerSettings)
    api: ApiSettings = Field(default_factory=ApiSettings)
    pull: PullSettings = Field(default_factory=PullSettings)
    notify: NotifySettings = Field(default_factory=NotifySettings)
    metrics: MetricsSettings = Field(default_factory=MetricsSettings)
    standard_weight_kg: float = Field(default=70.0, gt=0)
    standard_weight_window_kg: float = Field(default=10.0, ge=0)
    #: window of the cumulative skin dose of one patient's procedures, days (NCRP 168 asks for
    #: earlier procedures to be taken into account; 60 days: the issue's default, assumed)
    skin_dose_window_days: float = Field(default=60.0, gt=0, le=3650)
    #: an official coefficient table of the Dance method (CSV, the layout of
    #: ``beamaudit.model.dance_coefficients``) that takes precedence over the Monte Carlo's in
    #: every mean glandular dose the store keeps; None: the Monte Carlo's tables
    mammography_coefficients_file: Path | None = None
    #: edges (cm) of the water-equivalent-diameter bands adult CT groups are reviewed in by
    #: ``beamaudit review`` (empty: no size bands; no published edges: api/review/ct_size.py)
    ct_size_band_edges_cm: list[float] = Field(default_factory=list, max_length=50)

    @field_validator("database_url")
    @classmethod
    def _known_backend(cls, value: str) -> str:
        if not (value.startswith("sqlite") or value.startswith("postgresql")):
            raise ValueError("database_url must start with sqlite:/// or postgresql+psycopg://")
        if value.startswith("postgresql://") or value.startswith("postgres://"):
            value = "postgresql+psycopg://" + value.split("://", 1)[1]
        return value

    @property
    def backend(self) -> str:
        """``"sqlite"`` or ``"postgresql"``."""
        return "sqlite" if self.database_url.startswith("sqlite") else "postgresql"

    def store_folder(self) -> Path:
        """The folder of the service's own files by default (the listener's spool, the digest
        outbox): the SQLite database file's folder, else the pseudonymisation key's (a
        PostgreSQL store, an in-memory SQLite database)."""
        url = str(self.database_url)
        database = url.removeprefix("sqlite:///").split("?", 1)[0]
        if url.startswith("sqlite:///") and database and database != ":memory:":
            return Path(database).resolve().parent
        return Path(self.secret_key_path).resolve().parent

    @model_validator(mode="after")
    def _outbox_beside_the_store(self) -> Settings:
        if self.notify.outbox is None:
            self.notify.outbox = self.store_folder() / OUTBOX_NAME
        return self

    @classmethod
    def settings_customise_sources(
        cls,
        settings_cls: type[BaseSettings],
        init_settings: PydanticBaseSettingsSource,
        env_settings: PydanticBaseSettingsSource,
        dotenv_settings: PydanticBaseSettingsSource,
        file_secret_settings: PydanticBaseSettingsSource,
    ) -> tuple[PydanticBaseSettingsSource, ...]:
        toml_path = init_settings.init_kwargs.pop("_toml_path", None)  # type: ignore[attr-defined]
        sources: list[PydanticBaseSettingsSource] = [init_settings, env_settings]
        if toml_path is not None:
            sources.append(TomlConfigSettingsSource(settings_cls, toml_file=toml_path))
        return tuple(sources)


def load(config: Path | str | None = None, **overrides: Any) -> Settings:
    """Load and validate the settings.

    Parameters
    ----------
    config
        A TOML file; when ``None``, ``BEAMAUDIT_CONFIG`` names one if set.
    **overrides
        Values that win over every source (used by tests and the demo).

    Raises
    ------
    SettingsError
        The file is missing or not TOML, or a value is invalid.
    """
    path = Path(config) if config else None
    if path is None and os.environ.get("BEAMAUDIT_CONFIG"):
        path = Path(os.environ["BEAMAUDIT_CONFIG"])
    if path is not None:
        if not path.is_file():
            raise SettingsError(f"configuration file {path} does not exist")
        try:
            tomllib.loads(path.read_text(encoding="utf-8"))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise SettingsError(f"configuration file {path} is not valid TOML: {exc}") from None
    try:
        return Settings(_toml_path=path, **overrides)  # type: ignore[call-arg]
    except ValidationError as exc:
        problems = "; ".join(
            f"{'.'.join(str(p) for p in err['loc']) or 'settings'}: {err['msg']}"
            for err in exc.errors()
        )
        raise SettingsError(f"invalid settings: {problems}") from None
