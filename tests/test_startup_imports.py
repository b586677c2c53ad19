"""Commands start without the heavy libraries they do not use (issue #24, bench_startup.py).

``beamaudit levels list`` opens the store and lists rows: it needs SQLAlchemy, not pandas, SciPy
or pydicom, which the review core and the DICOM reader import when they are used.
"""

from __future__ import annotations

import subprocess
import sys

HEAVY = ("pandas", "scipy", "pydicom", "pynetdicom", "plotly", "alembic", "matplotlib")


def _imported_after(statement: str) -> list[str]:
    code = f"import sys\n{statement}\nprint(' '.join(m for m in {HEAVY!r} if m in sys.modules))\n"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return done.stdout.split()


def test_the_command_line_and_the_store_import_no_heavy_library() -> None:
    modules = "beamaudit.api.cli, beamaudit.api.cli._store, beamaudit.api.runs.record"
    assert _imported_after(f"import {modules}, beamaudit.api.logs") == []


def test_the_packages_load_their_parts_on_first_use() -> None:
    assert _imported_after("from beamaudit.api.review import ReviewError") == []
    assert "pydicom" in _imported_after("from beamaudit.ingest import read_file")
    assert "pandas" in _imported_after("from beamaudit.api.review import review")
