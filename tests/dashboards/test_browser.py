"""Every page in a real browser: Debian's Chromium, driven by playwright, on loopback.

The pages are rendered from the invented Kestrel Bay data and served by a tiny
stdlib HTTP server on 127.0.0.1 (a free port), which also serves
``/static/plotly.min.js`` from the installed plotly package and our style
sheet, as the API does, and answers the flags page's triage ``PATCH`` as the API
would (checking the CSRF header). Each page must draw every plotly figure it
holds, log no console error and fit its window; screenshots of each, at
1400 x 900 and 1920 x 1080 (whole page and first screen), land in
``artifacts/screenshots/``. Nothing is downloaded: playwright drives
/usr/bin/chromium.
"""

from __future__ import annotations

import contextlib
import http.server
import json
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from dashboards_demo import (
    EXAM_TYPES,
    FACILITY,
    METHOD,
    PERIOD,
    PERIODS,
    make_events,
    make_exam,
    make_flags,
    make_groups,
    make_history,
    make_ingest_errors,
    make_unmapped,
)
from peers import require_peer

from beamaudit.dashboards import (
    CAUTION,
    PageContext,
    attention_from_flags,
    render_committee_report,
    render_distributions,
    render_exam,
    render_flags,
    render_ingest_errors,
    render_levels,
    render_login,
    render_overview,
    render_room,
    render_unmapped,
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
#: the real service computes each page from its store (an exam page: every exposure's beam)
SERVICE_TIMEOUT_MS = 90_000


CSRF_TOKEN = "csrf-token-of-the-test-session"


def _pages() -> dict[str, str]:
    events = make_events()
    groups = make_groups(events)
    flags = make_flags()
    errors = make_ingest_errors()
    context = PageContext(
        facility=FACILITY,
        software_version="0.1.0",
        signed_in_as="a.physicist (physicist)",
        csrf_token=CSRF_TOKEN,
    )
    attention = attention_from_flags(
        [f for f in flags if f["period"] == PERIOD],
        ingest_errors=errors,
        exam_types=EXAM_TYPES,
        period=PERIOD,
    )
    return {
        "/": render_overview(
            groups, period=PERIOD, periods=PERIODS, attention=attention, open_flags=13,
            exam_types=EXAM_TYPES, context=context,
        ),
        "/distributions": render_distributions(
            events, levels=groups, period=PERIOD, periods=PERIODS, exam_types=EXAM_TYPES,
            context=context,
        ),
        "/distributions-enema": render_distributions(
            events, levels=groups, exam_type="fluoro_barium_enema", period=PERIOD,
            periods=PERIODS, exam_types=EXAM_TYPES, context=context,
        ),
        "/rooms/West%20DR%201": render_room(
            "West DR 1", make_history(), flags=flags, exam_types=EXAM_TYPES, context=context
        ),
        "/exams/2.25.7311000070": render_exam(make_exam(), exam_types=EXAM_TYPES, context=context),
        "/flags": render_flags(flags, can_triage=True, exam_types=EXAM_TYPES, context=context),
        "/unmapped": render_unmapped(
            make_unmapped(), period=PERIOD, periods=PERIODS, context=context
        ),
        "/ingest-errors": render_ingest_errors(errors, context=context),
        "/levels": render_levels(
            LEVEL_PROPOSALS, [], run_label="review run 41 of 2026-03", run_id=41,
            can_adopt=True, adopt_path="/api/v1/local-level-proposals/adopt",
            local_set_names=["Fernmoor local DRLs (invented)"], exam_types=EXAM_TYPES,
            context=context,
        ),
        "/login": render_login(error="That token was not accepted.", context=context),
        "/reports/2026-03": render_committee_report(
            groups, period=PERIOD, method=METHOD, software_version="0.1.0", events=events,
            flags=flags, attention=attention, exam_types=EXAM_TYPES, facility=FACILITY,
        ),
    }  # fmt: skip


#: invented site values of one run: a proposal for adults and one for a paediatric band
LEVEL_PROPOSALS = [
    {"site": FACILITY, "exam_type": exam, "patient_group": group, "clinical_indication": None,
     "quantity": "dap_gy_cm2", "unit": "Gy·cm²", "n_rooms": 11, "n_rooms_too_few_patients": 0,
     "n_patients": 330, "typical_value": typical, "typical_ci_low": 0.9 * typical,
     "typical_ci_high": 1.1 * typical, "proposal_status": "proposed",
     "proposed_local_drl": 1.2 * typical, "proposed_ci_low": typical, "proposed_ci_high": None,
     "min_rooms": 10, "local_level": 0.1 if group is None else None,
     "local_level_set": "Fernmoor local DRLs (invented)" if group is None else None}
    for exam, group, typical in (("chest_pa", None, 0.07), ("chest_pa", "weight_15_30kg", 0.02))
]  # fmt: skip


SHOT_NAMES = {
    "/": "overview",
    "/distributions": "distributions",
    "/distributions-enema": "distributions-enema",
    "/rooms/West%20DR%201": "room",
    "/exams/2.25.7311000070": "exam",
    "/flags": "flags",
    "/unmapped": "unmapped",
    "/ingest-errors": "ingest-errors",
    "/levels": "levels",
    "/login": "login",
    "/reports/2026-03": "report",
}


@dataclass
class _Site:
    base_url: str
    requests: list[str] = field(default_factory=list)
    #: triage requests the page sent: (path, X-CSRF-Token header, JSON body)
    patches: list[tuple[str, str, dict[str, Any]]] = field(default_factory=list)
    #: proposals adopted by the levels page: (path, X-CSRF-Token header, JSON body)
    posts: list[tuple[str, str, dict[str, Any]]] = field(default_factory=list)


def _triage_answer(path: str, body: dict[str, Any]) -> tuple[int, dict[str, Any]]:
    """What the API answers a triage (its rules: a note is needed to acknowledge or close)."""
    flag_id = path.rsplit("/", 1)[-1]
    if body.get("status") in ("acknowledged", "closed") and not (body.get("note") or "").strip():
        return 422, {"detail": [{"msg": "a note is needed to set a finding acknowledged"}]}
    return 200, {"id": int(flag_id), "review_run_id": 41, "status": body["status"],
                 "note": body.get("note"), "kind": "changepoint"}  # fmt: skip


def _handler(pages: dict[str, bytes], files: dict[str, bytes], site: _Site) -> type:
    class Handler(http.server.BaseHTTPRequestHandler):
        def do_GET(self) -> None:
            path = self.path.split("?", 1)[0]
            site.requests.append(self.path)
            if path.startswith("/static/") and path[len("/static/") :] in files:
                name = path[len("/static/") :]
                body = files[name]
                kind = "text/css" if name.endswith(".css") else "text/javascript"
            elif path in pages:
                body, kind = pages[path], "text/html; charset=utf-8"
            else:
                self.send_error(404)
                return
            self._send(200, body, kind, cache=path.startswith("/static/"))

        def do_PATCH(self) -> None:
            length = int(self.headers.get("Content-Length") or 0)
            body = json.loads(self.rfile.read(length) or b"{}")
            site.patches.append((self.path, self.headers.get("X-CSRF-Token", ""), body))
            if not self.path.startswith("/api/v1/reviews/41/flags/"):
                self.send_error(404)
                return
            if self.headers.get("X-CSRF-Token") != CSRF_TOKEN:
                status, answer = 403, {"detail": "a change made with the session cookie needs "
                                                 "the X-CSRF-Token header"}  # fmt: skip
            else:
                status, answer = _triage_answer(self.path, body)
            self._send(status, json.dumps(answer).encode(), "application/json")

        def do_POST(self) -> None:
            length = int(self.headers.get("Content-Length") or 0)
            body = json.loads(self.rfile.read(length) or b"{}")
            site.posts.append((self.path, self.headers.get("X-CSRF-Token", ""), body))
            answer = {"name": body.get("set_name"), "version": body.get("version"),
                      "effective_from": body.get("effective_from"),
                      "levels": body.get("choices") or []}  # fmt: skip
            self._send(201, json.dumps(answer).encode(), "application/json")

        def _send(self, status: int, body: bytes, kind: str, *, cache: bool = False) -> None:
            self.send_response(status)
            self.send_header("Content-Type", kind)
            if cache:
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
def chromium_browser() -> Iterator[Any]:
    """Debian's Chromium under playwright, one per module: the sync API allows one playwright at a
    time in a thread, so every context of the module comes from this browser."""
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
        try:
            yield chromium
        finally:
            chromium.close()


@pytest.fixture(scope="module")
def context(chromium_browser: Any) -> Iterator[Any]:
    """A playwright browser context in Debian's Chromium."""
    shared = chromium_browser.new_context(viewport={"width": 1400, "height": 900})
    try:
        yield shared  # one context for every page: plotly.js is fetched and parsed once
    finally:
        shared.close()


@dataclass
class _Visit:
    page: Any
    errors: list[str]


def _visit(
    context: Any, url: str, size: tuple[int, int] = (1400, 900), timeout_ms: int = PAGE_TIMEOUT_MS
) -> _Visit:
    page = context.new_page()
    page.set_viewport_size({"width": size[0], "height": size[1]})
    page.set_default_timeout(timeout_ms)
    errors: list[str] = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(url, wait_until="load")
    return _Visit(page, errors)


def _wait_for_figures(page: Any, path: str) -> None:
    expected = page.locator("div.figure").count()
    if not expected:
        return
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


#: the window sizes every page is looked at in: a laptop's and a desktop's
SIZES = ((1400, 900), (1920, 1080))


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
@pytest.mark.parametrize("path", list(SHOT_NAMES), ids=list(SHOT_NAMES.values()))
def test_page_renders_its_figures_without_errors(
    context: Any, site: _Site, path: str, size: tuple[int, int]
) -> None:
    visit = _visit(context, site.base_url + path, size)
    page = visit.page
    try:
        _wait_for_figures(page, path)
        assert CAUTION in page.inner_text("p.caution")
        # nothing wider than the window: no column cut off, no sideways scrolling of the page
        assert page.evaluate("document.documentElement.scrollWidth") <= size[0], path
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        name = f"{SHOT_NAMES[path]}-{size[0]}x{size[1]}"
        page.screenshot(path=str(SCREENSHOTS / f"{name}.png"), full_page=True)
        page.screenshot(path=str(SCREENSHOTS / f"{name}-first-screen.png"))
        assert visit.errors == [], visit.errors
    finally:
        page.close()


def test_the_first_screen_names_the_months_main_findings(context: Any, site: _Site) -> None:
    # a committee member reads the planted DAP-meter fault, the doubled dose and the 187 Gy·cm²
    # enema without scrolling a 1400 x 900 window
    page = _visit(context, site.base_url + "/").page
    try:
        wanted = (
            "West DR 1: reported DAP 1.35 × the reconstruction",
            "Abdomen AP in West DR 2: monthly median up 2.1 ×",
            "Barium enema in Fluoro 1: one examination at DAP 187 Gy·cm²",
        )
        for words in wanted:
            line = page.locator("ol.attention-list a.headline", has_text=words)
            assert line.count() == 1, words
            box = line.bounding_box()
            assert box is not None and box["y"] + box["height"] <= 900, (words, box)
        first = page.locator("ol.attention-list li").first.bounding_box()
        heatmap = page.locator("#overview-heatmap").bounding_box()
        assert first is not None and heatmap is not None and first["y"] < heatmap["y"]
    finally:
        page.close()


def test_the_overview_uses_the_whole_window(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/", (1920, 1080)).page
    try:
        width = page.evaluate("document.querySelector('main').getBoundingClientRect().width")
        assert width > 1800  # no column of 1280 px in a wide window
        _wait_for_figures(page, "/")
        heat = page.locator("#overview-heatmap .main-svg").first.bounding_box()
        assert heat is not None and heat["width"] > 1700
    finally:
        page.close()


def test_heatmap_cells_carry_their_words(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/").page
    try:
        _wait_for_figures(page, "/")
        texts = page.eval_on_selector_all(
            "#overview-heatmap text", "nodes => nodes.map(n => n.textContent)"
        )
        assert any(t.startswith("▲") and t.endswith("×") for t in texts)
        assert "○ too few" in texts
        assert "Median ÷ level" in texts  # the colour bar's title, without "(1)"
    finally:
        page.close()


def test_distribution_legend_shows_the_points_symbols(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/distributions").page
    try:
        _wait_for_figures(page, "/distributions")
        legend = page.locator("g.legend")
        assert legend.locator("text", has_text="Standard-size patients").count() == 1
        assert legend.locator("path.scatterpts").count() >= 2  # the circle and the diamond
        assert legend.locator("path.legendbox").count() == 0  # not a box's square
    finally:
        page.close()


def test_choosing_another_examination_opens_its_own_chart(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/distributions").page
    try:
        site.requests.clear()
        with page.expect_navigation():
            page.select_option("select[name=exam_type]", "ct_head")
        sent = [r for r in site.requests if r.startswith("/distributions?")]
        assert sent and "exam_type=ct_head" in sent[-1]
        assert "quantity=" not in sent[-1]  # the new examination takes its own quantity
    finally:
        page.close()


def _open_triage(page: Any, flag_id: str) -> Any:
    row = page.locator(f"tr#flag-{flag_id}")
    row.locator("details.triage summary").click()
    return row


def test_a_physicist_acknowledges_a_finding_with_a_note(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/flags").page
    try:
        site.patches.clear()
        row = _open_triage(page, "105")
        row.locator("textarea[name=note]").fill("AEC dose level raised by the vendor; recalled")
        row.locator("form.triage-form button").click()
        page.wait_for_function(
            "() => document.querySelector('tr#flag-105 .flag-status').textContent === "
            "'Acknowledged'"
        )
        assert site.patches == [
            (
                "/api/v1/reviews/41/flags/105",
                CSRF_TOKEN,
                {"status": "acknowledged", "note": "AEC dose level raised by the vendor; recalled"},
            )
        ]
        assert "Saved: Acknowledged." in row.locator(".triage-result").inner_text()
        assert "AEC dose level raised" in row.locator(".note-text").inner_text()
        assert row.locator("input[value=acknowledged]").is_disabled()
        assert row.get_attribute("class") == "flag-acknowledged"
    finally:
        page.close()


def test_triage_without_a_note_is_not_sent(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/flags").page
    try:
        site.patches.clear()
        row = _open_triage(page, "106")
        row.locator("input[value=closed]").check()
        row.locator("form.triage-form button").click()
        assert "Say why in the note" in row.locator(".triage-result").inner_text()
        assert site.patches == []
        assert row.locator(".flag-status").inner_text() == "Open"
    finally:
        page.close()


def test_a_refused_triage_says_why(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/flags").page
    try:
        page.evaluate(
            "document.querySelector('meta[name=csrf-token]').setAttribute('content', 'stale')"
        )
        row = _open_triage(page, "104")
        row.locator("textarea[name=note]").fill("DAP chamber recalibrated on 2026-04-02")
        row.locator("form.triage-form button").click()
        result = row.locator(".triage-result")
        page.wait_for_function(
            "el => el.textContent.includes('X-CSRF-Token')", arg=result.element_handle()
        )
        assert row.locator(".flag-status").inner_text() == "Open"
    finally:
        page.close()


def test_a_physicist_adopts_a_ticked_proposal(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/levels").page
    try:
        site.posts.clear()
        page.locator("input[name=choice]").nth(1).check()
        page.fill("input[name=version]", "2026-2")
        page.fill("input[name=effective_from]", "2026-05-01")
        page.fill("input[name=source]", "dose committee, minute 12")
        page.locator("fieldset.adopt button").click()
        result = page.locator(".adopt-result")
        page.wait_for_function(
            "el => el.textContent.startsWith('Stored')", arg=result.element_handle()
        )
        ((path, token, body),) = site.posts
        assert (path, token) == ("/api/v1/local-level-proposals/adopt", CSRF_TOKEN)
        assert body["run_id"] == 41 and body["version"] == "2026-2"
        assert body["choices"] == [
            {"exam_type": "chest_pa", "quantity": "dap_gy_cm2",
             "patient_group": "weight_15_30kg", "clinical_indication": ""}
        ]  # fmt: skip
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


def test_report_tables_keep_every_column_on_screen(context: Any, site: _Site) -> None:
    page = _visit(context, site.base_url + "/reports/2026-03").page
    try:
        main = page.locator("main").bounding_box()
        assert main is not None
        for i in range(page.locator("main table").count()):
            box = page.locator("main table").nth(i).bounding_box()
            assert box is not None and box["x"] + box["width"] <= main["x"] + main["width"] + 1
        links = page.locator("nav a").evaluate_all("nodes => nodes.map(n => n.textContent)")
        assert links == ["Overview of 2026-03", "Distributions", "Flags of 2026-03"]
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
        assert not page.is_visible("nav")  # the links back are for the screen
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SCREENSHOTS / "report-print.png"), full_page=True)
        pdf = page.pdf(format="A4", print_background=True)
        assert pdf.startswith(b"%PDF")
        (SCREENSHOTS / "report.pdf").write_bytes(pdf)
        assert visit.errors == []
    finally:
        page.close()


# ------------------------------------------------------------------ the real service on the demo
#
# ``beamaudit demo`` makes its invented hospital's database (DICOM files through the folder scan
# and C-STORE, every month reviewed); the API serves it on loopback, a physicist signs in on the
# login page, and every page is looked at as a committee member would. BEAMAUDIT_TEST_DEMO_DIR
# may name the folder of an earlier ``beamaudit demo --no-serve`` run, to look at that one.


@dataclass
class _Demo:
    base_url: str
    physicist: str
    viewer: str
    url: str


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def demo(request: pytest.FixtureRequest) -> Iterator[_Demo]:
    """The session's demo build (``demo_build``), served (under ``pytest -n`` this module runs in
    the worker of the test of the build's report: ``XDIST_GROUPS`` in ``tests/conftest.py``)."""
    import os
    import time

    import uvicorn

    from beamaudit.api.settings import load
    from beamaudit.api.store import make_engine, make_session_factory
    from beamaudit.api.store.auth import create_token
    from beamaudit.api.web.app import create_app

    given = os.environ.get("BEAMAUDIT_TEST_DEMO_DIR")
    if given:
        folder = Path(given)
    else:
        build = request.getfixturevalue("demo_build")
        assert build.code == 0, "the demo did not find what it planted"
        folder = build.folder
    url = f"sqlite:///{(folder / 'beamaudit-demo.db').resolve()}"
    engine = make_engine(url)
    with make_session_factory(engine).begin() as session:
        _, physicist = create_token(session, role="physicist", name="committee physicist",
                                    actor="test")  # fmt: skip
        _, viewer = create_token(session, role="viewer", name="committee member", actor="test")
    port = _free_port()
    server = uvicorn.Server(
        uvicorn.Config(create_app(load(database_url=url), engine=engine), host="127.0.0.1",
                       port=port, log_level="warning")
    )  # fmt: skip
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started
    try:
        yield _Demo(f"http://127.0.0.1:{port}", physicist, viewer, url)
    finally:
        server.should_exit = True
        thread.join(timeout=10)
        engine.dispose()


@pytest.fixture(scope="module")
def signed_in(demo: _Demo, chromium_browser: Any) -> Iterator[Any]:
    """A browser context signed in as a physicist on the demo's login page (a session cookie)."""
    shared = chromium_browser.new_context(viewport={"width": 1400, "height": 900})
    page = shared.new_page()
    page.goto(demo.base_url + "/login")
    page.fill("input[name=token]", demo.physicist)
    page.locator("form button[type=submit]").click()
    page.wait_for_url(demo.base_url + "/")
    page.close()
    try:
        yield shared
    finally:
        shared.close()


def _demo_paths(demo: _Demo) -> dict[str, str]:
    """Every page of the demo, by screenshot name (the exam: a radiograph with a flag)."""
    import re
    import urllib.request

    request = urllib.request.Request(
        demo.base_url + "/flags?kind=deviation_index_out_of_range",  # a radiograph
        headers={"Authorization": f"Bearer {demo.physicist}"},
    )
    with urllib.request.urlopen(request, timeout=60) as answer:
        flags = answer.read().decode()
    exam = re.search(r'href="(/exams/[^"]+)"', flags)
    assert exam is not None
    return {
        "overview": "/",
        "distributions": "/distributions",
        "distributions-enema": "/distributions?exam_type=fluoro_barium_enema",
        "room": "/rooms/HGH-RAD1",
        "room-angio": "/rooms/HGH-IR1",
        "exam": exam.group(1),
        "exam-enema": _study_of(demo, "exam_above_investigation_level", "HGH-FL1"),
        "exam-angio": _study_of(demo, "srdl_exceeded", "HGH-IR1"),
        "flags": "/flags",
        "levels": "/levels",
        "unmapped": "/unmapped",
        "ingest-errors": "/ingest-errors",
        "report": "/reports/" + re.search(r"Review of (\d{4}-\d{2})", _overview(demo)).group(1),
    }


def _study_of(demo: _Demo, kind: str, room: str) -> str:
    """The exam page of the first study a finding of ``kind`` in ``room`` names."""
    import re
    import urllib.request

    request = urllib.request.Request(
        f"{demo.base_url}/flags?kind={kind}&room={room}",
        headers={"Authorization": f"Bearer {demo.physicist}"},
    )
    with urllib.request.urlopen(request, timeout=60) as answer:
        found = re.search(r'href="(/exams/[^"]+)"', answer.read().decode())
    assert found is not None, (kind, room)
    return found.group(1)


def _overview(demo: _Demo) -> str:
    import urllib.request

    request = urllib.request.Request(
        demo.base_url + "/", headers={"Authorization": f"Bearer {demo.viewer}"}
    )
    with urllib.request.urlopen(request, timeout=60) as answer:
        return str(answer.read().decode())


def test_demo_first_screen_names_the_dap_meter_fault_and_the_doubled_dose(
    signed_in: Any, demo: _Demo
) -> None:
    # the planted findings of `beamaudit demo`, read from the overview's first screen of a
    # 1400 x 900 window, above the heatmap, without scrolling
    page = _visit(signed_in, demo.base_url + "/", timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        wanted = (
            "HGH-RAD1: reported DAP",  # the DAP meter reading high
            "check the DAP meter",
            "Abdomen AP in HGH-RAD2: monthly median up 2",  # the AEC fault that doubled the dose
        )
        for words in wanted:
            line = page.locator("ol.attention-list a.headline", has_text=words)
            assert line.count() >= 1, words
            box = line.first.bounding_box()
            assert box is not None and box["y"] + box["height"] <= 900, (words, box)
        heatmap = page.locator("#overview-heatmap").bounding_box()
        first = page.locator("ol.attention-list li").first.bounding_box()
        assert first is not None and heatmap is not None and first["y"] < heatmap["y"]
    finally:
        page.close()


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_every_demo_page_draws_fits_and_is_photographed(
    signed_in: Any, demo: _Demo, size: tuple[int, int]
) -> None:
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    for name, path in _demo_paths(demo).items():
        visit = _visit(signed_in, demo.base_url + path, size, SERVICE_TIMEOUT_MS)
        page = visit.page
        try:
            _wait_for_figures(page, path)
            assert CAUTION in page.inner_text("p.caution"), path
            assert page.evaluate("document.documentElement.scrollWidth") <= size[0], path
            shot = SCREENSHOTS / f"demo-{name}-{size[0]}x{size[1]}"
            page.screenshot(path=f"{shot}.png", full_page=True)
            page.screenshot(path=f"{shot}-first-screen.png")
            assert visit.errors == [], (path, visit.errors)
        finally:
            page.close()


def test_demo_pages_name_examinations_and_international_guidance(
    signed_in: Any, demo: _Demo
) -> None:
    page = _visit(
        signed_in,
        demo.base_url + "/distributions?exam_type=chest_pa",
        timeout_ms=SERVICE_TIMEOUT_MS,
    ).page
    try:
        text = page.inner_text("main")
        assert "Chest PA" in text and "chest_pa" not in text  # the catalogue's name
        # IAEA BSS 115 is international guidance, never called a national level
        assert "IAEA BSS 115" in text and "national level: iaea" not in text.lower()
    finally:
        page.close()


def test_a_physicist_triages_a_demo_finding_through_the_api(signed_in: Any, demo: _Demo) -> None:
    # the page's PATCH goes to the real API with the session's CSRF token; the finding changes
    page = _visit(
        signed_in, demo.base_url + "/flags?status=open", timeout_ms=SERVICE_TIMEOUT_MS
    ).page
    try:
        flag_row_id = page.locator("tr.flag-open").first.get_attribute("id")
        row = page.locator(f"tr#{flag_row_id}")  # by its id: its class changes with its status
        row.locator("details.triage summary").click()
        row.locator("textarea[name=note]").fill("AEC recalibrated by the vendor; follow up")
        row.locator("form.triage-form button").click()
        page.wait_for_function(
            f"() => document.querySelector('tr#{flag_row_id} .flag-status').textContent === "
            "'Acknowledged'"
        )
        assert "Saved" in row.locator(".triage-result").inner_text()
        again = _visit(
            signed_in, demo.base_url + "/flags?status=acknowledged", timeout_ms=SERVICE_TIMEOUT_MS
        ).page
        try:
            assert "AEC recalibrated by the vendor" in again.inner_text("main")
        finally:
            again.close()
    finally:
        page.close()


def _main_text(signed_in: Any, demo: _Demo, path: str) -> str:
    page = _visit(signed_in, demo.base_url + path, timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        return str(page.inner_text("main"))
    finally:
        page.close()


def test_demo_attention_names_the_paediatric_group(signed_in: Any, demo: _Demo) -> None:
    # the demo's children of 15-30 kg on RAD 2 (ICRP 135 weight band): their line says so, on
    # the overview's first screen and on the committee report
    page = _visit(signed_in, demo.base_url + "/", timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        line = page.locator("ol.attention-list a.headline", has_text="Chest PA, children 15")
        assert line.count() >= 1
        box = line.first.bounding_box()
        assert box is not None and box["y"] + box["height"] <= 900, box
        assert "in HGH-RAD2" in line.first.inner_text()
    finally:
        page.close()
    flags = _main_text(signed_in, demo, "/flags?kind=group_above_level&room=HGH-RAD2")
    assert "children 15" in flags


def test_demo_levels_page_shows_names_not_codes(signed_in: Any, demo: _Demo) -> None:
    import re

    text = _main_text(signed_in, demo, "/levels")
    assert "Chest PA" in text and "DAP (Gy·cm²)" in text and "children 15" in text
    codes = set(re.findall(r"\b[a-z0-9]+_[a-z0-9_]+\b", text))
    assert not codes, codes  # chest_pa, dap_gy_cm2, weight_15_30kg ... never reach a reader


def test_demo_exam_page_gives_the_hvl_a_real_uncertainty(signed_in: Any, demo: _Demo) -> None:
    # the HVL's uncertainty propagated from kV, filtration and attenuation data (k = 2), with
    # the method named in the trail; no figure of a radiograph says "not estimated"
    text = _main_text(signed_in, demo, _demo_paths(demo)["exam"])
    hvl = next(line for line in text.splitlines() if line.startswith("First half-value layer"))
    assert "±" in hvl and "k = 2" in hvl, hvl
    assert "GUM (JCGM 100:2008)" in text and "IEC 60601-2-54" in text
    assert "not estimated" not in text


def test_demo_ct_exam_page_gives_patient_size_and_ssde_real_uncertainties(
    signed_in: Any, demo: _Demo
) -> None:
    # Dw from the demo scanner's images (AAPM Report 220) and SSDE from it (AAPM Report 204),
    # each with a standard uncertainty (GUM) and the size's trail on the page
    import sqlite3

    database = demo.url.removeprefix("sqlite:///")
    with contextlib.closing(sqlite3.connect(f"file:{database}?mode=ro", uri=True)) as db:
        (study,) = db.execute(
            "SELECT s.study_instance_uid FROM exposure_events e JOIN studies s"
            " ON s.id = e.study_id WHERE e.size_ssde_mgy IS NOT NULL LIMIT 1"
        ).fetchone()
    text = _main_text(signed_in, demo, f"/exams/{study}")
    import re

    dw = re.search(
        r"Water-equivalent diameter \(Dw\), scan-range average.{0,200}?[\d.]+ ± ", text, re.S
    )
    assert dw is not None, text[:2000]
    assert "not estimated" not in text
    assert "SSDE standard uncertainty" in text and "JCGM 100:2008" in text


def test_demo_fluoroscopy_exam_page_draws_one_chart_of_its_beams(
    signed_in: Any, demo: _Demo
) -> None:
    # a study of tens of exposures: one chart of its distinct beams, each exposure naming its
    # beam, instead of a chart per exposure (the page took over 15 s under load)
    path = _demo_paths(demo)["exam-enema"]
    page = _visit(signed_in, demo.base_url + path, timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        _wait_for_figures(page, path)
        assert page.locator("#spectra div.figure").count() == 1
        assert page.locator("section.exposure div.figure").count() == 0
        exposures = page.locator("section.exposure").count()
        assert exposures > 3
        assert page.get_by_text("Its spectrum is beam").count() == exposures
        assert "Reported by the modality" in page.inner_text("main")
    finally:
        page.close()


def test_demo_pages_read_in_words_a_committee_uses(signed_in: Any, demo: _Demo) -> None:
    # issue #23, page by page: no field names or 16-digit floats, no unit "1", no "Fsd", no
    # "Beam model = –", one count of exposures, no developer notes, flag kinds in words, the
    # report's navigation and one word per state
    import re

    paths = _demo_paths(demo)
    exam = _main_text(signed_in, demo, paths["exam"])
    assert not re.search(r"\b[a-z0-9]+_[a-z0-9_]+\s*=", exam)  # hvl1_mm_al = ...
    assert not re.search(r"(?<![\d.])\d+\.\d{7,}(?![\d.])", exam)  # 3.4437997188749323, not UIDs
    assert "Fsd" not in exam and "= –" not in exam and "(1)" not in exam
    assert "from memory" not in exam and "cells written" not in exam
    assert exam.count("Exposures") == 1 and "Events" not in exam
    room = _main_text(signed_in, demo, paths["room"])
    assert not re.search(r"\b(group_above_level|dap_ratio_out_of_tolerance|changepoint)\b", room)
    report = _visit(signed_in, demo.base_url + paths["report"], timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        nav = report.inner_text("header")
        assert "Overview of" in nav and "Distributions" in nav and "Flags of" in nav
        text = report.inner_text("main")
        assert re.search(r"Open \d+; Acknowledged \d+; Closed \d+", text)
        assert "in hand" not in text and "seen," not in text
    finally:
        report.close()


def test_demo_flags_table_keeps_its_triage_column_on_screen(signed_in: Any, demo: _Demo) -> None:
    # reasons quote Study Instance UIDs; they wrap, so the triage column stays in a 1400 px window
    page = _visit(signed_in, demo.base_url + "/flags", timeout_ms=SERVICE_TIMEOUT_MS).page
    try:
        last = page.locator("table.flags thead th").last
        assert last.inner_text().strip() == "Triage"
        box = last.bounding_box()
        assert box is not None and box["x"] + box["width"] <= 1400, box
        link = page.locator("table.flags a", has_text="the exam").first.bounding_box()
        assert link is not None and link["height"] < 30, link  # one line, not broken mid-word
    finally:
        page.close()
