"""beamaudit's DICOM conformance statement (the layout of PS3.2 Annex A) and its IHE REM
statement, written from the code's own tables so that they cannot drift from it.

``beamaudit conformance`` (below) prints it; the repository ships it as
``docs/DICOM-CONFORMANCE.md``, and ``tests/api/ops/test_conformance.py`` fails when the shipped
file is not what this module writes now (or when its SOP class list is not the listener's).
The tables come from:

* the listener's storage SOP classes and presentation contexts
  (:data:`beamaudit.ingest.listener.IMAGE_STORAGE_SOP_CLASSES` and its siblings,
  :func:`beamaudit.ingest.listener.storage_contexts`) and its limits
  (:class:`beamaudit.api.settings.ListenerSettings`);
* the C-STORE statuses it answers (:class:`beamaudit.ingest.listener.StoreStatus`);
* what is read from each object (:data:`beamaudit.ingest.mapping.MAPPING`);
* pynetdicom's implementation class UID, version name and maximum PDU length.

The prose between the tables is ours; the standard's terms are used as the standard defines
them (PS3.2, PS3.4, PS3.7, PS3.16, PS3.18; IHE Radiology Technical Framework, REM profile).
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Annotated

import typer

__all__ = ["conformance_statement", "listener_sop_classes", "register"]


def listener_sop_classes() -> dict[str, str]:
    """The storage SOP classes the listener accepts as SCP by default: UID -> name."""
    from beamaudit.ingest.listener import (
        DOSE_REPORT_STORAGE_SOP_CLASSES,
        GENERIC_SR_STORAGE_SOP_CLASSES,
        IMAGE_STORAGE_SOP_CLASSES,
        ListenerConfig,
    )

    names = {
        **IMAGE_STORAGE_SOP_CLASSES,
        **DOSE_REPORT_STORAGE_SOP_CLASSES,
        **GENERIC_SR_STORAGE_SOP_CLASSES,
    }
    return {uid: names[uid] for uid in ListenerConfig().sop_classes}


def _table(header: Iterable[str], rows: Iterable[Iterable[object]]) -> list[str]:
    head = list(header)
    out = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for row in rows:
        out.append("| " + " | ".join(str(c).replace("|", "\\|") for c in row) + " |")
    return out


def _network_tables() -> dict[str, list[str]]:
    from pydicom.uid import UID
    from pynetdicom import AE, PYNETDICOM_IMPLEMENTATION_UID, PYNETDICOM_IMPLEMENTATION_VERSION

    from beamaudit.api.settings import ListenerSettings
    from beamaudit.ingest.listener import (
        DOSE_REPORT_STORAGE_SOP_CLASSES,
        GENERIC_SR_STORAGE_SOP_CLASSES,
        StoreStatus,
        storage_contexts,
    )

    classes = listener_sop_classes()

    def role(uid: str) -> str:
        if uid in DOSE_REPORT_STORAGE_SOP_CLASSES:
            return "dose report: every irradiation event and accumulated dose read"
        if uid in GENERIC_SR_STORAGE_SOP_CLASSES:
            return "read only when its root concept is (113701, DCM) X-Ray Radiation Dose Report"
        return "image header: technique, geometry and dose attributes; pixel data never decoded"

    contexts = storage_contexts(classes)
    storage_syntaxes = [str(t) for t in contexts[0].transfer_syntax]
    assert all([str(t) for t in c.transfer_syntax] == storage_syntaxes for c in contexts[:-1])
    verification = contexts[-1]
    defaults = ListenerSettings()
    ae = AE()
    return {
        "sop": _table(
            ["SOP Class Name", "SOP Class UID", "SCU", "SCP", "what beamaudit does with it"],
            [(name, f"`{uid}`", "No", "Yes", role(uid)) for uid, name in classes.items()]
            + [
                (
                    UID(str(verification.abstract_syntax)).name,
                    f"`{verification.abstract_syntax}`",
                    "No",
                    "Yes",
                    "C-ECHO answered",
                )
            ],
        ),
        "storage_ts": _table(
            ["Transfer Syntax Name", "UID"],
            [(UID(t).name, f"`{t}`") for t in storage_syntaxes],
        ),
        "verification_ts": _table(
            ["Transfer Syntax Name", "UID"],
            [(UID(str(t)).name, f"`{t}`") for t in verification.transfer_syntax],
        ),
        "limits": _table(
            ["setting (`[listener]`)", "default", "what it limits"],
            [
                ("ae_title", defaults.ae_title, "the AE title beamaudit answers to"),
                ("port", defaults.port, "TCP port of the Storage SCP"),
                ("allowed_calling_aets", "(empty: any)", "calling AE titles accepted"),
                ("max_associations", defaults.max_associations, "associations at once"),
                (
                    "max_associations_per_ae",
                    defaults.max_associations_per_ae,
                    "associations at once from one calling AE title",
                ),
                (
                    "max_connections",
                    defaults.max_connections,
                    "TCP connections at once, associated or not yet",
                ),
                (
                    "max_objects_in_flight",
                    defaults.max_objects_in_flight,
                    "objects decoded and spooled at once; others wait, then 0xA700",
                ),
                (
                    "max_object_bytes",
                    defaults.max_object_bytes,
                    "largest object; a larger one has its association aborted",
                ),
                (
                    "max_spooled",
                    defaults.max_spooled,
                    "objects acknowledged and not yet stored; past it, 0xA700",
                ),
                (
                    "request_timeout_s",
                    defaults.request_timeout_s,
                    "seconds a new connection has to send A-ASSOCIATE-RQ (ARTIM)",
                ),
                (
                    "idle_timeout_s",
                    defaults.idle_timeout_s,
                    "seconds an association may stay silent (DIMSE and network timeout)",
                ),
                (
                    "association_timeout_s",
                    defaults.association_timeout_s,
                    "seconds an association may last in all",
                ),
            ],
        ),
        "identity": _table(
            ["item", "value"],
            [
                ("Implementation Class UID", f"`{PYNETDICOM_IMPLEMENTATION_UID}`"),
                ("Implementation Version Name", f"`{PYNETDICOM_IMPLEMENTATION_VERSION}`"),
                ("Maximum PDU length received", f"{ae.maximum_pdu_size} bytes"),
                ("Application Context Name", "`1.2.840.10008.3.1.1.1`"),
            ],
        ),
        "statuses": _table(
            ["status", "code", "when"],
            [
                (s.name.replace("_", " ").lower(), f"0x{s.value:04X}", _STATUS_WHEN.get(s.name, ""))
                for s in StoreStatus
            ],
        ),
    }


_STATUS_WHEN = {
    "SUCCESS": "the object is committed to the listener's spool (stored from there; what "
    "cannot be used is then recorded as an ingest error)",
    "OUT_OF_RESOURCES": "the spool is unavailable or full (`max_spooled`), or too many objects "
    "are in flight: the sender keeps the object and retries",
    "CANNOT_UNDERSTAND": "the data set cannot be decoded to Pixel Data, or has no SOP Instance "
    "UID, or another than the request's (the Error Comment says why); recorded as an ingest "
    "error",
    "DATA_SET_DOES_NOT_MATCH_SOP_CLASS": "the data set's SOP Class differs from the request's",
    "DATA_SET_DOES_NOT_MATCH_SOP_CLASS_WARNING": "not sent by beamaudit",
    "COERCION_OF_DATA_ELEMENTS": "not sent by beamaudit",
    "ELEMENTS_DISCARDED": "not sent by beamaudit",
}

_CONTEXT_NAMES = {
    "document": "TID 10001 / 10011: the document and its observer context",
    "projection_event": "TID 10003 (with 10003A, 10003B, 10003C): Irradiation Event X-Ray Data",
    "projection_accumulated": "TID 10002 (with 10004 to 10007): Accumulated X-Ray Dose",
    "ct_event": "TID 10013: CT Irradiation Event Data",
    "ct_accumulated": "TID 10012: CT Accumulated Dose Data",
    "filter": "(113771, DCM) X-Ray Filters, within an irradiation event",
}


def _read_tables() -> dict[str, list[str]]:
    from beamaudit.ingest.mapping import MAPPING

    def unit(row: object) -> str:
        u, ours = getattr(row, "unit", ""), getattr(row, "our_unit", "")
        if not u and not ours:
            return ""
        return u if u == ours else f"{u} -> {ours}"

    header = [r for r in MAPPING if r.source == "header"]
    tables: dict[str, list[str]] = {}
    for family, title in ((None, "all"), ("projection", "projection"), ("ct", "ct")):
        rows = [r for r in header if (r.families is None if family is None else
                                      r.families is not None and family in r.families)]  # fmt: skip
        tables[f"header_{title}"] = _table(
            ["attribute", "VR", "beamaudit field", "unit"],
            [(r.label, r.vr, f"`{r.field}`", unit(r)) for r in rows],
        )
    for context, _ in _CONTEXT_NAMES.items():
        rows = [r for r in MAPPING if r.source == "sr" and r.context == context]
        tables[f"sr_{context}"] = _table(
            ["concept", "value type", "beamaudit field", "unit"],
            [(r.label, r.value_type, f"`{r.field}`", unit(r)) for r in rows],
        )
    return tables


def conformance_statement() -> str:
    """The whole statement as Markdown."""
    from beamaudit import __version__

    net = _network_tables()
    read = _read_tables()
    n_classes = len(listener_sop_classes())
    parts: list[str] = [
        "# beamaudit: DICOM conformance statement and IHE REM statement",
        "",
        "<!-- Written by `beamaudit conformance` from the code's own tables "
        "(beamaudit/api/cli/conformance.py); do not edit by hand: a test compares. -->",
        "",
        f"beamaudit {__version__}. Arranged as PS3.2 Annex A asks. beamaudit reads the headers of "
        "x-ray images and Radiation Dose Structured Reports to audit patient doses; it stores no "
        "pixel data and creates no DICOM object for others.",
        "",
        "## 1. Overview",
        "",
        _overview(n_classes),
        "",
        "## 2. Networking",
        "",
        "### 2.1 Implementation model",
        "",
        "One Application Entity, the **listener** (`beamaudit listen`), is a Storage SCP: a "
        "modality, a dose reporter or a PACS pushes objects to it by C-STORE. Each object is "
        "committed to the listener's spool before the C-STORE response is sent, then read "
        "(header, or dose report content), pseudonymised, mapped to irradiation events and "
        "committed to the store, in batches, by the listener's worker. A second, "
        "non-DIMSE, role is the **DICOMweb user agent** (`beamaudit pull`, `beamaudit "
        "nightly`), which searches an origin server with QIDO-RS and retrieves instance "
        "metadata with WADO-RS (section 2.4). Folder scans (`beamaudit scan`) read Part 10 "
        "files from a file system (section 3).",
        "",
        "The listener initiates no association: it never acts as SCU, never sends C-FIND, "
        "C-MOVE or C-GET, and never forwards objects.",
        "",
        "### 2.2 The listener's SOP classes",
        "",
        *net["sop"],
        "",
        "Other storage SOP classes are rejected at association negotiation (the presentation "
        "context is answered *abstract syntax not supported*). `[listener]` settings cannot "
        "add classes; a deployment may narrow them only in code (`ListenerConfig.sop_classes`).",
        "",
        "### 2.3 Association policies",
        "",
        "**Acceptance.** Any calling AE title unless `allowed_calling_aets` lists some; then "
        "any other is rejected (A-ASSOCIATE-RJ, permanent, *calling AE title not "
        "recognised*). The called AE title is not checked by default. An association beyond "
        "the limits below is rejected as *transient, local limit exceeded*, so the sender "
        "tries again later. Extended negotiation (SOP Class Extended, Common Extended, user "
        "identity) is not supported and ignored; asynchronous operations window: one "
        "operation at a time; SCP/SCU role selection: SCP only.",
        "",
        "**Limits** (settings, `[listener]` in the TOML file or `BEAMAUDIT_LISTENER__*`):",
        "",
        *net["limits"],
        "",
        "**Identity and PDU**:",
        "",
        *net["identity"],
        "",
        "**Presentation contexts.** Every storage class above is accepted with each of these "
        "transfer syntaxes (compressed pixel data is acceptable because pixel data is never "
        "decoded on receipt):",
        "",
        *net["storage_ts"],
        "",
        "Verification is accepted with:",
        "",
        *net["verification_ts"],
        "",
        "When a sender proposes several transfer syntaxes for one context, the first one "
        "proposed that is in the list is chosen (pynetdicom's acceptor negotiation).",
        "",
        "**C-STORE responses** (PS3.4 Annex B.2.3):",
        "",
        *net["statuses"],
        "",
        "Success is sent only once the object is durable in the listener's spool (a SQLite "
        "file, `spool_dir`; committed as `spool_synchronous` says: `normal` keeps it through "
        "a crash of the process, `full` through a crash of the machine too): a sender may "
        "delete its copy then. A listener stopped or killed stores what its spool holds when "
        "it starts again. Before answering, the listener checks what is cheap to check: the "
        "data set is read to Pixel Data (every element's tag, VR and length), and its SOP "
        "Class and Instance UIDs must be there and agree with the request; failing that, the "
        "object is refused as above and recorded. What only reading the object finds (a "
        "value that cannot be decoded or is out of its physical range, a report that is not "
        "a dose report, another object's SOP Instance UID with other content) was answered "
        "success and is recorded as an ingest error when the worker stores the spool: the "
        "ingest errors page lists it with its SOP Instance UID and reason. The same SOP "
        "Instance UID received twice with the same content is stored once (both C-STOREs are "
        "answered success). Objects are received into temporary files and only the data "
        "before Pixel Data is read and spooled (a CT image's pixel data too, for the patient's "
        "size).",
        "",
        "### 2.4 DICOMweb user agent (PS3.18)",
        "",
        "| service | request | what is asked for |",
        "|---|---|---|",
        "| QIDO-RS, studies | `GET {root}/studies?StudyDate={from}-{to}&ModalitiesInStudy={m}` "
        "| `includefield` StudyDate, ModalitiesInStudy; one search per modality |",
        "| QIDO-RS, series | `GET {root}/studies/{study}/series` | `includefield` Modality |",
        "| QIDO-RS, instances | `GET {root}/studies/{study}/series/{series}/instances` "
        "| `includefield` SOPClassUID; instances of other classes are not retrieved |",
        "| WADO-RS, metadata | `GET {root}/studies/{study}/series/{series}/metadata` "
        "| DICOM JSON (`application/dicom+json`); no pixel data or other bulk data is fetched |",
        "",
        "Searches are sent without `limit`/`offset`; further pages are asked for only when the "
        "server says in a `Warning` header that it held results back. HTTP Basic "
        "authentication (a login named in the settings), TLS with the system's or a given CA, "
        "timeouts, answer-size limits and retries on 408, 429, 500, 502, 503 and 504 are "
        "DEPLOYMENT.md's subject. The same SOP classes as the listener's are retrieved.",
        "",
        "## 3. Media interchange",
        "",
        "`beamaudit scan` reads DICOM Part 10 files (PS3.10) of the SOP classes in 2.2 from a "
        "folder, as a File-set Reader would but without needing a DICOMDIR: a DICOMDIR "
        "(Media Storage Directory Storage, `1.2.840.10008.1.3.10`) is recognised and skipped. "
        "beamaudit writes no media.",
        "",
        "## 4. What is read from each object",
        "",
        "Every value comes through one mapping table (`beamaudit/ingest/mapping.py`); where "
        "several attributes feed one field, the first present in the order below wins. Units "
        "are converted once, at reading (`unit`: as written in DICOM -> as stored).",
        "",
        "### 4.1 Image IODs (CR, DX, MG, breast tomosynthesis and projection, XA, XRF, CT; "
        "their Enhanced forms): attributes of every image",
        "",
        *read["header_all"],
        "",
        "### 4.2 Projection images only (CR, DX, MG, XA, XRF)",
        "",
        *read["header_projection"],
        "",
        "### 4.3 CT images only",
        "",
        *read["header_ct"],
        "",
        "### 4.4 Radiation Dose SR (TID 10001 Projection X-Ray, TID 10011 CT)",
        "",
    ]
    for context, title in _CONTEXT_NAMES.items():
        parts += [f"**{title}**", "", *read[f"sr_{context}"], ""]
    parts += [
        "Patient's Name, Patient ID and Patient's Birth Date are read only to make a keyed "
        "pseudonym and an age; neither is stored, logged or sent.",
        "",
        "## 5. Character sets",
        "",
        "Every Specific Character Set (0008,0005) that pydicom decodes is accepted; text is "
        "stored as Unicode. Control characters in texts are replaced before storing.",
        "",
        "## 6. Security",
        "",
        "The listener speaks DICOM over plain TCP (no TLS secure transport connection profile): "
        "put it on a network the hospital trusts or behind a TLS tunnel (DEPLOYMENT.md). Patient "
        "identifiers are replaced by a keyed pseudonym on receipt (SECURITY.md).",
        "",
        "## 7. IHE Radiation Exposure Monitoring (REM) statement",
        "",
        _REM.format(rem_table="\n".join(_table(["IHE REM item", "beamaudit"], _REM_ROWS))),
    ]
    return "\n".join(parts).rstrip() + "\n"


def _overview(n_classes: int) -> str:
    return "\n".join(
        [
            "| network service | SOP classes | user of service (SCU) | provider (SCP) |",
            "|---|---|---|---|",
            f"| Storage | {n_classes} storage classes (section 2.2) | No | Yes |",
            "| Verification | `1.2.840.10008.1.1` | No | Yes |",
            "| DICOMweb QIDO-RS, WADO-RS metadata (PS3.18) | the same classes | Yes (user "
            "agent) | No |",
            "| Query/Retrieve (C-FIND, C-MOVE, C-GET) | none | No | No |",
        ]
    )


_REM_ROWS = [
    ("actor", "Dose Information Consumer"),
    (
        "RAD-62 Store Dose Information, as receiver",
        "**supported**: the listener is the Storage SCP of X-Ray Radiation Dose SR (and of "
        "Enhanced X-Ray Radiation Dose SR and Patient Radiation Dose SR), projection and CT "
        "reports alike",
    ),
    ("RAD-64 Query Dose Information (DIMSE C-FIND)", "not supported"),
    (
        "RAD-65 Retrieve Dose Information (DIMSE C-MOVE)",
        "not supported; instead a DICOMweb pull (QIDO-RS search, WADO-RS metadata; section 2.4) "
        "fetches the same dose reports from a PACS, which is outside the REM transactions",
    ),
    (
        "Dose Information Reporter, Dose Register, RAD-63 Submit Dose Information",
        "not supported (beamaudit sends no dose object anywhere)",
    ),
    ("REM-NM (nuclear medicine)", "not supported"),
]

_REM = """\
The REM profile (IHE Radiology Technical Framework) moves dose objects from the x-ray equipment
that made them to the systems that collect, analyse and register them. beamaudit takes the role
of **Dose Information Consumer**: a system that receives dose reports and uses them (here: dose
audit against reference levels).

{rem_table}

Transaction numbers are from memory of the Technical Framework and are to be checked against its
current edition before a statement is given to a purchaser. As a consumer, beamaudit
accepts reports from any equipment vendor, reads both the projection X-ray (TID 10001) and CT
(TID 10011) templates, keeps every irradiation event of a report, and reports what it could not
read (an ingest error with its reason) instead of dropping it silently.
"""


def conformance_command(
    output: Annotated[
        Path | None, typer.Option("--output", "-o", help="File (default: stdout).")
    ] = None,
) -> None:
    """Print the DICOM conformance statement (PS3.2 layout) and the IHE REM statement, made
    from the code's own tables (the repository ships it as docs/DICOM-CONFORMANCE.md)."""
    text = conformance_statement()
    if output is None:
        typer.echo(text, nl=False)
    else:
        output.write_text(text, encoding="utf-8")


def register(app: typer.Typer) -> None:
    """Add ``conformance`` to ``app``."""
    app.command("conformance")(conformance_command)
