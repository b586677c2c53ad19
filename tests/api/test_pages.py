"""The dashboard pages served by the API: authentication, and each page on stored reviews.

Data are invented (a fictional hospital); the review method checked here is the
pages' plumbing, not the statistics (those are tested in tests/api/review).
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pytest
from fastapi.testclient import TestClient

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.runs.reviews import run_review
from beamaudit.api.settings import load
from beamaudit.api.store.auth import create_token
from beamaudit.api.web.app import create_app
from beamaudit.ingest.events import ExposureEvent, ParseResult, SourceObject

CAUTION_WORDS = "estimate"


def _store_exams(store, n_per_month: int = 25) -> str:
    rng = np.random.default_rng(3)
    pipe = Pipeline(store.session_factory)
    first_uid = ""
    k = 0
    for month in (9, 10):
        for room in ("RAD A", "RAD B"):
            for _ in range(n_per_month):
                k += 1
                sop, study = f"2.25.77{k}", f"2.25.88{k}"
                first_uid = first_uid or study
                when = datetime(2026, month, 2) + timedelta(hours=int(rng.integers(0, 600)))
                event = ExposureEvent(
                    event_key=f"{sop}#0", sop_instance_uid=sop,
                    sop_class_uid="1.2.840.10008.5.1.4.1.1.1.1", source_kind="image_header",
                    modality="DX", modality_family="projection", study_instance_uid=study,
                    study_datetime=when, event_datetime=when,
                    institution_name="Fernmoor Infirmary (invented)", station_name=room,
                    manufacturer="Invented", model_name="DR-1", device_serial_number=room,
                    study_description="XR CHEST", protocol_name="Chest PA", body_part="CHEST",
                    view_position="PA", patient_weight_kg=float(rng.normal(72, 8)),
                    kvp_kv=110.0, exposure_mas=2.0, sid_mm=1800.0,
                    body_part_thickness_mm=230.0, field_width_mm=350.0, field_height_mm=430.0,
                    dap_gy_cm2=float(rng.lognormal(np.log(0.08), 0.3)),
                )  # fmt: skip
                src = SourceObject(sop, event.sop_class_uid, "image_header", "DX", study)
                pipe.store(ParseResult(source=src, events=[event]), received_via="test")
    from beamaudit.api.intake.postprocess import process_new_events

    with store.session_factory() as s:
        from sqlalchemy import select

        from beamaudit.api.store import models as m

        ids = s.scalars(select(m.ExposureEventRow.id)).all()
    process_new_events(store.session_factory, ids)
    from beamaudit.api.review import LevelEntry, ReferenceLevelSet
    from beamaudit.api.store.level_sets import add_level_sets

    local = ReferenceLevelSet(
        "Fernmoor local DRLs (invented)", "local", "2026-1", datetime(2026, 1, 1).date(), "",
        (LevelEntry("chest_pa", "dap_gy_cm2", 0.05, "Gy.cm2"),),
    )  # fmt: skip
    with store.session_factory.begin() as s:
        add_level_sets(s, [local], actor="test")
    for month in (9, 10):
        run_review(store.session_factory, ReviewParameters(period=Period.month(2026, month)))
    return first_uid


@pytest.fixture
def site(store):
    uid = _store_exams(store)
    with store.session_factory.begin() as s:
        _, viewer = create_token(s, role="viewer", name="committee")
        _, physicist = create_token(s, role="physicist", name="physicist")
    app = create_app(load(database_url=store.url), engine=store.engine)
    with TestClient(app) as client:
        yield client, viewer, physicist, uid


def _get(client, path, token):
    return client.get(path, headers={"Authorization": f"Bearer {token}"})


def test_pages_without_a_token_go_to_login(site) -> None:
    client, *_ = site
    r = client.get("/flags?kind=x", follow_redirects=False)
    assert r.status_code == 303
    assert r.headers["location"].startswith("/login?next=/flags")
    assert client.get("/login").status_code == 200


@pytest.mark.parametrize(
    "path",
    [
        "/",
        "/?period=2026-09",
        "/distributions",
        "/rooms/RAD%20A",
        "/flags",
        "/reports/2026-10",
        "/levels",
    ],
)
def test_each_page_renders_for_a_viewer(site, path) -> None:
    client, viewer, _, _ = site
    r = _get(client, path, viewer)
    assert r.status_code == 200, r.text[:500]
    assert CAUTION_WORDS in r.text.lower()
    assert '<script src="http' not in r.text  # no script from another host (no CDN)


def test_the_levels_page_shows_typical_values_beside_the_levels_in_force(site) -> None:
    client, viewer, physicist, _ = site
    page = _get(client, "/levels", viewer).text
    assert "Typical value" in page and "Proposed local DRL" in page
    assert "none: 2 of 10 rooms needed" in page  # two rooms: a typical value, no proposal
    assert "Fernmoor local DRLs (invented)" in page
    assert "Recurrent exposure" not in page  # pseudonyms are for physicists
    full = _get(client, "/levels", physicist).text
    assert "Recurrent exposure" in full and "must never decide" in full


def test_exam_drilldown_needs_the_physicist_role(site) -> None:
    client, viewer, physicist, uid = site
    assert _get(client, f"/exams/{uid}", viewer).status_code == 403
    r = _get(client, f"/exams/{uid}", physicist)
    assert r.status_code == 200
    assert "plotly" in r.text.lower()  # the spectrum figure
    assert _get(client, "/exams/2.25.0", physicist).status_code == 404


def test_login_sets_a_session_cookie_that_pages_accept(site) -> None:
    client, viewer, _, _ = site
    bad = client.post("/login", data={"token": "bat_wrong", "next": "/"})
    assert bad.status_code == 401
    ok = client.post("/login", data={"token": viewer, "next": "/flags"}, follow_redirects=False)
    assert ok.status_code == 303 and ok.headers["location"] == "/flags"
    assert "httponly" in ok.headers["set-cookie"].lower()
    assert client.get("/flags").status_code == 200  # the cookie now authenticates


def test_login_never_redirects_off_site(site) -> None:
    client, viewer, _, _ = site
    r = client.post(
        "/login", data={"token": viewer, "next": "//evil.example"}, follow_redirects=False
    )
    assert r.headers["location"] == "/"


def test_static_files_and_unknown_period(site) -> None:
    client, viewer, _, _ = site
    assert client.get("/static/plotly.min.js").status_code == 200
    assert client.get("/static/../settings.py").status_code == 404
    assert _get(client, "/?period=2030-01", viewer).status_code == 404


def _open_flags_shown(client, token, period: str) -> tuple[int, str]:
    """The overview's count of open flags and the flags page's rows for ``period``."""
    import re

    overview = _get(client, f"/?period={period}", token).text
    count = re.search(r"(\d+) open flag", overview)
    flags = _get(client, f"/flags?period={period}", token).text
    return (int(count.group(1)) if count else 0), flags


def test_a_room_run_never_replaces_the_month(site, store) -> None:
    # a review of one room (or of a room the store does not know) is listed with its scope;
    # the overview, the flags page and the committee report keep the whole-site review
    client, viewer, _, _ = site
    open_before, flags_before = _open_flags_shown(client, viewer, "2026-10")
    report_before = _get(client, "/reports/2026-10", viewer).text
    assert open_before > 0 and "RAD B" in flags_before
    params = ReviewParameters(period=Period.month(2026, 10), rooms=("RAD A",))
    room_run = run_review(store.session_factory, params)
    open_after, flags_after = _open_flags_shown(client, viewer, "2026-10")
    assert open_after == open_before
    assert "RAD B" in flags_after  # the other room's flags are still the month's
    report = _get(client, "/reports/2026-10", viewer).text
    assert f"Review run {room_run}," not in report
    assert report.count("RAD B") == report_before.count("RAD B")
    overview = _get(client, "/?period=2026-10", viewer).text
    assert "room RAD A" in overview  # listed, as what it is


def test_a_date_range_run_leaves_every_page_standing(site, store) -> None:
    client, viewer, _, _ = site
    run_review(
        store.session_factory,
        ReviewParameters(period=Period.parse("2026-09-01/2026-11-01")),
    )
    for path in ("/", "/flags", "/distributions", "/reports/2026-10", "/rooms/RAD%20A"):
        r = _get(client, path, viewer)
        assert r.status_code == 200, (path, r.text[:300])
    assert "Review of 2026-10" in _get(client, "/", viewer).text


BAD_PARAMETERS = (
    "/flags?period=2026-13",
    "/distributions?quantity=bogus",
    "/distributions?period=2026-1",
    "/?period=October",
    "/reports/2026-13",
    "/flags?status=pending",
    "/flags?kind=nothing_like_it",
)
UNKNOWN_THINGS = (
    ("/rooms/RAD%20AX", "RAD A"),  # the closest known room is named
    ("/?period=2030-01", "2030-01"),
    ("/reports/2030-01", "2030-01"),
    ("/distributions?exam_type=chest_pq", "chest_pa"),
    ("/flags?room=RAD%20BX", "RAD B"),
    ("/no/such/page", "no such page"),
)


def test_bad_page_parameters_are_400_pages(site) -> None:
    client, viewer, _, _ = site
    for path in BAD_PARAMETERS:
        r = _get(client, path, viewer)
        assert r.status_code == 400, (path, r.text[:300])
        assert r.headers["content-type"].startswith("text/html"), path
        assert "<html" in r.text and CAUTION_WORDS in r.text.lower()


def test_unknown_things_are_404_pages_for_a_browser(site) -> None:
    client, viewer, _, _ = site
    for path, words in UNKNOWN_THINGS:
        r = _get(client, path, viewer)
        assert r.status_code == 404, (path, r.text[:300])
        assert r.headers["content-type"].startswith("text/html"), path
        assert words in r.text, (path, r.text[r.text.find("<main>") : r.text.find("</main>")])


def test_unknown_study_is_a_404_page_and_the_api_answers_json(site) -> None:
    client, _, physicist, _ = site
    page = _get(client, "/exams/2.25.0", physicist)
    assert page.status_code == 404 and page.headers["content-type"].startswith("text/html")
    api = _get(client, "/api/v1/reviews/424242", physicist)
    assert api.status_code == 404 and api.headers["content-type"] == "application/json"
    assert api.json()["detail"]


def test_exam_page_shows_b_with_its_source_and_uncertainty(site) -> None:
    client, _, physicist, uid = site
    text = _get(client, f"/exams/{uid}", physicist).text
    assert "Backscatter factor (B)" in text
    assert "Monte Carlo backscatter kernels" in text
    row = text[text.index("Backscatter factor (B)") :][:600]
    assert " ± " in row  # the estimate with one standard uncertainty


def _store_ingest_error(store, code: str = "not_dicom") -> None:
    from beamaudit.api.store import models as m

    with store.session_factory.begin() as s:
        s.add(
            m.IngestError(
                received_via="scan", source="/incoming/readme.txt", code=code,
                reason="not a DICOM file (no DICM prefix)",
            )
        )  # fmt: skip


def test_rejected_files_and_unmapped_values_have_their_pages(site, store) -> None:
    client, viewer, _, _ = site
    _store_ingest_error(store)
    errors = _get(client, "/ingest-errors", viewer)
    assert errors.status_code == 200, errors.text[:300]
    assert "/incoming/readme.txt" in errors.text and "no DICM prefix" in errors.text
    unmapped = _get(client, "/unmapped?period=2026-10", viewer)
    assert unmapped.status_code == 200, unmapped.text[:300]
    assert "2026-10" in unmapped.text
    assert _get(client, "/unmapped?period=2030-01", viewer).status_code == 404
    assert _get(client, "/ingest-errors?period=2026-13", viewer).status_code == 400


def test_overview_opens_with_what_needs_attention(site, store) -> None:
    # the month's open findings, in words with their numbers, and the rejected files
    client, viewer, _, _ = site
    _store_ingest_error(store)
    text = _get(client, "/?period=2026-10", viewer).text
    main = text[text.index("<main") :]
    assert "Chest PA" in main  # the catalogue's name, not the code chest_pa
    assert "× the level" in main  # a group above the invented local level, with its factor
    assert main.index("× the level") < main.index("overview-heatmap")
    # the rejected files are a line of their own (ranked after these single exams: listed in full
    # in the committee report)
    report = _get(client, "/reports/2026-10", viewer).text
    assert "1 file rejected at ingest: not DICOM" in report


def _signed_in(client, token) -> str:
    import re

    client.post("/login", data={"token": token, "next": "/flags"})
    page = client.get("/flags").text
    found = re.search(r'<meta name="csrf-token" content="([^"]+)"', page)
    return found.group(1) if found else ""


def test_a_physicist_triages_from_the_flags_page(site) -> None:
    # the page offers the form to a physicist signed in by a browser session; its PATCH, with the
    # session's CSRF token, changes the finding; without the token it is refused
    import re

    client, viewer, physicist, _ = site
    assert 'data-triage="' not in _get(client, "/flags", physicist).text  # a token: no session
    csrf = _signed_in(client, physicist)
    page = client.get("/flags?period=2026-10&status=open").text
    assert csrf and 'data-triage="' in page
    run_id, flag_id = re.search(r"/api/v1/reviews/(\d+)/flags/(\d+)", page).groups()
    url = f"/api/v1/reviews/{run_id}/flags/{flag_id}"
    body = {"status": "acknowledged", "note": "seen by the committee"}
    origin = {"Origin": str(client.base_url)}
    refused = client.patch(url, json=body, headers=origin)
    assert refused.status_code == 403 and "X-CSRF-Token" in refused.json()["detail"]
    done = client.patch(url, json=body, headers={**origin, "X-CSRF-Token": csrf})
    assert done.status_code == 200, done.text
    assert done.json()["status"] == "acknowledged"
    assert "seen by the committee" in client.get("/flags?status=acknowledged").text
    client.post("/logout")
    _signed_in(client, viewer)
    assert 'data-triage="' not in client.get("/flags").text  # a viewer reads, never triages


def test_distributions_read_only_the_chosen_examination(site, store, monkeypatch) -> None:
    import beamaudit.api.runs.reviews as reviews

    client, viewer, _, _ = site
    asked: list[str] = []
    real = reviews.exam_type_events

    def spy(session, **kw):
        asked.append(kw["exam_type"])
        return real(session, **kw)

    monkeypatch.setattr(reviews, "exam_type_events", spy)
    monkeypatch.setattr(reviews, "review_events", None)  # the month's every event: never read
    r = _get(client, "/distributions?period=2026-10", viewer)
    assert r.status_code == 200, r.text[:300]
    assert asked == ["chest_pa"]
    assert "Chest PA" in r.text


def test_every_reported_figure_carries_its_display_tolerance() -> None:
    """A reported CTDIvol, DLP or K_a,r on the exam page comes with the tolerance its standard
    allows on the displayed value (IEC 60601-2-43: ±35 % for K_a,r; IEC 60601-2-44: ±20 % for
    CTDIvol and DLP, from memory), under the quantity's one name."""
    from types import SimpleNamespace

    from beamaudit.api.review.quantities import QUANTITIES
    from beamaudit.api.web import page_data

    names = ("ctdivol_mgy", "dlp_mgy_cm", "reference_point_air_kerma_mgy")
    row = SimpleNamespace(**{QUANTITIES[n].column: 10.0 for n in names})
    figures = page_data._reported_figures(row)  # type: ignore[arg-type]
    assert set(figures) == set(names)
    assert "IEC 60601-2-43" in figures["reference_point_air_kerma_mgy"]["source"]
    assert figures["reference_point_air_kerma_mgy"]["uncertainty"] == pytest.approx(
        10.0 * 0.35 / 3**0.5
    )
