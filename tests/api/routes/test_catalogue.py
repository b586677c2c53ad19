"""The exam-type catalogue and mapping rules: CRUD, CSV import and export, audit, roles.

The shipped catalogue and rules (``beamaudit/api/data``) serve as the real-world input: what the
API imports and exports must be what the review core reads from the same files.
"""

from __future__ import annotations

import io
from importlib import resources

import pytest
from api_support import validation_only
from sqlalchemy import select

from beamaudit.api.review.examtypes import (
    load_default_catalogue,
    load_default_rules,
    read_catalogue_csv,
    read_rules_csv,
)
from beamaudit.api.store import models as m

CSV = {"Content-Type": "text/csv"}

CHEST_PA = {
    "exam_type": "chest_pa_local",
    "name": "Chest PA (local)",
    "modality_group": "radiography",
    "dicom_modalities": ["CR", "DX"],
    "level_applies_per": "projection",
    "quantities": ["dap_gy_cm2", "esak_mgy"],
}


def shipped(name: str) -> bytes:
    return resources.files("beamaudit.api").joinpath("data", name).read_bytes()


def audit_actions(api, entity):
    with api.store.session_factory() as s:
        rows = s.scalars(
            select(m.AuditLogEntry)
            .where(m.AuditLogEntry.entity == entity)
            .order_by(m.AuditLogEntry.id)
        )
        return [(e.action, e.entity_id) for e in rows]


@pytest.fixture
def catalogue(api):
    response = api.post(
        "/exam-types.csv", content=shipped("exam_types.csv"), headers=CSV, as_="physicist"
    )
    assert response.status_code == 200, response.text
    return response.json()


def test_an_empty_store_gets_the_shipped_catalogue_on_first_use(api) -> None:
    listed = api.get("/exam-types", as_="physicist").json()
    assert [t["exam_type"] for t in listed] == sorted(t.exam_type for t in load_default_catalogue())
    assert len(api.get("/mapping-rules").json()) == len(load_default_rules().rules)
    assert audit_actions(api, "exam_catalogue") == [("seed", None)]


def test_shipped_catalogue_round_trips(api, catalogue) -> None:
    expected = load_default_catalogue()
    assert len(catalogue) == len(expected)
    exported = api.get("/exam-types.csv")
    assert exported.headers["content-type"].startswith("text/csv")
    back = read_catalogue_csv(io.BytesIO(exported.content))
    assert sorted(back.types, key=lambda t: t.exam_type) == sorted(
        expected.types, key=lambda t: t.exam_type
    )
    # the store was seeded with the same file: importing it changes nothing, audits nothing
    assert audit_actions(api, "exam_type") == []
    edited = shipped("exam_types.csv").replace(b"Chest PA,", b"Chest posteroanterior,", 1)
    changed = api.post("/exam-types.csv", content=edited, headers=CSV).json()
    assert (
        next(t for t in changed if t["exam_type"] == "chest_pa")["name"] == "Chest posteroanterior"
    )
    assert audit_actions(api, "exam_type") == [("update", "chest_pa")]


def test_shipped_rules_round_trip(api, catalogue) -> None:
    response = api.put("/mapping-rules.csv", content=shipped("mapping_rules.csv"), headers=CSV)
    assert response.status_code == 200, response.text
    expected = load_default_rules()
    assert [r["priority"] for r in response.json()] == [r.priority for r in expected.rules]
    back = read_rules_csv(io.BytesIO(api.get("/mapping-rules.csv").content))
    assert [(r.priority, r.exam_type, r.patterns) for r in back.rules] == [
        (r.priority, r.exam_type, r.patterns) for r in expected.rules
    ]
    assert audit_actions(api, "mapping_rules") == [("replace", None)]


@validation_only
def test_bad_csv_is_422_with_line_numbers(api) -> None:
    text = "exam_type,name,modality_group,dicom_modalities,level_applies_per,quantities\n"
    text += "Chest PA,Chest,radiography,DX,projection,dap_gy_cm2\n"
    text += "abdomen,Abdomen,radiography,DX,sideways,dap_gy_cm2\n"
    response = api.post("/exam-types.csv", content=text.encode(), headers=CSV)
    assert response.status_code == 422
    problems = response.json()["detail"]
    assert [p["loc"] for p in problems] == [["body", "line", 2], ["body", "line", 3]]
    assert "lower-case" in problems[0]["msg"] and "level_applies_per" in problems[1]["msg"]
    assert (
        api.post(
            "/exam-types.csv", content=b"x", headers={"Content-Type": "application/json"}
        ).status_code
        == 415
    )


def test_exam_type_crud_is_audited(api) -> None:
    created = api.post("/exam-types", json=CHEST_PA, as_="physicist")
    assert created.status_code == 201, created.text
    assert api.post("/exam-types", json=CHEST_PA).status_code == 409
    changed = api.patch("/exam-types/chest_pa_local", json={"name": "Chest posteroanterior"})
    assert changed.json()["name"] == "Chest posteroanterior"
    assert api.get("/exam-types/chest_pa_local").json()["quantities"] == ["dap_gy_cm2", "esak_mgy"]
    assert api.delete("/exam-types/chest_pa_local").status_code == 204
    assert api.get("/exam-types/chest_pa_local").status_code == 404
    assert audit_actions(api, "exam_type") == [
        ("create", "chest_pa_local"),
        ("update", "chest_pa_local"),
        ("delete", "chest_pa_local"),
    ]


@validation_only
@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"aggregation": {"dap_gy_cm2": "sum"}}, "aggregation"),  # projection types have none
        ({"quantities": ["dap_gy_cm2", "dap_gy_cm2"]}, "quantities"),
        ({"quantities": ["kerma"]}, "quantities"),
        ({"modality_group": "radiotherapy"}, "modality_group"),
        ({"dicom_modalities": ["dx"]}, "dicom_modalities"),
        ({"name": None}, "name"),
    ],
)
def test_bad_exam_type_changes_are_422(api, change, field) -> None:
    response = api.patch("/exam-types/chest_pa", json=change)
    assert response.status_code == 422
    assert field in [str(p) for d in response.json()["detail"] for p in d["loc"]]


def test_aggregation_on_examination_types(api) -> None:
    body = CHEST_PA | {
        "exam_type": "ct_head_local",
        "modality_group": "ct",
        "dicom_modalities": ["CT"],
        "level_applies_per": "examination",
        "quantities": ["ctdivol_mgy", "dlp_mgy_cm"],
        "aggregation": {"ctdivol_mgy": "mean"},
    }
    assert api.post("/exam-types", json=body).json()["aggregation"] == {"ctdivol_mgy": "mean"}
    response = api.patch("/exam-types/ct_head_local", json={"quantities": ["dlp_mgy_cm"]})
    assert response.status_code == 422  # the kept aggregation names a quantity no longer reviewed
    assert response.json()["detail"][0]["loc"] == ["body", "aggregation"]


def test_mapping_rule_crud(api) -> None:
    api.post("/exam-types", json=CHEST_PA)
    rule = {
        "priority": 10,
        "exam_type": "chest_pa_local",
        "patterns": {"modality": "CR|DX", "body_part": "CHEST"},
    }
    created = api.post("/mapping-rules", json=rule, as_="physicist")
    assert created.status_code == 201, created.text
    rule_id = created.json()["id"]
    assert api.post("/mapping-rules", json=rule).status_code == 409  # priority taken
    assert api.delete("/exam-types/chest_pa_local").status_code == 409  # in use by the rule
    moved = api.patch(f"/mapping-rules/{rule_id}", json={"priority": 20, "note": "moved"}).json()
    assert (moved["priority"], moved["note"]) == (20, "moved")
    assert rule_id in [r["id"] for r in api.get("/mapping-rules").json()]
    assert api.delete(f"/mapping-rules/{rule_id}").status_code == 204
    assert api.get(f"/mapping-rules/{rule_id}").status_code == 404
    assert [a for a, _ in audit_actions(api, "mapping_rule")] == ["create", "update", "delete"]


@pytest.mark.parametrize(
    ("rule", "loc"),
    [
        (
            {"priority": 1, "exam_type": "nope", "patterns": {"modality": "DX"}},
            ["body", "exam_type"],
        ),
        (
            {"priority": 1, "exam_type": "chest_pa", "patterns": {"modality": "re:("}},
            ["body", "patterns", "modality"],
        ),
        ({"priority": 1, "exam_type": "chest_pa", "patterns": {}}, ["body", "patterns"]),
        (
            {"priority": 1, "exam_type": "chest_pa", "patterns": {"colour": "red"}},
            ["body", "patterns", "colour", "[key]"],
        ),
    ],
)
def test_bad_rules_are_422(api, rule, loc) -> None:
    response = api.post("/mapping-rules", json=rule)
    assert response.status_code == 422
    assert loc in [d["loc"] for d in response.json()["detail"]]


def test_rules_csv_naming_unknown_exam_types_is_refused(api) -> None:
    text = b"priority,exam_type,modality\n10,no_such_type,DX\n"
    response = api.put("/mapping-rules.csv", content=text, headers=CSV)
    assert response.status_code == 422
    assert "not in the catalogue" in response.json()["detail"][0]["msg"]


def test_viewer_cannot_read_or_edit_the_catalogue(api) -> None:
    assert api.get("/exam-types", as_="viewer").status_code == 403
    assert api.post("/exam-types", json=CHEST_PA, as_="viewer").status_code == 403


def test_changing_an_exam_type_keeps_its_paediatric_bands(api, catalogue) -> None:
    # the shipped catalogue bands chest PA by weight (ICRP 135; EC RP 185); the REST change and the
    # CSV import write through one mapping, so renaming it must not stop children being banded
    from beamaudit.api.store.review_rows import catalogue_from_store

    assert api.patch("/exam-types/chest_pa", json={"name": "Chest PA (renamed)"}).status_code == 200
    with api.store.session_factory() as session:
        chest = catalogue_from_store(session).get("chest_pa")
    assert chest is not None
    assert (chest.name, chest.paediatric_bands) == ("Chest PA (renamed)", "weight")
