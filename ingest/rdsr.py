"""Exposure events from Radiation Dose Structured Reports.

Reads X-Ray Radiation Dose SR (TID 10001 projection x-ray with TID 10002
accumulated dose and TID 10003 irradiation events, TID 10011 CT with TID 10012
and TID 10013) and the Enhanced X-Ray Radiation Dose SR, as well as TID
10001/10011 content sent in Enhanced/Comprehensive/Extensible SR classes.

The content tree is walked **by concept code, never by row position**: an
event is any CONTAINER (113706, DCM) "Irradiation Event X-Ray Data" or
(113819, DCM) "CT Acquisition" wherever it sits, and inside it each value is
found by its concept name. Included templates (TID 10003A/B/C, 10004-10007,
10014) are already flattened into their parent container in the encoding, so
the walk descends into all content below an event. Codes are compared in their
current spelling (retired SNOMED-RT codes are mapped to SNOMED CT,
:func:`beamaudit.ingest.codes.canonical`). Every NUM value is converted from
the unit in its own MeasurementUnitsCodeSequence: DAP in Gy·m², exposure in
µA·s, exposure time in ms for projection events and s for CT events.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from pydicom.dataelem import RawDataElement
from pydicom.dataset import Dataset

from ._context import FieldSink
from ._values import parse_dt
from .codes import (
    ACQUISITION_PLANES,
    ANODE_MATERIALS,
    CT_PHANTOM_DIAMETERS_CM,
    DEVICE_TYPES,
    EVENT_TYPES,
    FILTER_MATERIALS,
    FILTER_TYPES,
    FLUORO_MODES,
    GRIDS,
    LATERALITIES,
    MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS,
    PATIENT_ORIENTATION_MODIFIERS,
    PATIENT_ORIENTATIONS,
    PATIENT_TABLE_RELATIONSHIPS,
    PROCEDURE_FAMILIES,
    PROCEDURE_INTENTS,
    REFERENCE_POINTS,
    SSDE_METHODS,
    WATER_EQUIVALENT_DIAMETER_METHODS,
    CodeKey,
    canonical,
    material_from_meaning,
    view_from_meaning,
)
from .errors import IngestError
from .events import AccumulatedDose, ExposureEvent, FilterLayer
from .mapping import FieldMapping, SrContext, concept_rows

__all__ = [
    "DOSE_REPORT_ROOT",
    "ContentItem",
    "ReportContents",
    "content_tree",
    "is_dose_report_root",
    "rdsr_events",
    "report_contents",
]

DOSE_REPORT_ROOT: CodeKey = ("113701", "DCM")  # X-Ray Radiation Dose Report
_PROJECTION_EVENT: CodeKey = ("113706", "DCM")
_CT_EVENT: CodeKey = ("113819", "DCM")
_PROJECTION_ACCUMULATED: CodeKey = ("113702", "DCM")
_CT_ACCUMULATED: CodeKey = ("113811", "DCM")
_XRAY_FILTERS: CodeKey = ("113771", "DCM")
_CT_SOURCE: CodeKey = ("113831", "DCM")
_MAMMOGRAPHY: CodeKey = ("71651007", "SCT")
_LATERALITY: CodeKey = ("272741003", "SCT")
_CONTAINERS_OF_INTEREST = frozenset(
    {_PROJECTION_EVENT, _CT_EVENT, _PROJECTION_ACCUMULATED, _CT_ACCUMULATED}
)
_INT_FIELDS = frozenset({"number_of_pulses", "number_of_radiographic_frames", "number_of_events"})


@dataclass(slots=True)
class ContentItem:
    """One SR content item: concept (canonical code), value type, dataset, children."""

    code: CodeKey | None
    meaning: str
    value_type: str
    relationship: str
    ds: Dataset
    children: list[ContentItem] = field(default_factory=list)

    @property
    def label(self) -> str:
        """Provenance text, e.g. ``"(122130, DCM) Dose Area Product"``."""
        if self.code is None:
            return f"(no concept name) {self.value_type}"
        return f"({self.code[0]}, {self.code[1]}) {self.meaning}"


#: the elements of a content item read here (PS3.3 C.17.3 SR Document Content, C.18 Content
#: Item and Attribute Descriptions; tags from PS3.6)
_TAGS = {
    "CodeValue": 0x00080100,
    "CodingSchemeDesignator": 0x00080102,
    "CodeMeaning": 0x00080104,
    "LongCodeValue": 0x00080119,
    "URNCodeValue": 0x00080120,
    "RelationshipType": 0x0040A010,
    "ValueType": 0x0040A040,
    "ConceptNameCodeSequence": 0x0040A043,
    "FloatingPointValue": 0x0040A161,
    "ConceptCodeSequence": 0x0040A168,
    "MeasuredValueSequence": 0x0040A300,
    "NumericValue": 0x0040A30A,
    "ContentSequence": 0x0040A730,
    "MeasurementUnitsCodeSequence": 0x004008EA,
}
#: the short texts of a content item: codes, their meanings, value and relationship types
_SHORT_TEXT_VRS = frozenset({"SH", "LO", "CS"})


def _get(ds: Dataset, keyword: str) -> Any:
    """``ds.get(keyword)`` for the elements of :data:`_TAGS`, a short text (SH, LO, CS) of one
    value in plain ASCII read straight from its bytes.

    A dose report of a fluoroscopy study holds thousands of content items, each named by a code
    of three short texts; pydicom's conversion of each element (its hooks, the character set's
    decoder, the value's validation) was a third of reading such a report. ASCII bytes are the
    same text in every DICOM character set (PS3.5 6.1: the default repertoire is the G0 set of
    each; an escape byte, which ISO 2022 code extensions start with, or a backslash, which
    separates values, is left to pydicom), and the padding is removed as pydicom removes it
    (trailing spaces and NULs), so the value equals pydicom's (held so in the tests on sample
    files and on reports in several character sets)."""
    tag = _TAGS[keyword]
    raw = ds.get_item(tag)
    if raw is None:
        return None
    if isinstance(raw, RawDataElement) and raw.VR in _SHORT_TEXT_VRS:
        value = raw.value
        if value is not None and value.isascii() and b"\\" not in value and b"\x1b" not in value:
            return value.decode("ascii").rstrip(" \x00")
    return ds[tag].value


def _code_of(seq_item: Dataset) -> tuple[CodeKey, str]:
    value = (
        _get(seq_item, "CodeValue")
        or _get(seq_item, "LongCodeValue")
        or _get(seq_item, "URNCodeValue")
    )
    scheme = _get(seq_item, "CodingSchemeDesignator") or ""
    if not value:
        raise IngestError("broken_template", "a coded concept has no code value")
    return canonical(str(value), str(scheme)), str(_get(seq_item, "CodeMeaning") or "")


def _concept(ds: Dataset) -> tuple[CodeKey | None, str]:
    seq = _get(ds, "ConceptNameCodeSequence")
    if not seq:
        return None, ""
    return _code_of(seq[0])


def content_tree(ds: Dataset, *, depth: int = 0) -> ContentItem:
    """The content tree rooted at ``ds`` (the SR document or one content item).

    Raises
    ------
    IngestError
        ``broken_template`` if the tree nests deeper than 64 levels (PS3.16
        templates nest fewer than 10) or a concept name has no code.
    """
    if depth > 64:
        raise IngestError("broken_template", "content tree nests deeper than 64 levels")
    code, meaning = _concept(ds)
    item = ContentItem(
        code,
        meaning,
        str(_get(ds, "ValueType") or ""),
        str(_get(ds, "RelationshipType") or ""),
        ds,
    )
    for child in _get(ds, "ContentSequence") or ():
        item.children.append(content_tree(child, depth=depth + 1))
    return item


def is_dose_report_root(ds: Dataset) -> bool:
    """True if the SR document's root concept is (113701, DCM) X-Ray Radiation Dose Report."""
    try:
        code, _ = _concept(ds)
    except IngestError:
        return False
    return code == DOSE_REPORT_ROOT and str(_get(ds, "ValueType") or "") == "CONTAINER"


# ---- values of content items ---------------------------------------------------------------
def _num(item: ContentItem) -> tuple[float, str] | None:
    seq = _get(item.ds, "MeasuredValueSequence")
    if not seq:
        return None  # value absent (a NumericValueQualifierCodeSequence may say why)
    measured = seq[0]
    raw: Any = _get(measured, "FloatingPointValue")
    if raw is None:
        raw = _get(measured, "NumericValue")
    if raw is None or raw == "":
        return None
    try:
        value = float(raw)
    except (TypeError, ValueError):
        raise IngestError("bad_value", f"{item.label}: {raw!r} is not a number") from None
    if value != value or value in (float("inf"), float("-inf")):
        raise IngestError("bad_value", f"{item.label} is not finite")
    units = _get(measured, "MeasurementUnitsCodeSequence")
    if not units or not units[0].get("CodeValue"):
        raise IngestError("broken_template", f"{item.label} has no measurement unit")
    return value, str(units[0].CodeValue)


def _coded(item: ContentItem) -> tuple[CodeKey, str] | None:
    seq = _get(item.ds, "ConceptCodeSequence")
    if not seq:
        return None
    return _code_of(seq[0])


def _text(item: ContentItem, keyword: str) -> str | None:
    value = item.ds.get(keyword)
    if value is None:
        return None
    text = str(value).strip()
    return text or None


@dataclass(slots=True)
class _Found:
    row: FieldMapping
    item: ContentItem


def _walk(
    item: ContentItem,
    rows: dict[CodeKey, FieldMapping],
    found: dict[str, list[_Found]],
    notes: list[str],
) -> None:
    """Collect the items below ``item`` whose concept has a row, depth first.

    Nested events/accumulations are not entered; of several CT X-Ray Source
    Parameters containers only the first is (one tube's technique per event).
    """
    sources_seen = 0
    for child in item.children:
        if child.code in _CONTAINERS_OF_INTEREST:
            continue
        if child.code == _CT_SOURCE:
            sources_seen += 1
            if sources_seen > 1:
                if sources_seen == 2:
                    notes.append("several x-ray sources: the technique of the first is kept")
                continue
        row = rows.get(child.code) if child.code is not None else None
        if row is not None:
            found.setdefault(row.field, []).append(_Found(row, child))
            if row.value_type == "CONTAINER":
                continue
        _walk(child, rows, found, notes)


def _number_value(sink: FieldSink, name: str, hits: list[_Found]) -> None:
    best = min(h.row.rank for h in hits)
    hits = [h for h in hits if h.row.rank == best]
    values: list[float] = []
    label = hits[0].row.label
    for hit in hits:
        read = _num(hit.item)
        if read is None:
            sink.notes.append(f"{hit.item.label} present without a value")
            continue
        value, unit = read
        probe = FieldSink(sink.warnings)
        probe.quantity(name, value, hit.item.label, from_unit=unit, to_unit=hit.row.our_unit)
        sink.notes.extend(probe.notes)
        if name in probe.values:
            values.append(probe.values[name])
    if not values:
        return
    if len(values) == 1 or all(v == values[0] for v in values):
        result = values[0]
    else:
        result = float(f"{sum(values) / len(values):.12g}")
        label = f"{label}, mean of {len(values)} values"
        sink.notes.append(f"{hits[0].row.label}: {len(values)} values, their mean kept")
    if name in _INT_FIELDS:
        if not float(result).is_integer():
            raise IngestError("bad_value", f"{label} {result:g} is not a whole number")
        sink.put(name, int(result), label)
    else:
        sink.put(name, result, label)


def _size_methods(sink: FieldSink, hits: list[_Found]) -> None:
    """(370129005, SCT) Measurement Method items: a CID 10023 value names how the SSDE was
    made, a CID 10024 value how the water-equivalent diameter was; other methods (of an
    effective dose, say) are not size methods and are passed over."""
    for hit in hits:
        coded = _coded(hit.item)
        if coded is None:
            continue
        code, meaning = coded
        label = f"{hit.item.label} = ({code[0]}, {code[1]}) {meaning}"
        if code in SSDE_METHODS and "ssde_method" not in sink.values:
            sink.put("ssde_method", SSDE_METHODS[code], label)
        elif (
            code in WATER_EQUIVALENT_DIAMETER_METHODS
            and "water_equivalent_diameter_method" not in sink.values
        ):
            sink.put(
                "water_equivalent_diameter_method", WATER_EQUIVALENT_DIAMETER_METHODS[code], label
            )


#: coded fields of the skin-dose geometry: their value set, an unknown code keeping its meaning
_POSITION_CODES: dict[str, dict[CodeKey, str]] = {
    "reference_point_definition": REFERENCE_POINTS,
    "patient_table_relationship": PATIENT_TABLE_RELATIONSHIPS,
    "patient_orientation": PATIENT_ORIENTATIONS,
    "patient_orientation_modifier": PATIENT_ORIENTATION_MODIFIERS,
}


def _code_value(sink: FieldSink, name: str, hits: list[_Found]) -> None:
    if name == "size_method":
        _size_methods(sink, hits)
        return
    if name == "mammography_intent":
        _intent(sink, hits)
        return
    hit = hits[0]
    coded = _coded(hit.item)
    if coded is None:
        if name == "reference_point_definition" and hit.item.value_type == "TEXT":
            # TID 10003B rows 2 and 3: the same concept as TEXT or as CODE
            sink.put(name, _text(hit.item, "TextValue"), hit.item.label)
        return
    code, meaning = coded
    label = f"{hit.item.label} = ({code[0]}, {code[1]}) {meaning}"
    value: Any
    if name == "event_type":
        value = EVENT_TYPES.get(code)
    elif name == "body_part":
        value = meaning.upper() or None
    elif name == "view_position":
        value = view_from_meaning(meaning) if meaning else None
    elif name == "acquisition_plane":
        value = ACQUISITION_PLANES.get(code)
    elif name == "fluoro_mode":
        value = FLUORO_MODES.get(code)
    elif name == "anode_material":
        value = ANODE_MATERIALS.get(code) or material_from_meaning(meaning)
    elif name == "grid":
        names = []
        for h in hits:
            c = _coded(h.item)
            if c is not None and c[0] in GRIDS:
                names.append(GRIDS[c[0]])
        value = "+".join(names) or None
    elif name == "ct_phantom_diameter_cm":
        value = CT_PHANTOM_DIAMETERS_CM.get(code)
    elif name == "procedure_reported":
        value = PROCEDURE_FAMILIES.get(code)
        sink.put("procedure_code", code, label)
    elif name == "acquisition_device_type":
        value = DEVICE_TYPES.get(code)
    elif name in _POSITION_CODES:
        value = _POSITION_CODES[name].get(code) or meaning.strip().lower() or None
    elif name == "image_laterality":
        value = LATERALITIES.get(code)
    else:
        value = meaning or None
    if value is None:
        sink.notes.append(f"{label}: value not mapped")
        return
    sink.put(name, value, label)


def _intent(sink: FieldSink, hits: list[_Found]) -> None:
    """Screening or diagnostic: an event's Image View Modifier (111032, DCM) of a CID 4015
    workup view says diagnostic; the report's Has Intent (363703001, SCT) says screening when it
    is Screening Intent (360156006, SCT). Diagnostic Intent there says nothing: TID 10001 row 3
    is mandatory, and a device that knows nothing of the examination's purpose still has to
    write one intent, Diagnostic Intent being the one written (common practice, from memory), so
    taking it would turn screening rounds diagnostic; the descriptions then decide. Any other
    code says neither (no note: a DX view's CID 4011 modifier is no mistake)."""
    for hit in hits:
        coded = _coded(hit.item)
        if coded is None:
            continue
        code, meaning = coded
        if code in MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS:
            value: str | None = "diagnostic"
        else:
            intent = PROCEDURE_INTENTS.get(code) if hit.row.context == "document" else None
            value = intent if intent == "screening" else None
        if value is not None:
            sink.put(
                "mammography_intent", value, f"{hit.item.label} = ({code[0]}, {code[1]}) {meaning}"
            )
            return


def _filters(sink: FieldSink, hits: list[_Found]) -> None:
    rows = concept_rows("filter")
    layers: list[FilterLayer] = []
    types: list[str] = []
    for hit in hits:
        found: dict[str, list[_Found]] = {}
        _walk(hit.item, rows, found, sink.notes)
        part = FieldSink(sink.warnings)
        for name, items in found.items():
            if name in ("thickness_min_mm", "thickness_max_mm"):
                _number_value(part, name, items)
        filter_type = None
        if "filter_type" in found:
            coded = _coded(found["filter_type"][0].item)
            if coded is not None:
                filter_type = FILTER_TYPES.get(coded[0], coded[1].lower() or None)
        if filter_type:
            types.append(filter_type)
        if filter_type == "none":
            continue
        material = None
        if "material" in found:
            coded = _coded(found["material"][0].item)
            if coded is not None:
                material = FILTER_MATERIALS.get(coded[0]) or material_from_meaning(coded[1])
                if material is None:
                    sink.warnings.append(
                        f"X-Ray Filter Material {coded[1]!r} not known; layer not kept"
                    )
        thickness = part.values.get("thickness_min_mm", part.values.get("thickness_max_mm"))
        if material is not None and thickness is not None:
            layers.append(FilterLayer(material, float(thickness)))
        elif material is not None:
            sink.notes.append(f"{material} filter without a thickness: not kept")
    label = f"{hits[0].item.label} container(s)"
    if layers:
        sink.put("filters", tuple(layers), label)
    if types:
        sink.put("filter_type", "+".join(dict.fromkeys(types)), label)


def _glandular_dose_by_side(sink: FieldSink, hits: list[_Found]) -> None:
    """TID 10005: one Accumulated Average Glandular Dose per breast, told apart by its
    Laterality modifier (CID 6022 Side; CID 244 spellings accepted). A value without a side,
    or of both, is the unlateralised total."""
    by_side: dict[str, list[_Found]] = {}
    for hit in hits:
        side = None
        for child in hit.item.children:
            if child.code == _LATERALITY and child.value_type == "CODE":
                coded = _coded(child)
                side = LATERALITIES.get(coded[0]) if coded is not None else None
                if side is None:
                    sink.notes.append(f"{hit.item.label}: laterality not understood, no side")
        field = {"L": "agd_left_mgy", "R": "agd_right_mgy"}.get(side or "", "agd_total_mgy")
        by_side.setdefault(field, []).append(hit)
    sides = {"agd_left_mgy": "left breast", "agd_right_mgy": "right breast"}
    for field, side_hits in by_side.items():
        part = FieldSink(sink.warnings)
        _number_value(part, field, side_hits)
        sink.notes.extend(part.notes)
        if field in part.values:
            label = part.provenance[field]
            if field in sides:
                label += f" > (272741003, SCT) Laterality: {sides[field]}"
            sink.put(field, part.values[field], label)


def _fill(sink: FieldSink, found: dict[str, list[_Found]]) -> None:
    for name, hits in found.items():
        vt = hits[0].row.value_type
        if name == "agd_total_mgy":
            _glandular_dose_by_side(sink, hits)
        elif vt == "NUM":
            _number_value(sink, name, hits)
        elif vt == "CODE":
            _code_value(sink, name, hits)
        elif vt == "CONTAINER" and name == "filters":
            _filters(sink, hits)
        elif vt == "TEXT":
            sink.put(name, _text(hits[0].item, "TextValue"), hits[0].item.label)
        elif vt == "UIDREF":
            sink.put(name, _text(hits[0].item, "UID"), hits[0].item.label)
        elif vt == "DATETIME":
            text = _text(hits[0].item, "DateTime")
            if text is not None:
                try:
                    sink.put(name, parse_dt(text), hits[0].item.label)
                except ValueError:
                    sink.warnings.append(f"{hits[0].item.label} {text!r} is not a DT value")


def _containers(root: ContentItem) -> list[ContentItem]:
    out: list[ContentItem] = []
    stack = [root]
    while stack:
        node = stack.pop()
        for child in node.children:
            if child.code in _CONTAINERS_OF_INTEREST and child.value_type == "CONTAINER":
                out.append(child)
            else:
                stack.append(child)
    # document order (the stack visits siblings in reverse)
    order = {id(c): i for i, c in enumerate(_document_order(root))}
    return sorted(out, key=lambda c: order[id(c)])


def _document_order(root: ContentItem) -> list[ContentItem]:
    out: list[ContentItem] = []
    stack = [root]
    while stack:
        node = stack.pop()
        out.append(node)
        stack.extend(reversed(node.children))
    return out


@dataclass(slots=True)
class ReportContents:
    """What a dose report holds, before it is joined with the document header."""

    document: FieldSink
    events: list[tuple[str, FieldSink]]  # ("projection" | "ct", fields)
    accumulated: list[tuple[str, FieldSink]]


def report_contents(ds: Dataset, *, warnings: list[str]) -> ReportContents:
    """Walk a dose report's content tree into per-event and per-accumulation fields.

    Raises
    ------
    IngestError
        ``broken_template`` if the root is not (113701, DCM) or the report
        holds neither events nor accumulations; ``out_of_range`` /
        ``bad_value`` for a value that fails its check (the message names
        the event).
    """
    if not is_dose_report_root(ds):
        code, meaning = _concept(ds)
        shown = f"({code[0]}, {code[1]}) {meaning}" if code else "no concept name"
        raise IngestError(
            "broken_template",
            f"the root content item is {shown}, "
            "not CONTAINER (113701, DCM) X-Ray Radiation Dose Report",
        )
    root = content_tree(ds)
    document = FieldSink(warnings)
    doc_found: dict[str, list[_Found]] = {}
    doc_rows = concept_rows("document")
    for child in root.children:
        row = doc_rows.get(child.code) if child.code is not None else None
        if row is not None:
            doc_found.setdefault(row.field, []).append(_Found(row, child))
            if row.field == "procedure_reported":  # its Has Intent (TID 10001 row 3)
                for modifier in child.children:
                    intent_row = doc_rows.get(modifier.code) if modifier.code else None
                    if intent_row is not None and intent_row.field == "mammography_intent":
                        doc_found.setdefault(intent_row.field, []).append(
                            _Found(intent_row, modifier)
                        )
    _fill(document, doc_found)

    events: list[tuple[str, FieldSink]] = []
    accumulated: list[tuple[str, FieldSink]] = []
    contexts: dict[CodeKey, tuple[str, SrContext]] = {
        _PROJECTION_EVENT: ("projection", "projection_event"),
        _CT_EVENT: ("ct", "ct_event"),
        _PROJECTION_ACCUMULATED: ("projection", "projection_accumulated"),
        _CT_ACCUMULATED: ("ct", "ct_accumulated"),
    }
    for container in _containers(root):
        assert container.code is not None
        family, context = contexts[container.code]
        sink = FieldSink(warnings)
        found: dict[str, list[_Found]] = {}
        _walk(container, concept_rows(context), found, sink.notes)
        is_event = context.endswith("_event")
        try:
            _fill(sink, found)
        except IngestError as exc:
            where = "irradiation event" if is_event else "accumulated dose"
            number = len(events) + 1 if is_event else len(accumulated) + 1
            uid = ""
            for hit in found.get("irradiation_event_uid", []):
                uid = f" ({_text(hit.item, 'UID')})"
            raise IngestError(exc.code, f"{where} {number}{uid}: {exc.reason}") from None
        (events if is_event else accumulated).append((family, sink))
    if not events and not accumulated:
        raise IngestError(
            "broken_template",
            "the report holds no irradiation event (113706 or 113819, DCM) "
            "and no accumulated dose (113702 or 113811, DCM)",
        )
    if not events:
        warnings.append("the dose report holds accumulated doses but no irradiation events")
    return ReportContents(document, events, accumulated)


def rdsr_events(
    ds: Dataset,
    *,
    base: dict[str, Any],
    base_provenance: dict[str, str],
    warnings: list[str],
) -> tuple[list[ExposureEvent], list[AccumulatedDose]]:
    """Events and accumulations of one dose report, joined with the shared ``base`` fields.

    Raises
    ------
    IngestError
        As :func:`report_contents`.
    """
    contents = report_contents(ds, warnings=warnings)
    doc = contents.document
    base, provenance = _with_observer_equipment(base, base_provenance, doc)
    procedure_family = doc.values.get("procedure_reported")
    is_mammo = doc.values.get("procedure_code") == _MAMMOGRAPHY
    sop = str(base["sop_instance_uid"])
    events: list[ExposureEvent] = []
    seen_uids: set[str] = set()
    for index, (family, sink) in enumerate(contents.events):
        if procedure_family is not None and procedure_family != family:
            sink.notes.append(
                f"a {family} event in a report of procedure family {procedure_family}"
            )
        uid = sink.values.get("irradiation_event_uid")
        _check_event_uid(uid, index, seen_uids, warnings)
        event_key = uid if uid is not None else f"{sop}#{index}"
        fields, event_prov = _event_fields(family, sink, base, provenance, doc, is_mammo=is_mammo)
        events.append(
            ExposureEvent(
                event_key=event_key,
                event_index=index,
                acquisition_key=event_key,
                provenance=event_prov,
                notes=sink.notes,
                **fields,
            )
        )
    accumulated = [
        _accumulated_dose(family, sink, events, base=base, warnings=warnings)
        for family, sink in contents.accumulated
    ]
    return events, accumulated


def _with_observer_equipment(
    base: dict[str, Any], base_provenance: dict[str, str], doc: FieldSink
) -> tuple[dict[str, Any], dict[str, str]]:
    """Copies of the header's ``base`` fields and their provenance, with the equipment the
    report's observer context names: where the header lacks it (General Equipment is Type 3 for
    StationName; Enhanced General Equipment makes the others Type 1), and always for the device
    observer UID and the acquisition device type."""
    base = dict(base)
    provenance = dict(base_provenance)
    for name in ("station_name", "manufacturer", "model_name", "device_serial_number"):
        if base.get(name) is None and name in doc.values:
            base[name] = doc.values[name]
            provenance[name] = doc.provenance[name]
    for name in ("device_observer_uid", "acquisition_device_type"):
        if name in doc.values:
            base[name] = doc.values[name]
            provenance[name] = doc.provenance[name]
    return base, provenance


def _check_event_uid(uid: Any, index: int, seen_uids: set[str], warnings: list[str]) -> None:
    """Warn of an irradiation event without an Irradiation Event UID or repeating one; note a new
    one in ``seen_uids``."""
    if uid is None:
        warnings.append(f"irradiation event {index + 1} has no Irradiation Event UID (113769, DCM)")
    elif uid in seen_uids:
        warnings.append(f"irradiation event {index + 1} repeats Irradiation Event UID {uid}")
    else:
        seen_uids.add(uid)


def _event_fields(
    family: str,
    sink: FieldSink,
    base: dict[str, Any],
    provenance: dict[str, str],
    doc: FieldSink,
    *,
    is_mammo: bool,
) -> tuple[dict[str, Any], dict[str, str]]:
    """One event's fields (the report's ``base`` joined with its own values) and their
    provenance, with its modality: CT for a CT event, MG for an event of a mammography report,
    RF for a fluoroscopy event or a fluoroscopy-guided system's report."""
    fields = dict(base)
    fields.update(dict(sink.values))
    fields["modality_family"] = family
    fields["modality"] = "CT" if family == "ct" else ("MG" if is_mammo else None)
    event_prov = dict(provenance)
    event_prov.update(sink.provenance)
    if is_mammo and family == "projection":
        _mammography_acquisition(fields, sink)
        event_prov.update(sink.provenance)
        if fields.get("mammography_intent") is None and "mammography_intent" in doc.values:
            # an event's own workup-view modifier first, then the report's procedure codes
            # (in base, from its header), then its Has Intent
            fields["mammography_intent"] = doc.values["mammography_intent"]
            event_prov["mammography_intent"] = doc.provenance["mammography_intent"]
    else:
        fields.pop("mammography_intent", None)
        event_prov.pop("mammography_intent", None)
    guided = fields.get("acquisition_device_type") == "fluoroscopy_guided"
    if fields["modality"] is None and (guided or fields.get("event_type") == "fluoroscopy"):
        # a fluoroscopy-guided system's report (CID 10032 113957): the room is RF/XA; RF is
        # what the mapping rules of fluoroscopic examinations look for
        fields["modality"] = "RF"
    return fields, event_prov


def _accumulated_dose(
    family: str,
    sink: FieldSink,
    events: list[ExposureEvent],
    *,
    base: dict[str, Any],
    warnings: list[str],
) -> AccumulatedDose:
    """One accumulation of the report; a projection accumulation without its number of events
    counts the report's events of its plane, a CT total DLP is checked against the events'."""
    values = dict(sink.values)
    prov = dict(sink.provenance)
    if family == "projection" and "number_of_events" not in values:
        plane = values.get("acquisition_plane")
        values["number_of_events"] = sum(
            1
            for e in events
            if e.modality_family == "projection"
            and (plane in (None, "all", "single") or e.acquisition_plane == plane)
        )
        prov["number_of_events"] = "counted: TID 10003 events of this plane in the report"
    if family == "ct" and "dlp_total_mgy_cm" in values:
        _check_dlp_total(values["dlp_total_mgy_cm"], events, warnings)
    return AccumulatedDose(
        sop_instance_uid=str(base["sop_instance_uid"]),
        study_instance_uid=base.get("study_instance_uid"),
        provenance=prov,
        **values,
    )


def _mammography_acquisition(fields: dict[str, Any], sink: FieldSink) -> None:
    """2D or tomosynthesis for an event of a mammography report: a Rotational Acquisition
    (CID 10002) is a tomosynthesis sweep, a Stationary Acquisition a 2D view; without an event
    type, an acquisition protocol naming tomosynthesis decides (noted)."""
    event_type = fields.get("event_type")
    if event_type in ("rotational", "stationary"):
        fields["mammography_acquisition"] = "tomosynthesis" if event_type == "rotational" else "2d"
        sink.provenance["mammography_acquisition"] = sink.provenance["event_type"]
        return
    protocol = str(fields.get("protocol_name") or "")
    if "tomo" in protocol.lower():
        fields["mammography_acquisition"] = "tomosynthesis"
        sink.provenance["mammography_acquisition"] = sink.provenance["protocol_name"]
        sink.notes.append("tomosynthesis inferred from the acquisition protocol's name")


def _check_dlp_total(total: float, events: list[ExposureEvent], warnings: list[str]) -> None:
    dlps = [e.dlp_mgy_cm for e in events if e.modality_family == "ct" and e.dlp_mgy_cm is not None]
    if not dlps:
        return
    summed = sum(dlps)
    # 1 % or 0.5 mGy.cm, whichever is larger: reports round each event's DLP (common practice)
    if abs(summed - total) > max(0.01 * total, 0.5):
        warnings.append(
            f"(113813, DCM) CT Dose Length Product Total {total:g} mGy.cm differs from the "
            f"sum of the events' DLP {summed:g} mGy.cm"
        )
