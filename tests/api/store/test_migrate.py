"""Opening a store already at head skips Alembic; anything else still goes through it."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from sqlalchemy import text

from beamaudit.api.store import make_engine
from beamaudit.api.store.migrate import _at_shipped_head, _shipped_head, head_revision, upgrade


def test_the_head_read_from_the_files_is_alembics() -> None:
    assert _shipped_head() == head_revision()


def test_an_empty_database_is_not_at_head_and_is_migrated(tmp_path: Path) -> None:
    engine = make_engine(f"sqlite:///{tmp_path / 'empty.db'}")
    assert not _at_shipped_head(engine)
    upgrade(engine)
    assert _at_shipped_head(engine)
    engine.dispose()


def test_a_database_behind_head_is_not_at_head(tmp_path: Path) -> None:
    engine = make_engine(f"sqlite:///{tmp_path / 'behind.db'}")
    upgrade(engine)
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = '0001'"))
    assert not _at_shipped_head(engine)
    engine.dispose()


def test_opening_a_store_at_head_does_not_import_alembic(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'head.db'}"
    engine = make_engine(url)
    upgrade(engine)
    engine.dispose()
    code = (
        "import sys\n"
        "from beamaudit.api.store import make_engine\n"
        "from beamaudit.api.store.migrate import upgrade\n"
        f"upgrade(make_engine({url!r}))\n"
        "print('alembic' in sys.modules)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"
