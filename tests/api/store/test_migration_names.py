"""Migration ``0010_names19``: a quantity's name stored as data (levels, exam types, findings and
their keys, flags, review results) follows the one name per quantity, and the downgrade writes
the names earlier versions used back. The rows are invented."""

from __future__ import annotations

from datetime import date

from alembic import command
from sqlalchemy import select

from beamaudit.api.store import models as m
from beamaudit.api.store.finding_identity import finding_key
from beamaudit.api.store.migrate import alembic_config, upgrade

SUBJECT = {"room": "ANGIO 1", "exam_type": "xa_pci", "quantity": "reference_point_air_kerma_mgy"}
NUMBERS = {"reference_point_air_kerma_mgy": 6200.0, "reference_point_air_kerma_mgy_srdl": 5000.0}


def _rows(session) -> None:
    level_set = m.ReferenceLevelSetRow(
        name="Hollowbrook local DRLs (invented)", kind="local", version="1",
        effective_from=date(2026, 1, 1),
    )  # fmt: skip
    session.add(level_set)
    session.flush()
    session.add_all(
        [
            m.ReferenceLevelRow(set_id=level_set.id, exam_type="xa_pci", value=1400.0,
                                quantity="reference_point_air_kerma_mgy", unit="mGy"),
            m.ReferenceLevelRow(set_id=level_set.id, exam_type="mammo_cc", value=2.0,
                                quantity="mgd_mgy", unit="mGy"),
            m.ExamTypeRow(code="mammo_x", name="Invented view", modality="mammography",
                          level_applies_per="projection", quantities=["mgd_mgy", "esak_mgy"],
                          details={"aggregation": {}}),
        ]
    )  # fmt: skip
    run = m.ReviewRun(kind="monthly", period="2026-10", software_version="0.1.0", status="done",
                      result={"groups": [{"quantity": "mgd_mgy", "median": 1.1}]})  # fmt: skip
    finding = m.Finding(key=finding_key("srdl_exceeded", "2026-10", SUBJECT),
                        kind="srdl_exceeded", period="2026-10", subject=SUBJECT)  # fmt: skip
    session.add_all([run, finding])
    session.flush()
    session.add(
        m.FlagRow(review_run_id=run.id, finding_id=finding.id, kind="srdl_exceeded",
                  severity="warning", reason="invented", numbers=NUMBERS)
    )  # fmt: skip


def _stored(session) -> dict:
    finding = session.scalars(select(m.Finding)).one()
    return {
        "levels": sorted(session.scalars(select(m.ReferenceLevelRow.quantity))),
        "exam_type": session.get(m.ExamTypeRow, "mammo_x").quantities,
        "result": session.scalars(select(m.ReviewRun)).one().result["groups"][0]["quantity"],
        "subject": finding.subject["quantity"],
        "key_fits": finding.key == finding_key(finding.kind, finding.period, finding.subject),
        "numbers": sorted(session.scalars(select(m.FlagRow)).one().numbers),
    }


def test_stored_names_go_down_to_the_old_ones_and_up_again(store) -> None:
    with store.session_factory() as session, session.begin():
        _rows(session)
    new = {
        "levels": ["mgd_mgy", "reference_point_air_kerma_mgy"],
        "exam_type": ["mgd_mgy", "esak_mgy"],
        "result": "mgd_mgy",
        "subject": "reference_point_air_kerma_mgy",
        "key_fits": True,
        "numbers": ["reference_point_air_kerma_mgy", "reference_point_air_kerma_mgy_srdl"],
    }
    command.downgrade(alembic_config(store.engine), "0009_ct_size")
    with store.session_factory() as session:
        assert _stored(session) == {
            "levels": ["agd_mgy", "ref_point_air_kerma_mgy"],
            "exam_type": ["agd_mgy", "esak_mgy"],
            "result": "agd_mgy",
            "subject": "ref_point_air_kerma_mgy",
            "key_fits": True,
            "numbers": ["ref_point_air_kerma_mgy", "ref_point_air_kerma_mgy_srdl"],
        }
    upgrade(store.engine)
    with store.session_factory() as session:
        assert _stored(session) == new
