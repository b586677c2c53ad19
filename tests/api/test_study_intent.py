"""Screening or diagnostic for the whole study: one workup view (spot compression, magnification:
CID 4015) makes every view of its study diagnostic, unless an explicit study-level screening code
says otherwise; the deciding object is named in each view's trail. On both backends, through the
folder scan (the listener and the pull store through the same completion).

The views are the standard-built Digital Mammography image (``tests/ingest/mg_standard.py``, PS3.3
A.27) with its view and laterality changed; codes are PS3.16's (CID 4014 views, CID 4015
modifiers, as pydicom 3.0.2 lists them); procedure codes are a site's own, invented here. That a
screening examination needing a workup view is a diagnostic one is common practice.
"""

from __future__ import annotations

from pathlib import Path

from mg_standard import standard_mammogram
from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from rdsr_builders import SCREENING_INTENT, MammoEvent, mammography_report
from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.intake.study_intent import IntentReading, study_intents
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import load_or_create_key

CC = ("399162004", "SCT", "cranio-caudal")  # CID 4014
MLO = ("399368009", "SCT", "medio-lateral oblique")
SPOT = ("399055006", "SCT", "Spot Compression")  # CID 4015
SPOT_CLUE = "(0054,0222) ViewModifierCodeSequence (399055006, SCT) Spot Compression"
SCREENING_CODE = ("MGS2", "99LOCAL", "Screening mammography")  # a site's own, invented


def _code(value: str, scheme: str, meaning: str) -> Dataset:
    item = Dataset()
    item.CodeValue, item.CodingSchemeDesignator, item.CodeMeaning = value, scheme, meaning
    return item


def _view(
    instance: int,
    view: tuple[str, str, str],
    side: str,
    *,
    study: str,
    modifier: tuple[str, str, str] | None = None,
    procedure: tuple[str, str, str] | None = None,
) -> Dataset:
    ds = standard_mammogram(instance=instance)
    ds.StudyInstanceUID = study
    ds.SOPInstanceUID = f"{study}.{instance}"
    ds.ImageLaterality = side
    item = _code(*view)
    item.ViewModifierCodeSequence = Sequence([_code(*modifier)] if modifier else [])
    ds.ViewCodeSequence = Sequence([item])
    if procedure is not None:
        ds.ProcedureCodeSequence = Sequence([_code(*procedure)])
    return ds


def _four_views(study: str, **kwargs: object) -> list[Dataset]:
    views = [(CC, "R"), (CC, "L"), (MLO, "R"), (MLO, "L")]
    return [_view(i + 1, v, s, study=study, **kwargs) for i, (v, s) in enumerate(views)]  # type: ignore[arg-type]


def _spot(study: str, **kwargs: object) -> Dataset:
    return _view(5, CC, "L", study=study, modifier=SPOT, **kwargs)  # type: ignore[arg-type]


def _scan(store, tmp_path: Path, name: str, objects: list[Dataset]) -> None:
    folder = tmp_path / name
    folder.mkdir()
    for k, ds in enumerate(objects):
        ds.save_as(folder / f"{k}.dcm", enforce_file_format=True)
    summary = scan_paths(
        [folder],
        pipeline=Pipeline(store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    assert summary.errors == []


def _stored(store) -> list[tuple[object, ...]]:
    with store.session_factory() as s:
        rows = s.scalars(select(m.ExposureEventRow).order_by(m.ExposureEventRow.id)).all()
        return [
            (
                r.view_position,
                r.mammography_intent,
                r.clinical_indication,
                r.exam_type,
                (r.provenance or {}).get("mammography_intent"),
            )
            for r in rows
        ]


def _study_clue(store) -> str:
    with store.session_factory() as s:
        spot = s.scalars(
            select(m.SourceObjectRow.sop_instance_uid).where(
                m.SourceObjectRow.id.in_(
                    select(m.ExposureEventRow.source_object_id).where(
                        m.ExposureEventRow.mammography_intent == "diagnostic"
                    )
                )
            )
        ).all()
    # the spot view is the one whose own clue is the modifier
    with store.session_factory() as s:
        rows = s.scalars(select(m.ExposureEventRow)).all()
        own = [r for r in rows if r.provenance.get("mammography_intent") == SPOT_CLUE]
        (spot_row,) = own
        sop = s.get(m.SourceObjectRow, spot_row.source_object_id).sop_instance_uid
    assert sop in spot
    return f"the study: {SPOT_CLUE}, of object {sop}"


def test_a_spot_view_makes_its_whole_study_diagnostic(store, tmp_path) -> None:
    study = "1.2.826.0.1.3680043.10.1407.71"
    _scan(store, tmp_path, "in", [*_four_views(study), _spot(study)])
    clue = _study_clue(store)
    got = _stored(store)
    assert len(got) == 5
    assert all(g[1:3] == ("diagnostic", "diagnostic") for g in got)  # all five
    assert sorted(g[4] for g in got) == sorted([clue] * 4 + [SPOT_CLUE])
    assert sorted(g[3] for g in got) == ["mammo_cc"] * 3 + ["mammo_mlo"] * 2
    with store.session_factory() as s:
        kept = {r.provenance.get("mammography_intent_image") for r in s.scalars(
            select(m.ExposureEventRow)).all()}  # fmt: skip
    assert kept == {"none", None}  # the plain views' own reading: no clue; the spot's own


def test_a_plain_four_view_study_stays_screening(store, tmp_path) -> None:
    _scan(store, tmp_path, "in", _four_views("1.2.826.0.1.3680043.10.1407.72"))
    got = _stored(store)
    # no code: screening by the study description ("Screening mammography (invented)")
    assert [g[1:3] for g in got] == [(None, "screening")] * 4
    assert all(g[4] is None for g in got)


def test_a_study_level_screening_code_keeps_the_plain_views_screening(store, tmp_path) -> None:
    study = "1.2.826.0.1.3680043.10.1407.73"
    code = {"procedure": SCREENING_CODE}
    _scan(store, tmp_path, "in", [*_four_views(study, **code), _spot(study, **code)])
    got = _stored(store)
    screening_clue = "(0008,1032) ProcedureCodeSequence (MGS2, 99LOCAL) Screening mammography"
    assert sorted((g[1], g[2], g[4]) for g in got) == sorted(
        [("screening", "screening", screening_clue)] * 4 + [("diagnostic", "diagnostic", SPOT_CLUE)]
    )


def test_a_spot_view_arriving_later_turns_the_stored_views_diagnostic(store, tmp_path) -> None:
    study = "1.2.826.0.1.3680043.10.1407.74"
    _scan(store, tmp_path, "first", _four_views(study))
    assert {g[2] for g in _stored(store)} == {"screening"}
    _scan(store, tmp_path, "later", [_spot(study)])
    got = _stored(store)
    assert [g[1:3] for g in got] == [("diagnostic", "diagnostic")] * 5
    clue = _study_clue(store)
    assert [g[4] for g in got] == [clue] * 4 + [SPOT_CLUE]


def test_another_study_is_not_touched(store, tmp_path) -> None:
    _scan(
        store,
        tmp_path,
        "in",
        [*_four_views("1.2.826.0.1.3680043.10.1407.75"), _spot("1.2.826.0.1.3680043.10.1407.76")],
    )
    assert sorted(g[1] or "" for g in _stored(store)) == ["", "", "", "", "diagnostic"]


def test_a_report_of_screening_intent_keeps_its_study_screening(store, tmp_path) -> None:
    # TID 10001 Has Intent = Screening Intent is an explicit statement of the study: the spot
    # view of a header in the same study stays the only diagnostic one
    study = "1.2.826.0.1.3680043.10.1407.77"
    report = mammography_report([MammoEvent()], study_uid=study, intent=SCREENING_INTENT)
    _scan(store, tmp_path, "in", [report, _spot(study)])
    assert sorted(g[1] or "" for g in _stored(store)) == ["diagnostic", "screening"]


# ---- the decision alone
def _reading(key: int, intent: str | None, clue: str | None, **extra: str) -> IntentReading:
    provenance = {"mammography_intent": clue} if clue else {}
    return IntentReading(key, f"1.2.3.{key}", 0, intent, provenance | extra)


def test_a_later_explicit_screening_code_gives_the_views_their_own_reading_back() -> None:
    decided = study_intents([_reading(1, None, None), _reading(2, "diagnostic", SPOT_CLUE)])
    intent, provenance = decided[1]
    assert intent == "diagnostic" and provenance["mammography_intent_image"] == "none"
    again = [
        IntentReading(1, "1.2.3.1", 0, intent, provenance),
        _reading(2, "diagnostic", SPOT_CLUE),
        _reading(3, "screening", "(363703001, SCT) Has Intent = (360156006, SCT) Screening Intent"),
    ]
    assert study_intents(again) == {1: (None, {})}


def test_a_requested_screening_code_does_not_keep_the_study_screening() -> None:
    requested = "(0032,1064) RequestedProcedureCodeSequence (MGR1, 99LOCAL) Screening mammography"
    decided = study_intents(
        [_reading(1, "screening", requested), _reading(2, "diagnostic", SPOT_CLUE)]
    )
    assert decided[1][0] == "diagnostic"
    assert decided[1][1]["mammography_intent_image"] == f"screening, from {requested}"
    assert decided[1][1]["mammography_intent"] == f"the study: {SPOT_CLUE}, of object 1.2.3.2"


def test_the_deciding_view_does_not_depend_on_arrival_order() -> None:
    procedure = "(0008,1032) ProcedureCodeSequence (MGD1, 99LOCAL) Diagnostic mammogram"
    readings = [_reading(3, "diagnostic", procedure), _reading(2, "diagnostic", SPOT_CLUE),
                _reading(1, None, None)]  # fmt: skip
    for order in (readings, readings[::-1]):
        (only,) = study_intents(order).values()
        assert only[1]["mammography_intent"].endswith("Spot Compression, of object 1.2.3.2")
