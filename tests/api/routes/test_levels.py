"""Reference-level sets: create, read, update, retire, CSV import and export, audit, roles.

The shipped national levels (``beamaudit/api/data/national_levels.csv``, each value with its
published source) are the real-world input: imported through the API and exported again, they
must be what the review core reads from the file itself.
"""

from __future__ import annotations

import io
from importlib import resources

import pytest
from api_support import validation_only
from sqlalchemy import select

from beamaudit.api.review.levels import load_national_levels, read_levels_csv
from beamaudit.api.store import models as m

CSV = {"Content-Type": "text/csv"}

LOCAL = {
    "name": "Hollowbrook local DRLs (invented)",
    "kind": "local",
    "version": "2026-1",
    "effective_from": "2026-01-01",
    "source": "dose committee, invented for tests",
    "levels": [
        # 250 mGy·cm² is 0.25 Gy·cm² (the review core's own worked example of the conversion)
        {"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 250, "unit": "mGy.cm2"},
        {"exam_type": "chest_pa", "quantity": "esak_mgy", "value": 0.2},
    ],
}


def shipped(name: str) -> bytes:
    return resources.files("beamaudit.api").joinpath("data", name).read_bytes()


@pytest.fixture
def catalogue(api):
    assert (
        api.post("/exam-types.csv", content=shipped("exam_types.csv"), headers=CSV).status_code
        == 200
    )


def test_shipped_national_levels_round_trip(api, catalogue) -> None:
    response = api.post(
        "/level-sets.csv", content=shipped("national_levels.csv"), headers=CSV, as_="physicist"
    )
    assert response.status_code == 201, response.text
    expected = {(s.name, s.version): s for s in load_national_levels()}
    assert {(s["name"], s["version"]) for s in response.json()} == set(expected)
    back = read_levels_csv(io.BytesIO(api.get("/level-sets.csv").content))
    for s in back:
        want = expected[(s.name, s.version)]
        assert (s.kind, s.effective_from, s.source) == (want.kind, want.effective_from, want.source)
        got = sorted((e.exam_type, e.quantity, e.value, e.unit, e.source) for e in s.entries)
        assert got == sorted(
            (e.exam_type, e.quantity, e.value, e.unit, e.source) for e in want.entries
        )
    again = api.post("/level-sets.csv", content=shipped("national_levels.csv"), headers=CSV)
    assert again.status_code == 409  # the same versions cannot be added twice


def test_create_converts_units_and_is_audited(api, catalogue) -> None:
    response = api.post("/level-sets", json=LOCAL, as_="physicist")
    assert response.status_code == 201, response.text
    body = response.json()
    levels = {(x["quantity"]): x for x in body["levels"]}
    assert (
        levels["dap_gy_cm2"]["value"] == pytest.approx(0.25)
        and levels["dap_gy_cm2"]["unit"] == "Gy.cm2"
    )
    assert levels["esak_mgy"]["unit"] == "mGy"
    assert api.get(f"/level-sets/{body['id']}").json() == body
    one = read_levels_csv(io.BytesIO(api.get(f"/level-sets/{body['id']}/levels.csv").content))
    assert [s.version for s in one] == ["2026-1"]
    with api.store.session_factory() as s:
        (entry,) = s.scalars(
            select(m.AuditLogEntry).where(m.AuditLogEntry.entity == "reference_level_set")
        )
    assert entry.action == "create" and len(entry.after["levels"]) == 2


def test_update_replaces_levels_then_retire_freezes_the_set(api, catalogue) -> None:
    set_id = api.post("/level-sets", json=LOCAL).json()["id"]
    new_levels = [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.2}]
    changed = api.patch(
        f"/level-sets/{set_id}", json={"levels": new_levels, "source": "committee 2026-02"}
    )
    assert changed.status_code == 200, changed.text
    assert [(x["quantity"], x["value"]) for x in changed.json()["levels"]] == [("dap_gy_cm2", 0.2)]
    retired = api.post(f"/level-sets/{set_id}/retire", as_="physicist")
    assert retired.json()["retired_at"] is not None
    assert (
        api.post(f"/level-sets/{set_id}/retire").json()["retired_at"]
        == retired.json()["retired_at"]
    )
    assert api.patch(f"/level-sets/{set_id}", json={"source": "x"}).status_code == 409
    assert api.get("/level-sets").json() == []
    assert [s["id"] for s in api.get("/level-sets", params={"include_retired": True}).json()] == [
        set_id
    ]
    with api.store.session_factory() as s:
        entries = list(
            s.scalars(
                select(m.AuditLogEntry)
                .where(m.AuditLogEntry.entity == "reference_level_set")
                .order_by(m.AuditLogEntry.id)  # PostgreSQL returns rows in no set order
            )
        )
    assert [e.action for e in entries] == ["create", "update", "retire"]
    update = entries[1]
    assert update.before["levels"][0]["value"] == pytest.approx(0.25)
    assert update.after["source"] == "committee 2026-02"


def test_versions_of_one_name_must_agree(api, catalogue) -> None:
    api.post("/level-sets", json=LOCAL)
    assert api.post("/level-sets", json=LOCAL).status_code == 409  # same name and version
    same_day = LOCAL | {"version": "2026-2"}
    assert api.post("/level-sets", json=same_day).status_code == 409  # same effective date
    other_kind = LOCAL | {
        "version": "2026-3",
        "effective_from": "2026-06-01",
        "kind": "national",
        "levels": [LOCAL["levels"][1] | {"source": "a table"}],
    }
    assert api.post("/level-sets", json=other_kind).status_code == 409
    later = LOCAL | {"version": "2026-4", "effective_from": "2026-07-01"}
    assert api.post("/level-sets", json=later).status_code == 201


@validation_only
@pytest.mark.parametrize(
    ("change", "loc"),
    [
        ({"kind": "national"}, ["body", "levels"]),  # national levels need their published source
        (
            {"levels": [{"exam_type": "nope", "quantity": "dap_gy_cm2", "value": 1}]},
            ["body", "levels", 0, "exam_type"],
        ),
        (
            {"levels": [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": -1}]},
            ["body", "levels", 0, "value"],
        ),
        (
            {
                "levels": [
                    {"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 1, "unit": "mGy"}
                ]
            },
            ["body", "levels", 0],
        ),
        ({"levels": [LOCAL["levels"][0], LOCAL["levels"][0]]}, ["body", "levels"]),
        ({"effective_from": "0001-01-01"}, ["body", "effective_from"]),
        ({"kind": "regional"}, ["body", "kind"]),
    ],
)
def test_bad_sets_are_422_naming_the_field(api, catalogue, change, loc) -> None:
    response = api.post("/level-sets", json=LOCAL | change)
    assert response.status_code == 422, response.text
    assert loc in [d["loc"] for d in response.json()["detail"]]


def test_unknown_set_is_404_and_viewer_is_403(api) -> None:
    assert api.get("/level-sets/424242").status_code == 404
    assert api.post("/level-sets/424242/retire").status_code == 404
    assert api.get("/level-sets", as_="viewer").status_code == 403


def test_levels_for_a_band_or_an_indication_are_kept_with_them(api, catalogue) -> None:
    # a child's level stored without its band would apply to adults: the band and the
    # indication are stored, shown, exported and read back as they were
    text = (
        "set_name,kind,version,effective_from,set_source,exam_type,quantity,value,unit,source,"
        "note,patient_group,clinical_indication\n"
        "Paed (invented),local,1,2026-01-01,tests,chest_pa,dap_gy_cm2,0.1,Gy.cm2,,,,\n"
        "Paed (invented),local,1,2026-01-01,tests,chest_pa,dap_gy_cm2,0.02,Gy.cm2,,,"
        "weight_15_30kg,\n"
    )
    response = api.post("/level-sets.csv", content=text.encode(), headers=CSV, as_="physicist")
    assert response.status_code == 201, response.text
    (stored,) = api.get("/level-sets").json()
    assert [(x["patient_group"], x["value"]) for x in stored["levels"]] == [
        ("", 0.1),
        ("weight_15_30kg", 0.02),
    ]
    exported = api.get(f"/level-sets/{stored['id']}/levels.csv").text
    assert "weight_15_30kg" in exported


def test_a_level_for_an_unknown_band_is_422(api, catalogue) -> None:
    level = {"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.1}
    body = LOCAL | {"levels": [level | {"patient_group": "toddlers"}]}
    response = api.post("/level-sets", json=body)
    assert response.status_code == 422
    assert "is not a band" in response.text
    twice = LOCAL | {"levels": [level, level | {"clinical_indication": "acute_stroke"}]}
    assert api.post("/level-sets", json=twice).status_code == 201


def test_a_csv_version_clashing_with_a_stored_one_is_409_as_on_the_command_line(
    api, catalogue
) -> None:
    # the same file `beamaudit levels import` refuses (tests/api/cli/test_levels.py)
    head = "set_name,kind,version,effective_from,set_source,exam_type,quantity,value,unit,source\n"
    local = head + "X (invented),local,v1,2025-01-01,tests,chest_pa,dap_gy_cm2,0.2,Gy.cm2,\n"
    national = (
        head + "X (invented),national,v2,2025-01-01,tests,chest_pa,dap_gy_cm2,0.2,Gy.cm2,t1\n"
    )
    assert api.post("/level-sets.csv", content=local.encode(), headers=CSV).status_code == 201
    response = api.post("/level-sets.csv", content=national.encode(), headers=CSV)
    assert response.status_code == 409
    assert "both local and national" in response.json()["detail"]
    both = local + national.split("\n", 1)[1]
    response = api.post("/level-sets.csv", content=both.encode(), headers=CSV)
    assert response.status_code == 422 and "both local and national" in response.text
    assert [s["version"] for s in api.get("/level-sets").json()] == ["v1"]


def test_a_ct_level_may_carry_a_size_band_and_keeps_it(api, catalogue) -> None:
    # CT levels by patient size (Dw bands, api/review/ct_size.py): stored, shown, read back
    level = {"exam_type": "ct_chest", "quantity": "ctdivol_mgy", "value": 8.0}
    body = LOCAL | {"levels": [level, level | {"value": 11.0, "patient_group": "ct_dw_25_30cm"}]}
    response = api.post("/level-sets", json=body)
    assert response.status_code == 201, response.text
    (stored,) = api.get("/level-sets").json()
    assert sorted((x["patient_group"], x["value"]) for x in stored["levels"]) == [
        ("", 8.0),
        ("ct_dw_25_30cm", 11.0),
    ]
    unknown = LOCAL | {"version": "9", "levels": [level | {"patient_group": "ct_dw_not_known"}]}
    response = api.post("/level-sets", json=unknown)
    assert response.status_code == 422 and "nor a CT size band" in response.text


def test_a_mammography_level_may_carry_a_thickness_band_and_keeps_it(api, catalogue) -> None:
    # mammography levels per compressed-thickness band (api/review/mammography.py), in the same
    # column as a CT level's size band
    level = {"exam_type": "mammo_cc", "quantity": "mgd_mgy", "value": 2.5}
    body = LOCAL | {"levels": [level, level | {"value": 2.0, "patient_group": "breast_45_55mm"}]}
    response = api.post("/level-sets", json=body)
    assert response.status_code == 201, response.text
    (stored,) = api.get("/level-sets").json()
    assert sorted((x["patient_group"], x["value"]) for x in stored["levels"]) == [
        ("", 2.5),
        ("breast_45_55mm", 2.0),
    ]
    for name in ("breast_outside_thickness_band", "breast_55_45mm"):
        bad = LOCAL | {"version": "9", "levels": [level | {"patient_group": name}]}
        response = api.post("/level-sets", json=bad)
        assert response.status_code == 422 and "nor a breast thickness band" in response.text


def test_old_quantity_names_are_taken_as_the_new_ones(api, catalogue) -> None:
    # the names versions before one-name-per-quantity wrote (QUANTITY_ALIASES), in JSON and CSV
    old = [
        {"exam_type": "xa_pci", "quantity": "ref_point_air_kerma_mgy", "value": 1.4, "unit": "Gy"},
        {"exam_type": "mammo_cc", "quantity": "agd_mgy", "value": 2.0},
    ]
    response = api.post("/level-sets", json=LOCAL | {"levels": old})
    assert response.status_code == 201, response.text
    stored = {(x["quantity"], x["value"]) for x in api.get("/level-sets").json()[0]["levels"]}
    assert stored == {("reference_point_air_kerma_mgy", 1400.0), ("mgd_mgy", 2.0)}
    exported = api.get("/level-sets.csv").text
    assert "reference_point_air_kerma_mgy" in exported and "mgd_mgy" in exported
    assert "ref_point_air_kerma_mgy" not in exported and "agd_mgy" not in exported
