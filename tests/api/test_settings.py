"""Settings: defaults, TOML file, environment, validation."""

from __future__ import annotations

import pytest

from beamaudit.api.settings import SettingsError, load


def test_defaults(monkeypatch) -> None:
    monkeypatch.delenv("BEAMAUDIT_DATABASE_URL", raising=False)
    monkeypatch.delenv("BEAMAUDIT_CONFIG", raising=False)
    s = load()
    assert s.database_url == "sqlite:///beamaudit.db"
    assert s.backend == "sqlite"
    assert s.listener.ae_title == "BEAMAUDIT"
    assert s.listener.port == 11112
    assert s.api.cors_origins == []  # CORS off by default


def test_environment_wins_over_file(tmp_path, monkeypatch) -> None:
    cfg = tmp_path / "c.toml"
    cfg.write_text('database_url = "sqlite:///a.db"\n[listener]\nport = 104\n', encoding="utf-8")
    monkeypatch.setenv("BEAMAUDIT_LISTENER__PORT", "11113")
    monkeypatch.delenv("BEAMAUDIT_DATABASE_URL", raising=False)
    s = load(cfg)
    assert s.database_url == "sqlite:///a.db"
    assert s.listener.port == 11113


def test_plain_postgresql_url_gets_the_psycopg_driver(monkeypatch) -> None:
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", "postgresql://u@h/db")
    s = load()
    assert s.database_url == "postgresql+psycopg://u@h/db"
    assert s.backend == "postgresql"


def test_config_from_environment_variable(tmp_path, monkeypatch) -> None:
    cfg = tmp_path / "c.toml"
    cfg.write_text('[listener]\nae_title = "DOSECOLLECT"\n', encoding="utf-8")
    monkeypatch.setenv("BEAMAUDIT_CONFIG", str(cfg))
    assert load().listener.ae_title == "DOSECOLLECT"


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("database_url = 'oracle://x'", "database_url"),
        ("[listener]\nport = 70000", "listener.port"),
        ("unknown_setting = 1", "unknown_setting"),
        ("this is not toml", "not valid TOML"),
    ],
)
def test_bad_values_name_the_setting(tmp_path, monkeypatch, text, match) -> None:
    monkeypatch.delenv("BEAMAUDIT_DATABASE_URL", raising=False)
    cfg = tmp_path / "c.toml"
    cfg.write_text(text, encoding="utf-8")
    with pytest.raises(SettingsError, match=match):
        load(cfg)


def test_the_listeners_quiet_time_before_ct_sizing_is_a_setting(tmp_path, monkeypatch) -> None:
    monkeypatch.delenv("BEAMAUDIT_DATABASE_URL", raising=False)
    monkeypatch.delenv("BEAMAUDIT_CONFIG", raising=False)
    assert load().listener.size_quiet_s == 30.0
    cfg = tmp_path / "c.toml"
    cfg.write_text("[listener]\nsize_quiet_s = 5\n", encoding="utf-8")
    assert load(cfg).listener.size_quiet_s == 5.0
    cfg.write_text("[listener]\nsize_quiet_s = 0\n", encoding="utf-8")
    with pytest.raises(SettingsError, match=r"listener\.size_quiet_s"):
        load(cfg)


def test_the_digest_outbox_lies_beside_the_store_unless_set(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    for name in ("BEAMAUDIT_CONFIG", "BEAMAUDIT_DATABASE_URL", "BEAMAUDIT_NOTIFY__OUTBOX"):
        monkeypatch.delenv(name, raising=False)
    store = tmp_path / "data" / "dose.db"
    settings = load(database_url=f"sqlite:///{store}")
    assert settings.notify.outbox == store.parent / "beamaudit-outbox.jsonl"
    key = tmp_path / "keys" / "k.key"
    settings = load(
        database_url="postgresql+psycopg://postgres@127.0.0.1:5432/test", secret_key_path=key
    )
    assert settings.notify.outbox == key.parent / "beamaudit-outbox.jsonl"
    chosen = tmp_path / "digests.jsonl"
    assert load(notify={"outbox": chosen}).notify.outbox == chosen
