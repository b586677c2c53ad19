"""A C-STORE send of the demo that fails ends in one line naming the room and the reason.

The peer is a real pynetdicom SCP on loopback that aborts the association (A-ABORT, PS3.8
section 7.3) on the first C-STORE request it is sent, as a listener's time limits may on a
heavily loaded machine; the sender waits out its DIMSE timeout, and the next request finds no
association (pynetdicom raises RuntimeError), which the demo turns into its own one-line error.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

_DX = "1.2.840.10008.5.1.4.1.1.1.1"  # Digital X-Ray Image Storage - For Presentation (PS3.4 B.5)


def _file(folder: Path, n: int) -> Path:
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = _DX
    meta.MediaStorageSOPInstanceUID = generate_uid()
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID = _DX
    ds.SOPInstanceUID = meta.MediaStorageSOPInstanceUID
    ds.Modality = "DX"
    path = folder / f"object{n}.dcm"
    ds.save_as(path, enforce_file_format=True)
    return path


@pytest.fixture
def aborting_listener(monkeypatch: pytest.MonkeyPatch) -> Iterator[int]:
    """A C-STORE SCP on loopback that aborts the association on the first object (the sender
    notices when its wait for the response runs out: 1 s here)."""
    from pynetdicom import AE, evt

    import beamaudit.api.demo.run as demo_run

    monkeypatch.setattr(demo_run, "_DIMSE_TIMEOUT_S", 1.0)

    def abort(event: Any) -> int:
        event.assoc.abort()
        return 0x0000

    ae = AE(ae_title="BEAMAUDIT")
    ae.add_supported_context(_DX, [ExplicitVRLittleEndian])
    server = ae.start_server(("127.0.0.1", 0), block=False, evt_handlers=[(evt.EVT_C_STORE, abort)])
    try:
        yield server.socket.getsockname()[1]
    finally:
        server.shutdown()


def test_an_aborted_association_is_one_demo_error_naming_the_room(
    aborting_listener: int, tmp_path: Path
) -> None:
    from beamaudit.api.demo.errors import DemoError
    from beamaudit.api.demo.run import _send_all

    files = [_file(tmp_path, n) for n in range(3)]
    rooms = dict.fromkeys(files, "West DR 2")
    with pytest.raises(DemoError) as caught:
        _send_all(files, [aborting_listener], [_DX], rooms)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith("C-STORE from room West DR 2 failed at object")
    assert "the association was aborted" in message


# pynetdicom leaves the socket of a refused connection to the garbage collector
@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")
def test_a_refused_association_names_the_rooms(tmp_path: Path) -> None:
    import socket

    from beamaudit.api.demo.errors import DemoError
    from beamaudit.api.demo.run import _send_all

    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    files = [_file(tmp_path, 0)]
    with pytest.raises(DemoError, match=r"C-STORE from room\(s\) Fluoro 1 failed: .* refused"):
        _send_all(files, [port], [_DX], {files[0]: "Fluoro 1"})


def test_the_demo_command_says_it_in_one_line(
    aborting_listener: int, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: Any
) -> None:
    """The whole command: the send's error reaches the user as one line, exit 2, no traceback."""
    import beamaudit.api.demo.run as demo_run
    from beamaudit.api.cli import main

    files = [_file(tmp_path, n) for n in range(3)]

    def run_demo(*_args: Any, **_kwargs: Any) -> None:  # the C-STORE phase only
        demo_run._send_all(files, [aborting_listener], [_DX], dict.fromkeys(files, "West DR 2"))

    monkeypatch.setattr(demo_run, "run_demo", run_demo)
    monkeypatch.setenv("COLUMNS", "80")
    code = main(["demo", "--output", str(tmp_path / "out"), "--no-serve"])
    err = capsys.readouterr().err
    assert code == 2
    assert "Traceback" not in err and "RuntimeError" not in err
    # one line, however narrow the terminal (log lines above it when an earlier test set INFO)
    errors = [line for line in err.splitlines() if line.startswith("error:")]
    assert len(errors) == 1 and err.endswith(errors[0] + "\n"), err
    assert "C-STORE from room West DR 2 failed" in errors[0]
