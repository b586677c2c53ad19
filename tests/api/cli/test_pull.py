"""``beamaudit pull`` against Orthanc with its DICOMweb plugin (Debian orthanc, orthanc-dicomweb).

Orthanc is loaded through its REST API with pydicom's and pydicom-data's real
files (CT_small.dcm: StudyDate 20040119; RG1_UNCI.dcm: StudyDate 20040826, DAP
1.200 dGy·cm²) and a constructed dose report; the pull stores them, a second
``--since last`` pull stores nothing new.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from peers import orthanc_missing, require_peer, start_orthanc
from pydicom.data import get_testdata_file
from sqlalchemy import func, select

from beamaudit.api.cli import main
from beamaudit.api.store import make_engine, make_session_factory
from beamaudit.api.store import models as m

pytestmark = pytest.mark.peer


@pytest.fixture
def orthanc(tmp_path):
    reason = orthanc_missing()
    require_peer("Orthanc with DICOMweb", reason is None, reason or "")
    peer = start_orthanc(tmp_path / "orthanc")
    try:
        for name in ("CT_small.dcm", "RG1_UNCI.dcm", "MR_small.dcm"):
            peer.upload(Path(get_testdata_file(name)).read_bytes())
        yield peer
    finally:
        peer.stop()


def _count(db: Path, model) -> int:
    engine = make_engine(f"sqlite:///{db}")
    with make_session_factory(engine)() as s:
        n = s.scalar(select(func.count()).select_from(model))
    engine.dispose()
    return n


def test_pull_then_pull_last_stores_nothing_new(settings_env, orthanc, capsys) -> None:
    url = orthanc.dicomweb_url
    assert main(["pull", "--dicomweb", url, "--since", "2004-01-01", "--json"]) == 0
    first = json.loads(capsys.readouterr().out)
    assert first["events"] == 2  # the CT and the CR; the MR is skipped by SOP class
    assert first["watermark"] == "2004-08-26"  # newest study date pulled (RG1_UNCI)
    assert _count(settings_env, m.ExposureEventRow) == 2
    assert main(["pull", "--dicomweb", url, "--since", "last", "--json"]) == 0
    second = json.loads(capsys.readouterr().out)
    assert second["events"] == 0
    assert second["since"] == "2004-08-26"
    assert _count(settings_env, m.ExposureEventRow) == 2
    assert main(["sources", "list"]) == 0
    assert "2004-08-26" in capsys.readouterr().out


def test_pull_last_before_any_pull_is_a_usage_error(settings_env, orthanc, capsys) -> None:
    assert main(["pull", "--dicomweb", orthanc.dicomweb_url, "--since", "last"]) == 2
    assert "nothing was pulled from this source yet" in capsys.readouterr().err


def test_pull_from_an_unreachable_server_is_one_line(settings_env, capsys) -> None:
    from peers import free_port

    url = f"http://127.0.0.1:{free_port()}/dicom-web"
    code = main(["pull", "--dicomweb", url, "--since", "2024-01-01"])
    err = capsys.readouterr()
    assert code == 2
    assert "Traceback" not in err.err + err.out
