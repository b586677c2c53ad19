"""A patient's cumulative skin dose on the store: the stored maps added on one patient-surface
grid, the sum of the peaks where they cannot be (api/store/skin_doses.py), on both backends.

A hand-made history (invented; dose reports built to DICOM PS3.16 TID 10001/10003 by
tests/ingest/rdsr_builders.py): one patient with two procedures whose fields overlap (the same
posterior field twice), another with two whose fields do not (a posterior and an anterior
field). By the definition of the cumulative map, D_c = sum over procedures of D_c,p and the
cumulative peak = max over cells c: where the fields coincide the peaks add, where they share
no cell the cumulative peak is the larger single peak.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest
from ingest_samples import to_bytes
from rdsr_builders import fluoroscopy_report
from sqlalchemy import select
from test_skin_doses import rows, run, scan

from beamaudit.api.intake.skin import compute_study_skin_dose
from beamaudit.api.store import models as m
from beamaudit.api.store.skin_doses import cumulative_skin_doses, patient_skin_dose

UID = "1.2.826.0.1.3680043.10.2."
# suffix: (patient, K_a,r in Gy, C-arm primary angle in degrees, day of November 2026)
HISTORY = {
    "201": ("P-OVERLAP", 2.0, 0.0, 2),
    "202": ("P-OVERLAP", 1.5, 0.0, 20),
    "203": ("P-APART", 2.0, 0.0, 3),
    "204": ("P-APART", 1.5, 180.0, 21),
}
AS_OF = datetime(2026, 11, 30)


def store_history(store, tmp_path: Path) -> dict[str, m.SkinDoseRow]:
    folder = tmp_path / "in"
    folder.mkdir()
    for suffix, (_, kar, angle, _) in HISTORY.items():
        report = fluoroscopy_report([run(kar, angle)], study_uid=UID + suffix)
        (folder / f"{suffix}.dcm").write_bytes(to_bytes(report))
    scan(store, folder, tmp_path)
    with store.session_factory.begin() as s:
        for study in s.scalars(select(m.Study)):
            patient, _, _, day = HISTORY[study.study_instance_uid.rsplit(".", 1)[1]]
            study.patient_pseudo_id = patient
            study.study_datetime = datetime(2026, 11, day, 9, 30)
    found = rows(store)
    assert all(found[k].status == "ok" for k in HISTORY)
    return found


def test_overlapping_fields_add_and_separate_fields_do_not(store, tmp_path) -> None:
    found = store_history(store, tmp_path)
    psd = {k: found[k].peak_skin_dose_mgy for k in HISTORY}
    with store.session_factory() as s:
        entries = {e.patient_pseudo_id: e for e in cumulative_skin_doses(
            s, window_days=60.0, as_of=AS_OF)}  # fmt: skip
    overlap, apart = entries["P-OVERLAP"], entries["P-APART"]
    # the same field twice: the peaks fall on the same cell and add
    assert overlap.method.startswith("maps_added")
    assert overlap.peak_skin_dose_mgy == pytest.approx(psd["201"] + psd["202"], rel=1e-4)
    # back and front share no cell: the cumulative peak is the larger single peak
    assert apart.method.startswith("maps_added")
    assert apart.peak_skin_dose_mgy == pytest.approx(max(psd["203"], psd["204"]), rel=1e-4)
    assert apart.upper_bound_mgy == pytest.approx(psd["203"] + psd["204"], rel=1e-9)
    assert apart.lower_bound_mgy == pytest.approx(max(psd["203"], psd["204"]), rel=1e-9)
    # the added map is there to be drawn, its peak on the overlapping field
    record = overlap.map_record
    assert record is not None and record["peak_skin_dose_mgy"] == pytest.approx(
        overlap.peak_skin_dose_mgy, rel=1e-9
    )
    assert record["peak"]["side"] == found["201"].record["peak"]["side"]
    assert record["area_above_cm2"]["3000"] >= found["201"].area_above_3gy_cm2


def test_maps_of_different_patient_models_give_the_sum_of_the_peaks(store, tmp_path) -> None:
    found = store_history(store, tmp_path)
    with store.session_factory.begin() as s:
        study = s.scalar(select(m.Study).where(m.Study.study_instance_uid == UID + "202"))
        study.patient_height_m, study.patient_weight_kg = 1.62, 95.0  # recorded this time
        compute_study_skin_dose(s, study.id)
    again = rows(store)
    with store.session_factory() as s:
        entry = patient_skin_dose(s, "P-OVERLAP", window_days=60.0, as_of=AS_OF)
    assert entry is not None and entry.method == "peaks_added"
    total = found["201"].peak_skin_dose_mgy + again["202"].peak_skin_dose_mgy
    assert entry.peak_skin_dose_mgy == pytest.approx(total, rel=1e-9)
    assert entry.upper_bound_mgy == entry.peak_skin_dose_mgy and entry.map_record is None
    assert any("upper bound" in note for note in entry.notes)


def test_a_procedure_without_a_map_is_named_not_dropped(store, tmp_path) -> None:
    found = store_history(store, tmp_path)
    with store.session_factory.begin() as s:
        skin = s.scalar(
            select(m.SkinDoseRow).join(m.Study).where(m.Study.study_instance_uid == UID + "202")
        )
        skin.status, skin.reason, skin.record = "failed", "skin-dose map not computed: test", None
    with store.session_factory() as s:
        entry = patient_skin_dose(s, "P-OVERLAP", window_days=60.0, as_of=AS_OF)
        alone = patient_skin_dose(s, "P-APART", window_days=10.0, as_of=AS_OF)
        nobody = patient_skin_dose(s, "P-NOBODY", window_days=60.0, as_of=AS_OF)
    assert entry is not None and len(entry.study_uids) == 2
    assert entry.peak_skin_dose_mgy == pytest.approx(found["201"].peak_skin_dose_mgy, rel=1e-4)
    assert any(UID + "202" in note and "lower bound" in note for note in entry.notes)
    # one procedure in a 10-day window: its own map (not on the list of several procedures)
    assert alone is not None and alone.study_uids == (UID + "204",)
    assert alone.peak_skin_dose_mgy == pytest.approx(found["204"].peak_skin_dose_mgy, rel=1e-4)
    assert nobody is None
