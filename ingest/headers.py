"""Exposure events from image headers: CR, DX, MG, RF, XA and CT, classic and enhanced.

A classic image (one frame, or a single-event cine run) is one event. An
enhanced multi-frame object keeps its values in functional groups: each
frame's values are looked up in its Per-Frame Functional Groups item first,
then in the Shared Functional Groups, then at the top level (PS3.3 C.7.6.16),
and frames are grouped into one event per Irradiation Event UID
(IrradiationEventIdentificationSequence). Within an event the first frame's
values stand for the event, except that projection x-ray mAs and exposure time
recorded per frame are summed over the event's frames. A dose value found only
at the top level of an object that holds several events is an object total: it
is not copied onto each event.

Quirks honoured (DICOM-NOTES section 1): DAP (0018,115E) is in dGy·cm²;
KVP and Exposure of 0 (CR readers) mean "not recorded"; CTDIvol in CT images
is per acquisition, repeated on every slice: events carry an
``acquisition_key`` shared by all images of one acquisition so that nobody
sums it, and image headers carry no DLP. Collimator edges are used for a field
size only when they are pixel positions inside the image.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from datetime import datetime
from functools import cache

from pydicom.dataset import Dataset

from ._context import FieldSink
from ._values import ValueReader, parse_da, parse_dt, parse_tm
from .codes import (
    CT_PHANTOM_DIAMETERS_CM,
    ELEMENT_SYMBOLS,
    HEADER_MATERIALS,
    MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS,
    MAMMOGRAPHY_VIEW_MODIFIERS,
    WATER_EQUIVALENT_DIAMETER_METHODS,
    CodeKey,
    canonical,
    intent_from_words,
    view_from_meaning,
)
from .errors import IngestError
from .events import ExposureEvent, FilterLayer
from .mapping import FieldMapping, header_rows_by_field

__all__ = ["CT_SCAN_MODES", "header_events", "procedure_intent"]

# (0018,9302) AcquisitionType Defined Terms (PS3.3 C.8.15.3.2) and (0018,0022) ScanOptions
# values seen in pydicom's test files (GE); anything else is kept unmapped, with a note.
CT_SCAN_MODES: dict[str, str] = {
    "SPIRAL": "ct_spiral",
    "HELICAL": "ct_spiral",
    "HELICAL MODE": "ct_spiral",
    "SEQUENCED": "ct_sequenced",
    "AXIAL": "ct_sequenced",
    "AXIAL MODE": "ct_sequenced",
    "CONSTANT_ANGLE": "ct_localizer",
    "SCOUT": "ct_localizer",
    "SCOUT MODE": "ct_localizer",
    "STATIONARY": "ct_stationary",
    "CINE": "ct_stationary",
    "CINE MODE": "ct_stationary",
    "FREE": "ct_free",
}

_EVENT_NUMBERS = (
    "kvp_kv",
    "tube_current_ma",
    "exposure_time_ms",
    "exposure_mas",
    "sid_mm",
    "source_to_patient_mm",
    "source_to_entrance_mm",
    "source_to_isocenter_mm",
    "body_part_thickness_mm",
    "magnification_factor",
    "dap_gy_cm2",
    "entrance_dose_mgy",
    "organ_dose_mgy",
    "hvl_mm_al",
    "xray_output_mgy_per_mas",
    "ctdivol_mgy",
    "water_equivalent_diameter_mm",
    "ct_pitch_factor",
    "ct_total_collimation_mm",
    "exposure_index",
    "target_exposure_index",
    "deviation_index",
    "irradiation_duration_s",
    "compression_force_n",
    "compression_pressure_kpa",
    "compression_contact_area_mm2",
    "tomo_scan_arc_deg",
)
_EVENT_TEXT = (
    "protocol_name",
    "body_part",
    "view_position",
    "filter_type",
    "entrance_dose_derivation",
    "paddle_description",
    "organ_exposed",
)
_DOSE_FIELDS = frozenset({"dap_gy_cm2", "entrance_dose_mgy", "organ_dose_mgy"})
_SUMMED_OVER_FRAMES = frozenset({"exposure_mas", "exposure_time_ms"})
_FILTER_TEXT = re.compile(r"(\d+(?:\.\d+)?)\s*(?:mm\s*)?(Al|Cu|Mo|Rh|Ag|Pb|Sn|Ta|Nb|Eu|W)(?![a-z])")
_FILTER_TEXT_REST = re.compile(r"[\s,;+/&]*")

_PER_FRAME = 0x52009230
_SHARED = 0x52009229
_XRAY_FILTER_SEQUENCE = 0x00189556
_XRAY_ACQUISITION_DOSE_SEQUENCE = 0x00189542
_XRAY_3D_ACQUISITION_SEQUENCE = 0x00189507  # Breast Tomosynthesis Acquisition module

# Storage SOP Classes of breast imaging (PS3.4 B.5): Digital Mammography X-Ray (presentation,
# processing), Breast Tomosynthesis, Breast Projection X-Ray (presentation, processing)
_BREAST_SOP_CLASSES = frozenset(
    {
        "1.2.840.10008.5.1.4.1.1.1.2",
        "1.2.840.10008.5.1.4.1.1.1.2.1",
        "1.2.840.10008.5.1.4.1.1.13.1.3",
        "1.2.840.10008.5.1.4.1.1.13.1.4",
        "1.2.840.10008.5.1.4.1.1.13.1.5",
    }
)
_BREAST_TOMOSYNTHESIS_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.13.1.3"
# (0020,0062) Image Laterality and (0020,0060) Laterality, Enumerated Values (PS3.3 C.7.6.2,
# C.7.3.1): L left, R right, B both; U (unpaired) says nothing of a breast's side
_LATERALITIES = {"L": "L", "R": "R", "B": "B"}
# (0028,1300) Breast Implant Present, Enumerated Values YES, NO (PS3.3 C.8.11.7)
_YES_NO = {"YES": True, "NO": False}
# summed over a tomosynthesis sweep's projections when the acquisition gives no total
_PER_PROJECTION_SUMS = ("exposure_mas", "organ_dose_mgy", "entrance_dose_mgy")


class _Views:
    """Where one event's values are looked up, nearest first."""

    __slots__ = ("frames", "n_per_frame", "rest")

    def __init__(self, frames: list[list[ValueReader]], rest: list[ValueReader]) -> None:
        self.frames = frames  # per-frame macro items of each frame of the event
        self.rest = rest  # shared macro items, then the top level
        self.n_per_frame = len(frames[0]) if frames else 0

    def first(self) -> list[ValueReader]:
        return (self.frames[0] if self.frames else []) + self.rest


def _macro_items(reader: ValueReader, fg: Dataset) -> list[ValueReader]:
    items: list[ValueReader] = []
    for elem in fg:
        if elem.VR == "SQ" and elem.value:
            items.append(reader.child(elem.value[0]))
    return items


def _event_uid_of(views: list[ValueReader], row: FieldMapping) -> str | None:
    for view in views:
        value = view.string(row)
        if value is not None:
            return value
    return None


def _group_frames(reader: ValueReader, uid_row: FieldMapping) -> list[tuple[str | None, _Views]]:
    """One ``(irradiation event UID, views)`` per event of the object."""
    top_extra = [
        reader.child(item)
        for tag in (_XRAY_ACQUISITION_DOSE_SEQUENCE, _XRAY_3D_ACQUISITION_SEQUENCE)
        for item in reader.sequence(tag)[:1]
    ]
    shared_fg = reader.sequence(_SHARED)
    shared = _macro_items(reader, shared_fg[0]) if shared_fg else []
    rest = [*shared, *top_extra, reader]
    per_frame = reader.sequence(_PER_FRAME)
    if not per_frame:
        return [(_event_uid_of(rest, uid_row), _Views([], rest))]
    groups: dict[str | None, list[list[ValueReader]]] = {}
    for fg in per_frame:
        frame = _macro_items(reader, fg)
        groups.setdefault(_event_uid_of(frame + rest, uid_row), []).append(frame)
    return [(uid, _Views(frames, rest)) for uid, frames in groups.items()]


def _numbers(
    views: Iterable[ValueReader], rows: tuple[FieldMapping, ...]
) -> tuple[list[float], FieldMapping, int] | None:
    for index, view in enumerate(views):
        present = view.present
        for row in rows:
            assert row.tag is not None and row.keyword is not None and row.vr is not None
            if row.tag not in present:
                continue
            values = view.numbers(row.tag, row.keyword, row.vr)
            if values is not None:
                return values, row, index
    return None


def _string(
    views: Iterable[ValueReader], rows: tuple[FieldMapping, ...]
) -> tuple[str, FieldMapping] | None:
    for view in views:
        present = view.present
        for row in rows:
            if row.tag not in present:
                continue
            text = view.string(row)
            if text is not None:
                return text, row
    return None


@cache
def _rows(field: str, family: str) -> tuple[FieldMapping, ...]:
    return tuple(
        r for r in header_rows_by_field()[field] if r.families is None or family in r.families
    )


def _read_numbers(sink: FieldSink, group: _Views, family: str, n_events: int) -> None:
    first = group.first()
    for field in _EVENT_NUMBERS:
        rows = _rows(field, family)
        if not rows:
            continue
        found = _numbers(first, rows)
        if found is None:
            continue
        values, row, index = found
        per_frame = index < group.n_per_frame
        at_object_top = index == len(first) - 1
        if field in _DOSE_FIELDS and n_events > 1 and at_object_top:
            sink.notes.append(
                f"{row.label} is an object total over {n_events} events: not given to each event"
            )
            continue
        value = values[0]
        label = row.label
        if (
            family == "projection"
            and field in _SUMMED_OVER_FRAMES
            and len(group.frames) > 1
            and per_frame
        ):
            assert row.tag is not None and row.keyword is not None and row.vr is not None
            total = 0.0
            for frame in group.frames:
                frame_values = _numbers(frame, (row,))
                total += frame_values[0][0] if frame_values else 0.0
            value = total
            label = f"{row.label}, summed over {len(group.frames)} frames"
        elif len(group.frames) > 1 and per_frame:
            label = f"{row.label}, frame 1 of {len(group.frames)}"
        sink.quantity(field, value, label, from_unit=row.unit, to_unit=row.our_unit)


def _read_text(sink: FieldSink, views: list[ValueReader], family: str) -> None:
    for field in _EVENT_TEXT:
        found = _string(views, tuple(r for r in _rows(field, family) if r.vr != "SQ"))
        if found is not None:
            sink.put(field, found[0], found[1].label)
    if "view_position" not in sink.values:
        (row,) = [r for r in header_rows_by_field()["view_position"] if r.vr == "SQ"]
        assert row.tag is not None
        for view in views:
            items = view.sequence(row.tag)
            if items:
                meaning = items[0].get("CodeMeaning")
                if meaning:
                    sink.put("view_position", view_from_meaning(str(meaning)), row.label)
                break

    found = _string(views, _rows("anode_material", family))
    if found is not None:
        material = HEADER_MATERIALS.get(found[0].upper())
        if material is None:
            sink.warnings.append(f"{found[1].label} {found[0]!r} is not a known anode material")
        else:
            sink.put("anode_material", material, found[1].label)
    for view in views:
        (grid_row,) = _rows("grid", family)
        assert grid_row.tag is not None and grid_row.keyword is not None and grid_row.vr is not None
        grids = view.strings(grid_row.tag, grid_row.keyword, grid_row.vr)
        if grids:
            sink.put("grid", "+".join(g.lower() for g in grids), grid_row.label)
            break
    found = _string(views, _rows("fluoro_mode", family))
    if found is not None and found[0].upper() in ("CONTINUOUS", "PULSED"):
        sink.put("fluoro_mode", found[0].lower(), found[1].label)
    if family == "ct":
        found = _string(views, _rows("event_type", family))
        if found is not None:
            mode = CT_SCAN_MODES.get(found[0].upper())
            if mode is None:
                sink.notes.append(f"{found[1].label} {found[0]!r}: scan mode not mapped")
            else:
                sink.put("event_type", mode, found[1].label)


def _read_focal_spot(sink: FieldSink, views: list[ValueReader]) -> None:
    (row,) = header_rows_by_field()["focal_spot_mm"]
    found = _numbers(views, (row,))
    if found is None:
        return
    if len(found[0]) == 1:
        sink.quantity("focal_spot_mm", found[0][0], row.label, from_unit="mm", to_unit="mm")
    else:
        sink.notes.append(
            f"{row.label} lists {len(found[0])} nominal focal spots; the one used is not recorded"
        )


def _filter_layers_from(
    view: ValueReader, rows: tuple[FieldMapping, ...], sink: FieldSink
) -> list[FilterLayer] | None:
    material_row, min_row, max_row = rows
    assert material_row.tag is not None and material_row.keyword is not None
    materials = view.strings(material_row.tag, material_row.keyword, "CS")
    if not materials:
        return None
    thickness = None
    for row in (min_row, max_row):
        assert row.tag is not None and row.keyword is not None
        thickness = view.numbers(row.tag, row.keyword, "DS")
        if thickness is not None:
            break
    if thickness is None or len(thickness) != len(materials):
        sink.warnings.append(
            f"{material_row.label} lists {len(materials)} materials but "
            f"{0 if thickness is None else len(thickness)} thicknesses; filters not kept"
        )
        return []
    layers = []
    for material, mm in zip(materials, thickness, strict=True):
        name = HEADER_MATERIALS.get(material.upper())
        if name is None:
            sink.warnings.append(
                f"{material_row.label} {material!r} is not a known filter material"
            )
            return []
        if mm < 0:
            raise IngestError("out_of_range", f"{min_row.label} {mm:g} mm is negative")
        layers.append(FilterLayer(name, mm))
    return layers


def parse_filter_text(text: str) -> list[FilterLayer] | None:
    """Filter layers from a free-text description such as ``"0.1Cu 1Al"`` or
    ``"1.0 mm Al + 0.2 mm Cu"`` (thickness in mm before an element symbol).

    Returns ``None`` unless the whole text is such a list (``"FLAT"``,
    ``"BODY FILTER"`` and the like are filter shapes, not layers).
    """
    layers = []
    position = 0
    for match in _FILTER_TEXT.finditer(text):
        if _FILTER_TEXT_REST.fullmatch(text[position : match.start()]) is None:
            return None
        layers.append(FilterLayer(ELEMENT_SYMBOLS[match.group(2)], float(match.group(1))))
        position = match.end()
    if not layers or _FILTER_TEXT_REST.fullmatch(text[position:]) is None:
        return None
    return layers


def _read_filters(sink: FieldSink, views: list[ValueReader], reader: ValueReader) -> None:
    rows = header_rows_by_field()["filters"]
    for item in reader.sequence(_XRAY_FILTER_SEQUENCE):
        layers = _filter_layers_from(reader.child(item), rows, sink)
        if layers:
            sink.values.setdefault("filters", ())
            sink.values["filters"] += tuple(layers)
            sink.provenance["filters"] = f"(0018,9556) XRayFilterSequence > {rows[0].label}"
    if "filters" in sink.values:
        return
    for view in views:
        layers = _filter_layers_from(view, rows, sink)
        if layers is not None:
            if layers:
                sink.put("filters", tuple(layers), f"{rows[0].label} + {rows[1].label}")
            return
    text = sink.values.get("filter_type")
    if isinstance(text, str):
        parsed = parse_filter_text(text)
        if parsed:
            sink.put(
                "filters",
                tuple(parsed),
                f"{sink.provenance['filter_type']}, parsed as mm and element",
            )


def _read_geometry(sink: FieldSink, views: list[ValueReader]) -> None:
    by_field = header_rows_by_field()
    for field in ("imager_pixel_spacing_mm", "detector_dimensions_mm"):
        (row,) = by_field[field]
        found = _numbers(views, (row,))
        if found is not None and len(found[0]) == 2 and min(found[0]) > 0:
            sink.put(field, (found[0][0], found[0][1]), row.label)
    edge_rows = by_field["collimator_edges_px"]
    edges = []
    for row in edge_rows:
        found = _numbers(views, (row,))
        if found is None:
            break
        edges.append(int(found[0][0]))
    if len(edges) == 4:
        left, right, upper, lower = edges
        sink.put(
            "collimator_edges_px",
            (left, right, upper, lower),
            f"{edge_rows[0].label}..{edge_rows[3].keyword}",
        )
        exposed_row, columns_row = by_field["field_width_mm"]
        (rows_row,) = by_field["field_height_mm"]
        columns = _numbers(views, (columns_row,))
        n_rows = _numbers(views, (rows_row,))
        spacing = sink.values.get("imager_pixel_spacing_mm")
        if (
            columns is not None
            and n_rows is not None
            and spacing is not None
            and 1 <= left < right <= columns[0][0]
            and 1 <= upper < lower <= n_rows[0][0]
        ):
            spacing_label = sink.provenance["imager_pixel_spacing_mm"]
            label = f"{edge_rows[0].label}..{edge_rows[3].keyword} x {spacing_label}"
            width = (right - left + 1) * spacing[1]
            height = (lower - upper + 1) * spacing[0]
            sink.quantity("field_width_mm", width, label, from_unit="mm", to_unit="mm")
            sink.quantity("field_height_mm", height, label, from_unit="mm", to_unit="mm")
            sink.put("field_area_cm2", float(f"{width * height / 100.0:.12g}"), label)
            sink.put("field_plane", "detector", label)
        else:
            sink.notes.append(
                "collimator edges are not pixel positions inside the image: no field size"
            )
    if "field_width_mm" not in sink.values:
        exposed_row = by_field["field_width_mm"][0]
        found = _numbers(views, (exposed_row,))
        if found is not None and len(found[0]) == 2:
            sink.quantity(
                "field_width_mm", found[0][0], exposed_row.label, from_unit="mm", to_unit="mm"
            )
            sink.quantity(
                "field_height_mm", found[0][1], exposed_row.label, from_unit="mm", to_unit="mm"
            )
            sink.put("field_plane", "reported", exposed_row.label)


def _read_ct_code(
    sink: FieldSink,
    views: list[ValueReader],
    field: str,
    table: Mapping[CodeKey, object],
    what: str,
) -> None:
    """A CT code sequence attribute (the first item of the nearest view) through ``table``;
    a code the table maps to None is known but has no value, one it lacks gets a note."""
    (row,) = header_rows_by_field()[field]
    assert row.tag is not None
    for view in views:
        items = view.sequence(row.tag)
        if not items:
            continue
        item = items[0]
        code = canonical(
            str(item.get("CodeValue", "")), str(item.get("CodingSchemeDesignator", ""))
        )
        label = f"{row.label} ({code[0]}, {code[1]})"
        if code not in table:
            sink.notes.append(f"{label} is not a known {what}")
        elif table[code] is not None:
            sink.put(field, table[code], label)
        return


def _read_mammography(
    sink: FieldSink, views: list[ValueReader], reader: ValueReader, base: dict[str, object]
) -> None:
    """Laterality, implant, screening or diagnostic, 2D or tomosynthesis, and a tomosynthesis
    sweep's projections."""
    by_field = header_rows_by_field()
    found = _string(views, by_field["image_laterality"])
    if found is not None:
        side = _LATERALITIES.get(found[0].upper())
        if side is not None:
            sink.put("image_laterality", side, found[1].label)
        elif found[0].upper() != "U":
            sink.warnings.append(f"{found[1].label} {found[0]!r} is not L, R, B or U; not kept")
    found = _string(views, by_field["breast_implant_present"])
    if found is not None:
        if found[0].upper() in _YES_NO:
            sink.put("breast_implant_present", _YES_NO[found[0].upper()], found[1].label)
        else:
            sink.warnings.append(f"{found[1].label} {found[0]!r} is not YES or NO; not kept")
    acquisition_row, image_type_row = by_field["mammography_acquisition"]
    assert acquisition_row.tag is not None and image_type_row.tag is not None
    acquisitions = reader.sequence(acquisition_row.tag)
    sop_class = str(base.get("sop_class_uid") or "")
    if sop_class in _BREAST_SOP_CLASSES or str(base.get("modality") or "") == "MG":
        _read_intent(sink, views)
    if acquisitions:
        sink.put("mammography_acquisition", "tomosynthesis", acquisition_row.label)
        _read_projections(sink, reader.child(acquisitions[0]))
        return
    if sop_class == _BREAST_TOMOSYNTHESIS_SOP_CLASS:
        sink.put("mammography_acquisition", "tomosynthesis", "(0008,0016) SOPClassUID")
        return
    if sop_class not in _BREAST_SOP_CLASSES and str(base.get("modality") or "") != "MG":
        return
    assert image_type_row.keyword is not None and image_type_row.vr is not None
    image_type = reader.strings(image_type_row.tag, image_type_row.keyword, image_type_row.vr)
    if image_type and any("TOMO" in value.upper() for value in image_type):
        joined = "\\".join(image_type)
        sink.put("mammography_acquisition", "tomosynthesis", f"{image_type_row.label} {joined}")
    else:
        sink.put("mammography_acquisition", "2d", "(0008,0016) SOPClassUID, (0008,0008) ImageType")


_VIEW_CODE_SEQUENCE = 0x00540220
#: where a requested procedure code sits: an image's Request Attributes Sequence (General Series,
#: Mammography Series modules), an SR document's Referenced Request Sequence (SR Document General)
_REQUEST_SEQUENCES = (0x00400275, 0x0040A370)


def _code_items(views: list[ValueReader], tag: int, within: tuple[int, ...] = ()) -> list[Dataset]:
    """The items of sequence ``tag`` in the nearest view that has any, looked for at the view's
    top level and in the items of the sequences ``within``."""
    for view in views:
        items = list(view.sequence(tag))
        for outer_tag in within:
            for outer in view.sequence(outer_tag):
                items.extend(view.child(outer).sequence(tag))
        if items:
            return items
    return []


def _coded(item: Dataset) -> tuple[CodeKey, str] | None:
    value = str(item.get("CodeValue") or item.get("LongCodeValue") or "").strip()
    if not value:
        return None
    return canonical(value, str(item.get("CodingSchemeDesignator") or "")), str(
        item.get("CodeMeaning") or ""
    ).strip()


def _read_intent(sink: FieldSink, views: list[ValueReader]) -> None:
    """Screening or diagnostic, from the first of these clues that says one (the provenance
    names it):

    1. a View Modifier Code Sequence (0054,0222) item (in View Code Sequence (0054,0220), PS3.3
       C.8.11.7 Mammography Image module) of a workup view of CID 4015 (magnification, spot
       compression, rolled or tangential): diagnostic, whatever the procedure says;
    2. the procedure codes' meanings, :func:`procedure_intent`.

    A procedure code whose meaning names both or neither says nothing; the mapping rules'
    description fallbacks then decide (``api/data/mapping_rules.csv``)."""
    modifier_row = header_rows_by_field()["mammography_intent"][0]
    assert modifier_row.tag is not None and modifier_row.keyword == "ViewModifierCodeSequence"
    for item in _code_items(views, modifier_row.tag, (_VIEW_CODE_SEQUENCE,)):
        found = _coded(item)
        if found is not None and found[0] in MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS:
            code, meaning = found
            name = MAMMOGRAPHY_VIEW_MODIFIERS[code]
            label = f"{modifier_row.label} ({code[0]}, {code[1]}) {meaning or name}"
            sink.put("mammography_intent", "diagnostic", label)
            return
    found_intent = procedure_intent(views)
    if found_intent is not None:
        sink.put("mammography_intent", *found_intent)


def procedure_intent(views: list[ValueReader]) -> tuple[str, str] | None:
    """``(intent, provenance)`` from the meaning of the first procedure code that says
    screening or diagnostic (:func:`~beamaudit.ingest.codes.intent_from_words`), in this order:
    Performed Procedure Code Sequence (0040,A372) (SR Document General module), Procedure Code
    Sequence (0008,1032) (General Study), Requested Procedure Code Sequence (0032,1064) at the
    top level or in Request Attributes Sequence (0040,0275) (an image's General Series) or
    Referenced Request Sequence (0040,A370) (an SR document); None when none says one."""
    for row in header_rows_by_field()["mammography_intent"][1:]:
        assert row.tag is not None
        within = _REQUEST_SEQUENCES if row.keyword == "RequestedProcedureCodeSequence" else ()
        for item in _code_items(views, row.tag, within):
            found = _coded(item)
            if found is None:
                continue
            intent = intent_from_words(found[1])
            if intent is not None:
                code, meaning = found
                return intent, f"{row.label} ({code[0]}, {code[1]}) {meaning}"
    return None


def _read_projections(sink: FieldSink, acquisition: ValueReader) -> None:
    """Projections of one Breast Tomosynthesis Acquisition item; totals summed from them where
    the item gives none."""
    (row,) = header_rows_by_field()["tomo_projections"]
    assert row.tag is not None
    projections = [acquisition.child(item) for item in acquisition.sequence(row.tag)]
    if not projections:
        return
    sink.put("tomo_projections", len(projections), row.label)
    for field in _PER_PROJECTION_SUMS:
        if field in sink.values:
            continue
        rows = _rows(field, "projection")
        found = [_numbers([p], rows) for p in projections]
        if not all(found):
            if any(found):
                sink.notes.append(
                    f"{field} recorded for some projections only: no total over the sweep"
                )
            continue
        total = sum(f[0][0] for f in found if f is not None)
        first = next(f for f in found if f is not None)[1]
        label = f"{row.label} > {first.label}, summed over {len(projections)} projections"
        sink.quantity(field, total, label, from_unit=first.unit, to_unit=first.our_unit)


def _read_event_datetime(sink: FieldSink, reader: ValueReader) -> None:
    dt_row, date_row, time_row = header_rows_by_field()["event_datetime"]
    text = reader.string(dt_row)
    try:
        if text is not None:
            sink.put("event_datetime", parse_dt(text), dt_row.label)
            return
        day = reader.string(date_row)
        if day is None:
            return
        moment = parse_da(day)
        clock = reader.string(time_row)
        if clock is None:
            sink.put(
                "event_datetime", datetime(moment.year, moment.month, moment.day), date_row.label
            )
        else:
            sink.put(
                "event_datetime",
                datetime.combine(moment, parse_tm(clock)),
                f"{date_row.label} + {time_row.label}",
            )
    except ValueError as exc:
        sink.warnings.append(f"acquisition date/time not kept: {exc}")


def header_events(
    reader: ValueReader,
    *,
    base: dict[str, object],
    base_provenance: dict[str, str],
    family: str,
    warnings: list[str],
) -> list[ExposureEvent]:
    """The exposure events of one image object.

    Parameters
    ----------
    reader
        Value reader over the dataset (pixel data never read).
    base
        Fields shared by every event of the object (identity, context,
        patient), already checked, with ``base_provenance``.
    family
        ``"projection"`` or ``"ct"``.
    warnings
        Receives the object's warnings.

    Raises
    ------
    IngestError
        For a value outside its physical range or one that cannot be decoded.
    """
    by_field = header_rows_by_field()
    (uid_row,) = by_field["irradiation_event_uid"]
    groups = _group_frames(reader, uid_row)
    sop = str(base["sop_instance_uid"])
    series = base.get("series_instance_uid")
    events: list[ExposureEvent] = []
    for index, (event_uid, group) in enumerate(groups):
        sink = FieldSink(warnings)
        views = group.first()
        if event_uid is not None:
            assert uid_row.tag is not None and uid_row.keyword is not None
            all_uids = next(
                (u for v in views if (u := v.strings(uid_row.tag, uid_row.keyword, "UI"))),
                [event_uid],
            )
            if len(all_uids) > 1:
                sink.notes.append(
                    f"{uid_row.label} lists {len(all_uids)} events; the first is kept"
                )
            sink.put("irradiation_event_uid", event_uid, uid_row.label)
        _read_numbers(sink, group, family, len(groups))
        _read_text(sink, views, family)
        if family == "projection":
            _read_mammography(sink, views, reader, base)
        _read_focal_spot(sink, views)
        _read_filters(sink, views, reader)
        _read_geometry(sink, views)
        if family == "ct":
            _read_ct_code(
                sink, views, "ct_phantom_diameter_cm", CT_PHANTOM_DIAMETERS_CM, "CTDI phantom"
            )
            _read_ct_code(
                sink, views, "water_equivalent_diameter_method",
                WATER_EQUIVALENT_DIAMETER_METHODS, "Dw method",
            )  # fmt: skip
        _read_event_datetime(sink, reader)
        event_key = event_uid if event_uid is not None else f"{sop}#{index}"
        acquisition_key = event_uid
        if acquisition_key is None and family == "ct" and len(groups) == 1:
            (acq_row,) = by_field["acquisition_key"]
            number = reader.number(acq_row)
            acquisition_key = f"{series}/acquisition {int(number) if number is not None else '?'}"
            sink.provenance["acquisition_key"] = f"(0020,000E) SeriesInstanceUID + {acq_row.label}"
        if len(groups) > 1 and group.frames:
            sink.notes.append(f"event of {len(group.frames)} frames")
        provenance = dict(base_provenance)
        provenance.update(sink.provenance)
        events.append(
            ExposureEvent(
                event_key=event_key,
                event_index=index,
                acquisition_key=acquisition_key or event_key,
                **base,  # type: ignore[arg-type]
                **sink.values,
                provenance=provenance,
                notes=sink.notes,
            )
        )
    return events
