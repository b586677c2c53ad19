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
from typing import Any

from pydantic import BaseModel, Field, SecretStr, ValidationError, field_validator, model_validator
from pydantic_settings import (
    BaseSettings,
    PydanticBaseSettingsSource,
    SettingsConfigDict,
    TomlConfigSettingsSource,
)

from beamaudit.api.errors import ApiError

__all__ = [
    "ApiSettings",
    "ListenerSettings",
    "PullCredentials",
    "PullSettings",
    "Settings",
    "SettingsError",
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
    #: received objects decoded and stored at once
    max_objects_in_flight: int = Field(default=4, ge=1, le=100)
    #: largest object accepted (1 GiB: a breast tomosynthesis object fits; its pixels stay on disk)
    max_object_bytes: int = Field(default=1024 * 1024 * 1024, ge=1024)
    #: seconds a new connection has to ask for an association
    request_timeout_s: float = Field(default=10.0, gt=0, le=3600)
    #: seconds an association may stay silent
    idle_timeout_s: float = Field(default=30.0, gt=0, le=86400)
    #: seconds an association may last in all
    association_timeout_s: float = Field(default=3600.0, gt=0, le=7 * 86400)


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
    standard_weight_kg: float = Field(default=70.0, gt=0)
    standard_weight_window_kg: float = Field(default=10.0, ge=0)
    #: window of the cumulative skin dose of one patient's procedures, days (NCRP 168 asks for
    #: earlier procedures to be taken into account; 60 days: the issue's default, assumed)
    skin_dose_window_days: float = Field(default=60.0, gt=0, le=3650)

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
