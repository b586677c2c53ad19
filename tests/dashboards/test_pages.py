"""Pages: HTML strings from plain tables; links, caution, escaping, self-contained report."""

from __future__ import annotations

import copy
import json
import re
from datetime import UTC, datetime
from html.parser import HTMLParser
from typing import Any

import pytest
from dashboards_demo import (
    EXAM_TYPES,
    FACILITY,
    METHOD,
    PERIOD,
    PERIODS,
    make_exam,
    make_flags,
    make_history,
    make_ingest_errors,
    make_unmapped,
)

from beamaudit.dashboards import (
    CAUTION,
    DashboardError,
    PageContext,
    TableError,
    attention_from_flags,
    plotly_js_path,
    render_committee_report,
    render_distributions,
    render_exam,
    render_flags,
    render_ingest_errors,
    render_login,
    render_overview,
    render_room,
    render_unmapped,
    static_files,
)

Rows = list[dict[str, Any]]
CONTEXT = PageContext(
    facility=FACILITY, software_version="9.9.9", signed_in_as="a.physicist", csrf_token="t0k3n"
)


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
def attention() -> Any:
    flags = [f for f in make_flags() if f["period"] == PERIOD]
    return attention_from_flags(
        flags, ingest_errors=make_ingest_errors(), exam_types=EXAM_TYPES, period=PERIOD
    )


@pytest.fixture(scope="module")
def pages(demo_events: Rows, demo_groups: Rows, attention: Any) -> dict[str, str]:
    demo_flags, demo_history, demo_exam = make_flags(), make_history(), make_exam()
    return {
        "overview": render_overview(
            demo_groups, period=PERIOD, periods=PERIODS, attention=attention, open_flags=13,
            exam_types=EXAM_TYPES, context=CONTEXT,
        ),
        "distributions": render_distributions(
            demo_events, levels=demo_groups, period=PERIOD, periods=PERIODS,
            exam_types=EXAM_TYPES, context=CONTEXT,
        ),
        "room": render_room("West DR 1", demo_history, flags=demo_flags, exam_types=EXAM_TYPES,
                            context=CONTEXT),
        "exam": render_exam(demo_exam, exam_types=EXAM_TYPES, context=CONTEXT),
        "flags": render_flags(demo_flags, can_triage=True, exam_types=EXAM_TYPES,
                              context=CONTEXT),
        "unmapped": render_unmapped(make_unmapped(), period=PERIOD, periods=PERIODS,
                                    context=CONTEXT),
        "ingest_errors": render_ingest_errors(make_ingest_errors(), context=CONTEXT),
        "login": render_login(context=CONTEXT),
    }  # fmt: skip


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


RAW_NAMES = ("above_level", "possibly_above", "below_level", "insufficient_sample", "no_level",
             "group_above_level", "exam_above_investigation_level", "dap_ratio_out_of_tolerance",
             "no_dose_data", "unmapped_events", "deviation_index_out_of_range", "changepoint",
             "pelvis_ap", "fluoro_barium_enema", "lumbar_spine_ap")  # fmt: skip


def test_states_kinds_and_examinations_are_shown_in_words(pages: dict[str, str]) -> None:
    for name in ("overview", "room", "flags", "distributions"):
        main = _main_words(pages[name])
        for raw in RAW_NAMES:
            assert raw not in main, (name, raw)
    words = _Page(pages["overview"]).words
    assert "Above the level" in words and "Too few patients" in words
    assert "Pelvis AP" in words and "Barium enema" in words


def _main_words(html: str) -> str:
    """Visible words of the page's content less the review's own reasons (which quote codes)."""
    page = _Page(html[html.index("<main>") :])
    return " ".join(t for t in page.text if not t.startswith(("DAP ", "Median ", "The monthly",
                                                               "Study ", "Exposure ", "Two ",
                                                               "54 event")))  # fmt: skip


# ---------------------------------------------------------------- overview


def test_overview_opens_with_what_needs_attention(pages: dict[str, str]) -> None:
    html = pages["overview"]
    assert html.index("What needs attention") < html.index('id="overview-heatmap"')
    assert html.index('id="overview-heatmap"') < html.index("All groups")
    lines = re.findall(r'<a href="([^"]+)" class="headline"[^>]*>([^<]+)</a>', html)
    headlines = [h for _, h in lines]
    assert len(lines) == 8  # ATTENTION_SHOWN; the ninth is counted
    assert "1 more open finding" in _Page(html).words
    # the planted findings, each with its numbers, among the first lines
    assert headlines[0].startswith("Pelvis AP in Ortho DR: median DAP 2.31 Gy·cm² is 1.28 ×")
    assert any("West DR 1: reported DAP 1.35 × the reconstruction" in h for h in headlines[:4])
    assert any("Abdomen AP in West DR 2: monthly median up 2.1 ×" in h for h in headlines[:4])
    assert any("Barium enema in Fluoro 1: one examination at DAP 187 Gy·cm², 8.5 ×" in h
               for h in headlines[:4])  # fmt: skip
    links = dict((h, href) for href, h in lines)
    enema = next(h for h in headlines if h.startswith("Barium enema"))
    assert links[enema] == "/exams/2.25.7319000001"
    rejected = next(h for h in headlines if "rejected at ingest" in h)
    assert links[rejected] == "/ingest-errors"
    unmapped = next(h for h in headlines if "map to no examination type" in h)
    assert links[unmapped] == "/unmapped?period=2026-03"


def test_overview_without_attention_lines_points_to_the_flags(demo_groups: Rows) -> None:
    html = render_overview(demo_groups, period=PERIOD)
    assert (
        'The open findings of 2026-03 are on <a href="/flags?period=2026-03&amp;status=open">'
        in html
    )
    empty = _Page(render_overview(demo_groups, period=PERIOD, attention=[])).words
    assert "No open finding in 2026-03" in empty


def test_overview_links_and_period_picker(pages: dict[str, str]) -> None:
    page = _Page(pages["overview"])
    assert "/rooms/West%20DR%201" in page.links
    assert "/reports/2026-03" in page.links
    assert "/flags?period=2026-03&status=open" in page.links
    assert "/distributions?exam_type=pelvis_ap&quantity=dap_gy_cm2&period=2026-03" in page.links
    assert page.selects["period"] == [("2026-03", True), ("2026-02", False), ("2026-01", False)]
    assert page.forms[0]["action"] == "/" and page.forms[0]["method"] == "get"
    assert "13 open flags" in page.words


def test_overview_table_is_sortable_with_numbers_to_sort_by(pages: dict[str, str]) -> None:
    html = pages["overview"]
    assert 'class="data groups sortable"' in html
    assert 'data-sort="number"' in html
    assert re.search(r'data-value="0\.\d+"', html)


def test_overview_counts_groups_by_status(pages: dict[str, str]) -> None:
    # Ortho DR Pelvis AP is above its local level and possibly above its national one: one group
    words = _Page(pages["overview"]).words
    assert "Above the level 2" in words


def test_overview_heatmap_is_embedded_with_its_key(pages: dict[str, str]) -> None:
    page = _Page(pages["overview"])
    assert list(page.figures) == ["overview-heatmap"]
    assert page.figures["overview-heatmap"]["data"][0]["type"] == "heatmap"
    for words in ("cell colour: median ÷ level", "Too few patients: no colour, no verdict",
                  "blank: no such examination in that room", "Possibly above"):  # fmt: skip
        assert words in page.words


def test_a_level_without_a_ratio_is_named_without_a_dangling_colon(demo_groups: Rows) -> None:
    rows = copy.deepcopy(demo_groups)
    for row in rows:
        if row["status"] == "insufficient_sample":
            row["ratio_to_level"] = None
    words = _Page(render_overview(rows, period=PERIOD, exam_types=EXAM_TYPES)).words
    assert "International guidance 0.4 mGy" in words
    assert not re.search(r"(level|guidance) [\d.]+ [^\s:]+: (?![\d.]+×)", words)


def test_international_guidance_is_its_own_kind(pages: dict[str, str]) -> None:
    words = _Page(pages["overview"]).words
    assert "International guidance 0.4 mGy: 0.44×" in words
    assert "international guidance: International guidance (invented for the demo)" in words


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
    assert "&lt;/script><b>x</b>" in figure["data"][0]["x"]


# ----------------------------------------------------------- distributions


def test_distributions_open_on_one_chart_the_most_urgent(pages: dict[str, str]) -> None:
    page = _Page(pages["distributions"])
    assert len(page.figures) == 1
    (figure,) = page.figures.values()
    assert figure["layout"]["title"]["text"] == "Pelvis AP: DAP"  # above its level in Ortho DR
    assert ("pelvis_ap", True) in page.selects["exam_type"]
    assert ("dap_gy_cm2", True) in page.selects["quantity"]
    assert "▲ Pelvis AP" in page.words and "○ Barium enema" in page.words
    assert "all" not in [v for v, _ in page.selects["exam_type"]]  # no page of every chart


def test_distributions_picker_shows_one_chosen_chart(demo_events: Rows, demo_groups: Rows) -> None:
    html = render_distributions(demo_events, levels=demo_groups, exam_type="chest_pa",
                                quantity="recon_dap_gy_cm2", exam_types=EXAM_TYPES)  # fmt: skip
    page = _Page(html)
    assert len(page.figures) == 1
    assert ("chest_pa", True) in page.selects["exam_type"]
    assert ("recon_dap_gy_cm2", True) in page.selects["quantity"]
    assert 'data-resets="quantity"' in html  # a new examination takes its own quantity


def test_a_fluoroscopy_distribution_is_per_examination(
    demo_events: Rows, demo_groups: Rows
) -> None:
    html = render_distributions(demo_events, levels=demo_groups,
                                exam_type="fluoro_barium_enema", exam_types=EXAM_TYPES)  # fmt: skip
    (figure,) = _Page(html).figures.values()
    values = [v for t in figure["data"] if t["type"] == "box" for v in t["y"]]
    assert max(values) == pytest.approx(187.0, rel=1e-3)
    assert "each point is one study's total" in _Page(html).words


def test_distributions_reject_an_unknown_quantity(demo_events: Rows) -> None:
    with pytest.raises(DashboardError, match="quantity 'kvp_kv' is not one of"):
        render_distributions(demo_events, quantity="kvp_kv")


# --------------------------------------------------------------------- room


def test_room_page_lists_changes_and_open_flags(pages: dict[str, str]) -> None:
    page = _Page(pages["room"])
    assert "From November 2025: Lumbar spine AP, DAP (Gy·cm²)" in page.words
    assert len(page.figures) == 3  # DAP and ESAK medians, DAP ratio
    assert "Reported DAP off the reconstruction" in page.words  # the kind, in words
    assert "Pelvis AP median DAP" not in page.words  # another room's flag
    assert "/flags?room=West+DR+1" in page.links
    assert 'class="card span-2"' in pages["room"]  # 19 lines get the page's width


# --------------------------------------------------------------------- exam


def test_exam_page_names_and_rounds_what_it_shows(pages: dict[str, str]) -> None:
    words = _Page(pages["exam"]).words
    assert "Lumbar spine AP" in words and "lumbar_spine_ap" not in words
    assert "Tube voltage" in words and "Source-image distance (SID)" in words
    assert "18.0 mAs" in words and "1150 mm" in words and "3.00 mm Al" in words
    assert "1.182 ± 0.092" in words and "Reported by the modality" in words
    assert "First half-value layer (HVL₁) = 3.44 mm Al" in words
    assert "Focus-to-skin distance (FSD) = 950 mm" in words and "Fsd" not in words
    assert not re.search(r"(?<![\d.])\d+\.\d{5,}(?![\d.])", words)  # no float to its last digit
    assert "hvl1_mm_al" not in words and "standard_uncertainty" not in words


def test_exam_page_says_when_an_uncertainty_was_not_estimated(pages: dict[str, str]) -> None:
    words = _Page(pages["exam"]).words
    assert "uncertainty not estimated" in words  # the HVL's 0.0 is no uncertainty
    assert "± 0.0 " not in words and "± 0 " not in words


def test_exam_page_writes_no_unit_1_and_no_empty_value(pages: dict[str, str]) -> None:
    page = _Page(pages["exam"])
    dose = pages["exam"][pages["exam"].index("Backscatter factor (B)") :][:400]
    assert "<td>1</td>" not in dose and "1.347 ± 0.028" in dose
    assert "= –" not in page.words
    assert "<strong>Beam model</strong>: assumption of the beam model" in pages["exam"]


def test_exam_page_lists_exposures_in_time_order_once(pages: dict[str, str]) -> None:
    words = _Page(pages["exam"]).words
    first, second = words.index("Exposure 1"), words.index("Exposure 2")
    assert words[first:].startswith("Exposure 1 · 2026-03-11 09:41:12 UTC")
    assert first < second and "09:42:05" in words[second:]
    assert "Exposures 2, in time order" in words
    assert "Events" not in words and "events 2" not in words  # the number is said once


def test_exam_page_keeps_developer_notes_from_readers(pages: dict[str, str]) -> None:
    words = _Page(pages["exam"]).words
    assert "written from memory" not in words and "to be confirmed" not in words
    assert "not yet checked against the published original" in words  # said in a reader's words
    assert "K_a,i = Y · P_It · (1 m / d_FSD)²" in words
    assert "Assumed: patient thickness 22 cm (no measured value)" in words


def test_exam_page_links(pages: dict[str, str], demo_exam: Any) -> None:
    page = _Page(pages["exam"])
    nav = 7  # Overview, Distributions, Flags, Reference levels, Unmapped, Rejected files, Sign out
    assert page.links[nav : nav + 3] == ["/rooms/West%20DR%201", "/", "/rooms/West%20DR%201"]
    html = render_exam(demo_exam, back_href="/flags?status=open")
    assert _Page(html).links[6] == "/flags?status=open"  # after the six navigation links


# -------------------------------------------------------------------- flags


def test_flags_filters(demo_flags: Rows) -> None:
    page = _Page(render_flags(demo_flags, status="open", room="Ortho DR"))
    assert "2 of 17 flags shown." in page.words
    assert ("Ortho DR", True) in page.selects["room"]
    assert ("open", True) in page.selects["status"]
    assert ("group_above_level", False) in page.selects["kind"]
    assert "Median above a level" in page.words  # the kind's words in the picker and the table
    assert page.forms[0]["action"] == "/flags"


def test_flags_order_open_then_most_severe(demo_flags: Rows) -> None:
    html = render_flags(demo_flags)
    rows = _Page(html[html.index("<tbody>") :]).text
    statuses = [t for t in rows if t in ("Open", "Acknowledged", "Closed")]
    assert statuses == sorted(statuses, key=["Open", "Acknowledged", "Closed"].index)
    assert rows.index("Action") < rows.index("Warning") < rows.index("Information")


def test_flags_link_to_what_they_are_about(demo_flags: Rows) -> None:
    page = _Page(render_flags(demo_flags))
    assert "/exams/2.25.7319000001" in page.links  # the enema
    assert "/unmapped?period=2026-03" in page.links  # the unmapped events flag


def test_physicists_get_triage_forms_that_patch_the_api(pages: dict[str, str]) -> None:
    html = pages["flags"]
    forms = re.findall(r'<form class="triage-form" data-triage="([^"]+)"', html)
    assert "/api/v1/reviews/41/flags/103" in forms
    assert len(forms) == 17  # every flag of the list carries its run and id
    assert "X-CSRF-Token" in html and 'meta[name="csrf-token"]' in html
    assert f'<meta name="csrf-token" content="{CONTEXT.csrf_token}">' in html
    row = html[html.index('id="flag-122"') :].split("</tr>")[0]  # acknowledged already
    assert re.search(r'value="acknowledged" disabled', row)
    assert re.search(r'value="closed" checked', row)
    assert "Hip prosthesis: AEC under metal" in row  # the note so far, beside the reason
    assert '<textarea name="note" rows="3" maxlength="4000"></textarea>' in row  # a new note
    for verb in ("Acknowledge", "Close", "Reopen"):
        assert verb in _Page(html).words


def test_triage_is_offered_only_to_a_session_that_may_triage(demo_flags: Rows) -> None:
    viewer = render_flags(demo_flags, can_triage=False, context=CONTEXT)
    assert "triage-form" not in viewer
    no_session = render_flags(demo_flags, can_triage=True, context=PageContext())
    assert "triage-form" not in no_session  # no CSRF token: no form that would be refused


def test_flags_reject_an_unknown_status(demo_flags: Rows) -> None:
    with pytest.raises(DashboardError, match="status must be one of open, acknowledged, closed"):
        render_flags(demo_flags, status="resolved")


# ------------------------------------------------------------ intake pages


def test_unmapped_page_lists_the_header_values(pages: dict[str, str]) -> None:
    page = _Page(pages["unmapped"])
    words = page.words
    assert "54 exposures in 2 combinations of header values" in words
    assert "USER PROGRAM 14" in words and "Protocol name" in words and "(0018,1030)" in words
    assert "Body part" not in words  # a column empty on every row is left out
    assert "beamaudit examtypes remap" in words
    assert page.selects["period"][0] == ("2026-03", True)


def test_unmapped_page_with_nothing_unmapped() -> None:
    words = _Page(render_unmapped([], period=PERIOD)).words
    assert "Every exposure of 2026-03 maps to an examination type." in words


def test_ingest_errors_page_lists_each_file_and_why(pages: dict[str, str]) -> None:
    words = _Page(pages["ingest_errors"]).words
    assert "/srv/incoming/2026-03/kvp_180.dcm" in words
    assert "(0018,0060) KVP 180 kV is outside 20-150 kV" in words
    assert "Not DICOM" in words and "C-STORE" in words and "folder scan" in words
    assert words.index("2026-03-20 16:45 UTC") < words.index("2026-03-14 10:02 UTC")  # newest first


def test_ingest_errors_refuse_a_row_without_its_reason(demo_ingest_errors: Rows) -> None:
    rows = copy.deepcopy(demo_ingest_errors)
    rows[1]["reason"] = " "
    with pytest.raises(TableError, match=r"ingest errors table, column 'reason': empty value"):
        render_ingest_errors(rows)


# -------------------------------------------------------------------- login


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
def report(demo_events: Rows, demo_groups: Rows, attention: Any) -> str:
    return render_committee_report(
        demo_groups,
        period=PERIOD,
        method=METHOD,
        software_version="9.9.9",
        events=demo_events,
        flags=make_flags(),
        attention=attention,
        exam_types=EXAM_TYPES,
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
    assert "International guidance" in words
    assert "beamaudit 9.9.9" in words
    assert "2026-04-02 09:30 UTC" in words
    assert CAUTION in words
    assert "Committee notes and sign-off" in words


def test_report_opens_with_what_needs_attention(report: str) -> None:
    words = _Page(report).words
    assert words.index("What needs attention") < words.index("2. Method")
    assert "Barium enema in Fluoro 1: one examination at DAP 187 Gy·cm²" in words


def test_report_says_each_state_in_one_word(report: str) -> None:
    words = _Page(report).words
    assert "Flags of this period by status: Open 15; Acknowledged 1; Closed 0." in words
    assert "seen, in hand" not in words.lower()


def test_report_links_back_to_the_pages_on_screen_only(report: str) -> None:
    page = _Page(report)
    for link in ("/?period=2026-03", "/distributions?period=2026-03", "/flags?period=2026-03"):
        assert link in page.links
    assert '<nav aria-label="Pages" class="no-print">' in report


def test_report_shows_distributions_only_where_a_level_may_be_passed(report: str) -> None:
    figures = _Page(report).figures
    titles = sorted(
        f["layout"]["title"]["text"] for k, f in figures.items() if k.startswith("report-dist")
    )
    assert titles == ["Chest PA: DAP", "Lumbar spine AP: DAP", "Pelvis AP: DAP"]
    assert all(f["layout"]["width"] == 700 for f in figures.values())  # fits A4 portrait


def test_report_lists_the_period_flags_not_closed(report: str) -> None:
    words = _Page(report).words
    assert "Median ratio of reported to reconstructed DAP in room West DR 1" in words
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


def test_a_room_with_no_monthly_history_still_has_its_page() -> None:
    # a room whose events the review put in no monthly series (a few unmapped angiographies)
    from beamaudit.dashboards import render_room

    html = render_room("Angio 9", [])
    assert "Room Angio 9" in html
