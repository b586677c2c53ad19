"""Events travel between processes (parser processes to the storing one) by pickle, unchanged."""

from __future__ import annotations

import copy
import pickle

from ingest_samples import PSEUDONYMISER, sample
from rdsr_builders import ct_report, fluoroscopy_report

from beamaudit.ingest import read_dataset, read_file


def test_events_survive_pickle_and_copies_unchanged() -> None:
    # pydicom's CT_small.dcm (CT image header) and built dose reports with several events
    results = [
        read_file(sample("CT_small.dcm"), pseudonymiser=PSEUDONYMISER),
        read_dataset(fluoroscopy_report(), pseudonymiser=PSEUDONYMISER, source="built"),
        read_dataset(ct_report(), pseudonymiser=PSEUDONYMISER, source="built"),
    ]
    events = [e for r in results for e in r.events]
    assert len(events) > 3
    for event in events:
        for other in (
            pickle.loads(pickle.dumps(event, protocol=pickle.HIGHEST_PROTOCOL)),
            pickle.loads(pickle.dumps(event, protocol=2)),
            copy.copy(event),
            copy.deepcopy(event),
        ):
            assert other == event
            assert other.as_dict() == event.as_dict()
    for result in results:
        assert pickle.loads(pickle.dumps(result)) == result
