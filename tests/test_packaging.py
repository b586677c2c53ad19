"""The built wheel holds the four stages under ``beamaudit`` and their package data."""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def wheel_names(tmp_path_factory) -> list[str]:
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [
            sys.executable,
            "-m",
            "build",
            "--wheel",
            "--no-isolation",
            "--skip-dependency-check",
            "--outdir",
            str(out),
            str(ROOT),
        ],
        check=True,
        capture_output=True,
        timeout=300,
    )
    (wheel,) = out.glob("beamaudit-*.whl")
    with zipfile.ZipFile(wheel) as zf:
        return zf.namelist()


@pytest.mark.slow
def test_wheel_maps_each_stage_into_the_namespace(wheel_names) -> None:
    for stage in ("ingest", "model", "api", "dashboards"):
        assert f"beamaudit/{stage}/__init__.py" in wheel_names
    # nothing generic lands at the top of site-packages
    tops = {name.split("/")[0] for name in wheel_names}
    assert tops <= {"beamaudit"} | {n for n in tops if n.endswith(".dist-info")}


@pytest.mark.slow
def test_wheel_carries_every_source_file_and_package_data(wheel_names) -> None:
    expected = set()
    for stage in ("ingest", "model", "api", "dashboards"):
        for path in (ROOT / stage).rglob("*"):
            if path.is_file() and "__pycache__" not in path.parts and path.suffix != ".pyc":
                expected.add(f"beamaudit/{stage}/{path.relative_to(ROOT / stage).as_posix()}")
    missing = sorted(expected - set(wheel_names))
    assert not missing, f"files left out of the wheel: {missing}"
