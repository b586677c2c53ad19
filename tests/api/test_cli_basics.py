"""The command line's frame: help, version, settings errors, ``db upgrade``."""

from __future__ import annotations

import subprocess
import sys

import pytest

from beamaudit import __version__
from beamaudit.api.cli import main


def test_version(capsys) -> None:
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"beamaudit {__version__}"


def test_help_lists_the_commands(capsys) -> None:
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for command in ("db", "serve"):
        assert command in out


@pytest.mark.parametrize(
    "argv", [["db", "--help"], ["db", "upgrade", "--help"], ["serve", "--help"]]
)
def test_every_command_has_help(argv, capsys) -> None:
    assert main(argv) == 0
    assert "Usage" in capsys.readouterr().out


def test_db_upgrade_creates_the_schema(settings_env, capsys) -> None:
    assert main(["db", "upgrade"]) == 0
    assert settings_env.exists()
    assert "revision" in capsys.readouterr().out


@pytest.mark.parametrize(
    "url",
    [
        "mysql://root@localhost/x",  # not a backend we support
        "postgresql+psycopg://nobody@127.0.0.1:1/none",  # nothing listens on port 1
        "sqlite:////nonexistent-dir/sub/beamaudit.db",  # folder does not exist
    ],
)
def test_bad_database_url_is_one_line_and_exit_2(url, monkeypatch, tmp_path) -> None:
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", url)
    proc = subprocess.run(
        [sys.executable, "-m", "beamaudit", "db", "upgrade"],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=60,
    )
    assert proc.returncode == 2
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("error:")
    assert "Traceback" not in proc.stderr


def test_missing_config_file_is_a_clear_error(tmp_path, capsys) -> None:
    assert main(["--config", str(tmp_path / "missing.toml"), "db", "upgrade"]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_config_file_sets_the_database(tmp_path, monkeypatch, capsys) -> None:
    monkeypatch.delenv("BEAMAUDIT_DATABASE_URL", raising=False)
    db = tmp_path / "from-config.db"
    cfg = tmp_path / "beamaudit.toml"
    cfg.write_text(f'database_url = "sqlite:///{db}"\n', encoding="utf-8")
    assert main(["--config", str(cfg), "db", "upgrade"]) == 0
    assert db.exists()


def test_an_error_of_any_stage_is_one_line_and_exit_2(monkeypatch, capsys) -> None:
    """The command line's last net: an error a command did not turn into words itself (any stage's
    root derives from BeamauditError) still reaches the user as one line, exit 2, no traceback."""
    import typer

    import beamaudit.api.cli as cli
    from beamaudit.model.errors import ModelError

    raising_app = typer.Typer()

    @raising_app.command("beam")
    def beam() -> None:
        raise ModelError("tube voltage 0 kV is outside 20-150 kV\n(second line)")

    @raising_app.command("other")
    def other() -> None:  # two commands: "beam" stays a subcommand
        pass

    monkeypatch.setattr(cli, "app", raising_app)
    assert cli.main(["beam"]) == 2
    err = capsys.readouterr().err
    assert err == "error: tube voltage 0 kV is outside 20-150 kV (second line)\n"
    assert "Traceback" not in err
