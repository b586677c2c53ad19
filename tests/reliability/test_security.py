"""What the service protects: tokens, upload limits, file names, CORS, who may send by C-STORE.

(The patient-data checks are in test_privacy.py.)
"""

from __future__ import annotations

import hashlib
import hmac
from pathlib import Path

import pytest
from api_support import make_api
from corpus import dx_header, encode
from peers import free_port, wait_for_tcp
from procs import beamaudit_process, counts, shared_store, wait_spool_drained
from pynetdicom import AE
from sqlalchemy import select

import beamaudit.api.store.auth as auth
from beamaudit.api.store import models as m
from beamaudit.ingest.sender import open_association

DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
EXPLICIT_LE = "1.2.840.10008.1.2.1"


def test_tokens_are_stored_only_as_their_sha256_and_compared_in_constant_time(
    store, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    with store.session_factory.begin() as session:
        _, token = auth.create_token(session, role="viewer", name="security test")
    with store.session_factory() as session:
        (row,) = session.scalars(select(m.ApiToken)).all()
        every_value = " ".join(str(getattr(row, c.key)) for c in m.ApiToken.__table__.columns)
    assert token not in every_value
    assert token.removeprefix(auth.TOKEN_PREFIX) not in every_value
    assert row.token_hash == hashlib.sha256(token.encode()).hexdigest()  # FIPS 180-4 SHA-256
    if store.backend == "sqlite":
        db = Path(store.url.removeprefix("sqlite:///"))
        raw = b"".join(p.read_bytes() for p in db.parent.glob(db.name + "*"))
        assert token.encode() not in raw
    compared: list[tuple[str, str]] = []
    constant_time = hmac.compare_digest

    def spy(a: str, b: str) -> bool:
        compared.append((a, b))
        return constant_time(a, b)

    monkeypatch.setattr(auth.hmac, "compare_digest", spy)
    with store.session_factory() as session:
        assert auth.authenticate(session, token) is not None
        assert auth.authenticate(session, token[:-1] + ("A" if token[-1] != "A" else "B")) is None
    assert compared and all(len(a) == len(b) == 64 for a, b in compared)


def test_uploads_over_the_limit_are_refused_and_store_nothing(store, tmp_path: Path) -> None:
    big = encode(dx_header("too-big", ProtocolName="P" * 6000))
    assert len(big) > 4096
    for api in make_api(store, tmp_path, api={"max_upload_bytes": 4096}):
        raw = api.post("/upload", content=big, headers={"Content-Type": "application/dicom"})
        assert raw.status_code == 413
        multipart = api.post("/upload", files=[("files", ("a.dcm", big, "application/dicom"))])
        assert multipart.status_code == 413
        small = encode(dx_header("small-enough"))
        assert len(small) < 4096
        ok = api.post("/upload", content=small, headers={"Content-Type": "application/dicom"})
        assert ok.status_code == 200
    with store.session_factory() as session:
        assert len(session.scalars(select(m.SourceObjectRow)).all()) == 1


@pytest.mark.parametrize(
    "name", ["../../escaped-by-name.dcm", "/tmp/escaped-by-name.dcm", "..\\..\\escaped-by-name"]
)
def test_upload_file_names_never_become_paths(
    store, tmp_path: Path, name: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    work = tmp_path / "work" / "deeper"
    work.mkdir(parents=True)
    monkeypatch.chdir(work)
    data = encode(dx_header(f"named-{name}"))
    for api in make_api(store, tmp_path):
        reply = api.post("/upload", files=[("files", (name, data, "application/dicom"))])
        assert reply.status_code == 200
        assert reply.json()["files"][0]["status"] == "stored"
    for root in (tmp_path, Path("/tmp")):
        assert not list(root.rglob("escaped-by-name*")), "a file was written under its name"


def test_cors_is_off_by_default(store, tmp_path: Path) -> None:
    for api in make_api(store, tmp_path):
        preflight = api.client.options(
            "/api/v1/events",
            headers={
                "Origin": "https://elsewhere.example",
                "Access-Control-Request-Method": "GET",
                "Access-Control-Request-Headers": "authorization",
            },
        )
        assert "access-control-allow-origin" not in preflight.headers
        reply = api.get("/events", headers={"Origin": "https://elsewhere.example"})
        assert reply.status_code == 200
        assert "access-control-allow-origin" not in reply.headers


@pytest.mark.slow
def test_listener_accepts_only_the_configured_calling_ae_titles(tmp_path: Path) -> None:
    port = free_port()
    with shared_store("sqlite", tmp_path) as store:
        args = ["listen", "--host", "127.0.0.1", "--port", str(port)]
        env = {"BEAMAUDIT_LISTENER__ALLOWED_CALLING_AETS": '["DR_ROOM1", "CT_MAIN"]'}
        with beamaudit_process(args, store, tmp_path / "listen.log", **env):
            assert wait_for_tcp(port, timeout_s=60)
            for calling, allowed in (("INTRUDER", False), ("DR_ROOM1", True)):
                ae = AE(ae_title=calling)
                ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
                assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
                assert assoc.is_established == allowed, calling
                if allowed:
                    assert assoc.send_c_store(dx_header("from-dr-room1")).Status == 0
                    assoc.release()
                else:
                    assert assoc.is_rejected
            wait_spool_drained(store, port)
        assert counts(store)["objects"] == 1


@pytest.mark.slow
def test_listener_serves_a_legitimate_sender_under_idle_connections_and_associations(
    tmp_path: Path,
) -> None:
    """10 bare TCP connections and 10 idle associations from an allowed AE title held open:
    the listener (``max_associations`` from the settings) still stores a third sender's object."""
    import socket

    port = free_port()
    with shared_store("sqlite", tmp_path) as store:
        args = ["listen", "--host", "127.0.0.1", "--port", str(port)]
        env = {
            "BEAMAUDIT_LISTENER__ALLOWED_CALLING_AETS": '["DR_ROOM1", "CT_MAIN"]',
            "BEAMAUDIT_LISTENER__MAX_ASSOCIATIONS": "10",
        }
        with beamaudit_process(args, store, tmp_path / "listen.log", **env):
            assert wait_for_tcp(port, timeout_s=60)
            bare = [socket.create_connection(("127.0.0.1", port)) for _ in range(10)]
            held = []
            for _ in range(10):
                ae = AE(ae_title="DR_ROOM1")
                ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
                held.append(open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT"))
            try:
                ae = AE(ae_title="CT_MAIN")
                ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
                assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
                assert assoc.is_established
                assert assoc.send_c_store(dx_header("legitimate-under-load")).Status == 0
                assoc.release()
            finally:
                for a in held:
                    if a.is_established:
                        a.release()
                for s in bare:
                    s.close()
            wait_spool_drained(store, port)
        assert counts(store)["objects"] == 1
