"""Pages: HTML strings from plain tables; links, caution, escaping, self-contained report."""

from __future__ import annotations

import copy
import json
import re
from datetime import UTC, datetime
from html.parser import HTMLParser
from typing import Any

import pytest
from dashboards_demo import FACILITY, METHOD, PERIOD, PERIODS, make_exam, make_flags, make_history

from beamaudit.dashboards import (
    CAUTION,
    DashboardError,
    PageContext,
    TableError,
    plotly_js_path,
    render_committee_report,
    render_distributions,
    render_exam,
    render_flags,
    render_login,
    render_overview,
    render_room,
    static_files,
)

Rows = list[dict[str, Any]]
CONTEXT = PageContext(facility=FACILITY, software_version="9.9.9", signed_in_as="a.physicist")


class _Page(HTMLParser):
    """Visible text, links, scripts and figure payloads of a page."""

    def __init__(self, html: str) -> None:
        super().__init__()
        self.text: list[str] = []
        self.links: list[str] = []
        self.script_srcs: list[str] = []
        self.figures: dict[str, Any] = {}
        self.forms: list[dict[str, str]] = []
        self.selects: dict[str, list[tuple[str, bool]]] = {}
        self._in: list[str] = []
        self._figure: str | None = None
        self._select: str | None = None
        self.feed(html)

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self._in.append(tag)
        if tag == "a" and "href" in a:
            self.links.append(a["href"])
        if tag == "script":
            if "src" in a:
                self.script_srcs.append(a["src"])
            self._figure = a.get("data-figure")
        if tag == "form":
            self.forms.append(a)
        if tag == "select":
            self._select = a["name"]
            self.selects[self._select] = []
        if tag == "option" and self._select:
            self.selects[self._select].append((a["value"], "selected" in a))

    def handle_endtag(self, tag: str) -> None:
        if self._in:
            self._in.pop()
        if tag == "select":
            self._select = None

    def handle_data(self, data: str) -> None:
        if self._in and self._in[-1] == "script":
            if self._figure:
                self.figures[self._figure] = json.loads(data)
            return
        if self._in and self._in[-1] == "style":
            return
        if data.strip():
            self.text.append(data.strip())

    @property
    def words(self) -> str:
        return " ".join(self.text)


@pytest.fixture(scope="module")
def pages(demo_events: Rows, demo_groups: Rows) -> dict[str, str]:
    demo_flags, demo_history, demo_exam = make_flags(), make_history(), make_exam()
    return {
        "overview": render_overview(
            demo_groups, period=PERIOD, periods=PERIODS, open_flags=3, context=CONTEXT
        ),
        "distributions": render_distributions(
            demo_events, levels=demo_groups, period=PERIOD, periods=PERIODS, context=CONTEXT
        ),
        "room": render_room("West DR 1", demo_history, flags=demo_flags, context=CONTEXT),
        "exam": render_exam(demo_exam, context=CONTEXT),
        "flags": render_flags(demo_flags, context=CONTEXT),
        "login": render_login(context=CONTEXT),
    }


def test_every_page_carries_the_caution(pages: dict[str, str]) -> None:
    banner = re.compile(r'<p class="caution" role="note"><strong>Estimates\.</strong> (.*?)</p>')
    for name, html in pages.items():
        match = banner.search(html)
        assert match and match.group(1) == CAUTION, name


def test_the_caution_says_what_the_project_promises() -> None:
    assert "estimate" in CAUTION
    assert "quality assurance and optimisation" in CAUTION
    assert "qualified medical physicist" in CAUTION
    assert "local regulations and licensed practice take precedence" in CAUTION


def test_pages_load_plotly_from_our_own_static_path(pages: dict[str, str]) -> None:
    for name, html in pages.items():
        srcs = _Page(html).script_srcs
        assert all(src == "/static/plotly.min.js" for src in srcs), (name, srcs)
        assert "http://" not in html and "https://" not in html, name
    assert _Page(pages["overview"]).script_srcs == ["/static/plotly.min.js"]
    assert _Page(pages["flags"]).script_srcs == []  # no figure, no plotly


def test_status_is_shown_in_plain_words(pages: dict[str, str]) -> None:
    words = _Page(pages["overview"]).words
    for raw in ("above_level", "possibly_above", "below_level", "insufficient_sample", "no_level"):
        assert raw not in words
    assert "Over the level" in words and "Too few patients" in words


def test_overview_links_and_period_picker(pages: dict[str, str]) -> None:
    page = _Page(pages["overview"])
    assert "/rooms/West%20DR%201" in page.links
    assert "/reports/2026-03" in page.links
    assert "/flags?period=2026-03&status=open" in page.links
    assert "/distributions?exam_type=Pelvis+AP&quantity=dap_gy_cm2&period=2026-03" in page.links
    assert page.selects["period"] == [("2026-03", True), ("2026-02", False), ("2026-01", False)]
    assert page.forms[0]["action"] == "/" and page.forms[0]["method"] == "get"


def test_overview_table_is_sortable_with_numbers_to_sort_by(pages: dict[str, str]) -> None:
    html = pages["overview"]
    assert 'class="data groups sortable"' in html
    assert 'data-sort="number"' in html
    assert re.search(r'data-value="0\.\d+"', html)


def test_overview_counts_groups_by_status(demo_groups: Rows, pages: dict[str, str]) -> None:
    # Ortho DR Pelvis AP is over both levels: one group, counted once
    words = _Page(pages["overview"]).words
    assert "Over the level 2" in words


def test_overview_heatmap_is_embedded_as_json(pages: dict[str, str]) -> None:
    figures = _Page(pages["overview"]).figures
    assert list(figures) == ["overview-heatmap"]
    assert figures["overview-heatmap"]["data"][0]["type"] == "heatmap"


def test_names_are_escaped_in_markup_and_figures(demo_groups: Rows) -> None:
    rows = copy.deepcopy(demo_groups)
    for row in rows:
        if row["room"] == "CT 1":
            row["room"] = "</script><b>x</b>"
    html = render_overview(rows, period=PERIOD)
    assert "</script><b>" not in html
    assert "&lt;/script&gt;&lt;b&gt;x&lt;/b&gt;" in html
    figure = _Page(html).figures["overview-heatmap"]
    # the JSON reads back intact, the closing tag written as text for plotly (shown "</script>"),
    # plotly's own <b> kept
    assert "&lt;/script><b>x</b>" in figure["data"][0]["y"]


def test_distributions_default_to_the_reviewed_quantities(pages: dict[str, str]) -> None:
    figures = _Page(pages["distributions"]).figures
    titles = sorted(f["layout"]["title"]["text"] for f in figures.values())
    assert "Chest PA: DAP (Gy·cm²)" in titles
    assert not any("reconstructed" in t for t in titles)
    assert len(titles) == 8  # 3 radiography exams × (DAP, ESAK) + CT head × (CTDIvol, DLP)


def test_distributions_filter(demo_events: Rows, demo_groups: Rows) -> None:
    html = render_distributions(
        demo_events, levels=demo_groups, exam_type="Chest PA", quantity="recon_dap_gy_cm2"
    )
    page = _Page(html)
    assert len(page.figures) == 1
    assert ("Chest PA", True) in page.selects["exam_type"]
    assert ("recon_dap_gy_cm2", True) in page.selects["quantity"]


def test_distributions_reject_an_unknown_quantity(demo_events: Rows) -> None:
    with pytest.raises(DashboardError, match="quantity 'kvp_kv' is not one of"):
        render_distributions(demo_events, quantity="kvp_kv")


def test_room_page_lists_changes_and_open_flags(pages: dict[str, str]) -> None:
    page = _Page(pages["room"])
    assert "November 2025: Lumbar spine AP, DAP (Gy·cm²)" in page.words
    assert len(page.figures) == 3  # DAP and ESAK medians, DAP ratio
    assert "Two Chest PA exposures 40 s apart in one study." in page.words
    assert "Pelvis AP median DAP" not in page.words  # another room's flag
    assert "/flags?room=West+DR+1" in page.links


def test_exam_page_shows_technique_dose_spectrum_and_why(pages: dict[str, str]) -> None:
    page = _Page(pages["exam"])
    words = page.words
    assert "Tube voltage (kV)" in words and "Source-image distance (mm)" in words
    assert "1.18 ± 0.09" in words and "Reported by the modality" in words
    assert "K_a,i = Y · P_It · (1 m / d_FSD)²" in words
    assert "uses an assumed value" in words
    assert "Assumed: patient thickness 22 cm (no measured value)" in words
    assert sorted(page.figures) == ["spectrum-0", "spectrum-1"]
    nav = 4  # Overview, Distributions, Flags, and Sign out beside who is signed in
    assert page.links[nav : nav + 3] == ["/rooms/West%20DR%201", "/", "/rooms/West%20DR%201"]


def test_exam_page_back_link(demo_exam: Any) -> None:
    html = render_exam(demo_exam, back_href="/flags?status=open")
    assert _Page(html).links[3] == "/flags?status=open"  # after the three navigation links


def test_flags_filters(demo_flags: Rows) -> None:
    page = _Page(render_flags(demo_flags, status="open", room="Ortho DR"))
    assert "2 of 5 flags shown." in page.words
    assert ("Ortho DR", True) in page.selects["room"]
    assert ("open", True) in page.selects["status"]
    assert "/exams/2.25.7311000180" in page.links
    assert page.forms[0]["action"] == "/flags"


def test_flags_reject_an_unknown_status(demo_flags: Rows) -> None:
    with pytest.raises(DashboardError, match="status must be one of open, acknowledged, closed"):
        render_flags(demo_flags, status="resolved")


def test_login_posts_a_token_and_keeps_only_local_next_paths() -> None:
    page = _Page(render_login(error="That token was not accepted.", next_path="/rooms/CT%201"))
    assert page.forms[0] == {"method": "post", "action": "/login"}
    assert "That token was not accepted." in page.words
    assert 'name="next" value="/rooms/CT%201"' in render_login(next_path="/rooms/CT%201")
    for hostile in ("//elsewhere.example", "https://elsewhere.example/", "javascript:alert(1)"):
        assert 'name="next" value="/"' in render_login(next_path=hostile)


def test_bad_period_is_refused(demo_groups: Rows) -> None:
    with pytest.raises(DashboardError, match="period must be a month written YYYY-MM"):
        render_overview(demo_groups, period="March")


def test_a_broken_table_reaches_the_caller_as_a_table_error(demo_groups: Rows) -> None:
    rows = [{k: v for k, v in g.items() if k != "median"} for g in demo_groups]
    with pytest.raises(TableError, match="missing column\\(s\\) 'median'"):
        render_overview(rows, period=PERIOD)


def test_empty_period_renders() -> None:
    page = _Page(render_overview([], period=PERIOD))
    assert "No review groups for 2026-03." in page.words
    assert page.script_srcs == []


# ------------------------------------------------------------------ report


@pytest.fixture(scope="module")
def report(demo_events: Rows, demo_groups: Rows) -> str:
    demo_flags = make_flags()
    return render_committee_report(
        demo_groups,
        period=PERIOD,
        method=METHOD,
        software_version="9.9.9",
        events=demo_events,
        flags=demo_flags,
        facility=FACILITY,
        generated_at=datetime(2026, 4, 2, 9, 30, tzinfo=UTC),
    )


def test_report_stands_alone(report: str) -> None:
    page = _Page(report)
    assert page.script_srcs == []
    assert 'rel="stylesheet"' not in report
    assert "@media print" in report  # the style sheet is inlined
    bundle = plotly_js_path().read_text(encoding="utf-8")
    assert bundle in report
    ours = report.replace(bundle, "")
    assert not re.search(r"""(src|href)=["'](https?:|/static)""", ours)


def test_report_states_method_levels_version_and_caution(report: str) -> None:
    words = _Page(report).words
    assert "following the facility-median approach of ICRP Publication 135." in words
    assert "Kestrel Bay local levels 2026 (invented)" in words
    assert "beamaudit 9.9.9" in words
    assert "2026-04-02 09:30 UTC" in words
    assert CAUTION in words
    assert "Committee notes and sign-off" in words


def test_report_shows_distributions_only_where_a_level_may_be_passed(report: str) -> None:
    figures = _Page(report).figures
    titles = sorted(
        f["layout"]["title"]["text"] for k, f in figures.items() if k.startswith("report-dist")
    )
    assert titles == ["Lumbar spine AP: DAP (Gy·cm²)", "Pelvis AP: DAP (Gy·cm²)"]
    assert all(f["layout"]["width"] == 700 for f in figures.values())  # fits A4 portrait


def test_report_lists_the_period_flags_not_closed(report: str) -> None:
    words = _Page(report).words
    assert "Reported DAP is 1.19 times the reconstruction" in words
    assert "Lumbar spine AP median DAP over the local level." not in words  # February's


def test_report_needs_method_and_version(demo_groups: Rows) -> None:
    with pytest.raises(DashboardError, match="needs the review method"):
        render_committee_report(demo_groups, period=PERIOD, method=" ", software_version="1")
    with pytest.raises(DashboardError, match="needs the software version"):
        render_committee_report(demo_groups, period=PERIOD, method="m", software_version="")


# ------------------------------------------------------------------- files


def test_plotly_js_comes_from_the_installed_plotly_package() -> None:
    path = plotly_js_path()
    assert path.name == "plotly.min.js" and "plotly" in path.parts
    assert path.read_text(encoding="utf-8")[:40].lstrip().startswith("/**")


def test_static_files_cover_what_pages_reference(pages: dict[str, str]) -> None:
    files = static_files()
    referenced = set()
    for html in pages.values():
        referenced |= set(re.findall(r'"/static/([^"]+)"', html))
    assert referenced == {"beamaudit.css", "plotly.min.js"}
    assert referenced <= set(files)
    assert all(path.is_file() for path in files.values())
