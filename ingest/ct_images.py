"""CT images read for the patient's size: the one ingest path that reads pixel data.

Everything else in ingest reads headers only. Finding a CT patient's water-equivalent diameter
(AAPM Report 220, IEC 62985) needs the pixels of a few images of each study: the localizer, or
axial images at a chosen spacing along the scan. This module

1. summarises a CT image's header (:func:`ct_image_header`, no pixel data needed) and decides
   whether it is a **localizer** (Image Type (0008,0008) value 3 ``LOCALIZER``, or a scan
   mode of constant angle / scout), an **axial** image (Image Type ``AXIAL``, or an image plane
   within 60 degrees of transverse), or **other** (reformats, colour, multi-frame), with the
   reason;
2. chooses, from the headers of a study alone, which images are worth reading
   (:func:`select_size_images`), so that every other object stays header-only;
3. reads the chosen images' pixel data into plain records (:class:`AxialImage`,
   :class:`LocalizerImage`): the modality LUT applied (Rescale Slope/Intercept (0028,1053) /
   (0028,1052), or a Modality LUT Sequence), padding (Pixel Padding Value (0028,0120), with its
   range limit) as NaN, and the geometry from Image Position/Orientation (Patient)
   (0020,0032) / (0020,0037), Pixel Spacing (0028,0030) and Slice Location (0020,1041).

The records hold arrays and numbers only; the water-equivalent diameter is computed from them
by :mod:`beamaudit.model.ct_size` and :mod:`beamaudit.model.ct_localizer` (ingest imports
nothing of the model: the application joins them). A record is meant to be dropped once its
size is computed: nothing here keeps pixel data, and a caller's dataset is never changed (the
pixels are decoded without pydicom's cache on the dataset).

Pixel data is decoded by pydicom's decoders: native and RLE by pydicom itself, JPEG, JPEG-LS
and JPEG 2000 by the pylibjpeg plugins (dependencies of beamaudit).
"""

from __future__ import annotations

import io
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import IO, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydicom import dcmread
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.encaps import encapsulate
from pydicom.errors import InvalidDicomError
from pydicom.pixels import apply_modality_lut, get_decoder
from pydicom.uid import UID, ExplicitVRLittleEndian, ImplicitVRLittleEndian

from ._values import ValueReader
from .errors import IngestError
from .headers import CT_SCAN_MODES
from .reader import HEAD_BYTES, classify_head

__all__ = [
    "AxialImage",
    "CtImageHeader",
    "ImageKind",
    "LocalizerImage",
    "SelectedImage",
    "SizeSelection",
    "ct_image_header",
    "ct_size_image",
    "ct_size_image_from_frame",
    "read_ct_size_image",
    "select_size_images",
]

ImageKind = Literal["axial", "localizer", "other"]

_CT_IMAGE = "1.2.840.10008.5.1.4.1.1.2"
_CT_CLASSES = frozenset({_CT_IMAGE, "1.2.840.10008.5.1.4.1.1.2.1", "1.2.840.10008.5.1.4.1.1.2.2"})
#: an image plane whose normal lies within this angle of the table axis is axial (gantry tilts
#: stay under 30 degrees: common practice); coronal and sagittal reformats are far beyond it
_AXIAL_MAX_TILT_DEG = 60.0

# (tag, keyword, VR) of the attributes read; PS3.6 (checked in tests against pydicom's dictionary)
_TAGS: dict[str, tuple[int, str, str]] = {
    "sop_class_uid": (0x00080016, "SOPClassUID", "UI"),
    "sop_instance_uid": (0x00080018, "SOPInstanceUID", "UI"),
    "study_instance_uid": (0x0020000D, "StudyInstanceUID", "UI"),
    "series_instance_uid": (0x0020000E, "SeriesInstanceUID", "UI"),
    "frame_of_reference_uid": (0x00200052, "FrameOfReferenceUID", "UI"),
    "irradiation_event_uid": (0x00083010, "IrradiationEventUID", "UI"),
    "image_type": (0x00080008, "ImageType", "CS"),
    "scan_options": (0x00180022, "ScanOptions", "CS"),
    "acquisition_type": (0x00189302, "AcquisitionType", "CS"),
    "acquisition_number": (0x00200012, "AcquisitionNumber", "IS"),
    "instance_number": (0x00200013, "InstanceNumber", "IS"),
    "image_position_mm": (0x00200032, "ImagePositionPatient", "DS"),
    "image_orientation": (0x00200037, "ImageOrientationPatient", "DS"),
    "slice_location_mm": (0x00201041, "SliceLocation", "DS"),
    "slice_thickness_mm": (0x00180050, "SliceThickness", "DS"),
    "reconstruction_diameter_mm": (0x00181100, "ReconstructionDiameter", "DS"),
    "kvp_kv": (0x00180060, "KVP", "DS"),
    "pixel_spacing_mm": (0x00280030, "PixelSpacing", "DS"),
    "samples_per_pixel": (0x00280002, "SamplesPerPixel", "US"),
    "number_of_frames": (0x00280008, "NumberOfFrames", "IS"),
    "rows": (0x00280010, "Rows", "US"),
    "columns": (0x00280011, "Columns", "US"),
    "bits_allocated": (0x00280100, "BitsAllocated", "US"),
}
_PIXEL_DATA = 0x7FE00010
_PADDING_VALUE = 0x00280120
_PADDING_LIMIT = 0x00280121


def _label(name: str) -> str:
    tag, keyword, _ = _TAGS[name]
    return f"({tag >> 16:04X},{tag & 0xFFFF:04X}) {keyword}"


@dataclass(frozen=True, slots=True)
class CtImageHeader:
    """What the header of one CT image says about its use for the patient's size.

    ``kind`` is ``"axial"``, ``"localizer"`` or ``"other"``; ``kind_reason`` says which
    attribute decided it. ``z_mm`` is the table position of an axial image's centre (patient
    coordinates, from Image Position and Orientation; Slice Location when they are absent).
    ``pixel_data_bytes`` is the decoded size of the pixel data (rows x columns x frames x
    bytes per sample): what reading it would cost.
    """

    sop_instance_uid: str
    sop_class_uid: str
    study_instance_uid: str | None
    series_instance_uid: str | None
    frame_of_reference_uid: str | None
    irradiation_event_uid: str | None
    acquisition_number: int | None
    instance_number: int | None
    kind: ImageKind
    kind_reason: str
    image_type: tuple[str, ...]
    image_position_mm: tuple[float, float, float] | None
    image_orientation: tuple[float, float, float, float, float, float] | None
    slice_location_mm: float | None
    z_mm: float | None
    pixel_spacing_mm: tuple[float, float] | None
    rows: int | None
    columns: int | None
    slice_thickness_mm: float | None
    reconstruction_diameter_mm: float | None
    kvp_kv: float | None
    pixel_data_bytes: int

    @property
    def field_of_view_mm(self) -> float | None:
        """The smaller side of the image in mm (None without spacing or size)."""
        if self.pixel_spacing_mm is None or self.rows is None or self.columns is None:
            return None
        return min(self.rows * self.pixel_spacing_mm[0], self.columns * self.pixel_spacing_mm[1])

    @property
    def acquisition_group(self) -> str:
        """Images of one acquisition share it: the Irradiation Event UID, else the Frame of
        Reference with the Acquisition Number, else the series."""
        if self.irradiation_event_uid:
            return self.irradiation_event_uid
        if self.frame_of_reference_uid and self.acquisition_number is not None:
            return f"{self.frame_of_reference_uid}/acquisition {self.acquisition_number}"
        return f"{self.series_instance_uid}/series"


def _numbers(reader: ValueReader, name: str, count: int | None = None) -> list[float] | None:
    tag, keyword, vr = _TAGS[name]
    values = reader.numbers(tag, keyword, vr)
    if values is None:
        return None
    if count is not None and len(values) != count:
        raise IngestError("bad_value", f"{_label(name)} holds {len(values)} values, not {count}")
    if not all(math.isfinite(v) for v in values):
        raise IngestError("bad_value", f"{_label(name)} is not finite")
    return values


def _number(reader: ValueReader, name: str) -> float | None:
    values = _numbers(reader, name)
    return values[0] if values else None


def _integer(reader: ValueReader, name: str) -> int | None:
    value = _number(reader, name)
    return int(value) if value is not None else None


def _text(reader: ValueReader, name: str) -> str | None:
    tag, keyword, vr = _TAGS[name]
    values = reader.strings(tag, keyword, vr)
    return values[0] if values else None


def _texts(reader: ValueReader, name: str) -> tuple[str, ...]:
    tag, keyword, vr = _TAGS[name]
    return tuple(v.upper() for v in reader.strings(tag, keyword, vr) or ())


def _normal(orientation: Sequence[float]) -> NDArray[np.float64]:
    row = np.asarray(orientation[:3], dtype=np.float64)
    col = np.asarray(orientation[3:], dtype=np.float64)
    n = np.cross(row, col)
    norm = float(np.linalg.norm(n))
    if norm < 1e-6:
        raise IngestError(
            "bad_value", f"{_label('image_orientation')} row and column directions are parallel"
        )
    return n / norm


def _classify(
    reader: ValueReader,
    image_type: tuple[str, ...],
    orientation: tuple[float, ...] | None,
    samples: int,
    frames: int,
) -> tuple[ImageKind, str]:
    if samples != 1:
        return "other", f"{_label('samples_per_pixel')} {samples}: not CT numbers"
    if frames > 1:
        return "other", f"{_label('number_of_frames')} {frames}: multi-frame images not read yet"
    if "LOCALIZER" in image_type[2:]:
        return "localizer", f"{_label('image_type')} {'/'.join(image_type)}"
    for name in ("acquisition_type", "scan_options"):
        mode = _text(reader, name)
        if mode is not None and CT_SCAN_MODES.get(mode.upper()) == "ct_localizer":
            return "localizer", f"{_label(name)} {mode}"
    if orientation is not None:
        tilt = math.degrees(math.acos(min(1.0, abs(float(_normal(orientation)[2])))))
        if tilt <= _AXIAL_MAX_TILT_DEG:
            return "axial", f"{_label('image_orientation')}: plane {tilt:.0f} deg from transverse"
        return "other", f"{_label('image_orientation')}: plane {tilt:.0f} deg from transverse"
    if "AXIAL" in image_type[2:]:
        return "axial", f"{_label('image_type')} {'/'.join(image_type)}"
    return "other", "neither a localizer nor an axial image by Image Type and orientation"


def ct_image_header(ds: Dataset, *, source: str | None = None) -> CtImageHeader:
    """The size-relevant header of one CT image (pixel data not needed, never read).

    Raises
    ------
    IngestError
        ``unsupported_sop_class`` for an object that is not a CT image;
        ``missing_attribute`` without a SOP Instance UID; ``bad_value`` for a value that
        cannot be decoded (with ``source``).
    """
    try:
        return _header(ds)
    except IngestError as exc:
        raise exc.with_source(source) if source else exc from None


def _header(ds: Dataset) -> CtImageHeader:
    reader = ValueReader.for_dataset(ds)
    sop_class = _text(reader, "sop_class_uid")
    meta = getattr(ds, "file_meta", None)
    if sop_class is None and meta is not None:
        sop_class = str(meta.get("MediaStorageSOPClassUID") or "") or None
    if sop_class not in _CT_CLASSES:
        raise IngestError(
            "unsupported_sop_class", f"SOP Class {sop_class} is not a CT image: no CT size"
        )
    sop_instance = _text(reader, "sop_instance_uid")
    if sop_instance is None:
        raise IngestError("missing_attribute", f"{_label('sop_instance_uid')} is missing")
    image_type = _texts(reader, "image_type")
    position = _numbers(reader, "image_position_mm", 3)
    orientation = _numbers(reader, "image_orientation", 6)
    spacing = _numbers(reader, "pixel_spacing_mm", 2)
    if spacing is not None and min(spacing) <= 0:
        raise IngestError("bad_value", f"{_label('pixel_spacing_mm')} {spacing} is not positive")
    rows, columns = _integer(reader, "rows"), _integer(reader, "columns")
    samples = _integer(reader, "samples_per_pixel") or 1
    frames = _integer(reader, "number_of_frames") or 1
    bits = _integer(reader, "bits_allocated") or 16
    kind, reason = _classify(
        reader, image_type, tuple(orientation) if orientation else None, samples, frames
    )
    slice_location = _number(reader, "slice_location_mm")
    z = None
    if kind == "axial":
        z = slice_location
        if position is not None and orientation is not None and spacing and rows and columns:
            centre = (
                np.asarray(position)
                + np.asarray(orientation[:3]) * spacing[1] * (columns - 1) / 2.0
                + np.asarray(orientation[3:]) * spacing[0] * (rows - 1) / 2.0
            )
            z = float(centre[2])
        elif position is not None:
            z = position[2]
    return CtImageHeader(
        sop_instance_uid=sop_instance,
        sop_class_uid=sop_class,
        study_instance_uid=_text(reader, "study_instance_uid"),
        series_instance_uid=_text(reader, "series_instance_uid"),
        frame_of_reference_uid=_text(reader, "frame_of_reference_uid"),
        irradiation_event_uid=_text(reader, "irradiation_event_uid"),
        acquisition_number=_integer(reader, "acquisition_number"),
        instance_number=_integer(reader, "instance_number"),
        kind=kind,
        kind_reason=reason,
        image_type=image_type,
        image_position_mm=(position[0], position[1], position[2]) if position else None,
        image_orientation=tuple(orientation) if orientation else None,  # type: ignore[arg-type]
        slice_location_mm=slice_location,
        z_mm=z,
        pixel_spacing_mm=(spacing[0], spacing[1]) if spacing else None,
        rows=rows,
        columns=columns,
        slice_thickness_mm=_number(reader, "slice_thickness_mm"),
        reconstruction_diameter_mm=_number(reader, "reconstruction_diameter_mm"),
        kvp_kv=_number(reader, "kvp_kv"),
        pixel_data_bytes=(rows or 0) * (columns or 0) * frames * samples * ((bits + 7) // 8),
    )


# ---- choosing the images worth reading ------------------------------------------------------
@dataclass(frozen=True, slots=True)
class SelectedImage:
    """One image chosen for its pixels, with why."""

    sop_instance_uid: str
    series_instance_uid: str | None
    acquisition_group: str
    kind: ImageKind
    reason: str


@dataclass(frozen=True, slots=True)
class SizeSelection:
    """The images of a study worth reading for the patient's size, and what they cost."""

    selected: tuple[SelectedImage, ...]
    images: int
    pixel_data_bytes_selected: int
    pixel_data_bytes_all: int
    notes: tuple[str, ...] = field(default=())

    @property
    def sop_instance_uids(self) -> frozenset[str]:
        """The chosen images' SOP Instance UIDs."""
        return frozenset(s.sop_instance_uid for s in self.selected)


def _series_rank(images: list[CtImageHeader]) -> tuple[float, int, str]:
    fov = max((h.field_of_view_mm or 0.0) for h in images)
    diameter = max((h.reconstruction_diameter_mm or 0.0) for h in images)
    # the widest field holds the whole patient; then the fewest images (thickest slices)
    return (-max(fov, diameter), len(images), images[0].series_instance_uid or "")


def _sample(images: list[CtImageHeader], spacing_mm: float) -> list[tuple[CtImageHeader, str]]:
    ordered = sorted(images, key=lambda h: (h.z_mm or 0.0, h.instance_number or 0))
    z = np.array([h.z_mm for h in ordered], dtype=np.float64)
    lo, hi = float(z[0]), float(z[-1])
    steps = max(1, math.ceil((hi - lo) / spacing_mm - 1e-9)) if hi > lo else 0
    targets = [("first", lo), ("last", hi), ("centre", 0.5 * (lo + hi))]
    targets += [("sample", lo + (hi - lo) * k / steps) for k in range(1, steps)]
    chosen: dict[int, str] = {}
    for role, target in targets:
        index = int(np.argmin(np.abs(z - target)))
        chosen.setdefault(index, f"{role} of the scan (z {z[index]:g} mm)")
    return [(ordered[i], chosen[i]) for i in sorted(chosen)]


def select_size_images(
    headers: Iterable[CtImageHeader],
    *,
    axial_spacing_mm: float = 50.0,
    localizers: bool = True,
    axial: bool = True,
) -> SizeSelection:
    """Which images of a study to read for the patient's size, from their headers alone.

    Every localizer is chosen (when ``localizers``): there are one or two per study. For the
    axial images (when ``axial``), each acquisition (:attr:`CtImageHeader.acquisition_group`)
    contributes one series, the one with the widest field of view (then the fewest images);
    of it the first, the last and the centre image along the table and one image every
    ``axial_spacing_mm`` between them. Images without a table position are not chosen.
    """
    if not (math.isfinite(axial_spacing_mm) and axial_spacing_mm > 0):
        raise IngestError("bad_value", "the axial sampling spacing must be a positive mm value")
    all_headers = list(headers)
    selected: list[SelectedImage] = []
    notes: list[str] = []
    if localizers:
        for h in sorted(
            (h for h in all_headers if h.kind == "localizer"),
            key=lambda h: (h.series_instance_uid or "", h.instance_number or 0),
        ):
            selected.append(
                SelectedImage(
                    h.sop_instance_uid, h.series_instance_uid, h.acquisition_group, "localizer",
                    f"localizer ({h.kind_reason})",
                )
            )  # fmt: skip
    if axial:
        groups: dict[str, dict[str, list[CtImageHeader]]] = {}
        unplaced = 0
        for h in all_headers:
            if h.kind != "axial":
                continue
            if h.z_mm is None:
                unplaced += 1
                continue
            series = groups.setdefault(h.acquisition_group, {})
            series.setdefault(h.series_instance_uid or "", []).append(h)
        if unplaced:
            notes.append(f"{unplaced} axial images without a table position: not chosen")
        for group, by_series in groups.items():
            best = min(by_series.values(), key=_series_rank)
            for h, why in _sample(best, axial_spacing_mm):
                selected.append(
                    SelectedImage(h.sop_instance_uid, h.series_instance_uid, group, "axial", why)
                )
    chosen = {s.sop_instance_uid for s in selected}
    return SizeSelection(
        selected=tuple(selected),
        images=len(all_headers),
        pixel_data_bytes_selected=sum(
            h.pixel_data_bytes for h in all_headers if h.sop_instance_uid in chosen
        ),
        pixel_data_bytes_all=sum(h.pixel_data_bytes for h in all_headers),
        notes=tuple(notes),
    )


# ---- reading the pixels ---------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class AxialImage:
    """One axial image's CT numbers and geometry (no model: the application computes Dw).

    ``ct_numbers_hu`` is float32 with NaN for padding; ``pixel_spacing_mm`` is (row, column).
    """

    header: CtImageHeader
    ct_numbers_hu: NDArray[np.float32]
    pixel_spacing_mm: tuple[float, float]
    z_mm: float | None
    provenance: dict[str, str]
    notes: tuple[str, ...] = ()


@dataclass(frozen=True, slots=True)
class LocalizerImage:
    """One localizer, turned so that each row is one table position.

    ``values`` are the pixel values after the modality LUT (float32, NaN for padding), rows
    along the table; ``row_z_mm`` the table position of each row (None without Image
    Position/Orientation); ``column_spacing_mm`` the spacing across; ``view`` ``"frontal"``
    (AP or PA: image plane coronal) or ``"lateral"`` (sagittal), None if unknown.
    """

    header: CtImageHeader
    values: NDArray[np.float32]
    column_spacing_mm: float
    row_z_mm: NDArray[np.float64] | None
    view: Literal["frontal", "lateral"] | None
    provenance: dict[str, str]
    notes: tuple[str, ...] = ()


CtSizeImage = AxialImage | LocalizerImage


def _transfer_syntax(ds: Dataset, override: str | None) -> UID:
    if override:
        return UID(override)
    meta = getattr(ds, "file_meta", None)
    syntax = meta.get("TransferSyntaxUID") if meta is not None else None
    if syntax:
        return UID(str(syntax))
    elem = ds.get_item(_PIXEL_DATA)
    if elem is not None and (
        getattr(elem, "is_undefined_length", False) or getattr(elem, "length", 0) == 0xFFFFFFFF
    ):
        raise IngestError(
            "missing_attribute",
            "the pixel data is compressed and no (0002,0010) TransferSyntaxUID says how",
        )
    # a dataset decoded without file meta: pydicom knows how it was read
    implicit = getattr(ds, "is_implicit_VR", None)
    if implicit is None:
        implicit = getattr(ds, "original_encoding", (None,))[0]
    return ImplicitVRLittleEndian if implicit else ExplicitVRLittleEndian


def _decode(ds: Dataset, syntax: UID) -> NDArray[np.float64]:
    """The stored pixel values with the modality LUT applied, without touching ``ds``."""
    if ds.get_item(_PIXEL_DATA) is None:
        raise IngestError("missing_attribute", "(7FE0,0010) PixelData is absent")
    try:
        decoder = get_decoder(syntax)
    except NotImplementedError:
        raise IngestError(
            "bad_value", f"no pixel data decoder for transfer syntax {syntax.name} ({syntax})"
        ) from None
    if not decoder.is_available:
        raise IngestError(
            "bad_value",
            f"the decoder for {syntax.name} is not installed (pylibjpeg plugins are needed)",
        )
    try:
        options: dict[str, Any] = {"transfer_syntax_uid": syntax}
        stored, _ = decoder.as_array(ds, index=0, **options)
    except (ValueError, TypeError, KeyError, AttributeError, RuntimeError, EOFError) as exc:
        raise IngestError("bad_value", f"cannot decode the pixel data: {exc}") from None
    if stored.ndim != 2:
        raise IngestError("bad_value", f"pixel data of shape {stored.shape} is not one image")
    values = np.asarray(apply_modality_lut(stored, ds), dtype=np.float64)
    padding = _padding(ds, stored)
    if padding is not None:
        values[padding] = np.nan
    return values


def _padding(ds: Dataset, stored: NDArray[Any]) -> NDArray[np.bool_] | None:
    value = ds.get(_PADDING_VALUE)
    if value is None or value.value is None or value.value == b"":
        return None
    try:
        first = int(value.value)
        limit_elem = ds.get(_PADDING_LIMIT)
        last = int(limit_elem.value) if limit_elem is not None and limit_elem.value else first
    except (TypeError, ValueError):
        raise IngestError("bad_value", "(0028,0120) PixelPaddingValue is not a number") from None
    lo, hi = sorted((first, last))
    return np.asarray((stored >= lo) & (stored <= hi))


def ct_size_image(
    ds: Dataset, *, source: str | None = None, transfer_syntax_uid: str | None = None
) -> CtSizeImage:
    """Read one CT image's pixels for its patient size: an axial image or a localizer.

    Parameters
    ----------
    ds : Dataset
        The whole object, pixel data included (a file read in full, a C-STORE dataset, a
        WADO-RS instance). It is not changed.
    source : str, optional
        Where it came from, for errors.
    transfer_syntax_uid : str, optional
        How the pixel data is encoded, when ``ds`` has no file meta saying so.

    Raises
    ------
    IngestError
        ``unsupported_sop_class`` for an image neither axial nor a localizer (the reason says
        why); ``missing_attribute`` without pixel data or pixel spacing; ``bad_value`` for
        pixel data that cannot be decoded.
    """
    try:
        return _size_image(ds, transfer_syntax_uid)
    except IngestError as exc:
        raise exc.with_source(source) if source else exc from None


def _size_image(ds: Dataset, transfer_syntax_uid: str | None) -> CtSizeImage:
    header = _header(ds)
    if header.kind == "other":
        raise IngestError(
            "unsupported_sop_class",
            f"neither an axial image nor a localizer ({header.kind_reason}): no CT size",
        )
    if header.pixel_spacing_mm is None:
        raise IngestError(
            "missing_attribute", f"{_label('pixel_spacing_mm')} is missing: no size in mm"
        )
    values = _decode(ds, _transfer_syntax(ds, transfer_syntax_uid))
    provenance = {
        "values": "(7FE0,0010) PixelData through the modality LUT ((0028,1052) "
        "RescaleIntercept, (0028,1053) RescaleSlope), (0028,0120) PixelPaddingValue as NaN",
        "pixel_spacing_mm": _label("pixel_spacing_mm"),
        "kind": header.kind_reason,
    }
    if header.kind == "axial":
        provenance["z_mm"] = (
            f"{_label('image_position_mm')} + {_label('image_orientation')}, image centre"
            if header.image_position_mm is not None and header.image_orientation is not None
            else _label("slice_location_mm")
        )
        assert header.pixel_spacing_mm is not None
        return AxialImage(
            header=header,
            ct_numbers_hu=values.astype(np.float32),
            pixel_spacing_mm=header.pixel_spacing_mm,
            z_mm=header.z_mm,
            provenance=provenance,
        )
    return _localizer(header, values, provenance)


def _localizer(
    header: CtImageHeader, values: NDArray[np.float64], provenance: dict[str, str]
) -> LocalizerImage:
    spacing = header.pixel_spacing_mm
    assert spacing is not None
    orientation = header.image_orientation
    notes: list[str] = []
    if orientation is None or header.image_position_mm is None:
        notes.append(
            "no Image Position/Orientation: rows taken along the table (head at the top), "
            "table positions unknown"
        )
        return LocalizerImage(
            header, values.astype(np.float32), spacing[1], None, None, provenance, tuple(notes)
        )
    row_dir = np.asarray(orientation[:3])
    col_dir = np.asarray(orientation[3:])
    normal = np.abs(_normal(orientation))
    view: Literal["frontal", "lateral"] = "frontal" if normal[1] >= normal[0] else "lateral"
    z0 = header.image_position_mm[2]
    if abs(col_dir[2]) >= abs(row_dir[2]):  # going down the rows moves along the table
        row_z = z0 + np.arange(values.shape[0]) * spacing[0] * col_dir[2]
        across = spacing[1]
    else:
        values = values.T
        row_z = z0 + np.arange(values.shape[0]) * spacing[1] * row_dir[2]
        across = spacing[0]
        notes.append("image columns run along the table: turned so that rows do")
    provenance["row_z_mm"] = f"{_label('image_position_mm')} + {_label('image_orientation')}"
    provenance["column_spacing_mm"] = (
        f"{_label('pixel_spacing_mm')}, taken as the spacing at the isocentre"
    )
    return LocalizerImage(
        header=header,
        values=np.ascontiguousarray(values, dtype=np.float32),
        column_spacing_mm=across,
        row_z_mm=np.asarray(row_z, dtype=np.float64),
        view=view,
        provenance=provenance,
        notes=tuple(notes),
    )


def read_ct_size_image(source: str | os.PathLike[str] | bytes) -> CtSizeImage:
    """Read a CT image file (a path) or a Part 10 object in memory (bytes), pixels included.

    Raises
    ------
    IngestError
        ``unreadable``, ``not_dicom`` or ``truncated`` for a file that cannot be read, and as
        :func:`ct_size_image`.
    """
    name = "<bytes>" if isinstance(source, bytes) else str(source)
    try:
        if isinstance(source, bytes):
            fh: IO[bytes] = io.BytesIO(source)
        else:
            fh = open(source, "rb")  # noqa: SIM115 - closed below, around one read
        with fh:
            head = fh.read(HEAD_BYTES)
            if classify_head(head) == "not_dicom":
                raise IngestError(
                    "not_dicom", "no 'DICM' marker at byte 128 and no DICOM element at the start"
                )
            fh.seek(0)
            ds = dcmread(fh, force=head[128:132] != b"DICM")
    except IngestError as exc:
        raise exc.with_source(name) from None
    except InvalidDicomError as exc:
        raise IngestError("not_dicom", f"not a DICOM object: {exc}", name) from None
    except EOFError as exc:
        raise IngestError("truncated", f"the object ends early: {exc}", name) from None
    except OSError as exc:
        raise IngestError("unreadable", f"cannot read: {exc}", name) from None
    except (ValueError, TypeError, KeyError, NotImplementedError) as exc:
        raise IngestError("bad_value", f"cannot decode the object: {exc}", name) from None
    return ct_size_image(ds, source=name)


def ct_size_image_from_frame(
    metadata: Dataset,
    frame: bytes,
    *,
    transfer_syntax_uid: str = ExplicitVRLittleEndian,
    source: str | None = None,
) -> CtSizeImage:
    """Read a CT image delivered as DICOMweb does it: metadata and one frame's bytes.

    A WADO-RS frame request returns the frame alone: uncompressed little-endian
    (``application/octet-stream``) or in a compressed transfer syntax (``image/jls``,
    ``image/jp2``...). The metadata (the instance's DICOM JSON, already pulled) gives the
    rest. ``metadata`` is copied, not changed.
    """
    ds = Dataset()
    ds.update(metadata)
    syntax = UID(transfer_syntax_uid)
    ds.file_meta = FileMetaDataset()
    ds.file_meta.TransferSyntaxUID = syntax
    ds.PixelData = encapsulate([frame]) if syntax.is_compressed else frame
    ds["PixelData"].VR = "OB" if syntax.is_compressed or ds.get("BitsAllocated", 16) <= 8 else "OW"
    return ct_size_image(ds, source=source)
