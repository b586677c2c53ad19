"""The conformance statement says exactly what the code does: the shipped file is what
``beamaudit conformance`` writes now, its SOP class table is the listener's (UIDs checked against
pydicom's UID dictionary, which follows PS3.6 Annex A), and the listener refuses a class that is
not in it and accepts each one that is (a real association on loopback)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from pydicom.uid import UID
from pynetdicom import AE

from beamaudit.api.cli.conformance import conformance_statement, listener_sop_classes
from beamaudit.ingest.listener import ListenerConfig, StoreOutcome, start_listener

SHIPPED = Path(__file__).parents[3] / "docs" / "DICOM-CONFORMANCE.md"


def _section(text: str, title: str) -> str:
    return text.split(title, 1)[1].split("\n### ", 1)[0]


def test_the_shipped_statement_is_what_the_code_writes() -> None:
    assert SHIPPED.read_text(encoding="utf-8") == conformance_statement(), (
        "docs/DICOM-CONFORMANCE.md is stale: run "
        "`beamaudit conformance -o docs/DICOM-CONFORMANCE.md`"
    )


def test_the_statements_sop_classes_are_the_listeners() -> None:
    table = _section(SHIPPED.read_text(encoding="utf-8"), "### 2.2 The listener's SOP classes")
    uids = re.findall(r"\| `([0-9.]+)` \| No \| Yes \|", table)
    assert uids == [*ListenerConfig().sop_classes, "1.2.840.10008.1.1"]
    for uid, name in listener_sop_classes().items():
        assert UID(uid).name == name  # PS3.6 Annex A, as pydicom's dictionary has it
        assert f"| {name} | `{uid}` |" in table


def test_the_statements_transfer_syntaxes_are_the_listeners() -> None:
    from beamaudit.ingest.listener import storage_contexts

    text = SHIPPED.read_text(encoding="utf-8")
    listed = re.findall(
        r"\| `(1\.2\.840\.10008\.1\.2[0-9.]*)` \|", text.split("Verification is")[0]
    )
    expected = [str(t) for t in storage_contexts(listener_sop_classes())[0].transfer_syntax]
    assert listed == expected


@pytest.mark.parametrize(
    ("uid", "accepted"),
    [
        ("1.2.840.10008.5.1.4.1.1.88.67", True),  # X-Ray Radiation Dose SR Storage
        ("1.2.840.10008.5.1.4.1.1.1.1", True),  # Digital X-Ray Image Storage - For Presentation
        ("1.2.840.10008.5.1.4.1.1.4", False),  # MR Image Storage: not in the statement
        ("1.2.840.10008.5.1.4.1.1.128", False),  # PET Image Storage: not in the statement
    ],
)
def test_the_listener_negotiates_as_the_statement_says(uid: str, accepted: bool) -> None:
    assert (uid in listener_sop_classes()) is accepted
    with start_listener(ListenerConfig(port=0), lambda r: StoreOutcome.stored()) as listener:
        ae = AE(ae_title="CONFTEST")
        ae.add_requested_context(uid, "1.2.840.10008.1.2.1")
        ae.add_requested_context("1.2.840.10008.1.1")
        assoc = ae.associate("127.0.0.1", listener.port, ae_title="BEAMAUDIT")
        try:
            assert assoc.is_established
            by_class = {c.abstract_syntax: c for c in assoc.accepted_contexts}
            assert (uid in by_class) is accepted
        finally:
            assoc.release()
