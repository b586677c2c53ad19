"""Every page in a real browser: Debian's Chromium, driven by playwright, on loopback.

The pages are rendered from the invented Kestrel Bay data and served by a tiny
stdlib HTTP server on 127.0.0.1 (a free port), which also serves
``/static/plotly.min.js`` from the installed plotly package and our style
sheet, as the API does. Each page must draw every plotly figure it holds and
log no console error; a screenshot of each lands in ``artifacts/screenshots/``.
Nothing is downloaded: playwright drives /usr/bin/chromium.
"""

from __future__ import annotations

import http.server
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from dashboards_demo import (
    FACILITY,
    METHOD,
    PERIOD,
    PERIODS,
    make_events,
    make_exam,
    make_flags,
    make_groups,
    make_history,
)
from peers import require_peer

from beamaudit.dashboards import (
    CAUTION,
    PageContext,
    render_committee_report,
    render_distributions,
    render_exam,
    render_flags,
    render_login,
    render_overview,
    render_room,
    static_files,
)

pytestmark = [pytest.mark.peer, pytest.mark.slow]

CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
SCREENSHOTS = Path(__file__).resolve().parents[2] / "artifacts" / "screenshots"
PAGE_TIMEOUT_MS = 15_000


def _pages() -> dict[str, str]:
    events = make_events()
    groups = make_groups(events)
    flags = make_flags()
    context = PageContext(facility=FACILITY, software_version="0.1.0", signed_in_as="a.physicist")
    return {
        "/": render_overview(groups, period=PERIOD, periods=PERIODS, open_flags=3, context=context),
        "/distributions": render_distributions(
            events, levels=groups, period=PERIOD, periods=PERIODS, context=context
        ),
        "/rooms/West%20DR%201": render_room(
            "West DR 1", make_history(), flags=flags, context=context
        ),
        "/exams/2.25.7311000070": render_exam(make_exam(), context=context),
        "/flags": render_flags(flags, context=context),
        "/login": render_login(error="That token was not accepted.", context=context),
        "/reports/2026-03": render_committee_report(
            groups,
            period=PERIOD,
            method=METHOD,
            software_version="0.1.0",
            events=events,
            flags=flags,
            facility=FACILITY,
        ),
    }


SHOT_NAMES = {
    "/": "overview",
    "/distributions": "distributions",
    "/rooms/West%20DR%201": "room",
    "/exams/2.25.7311000070": "exam",
    "/flags": "flags",
    "/login": "login",
    "/reports/2026-03": "report",
}


@dataclass
class _Site:
    base_url: str
    requests: list[str] = field(default_factory=list)


def _handler(pages: dict[str, bytes], files: dict[str, bytes], site: _Site) -> type:
    class Handler(http.server.BaseHTTPRequestHandler):
        def do_GET(self) -> None:
            path = self.path.split("?", 1)[0]
            site.requests.append(path)
            if path.startswith("/static/") and path[len("/static/") :] in files:
                name = path[len("/static/") :]
                body = files[name]
                kind = "text/css" if name.endswith(".css") else "text/javascript"
            elif path in pages:
                body, kind = pages[path], "text/html; charset=utf-8"
            else:
                self.send_error(404)
                return
            self.send_response(200)
            self.send_header("Content-Type", kind)
            if path.startswith("/static/"):
                self.send_header("Cache-Control", "max-age=600")  # one parse of plotly.js
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, format: str, *args: Any) -> None:
            pass  # keep the test output quiet

    return Handler


@pytest.fixture(scope="module")
def site() -> Iterator[_Site]:
    pages = {path: html.encode("utf-8") for path, html in _pages().items()}
    files = {name: path.read_bytes() for name, path in static_files().items()}
    holder = _Site(base_url="")
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), _handler(pages, files, holder))
    holder.base_url = f"http://127.0.0.1:{server.server_address[1]}"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield holder
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)


@pytest.fixture(scope="module")
def context() -> Iterator[Any]:
    """A playwright browser context in Debian's Chromium."""
    require_peer("Chromium", CHROMIUM.exists(), "apt-get install -y chromium")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        require_peer("playwright", False, "pip install -e '.[test]'")
        raise
    with sync_playwright() as pw:
        chromium = pw.chromium.launch(
            executable_path=str(CHROMIUM), headless=True, args=LAUNCH_ARGS
        )
        shared = chromium.new_context(viewport={"width": 1280, "height": 900})
        try:
            yield shared  # one context for every page: plotly.js is fetched and parsed once
        finally:
            shared.close()
            chromium.close()


@dataclass
class _Visit:
    page: Any
    errors: list[str]


def _visit(context: Any, url: str) -> _Visit:
    page = context.new_page()
    page.set_default_timeout(PAGE_TIMEOUT_MS)
    errors: list[str] = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(url, wait_until="load")
    return _Visit(page, errors)


@pytest.mark.parametrize("path", list(SHOT_NAMES), ids=list(SHOT_NAMES.values()))
def test_page_renders_its_figures_without_errors(context: Any, site: _Site, path: str) -> None:
    visit = _visit(context, site.base_url + path)
    page = visit.page
    try:
        expected = page.locator("div.figure").count()
        if expected:
            page.wait_for_function(
                "n => document.querySelectorAll('.js-plotly-plot .main-svg').length >= n",
                arg=expected,
            )
            for i in range(expected):
                figure = page.locator("div.figure").nth(i)
                assert figure.locator(".main-svg").count() >= 1, f"figure {i} on {path}"
                assert figure.locator("g.trace, g.heatmaplayer image").count() >= 1 or (
                    figure.locator(".annotation-text").count() >= 1
                ), f"figure {i} on {path} drew nothing"
        assert CAUTION in page.inner_text("p.caution")
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SCREENSHOTS / f"{SHOT_NAMES[path]}.png"), full_page=True)
        assert visit.errors == [], visit.errors
    finally:
        page.close()


def test_overview_table_sorts_on_click(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/").page
    try:
        header = page.locator("table.groups th", has_text="n (standard)")
        header.click()
        assert header.get_attribute("aria-sort") == "ascending"
        values = [
            float(v)
            for v in page.eval_on_selector_all(
                "table.groups tbody tr td:nth-child(4)", "cells => cells.map(c => c.dataset.value)"
            )
        ]
        assert values == sorted(values)
        header.click()
        assert header.get_attribute("aria-sort") == "descending"
        values = [
            float(v)
            for v in page.eval_on_selector_all(
                "table.groups tbody tr td:nth-child(4)", "cells => cells.map(c => c.dataset.value)"
            )
        ]
        assert values == sorted(values, reverse=True)
    finally:
        page.close()


def test_report_asks_for_nothing_else_and_prints(context: Any, site: _Site) -> None:
    site.requests.clear()
    visit = _visit(context, site.base_url + "/reports/2026-03")
    page = visit.page
    try:
        page.wait_for_selector(".js-plotly-plot .main-svg")
        assert site.requests == ["/reports/2026-03"]  # self-contained: no script, style, image
        page.emulate_media(media="print")
        assert page.is_visible("p.caution")
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SCREENSHOTS / "report-print.png"), full_page=True)
        pdf = page.pdf(format="A4", print_background=True)
        assert pdf.startswith(b"%PDF")
        (SCREENSHOTS / "report.pdf").write_bytes(pdf)
        assert visit.errors == []
    finally:
        page.close()
