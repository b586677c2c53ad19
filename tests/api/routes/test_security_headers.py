"""Security headers on every answer; the API docs off by default, local assets and sign-in when on.

Before: no Content-Security-Policy, X-Frame-Options, nosniff or Cache-Control on any page, and
the docs page loaded its script from a public CDN and answered without a token.
"""

from __future__ import annotations

import re

import pytest
from api_support import make_api, validation_only

PAGES = ["/", "/flags", "/distributions", "/login", "/static/beamaudit.css", "/no-such-page"]
API = ["/api/v1/health", "/api/v1/rooms", "/api/v1/openapi.json", "/api/v1/no-such-route"]


@validation_only
@pytest.mark.parametrize("path", PAGES + API)
def test_every_answer_carries_the_security_headers(api, path: str) -> None:
    reply = api.client.get(path, headers=api.headers("viewer"), follow_redirects=False)
    csp = reply.headers["content-security-policy"]
    assert "default-src 'self'" in csp and "frame-ancestors 'none'" in csp
    assert "object-src 'none'" in csp
    assert not re.search(r"https?://", csp)  # no other origin may serve anything
    assert reply.headers["x-frame-options"] == "DENY"
    assert reply.headers["x-content-type-options"] == "nosniff"
    assert reply.headers["referrer-policy"] == "same-origin"
    expected = "max-age=3600" if path.startswith("/static/") else "no-store"
    assert reply.headers["cache-control"] == expected


@validation_only
def test_the_api_docs_are_off_by_default(api) -> None:
    assert api.client.get("/api/v1/docs", headers=api.headers("admin")).status_code == 404


@validation_only
def test_the_api_docs_when_on_need_a_sign_in_and_load_nothing_from_elsewhere(
    shared_store, tmp_path
) -> None:
    for api in make_api(shared_store, tmp_path, api={"docs": True}):
        anonymous = api.client.get("/api/v1/docs", follow_redirects=False)
        assert anonymous.status_code == 303 and anonymous.headers["location"].startswith("/login")
        page = api.client.get("/api/v1/docs", headers=api.headers("viewer"))
        assert page.status_code == 200
        sources = re.findall(r'(?:src|href)=["\']([^"\']+)', page.text)
        assert sources and not [s for s in sources if re.match(r"(https?:)?//", s)], sources
        for asset in ("/api/v1/docs/swagger-ui-bundle.js", "/api/v1/docs/swagger-ui.css"):
            assert asset in sources
            assert api.client.get(asset).status_code == 200
        assert api.client.get("/api/v1/docs/../../settings.py").status_code == 404
