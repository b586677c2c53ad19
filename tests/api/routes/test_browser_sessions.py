"""Browser sessions and CSRF (SECURITY.md, "Browser sessions").

Before: the login page set the API token itself as the cookie, and the API accepted the cookie
for changes, so a page on another port of the same host made a signed-in physicist's browser
create a level set and upload a file. Now the cookie is a session of its own with an expiry,
signing out ends it, and a change made with it needs the session's CSRF token and the service's
own Origin. Tokens may expire and record their last use. Both backends.
"""

from __future__ import annotations

import re
from datetime import timedelta

from corpus import dx_header, encode
from sqlalchemy import select, update

from beamaudit.api.store import models as m
from beamaudit.api.store.auth import create_token
from beamaudit.api.store.base import utcnow

OWN = "http://testserver"
ELSEWHERE = "http://testserver:8081"  # another port of the same host: another origin
LEVELS = {
    "name": "planted by another page",
    "kind": "local",
    "version": "1",
    "effective_from": "2026-01-01",
    "levels": [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.1}],
}


def _sign_in(api, role: str = "physicist") -> str:
    """Sign in on the login page; returns the cookie the browser now holds."""
    reply = api.client.post(
        "/login", data={"token": api.tokens[role], "next": "/flags"}, follow_redirects=False
    )
    assert reply.status_code == 303, reply.text
    cookie = api.client.cookies.get("beamaudit_session")
    assert cookie
    return cookie


def _csrf(api) -> str:
    page = api.client.get("/flags")
    assert page.status_code == 200
    found = re.search(r'<meta name="csrf-token" content="([^"]+)"', page.text)
    assert found, "the page carries the session's CSRF token"
    return found.group(1)


def _count(api, model) -> int:
    with api.store.session_factory() as s:
        return len(s.scalars(select(model)).all())


def test_the_cookie_is_a_session_of_its_own_not_the_token(api) -> None:
    cookie = _sign_in(api)
    token = api.tokens["physicist"]
    assert cookie != token and token not in cookie
    with api.store.session_factory() as s:
        (row,) = s.scalars(select(m.BrowserSession)).all()
        assert cookie not in (row.session_hash, row.csrf_token)  # stored only as its hash
        assert row.expires_at - utcnow() <= timedelta(hours=12, minutes=1)
    assert api.get("/rooms", as_=None).status_code == 200  # the cookie authenticates reads
    api.client.cookies.clear()
    api.client.cookies.set("beamaudit_session", token)  # the token as a cookie: no longer
    assert api.get("/rooms", as_=None).status_code == 401
    api.client.cookies.clear()


def test_another_origin_cannot_change_anything_with_the_cookie(api) -> None:
    _sign_in(api)
    csrf = _csrf(api)
    upload = encode(dx_header("csrf-upload"))
    # what a form or script on another port sends: the cookie rides along, no header of ours
    forged = [
        ("POST", "/level-sets", {"json": LEVELS, "headers": {"Origin": ELSEWHERE}}),
        ("POST", "/upload", {"content": upload, "headers": {
            "Origin": ELSEWHERE, "Content-Type": "application/dicom"}}),
        # even with a stolen CSRF token, the origin must be ours
        ("POST", "/level-sets", {"json": LEVELS, "headers": {
            "Origin": ELSEWHERE, "X-CSRF-Token": csrf}}),
        # our origin but no token (a same-site form post)
        ("POST", "/level-sets", {"json": LEVELS, "headers": {"Origin": OWN}}),
        ("POST", "/level-sets", {"json": LEVELS, "headers": {
            "Origin": OWN, "X-CSRF-Token": "not-the-token"}}),
        # no Origin and no Referer at all
        ("POST", "/level-sets", {"json": LEVELS, "headers": {"X-CSRF-Token": csrf}}),
    ]  # fmt: skip
    for method, path, kw in forged:
        reply = api.request(method, path, as_=None, **kw)
        assert reply.status_code == 403, (path, kw.get("headers"), reply.text)
    assert _count(api, m.ReferenceLevelSetRow) == 0
    assert _count(api, m.SourceObjectRow) == 0
    # the service's own page, with its token: allowed
    ok = api.post("/level-sets", as_=None, json=LEVELS,
                  headers={"Origin": OWN, "X-CSRF-Token": csrf})  # fmt: skip
    assert ok.status_code == 201, ok.text
    referer = api.post("/upload", as_=None, content=upload,
                       headers={"Referer": OWN + "/flags", "X-CSRF-Token": csrf,
                                "Content-Type": "application/dicom"})  # fmt: skip
    assert referer.status_code == 200, referer.text
    api.client.cookies.clear()


def test_bearer_tokens_need_no_csrf_token(api) -> None:
    reply = api.post("/level-sets", json=LEVELS, headers={"Origin": ELSEWHERE})
    assert reply.status_code == 201  # no ambient credential: nothing to forge


def test_signing_out_ends_the_session_in_the_store(api) -> None:
    cookie = _sign_in(api)
    assert api.client.get("/logout", follow_redirects=False).status_code == 303
    api.client.cookies.set("beamaudit_session", cookie)  # a copy kept by an attacker
    assert api.get("/rooms", as_=None).status_code == 401
    assert api.client.get("/flags", follow_redirects=False).status_code == 303  # to /login
    with api.store.session_factory() as s:
        assert s.scalars(select(m.BrowserSession.ended_at)).one() is not None
    api.client.cookies.clear()


def test_an_expired_session_or_a_revoked_token_ends_the_cookie(api) -> None:
    _sign_in(api)
    with api.store.session_factory.begin() as s:
        s.execute(update(m.BrowserSession).values(expires_at=utcnow() - timedelta(seconds=1)))
    assert api.get("/rooms", as_=None).status_code == 401
    api.client.cookies.clear()
    _sign_in(api, "viewer")
    assert api.get("/reviews", as_=None).status_code == 200
    assert api.post(f"/tokens/{api.token_ids['viewer']}/revoke").status_code == 200
    assert api.get("/reviews", as_=None).status_code == 401
    api.client.cookies.clear()


def test_tokens_expire_and_record_their_last_use(api) -> None:
    with api.store.session_factory.begin() as s:
        _, soon = create_token(s, role="viewer", name="expires", actor="test",
                               expires_at=utcnow() + timedelta(hours=1))  # fmt: skip
        _, gone = create_token(s, role="viewer", name="expired", actor="test",
                               expires_at=utcnow() - timedelta(seconds=1))  # fmt: skip
    assert api.client.get("/api/v1/reviews", headers={"Authorization": f"Bearer {soon}"}
                          ).status_code == 200  # fmt: skip
    assert api.client.get("/api/v1/reviews", headers={"Authorization": f"Bearer {gone}"}
                          ).status_code == 401  # fmt: skip
    assert api.client.post("/login", data={"token": gone}).status_code == 401
    listed = {t["name"]: t for t in api.get("/tokens").json()}
    assert listed["expires"]["last_used_at"] is not None
    assert listed["expired"]["last_used_at"] is None
    assert listed["expires"]["expires_at"] is not None


def test_login_from_another_origin_is_refused(api) -> None:
    reply = api.client.post("/login", data={"token": api.tokens["viewer"]},
                            headers={"Origin": ELSEWHERE}, follow_redirects=False)  # fmt: skip
    assert reply.status_code == 403
    assert "beamaudit_session" not in reply.headers.get("set-cookie", "")
