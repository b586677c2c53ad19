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

from pydantic import BaseModel, Field, ValidationError, field_validator
from pydantic_settings import (
    BaseSettings,
    PydanticBaseSettingsSource,
    SettingsConfigDict,
    TomlConfigSettingsSource,
)

__all__ = ["ListenerSettings", "Settings", "SettingsError", "load"]


class SettingsError(ValueError):
    """The configuration cannot be used; the message says which setting and why."""


class ListenerSettings(BaseModel):
    """The C-STORE listener (``beamaudit listen``)."""

    ae_title: str = Field(default="BEAMAUDIT", min_length=1, max_length=16)
    host: str = "0.0.0.0"
    port: int = Field(default=11112, ge=1, le=65535)
    allowed_calling_aets: list[str] = Field(default_factory=list)


class ApiSettings(BaseModel):
    """The REST API and the pages."""

    max_upload_bytes: int = Field(default=512 * 1024 * 1024, gt=0)
    cors_origins: list[str] = Field(default_factory=list)  # empty: CORS off


class Settings(BaseSettings):
    """All of beamaudit's settings, validated when loaded."""

    model_config = SettingsConfigDict(
        env_prefix="BEAMAUDIT_", env_nested_delimiter="__", extra="forbid"
    )

    database_url: str = "sqlite:///beamaudit.db"
    secret_key_path: Path = Path("beamaudit-secret.key")
    listener: ListenerSettings = Field(default_factory=ListenerSettings)
    api: ApiSettings = Field(default_factory=ApiSettings)
    standard_weight_kg: float = Field(default=70.0, gt=0)
    standard_weight_window_kg: float = Field(default=10.0, ge=0)

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
