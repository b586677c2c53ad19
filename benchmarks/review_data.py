"""Synthetic stored events for the review benchmark (invented data, for speed only).

Writes ``n`` exposure events (and their source objects and studies) straight
into a migrated store with bulk inserts: 10 rooms, 12 radiography exam types,
lognormal DAP, weights around 75 kg, all in one calendar month.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
from sqlalchemy import insert
from sqlalchemy.engine import Engine

from beamaudit.api.store import models as m

EXAMS = ("chest_pa", "chest_lat", "abdomen_ap", "pelvis_ap", "lumbar_spine_ap",
         "lumbar_spine_lat", "skull_ap", "hip", "knee", "thoracic_spine_ap",
         "cervical_spine_ap", "shoulder")  # fmt: skip


def fill(
    engine: Engine, n: int, *, month_start: datetime, seed: int = 0, chunk: int = 50_000
) -> None:
    rng = np.random.default_rng(seed)
    with engine.begin() as conn:
        conn.execute(insert(m.Site), [{"id": 1, "name": "Benchmark Site (invented)"}])
        conn.execute(
            insert(m.Room),
            [{"id": r, "site_id": 1, "name": f"ROOM {r}", "anode_material": "tungsten",
              "anode_angle_deg": 12.0, "ripple_percent": 0.0} for r in range(1, 11)],
        )  # fmt: skip
    n_studies = n // 2
    for start in range(0, n, chunk):
        ids = np.arange(start + 1, min(n, start + chunk) + 1)
        size = len(ids)
        study = (ids - 1) // 2 + 1
        room = rng.integers(1, 11, size)
        exam = rng.integers(0, len(EXAMS), size)
        seconds = rng.integers(0, 28 * 86400, size)
        dap = rng.lognormal(np.log(0.8), 0.5, size)
        weight = rng.normal(75, 14, size)
        with engine.begin() as conn:
            first_study = int(study[0])
            new_studies = [s for s in range(first_study, int(study[-1]) + 1)]
            if start:
                new_studies = [s for s in new_studies if s > (start // 2)]
            conn.execute(
                insert(m.Study),
                [{"id": s, "study_instance_uid": f"2.25.{s}", "has_dose_report": False}
                 for s in new_studies if s <= n_studies],
            )  # fmt: skip
            conn.execute(
                insert(m.SourceObjectRow),
                [{"id": int(i), "sop_instance_uid": f"2.25.9{i}",
                  "sop_class_uid": "1.2.840.10008.5.1.4.1.1.1.1",
                  "kind": "image_header", "modality": "DX", "study_id": int(s),
                  "received_via": "bench"}
                 for i, s in zip(ids, study, strict=True)],
            )  # fmt: skip
            conn.execute(
                insert(m.ExposureEventRow),
                [{"id": int(i), "event_key": f"2.25.9{i}#0", "source_object_id": int(i),
                  "study_id": int(s), "room_id": int(r), "source_kind": "image_header",
                  "event_index": 0, "exam_type": EXAMS[e], "superseded": False, "modality": "DX",
                  "modality_family": "projection",
                  "event_datetime": month_start + timedelta(seconds=int(t)),
                  "patient_weight_kg": float(w), "dap_gy_cm2": float(d),
                  "recon_dap_gy_cm2": float(d) / 1.02, "recon_esak_mgy": float(d) * 1.3,
                  "provenance": {}, "notes": []}
                 for i, s, r, e, t, d, w in zip(
                     ids, study, room, exam, seconds, dap, weight, strict=True)],
            )  # fmt: skip
