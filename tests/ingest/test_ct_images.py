"""CT images read for the patient's size: classification, pixel reading, and the whole way
from a DICOM phantom to its water-equivalent diameter.

The phantoms are real CT Image Storage objects (pydicom, with pixel data; ct_phantoms.py) whose
Dw is exact by construction (AAPM Report 220, eq. 2-3). Real files from pydicom and
pydicom-data are the sanity checks: their headers (a frontal and a lateral localizer, a tilted
head scan) and their pixels (JPEG lossless and JPEG 2000 compressed clinical slices).
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest
from ct_phantoms import (
    blank,
    ct_dataset,
    detector_signal,
    dw_cm,
    ellipse_fraction,
    paint,
    row_profile,
    signal_calibration_points,
    water_area_cm2,
)
from ingest_samples import DICOMDIR_TESTS, header, sample, to_bytes
from pydicom import dcmread
from pydicom.encaps import generate_frames
from pydicom.uid import RLELossless

from beamaudit.ingest import IngestError
from beamaudit.ingest.ct_images import (
    AxialImage,
    LocalizerImage,
    ct_image_header,
    ct_size_image,
    ct_size_image_from_frame,
    read_ct_size_image,
    select_size_images,
)
from beamaudit.model.ct_localizer import LocalizerCalibration, localizer_sizes
from beamaudit.model.ct_size import axial_sizes, scan_range_size

N = 512
PIXEL_MM = 0.8


def _cylinder_dataset(diameter_mm: float = 320.0, **kwargs: object):
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=diameter_mm / 2, b_mm=diameter_mm / 2), 0.0)
    yy, xx = np.mgrid[:N, :N] - (N - 1) / 2
    outside = xx**2 + yy**2 > (N / 2) ** 2  # the corners outside the reconstruction circle
    ds = ct_dataset(image, pixel_mm=PIXEL_MM, padding_value=-2000, padding_mask=outside, **kwargs)
    return ds, image


# ---- headers --------------------------------------------------------------------------------
def test_real_localizer_headers_frontal_and_lateral() -> None:
    # pydicom's dicomdirtests 98892001/CT2N: two GE scouts (ImageType .../LOCALIZER, SCOUT MODE)
    frontal = ct_image_header(dcmread(DICOMDIR_TESTS / "98892001" / "CT2N" / "6924"))
    lateral = ct_image_header(dcmread(DICOMDIR_TESTS / "98892001" / "CT2N" / "6293"))
    assert frontal.kind == lateral.kind == "localizer"
    assert "ImageType ORIGINAL/PRIMARY/LOCALIZER" in frontal.kind_reason
    assert frontal.z_mm is None  # a localizer has no single table position
    axial = ct_image_header(dcmread(DICOMDIR_TESTS / "98892001" / "CT5N" / "2062"))
    assert axial.kind == "axial" and axial.z_mm is not None


def test_tilted_head_scan_is_axial_with_its_centre_z() -> None:
    # J2K_pixelrep_mismatch.dcm: a head scan with the gantry tilted by about 22 degrees
    h = ct_image_header(dcmread(sample("J2K_pixelrep_mismatch.dcm"), stop_before_pixels=True))
    assert h.kind == "axial" and "22 deg from transverse" in h.kind_reason
    ds = dcmread(sample("J2K_pixelrep_mismatch.dcm"), stop_before_pixels=True)
    position = np.array([float(v) for v in ds.ImagePositionPatient])
    cosines = np.array([float(v) for v in ds.ImageOrientationPatient])
    spacing = [float(v) for v in ds.PixelSpacing]
    centre = (
        position
        + cosines[:3] * spacing[1] * (ds.Columns - 1) / 2
        + cosines[3:] * spacing[0] * (ds.Rows - 1) / 2
    )
    assert h.z_mm == pytest.approx(centre[2])
    assert h.z_mm != pytest.approx(position[2])  # not the corner's z
    assert h.pixel_data_bytes == 512 * 512 * 2


@pytest.mark.parametrize(
    ("values", "kind", "reason"),
    [
        ({"ScanOptions": "SCOUT", "ImageType": ["ORIGINAL", "PRIMARY"]}, "localizer", "SCOUT"),
        ({"ImageOrientationPatient": [1, 0, 0, 0, 0, -1]}, "other", "90 deg"),
        ({"SamplesPerPixel": 3}, "other", "not CT numbers"),
        ({"NumberOfFrames": 4}, "other", "multi-frame"),
    ],
)
def test_image_kinds(values: dict[str, object], kind: str, reason: str) -> None:
    ds, _ = _cylinder_dataset()
    for keyword, value in values.items():
        setattr(ds, keyword, value)
    h = ct_image_header(ds)
    assert h.kind == kind and reason in h.kind_reason


def test_header_errors() -> None:
    with pytest.raises(IngestError, match="not a CT image") as caught:
        ct_image_header(header(), source="a.dcm")
    assert caught.value.code == "unsupported_sop_class" and caught.value.source == "a.dcm"
    ds, _ = _cylinder_dataset()
    ds.ImageOrientationPatient = [1, 0, 0, 0]
    with pytest.raises(IngestError, match=r"ImageOrientationPatient holds 4 values, not 6"):
        ct_image_header(ds)


# ---- phantoms, all the way to Dw ----------------------------------------------------------
def test_water_cylinder_from_file_bytes_and_dataset(tmp_path: Path) -> None:
    ds, _ = _cylinder_dataset(320.0, z_mm=-250.0)
    path = tmp_path / "cylinder.dcm"
    ds.save_as(path, enforce_file_format=True)
    from_file = read_ct_size_image(path)
    from_bytes = read_ct_size_image(to_bytes(ds))
    from_dataset = ct_size_image(ds)
    assert isinstance(from_file, AxialImage)
    for other in (from_bytes, from_dataset):
        assert isinstance(other, AxialImage)
        np.testing.assert_array_equal(other.ct_numbers_hu, from_file.ct_numbers_hu)
    assert getattr(ds, "_pixel_array", None) is None  # the caller's dataset caches nothing
    assert np.isnan(from_file.ct_numbers_hu[0, 0])  # the padding value: outside the field
    assert from_file.z_mm == pytest.approx(-250.0)
    sizes = axial_sizes(from_file.ct_numbers_hu, pixel_spacing_mm=from_file.pixel_spacing_mm)
    # 32 cm of water: Dw = 32 cm (stored as whole HU: partial-volume pixels rounded)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(32.0, rel=3e-4)
    assert sizes.truncated_fraction[0] == 0.0


def test_rescale_slope_and_intercept_give_ct_numbers() -> None:
    image = blank(256)
    paint(image, ellipse_fraction(256, 1.0, a_mm=90.0, b_mm=60.0), -100.0)  # fat
    ds = ct_dataset(image, pixel_mm=1.0, slope=0.5, intercept=-1000.0)
    read = ct_size_image(ds)
    assert isinstance(read, AxialImage)
    np.testing.assert_allclose(read.ct_numbers_hu, np.round(image * 2) / 2, atol=1e-4)
    sizes = axial_sizes(read.ct_numbers_hu, pixel_spacing_mm=read.pixel_spacing_mm)
    exact = dw_cm(water_area_cm2(image, 1.0))
    assert exact == pytest.approx(2 * math.sqrt(90 * 60 * 0.9) / 10, rel=1e-4)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(exact, rel=3e-4)


def test_padding_range_limit() -> None:
    image = blank(64)
    mask = np.zeros_like(image, dtype=bool)
    mask[:, :4] = True
    ds = ct_dataset(image, pixel_mm=1.0, padding_value=-2000, padding_mask=mask)
    ds.PixelPaddingRangeLimit = -1990
    stored = np.frombuffer(ds.PixelData, dtype=np.int16).reshape(64, 64).copy()
    stored[:, 4] = -1995  # inside the padding range
    ds.PixelData = stored.tobytes()
    read = ct_size_image(ds)
    assert np.isnan(read.ct_numbers_hu[:, :5]).all()  # type: ignore[union-attr]
    assert not np.isnan(read.ct_numbers_hu[:, 5:]).any()  # type: ignore[union-attr]


def test_a_series_of_ellipses_averaged_over_the_scan_range() -> None:
    # Dw grows linearly along the table: the length-weighted mean is its value at the centre
    series = []
    for k, z in enumerate(np.arange(0.0, 401.0, 50.0)):
        a = 120.0 + 0.1 * z  # half-axes in mm
        image = blank(N)
        paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=a, b_mm=0.7 * a), 0.0)
        series.append(ct_dataset(image, pixel_mm=PIXEL_MM, z_mm=float(z), instance_number=k))
    images = [ct_size_image(ds) for ds in series]
    z = [im.z_mm for im in images]  # type: ignore[union-attr]
    dw = [
        axial_sizes(im.ct_numbers_hu, pixel_spacing_mm=PIXEL_MM).water_equivalent_diameter_cm[0]  # type: ignore[union-attr]
        for im in images
    ]
    result = scan_range_size(z_mm=z, dw_cm=dw, z_start_mm=0.0, z_end_mm=400.0)
    dw_at = lambda z_mm: 2 * math.sqrt(0.7) * (120.0 + 0.1 * z_mm) / 10  # noqa: E731
    assert result.centre_dw_cm == pytest.approx(dw_at(200.0), rel=3e-4)
    assert result.mean_dw_cm == pytest.approx(dw_at(200.0), rel=3e-4)


# ---- localizers ---------------------------------------------------------------------------
def _frontal_localizer(*, turned: bool) -> tuple[object, float]:
    """A frontal localizer of a water ellipse (a = 160 mm across, b = 100 mm front to back)
    with pixel values 1000 ln(I0/I) of a hardening beam; rows 1 mm apart along the table."""
    columns, across_mm, rows = 600, 0.8, 50
    profile = detector_signal(row_profile(columns, across_mm, [(160.0, 100.0, 0.0)]))
    values = np.tile(profile, (rows, 1))
    if turned:  # columns run along the table (head to the right), rows across
        orientation = (0, 0, -1, 1, 0, 0)
        ds = ct_dataset(
            values.T,
            pixel_mm=(across_mm, 1.0),
            localizer=True,
            intercept=0.0,
            orientation=orientation,
            position=(-240.0, 0.0, 100.0),
        )
    else:  # the usual display: rows along the table, head at the top
        orientation = (1, 0, 0, 0, 0, -1)
        ds = ct_dataset(
            values,
            pixel_mm=(1.0, across_mm),
            localizer=True,
            intercept=0.0,
            orientation=orientation,
            position=(-240.0, 0.0, 100.0),
        )
    return ds, 2 * math.sqrt(160 * 100) / 10


@pytest.mark.parametrize("turned", [False, True])
def test_localizer_rows_along_the_table_to_dw(turned: bool) -> None:
    ds, expected = _frontal_localizer(turned=turned)
    read = ct_size_image(ds)
    assert isinstance(read, LocalizerImage)
    assert read.view == "frontal" and read.values.shape == (50, 600)
    assert read.row_z_mm is not None
    np.testing.assert_allclose(read.row_z_mm[:3], [100.0, 99.0, 98.0])  # toward the feet
    calibration = LocalizerCalibration(*signal_calibration_points(), source="forward model")
    sizes = localizer_sizes(
        read.values, column_spacing_mm=read.column_spacing_mm, calibration=calibration
    )
    # stored as whole numbers of the pixel value: within 0.05 %
    np.testing.assert_allclose(sizes.water_equivalent_diameter_cm, expected, rtol=5e-4)


def test_lateral_localizer_view() -> None:
    ds, _ = _frontal_localizer(turned=False)
    ds.ImageOrientationPatient = [0, -1, 0, 0, 0, -1]  # as pydicom's lateral GE scout
    read = ct_size_image(ds)
    assert isinstance(read, LocalizerImage) and read.view == "lateral"


# ---- DICOMweb frames ---------------------------------------------------------------------
def test_wado_rs_frame_native_and_compressed() -> None:
    ds, _ = _cylinder_dataset(200.0)
    whole = ct_size_image(ds)
    metadata = dcmread(io.BytesIO(to_bytes(ds)), stop_before_pixels=True)
    native = ct_size_image_from_frame(metadata, ds.PixelData)
    np.testing.assert_array_equal(native.ct_numbers_hu, whole.ct_numbers_hu)  # type: ignore[union-attr]
    ds.compress(RLELossless)
    rle = ct_size_image_from_frame(
        metadata,
        next(generate_frames(ds.PixelData, number_of_frames=1)),
        transfer_syntax_uid=RLELossless,
    )
    np.testing.assert_array_equal(rle.ct_numbers_hu, whole.ct_numbers_hu)  # type: ignore[union-attr]
    assert "PixelData" not in metadata  # the metadata was not changed


# ---- real clinical slices (sanity checks) ----------------------------------------------------
def test_real_head_slice_jpeg_2000() -> None:
    # a whole adult head in view (22 cm field): Dw of an adult head lies around 15-19 cm
    # (from memory: AAPM Report 293's head sizes); the head holder is not counted
    read = read_ct_size_image(sample("J2K_pixelrep_mismatch.dcm"))
    assert isinstance(read, AxialImage)
    sizes = axial_sizes(read.ct_numbers_hu, pixel_spacing_mm=read.pixel_spacing_mm)
    assert 15.0 < sizes.water_equivalent_diameter_cm[0] < 20.0
    assert sizes.truncated_fraction[0] == 0.0


@pytest.mark.parametrize("name", ["bad_sequence.dcm", "CT_small.dcm"])
def test_real_cropped_slices_are_flagged_truncated(name: str) -> None:
    # bad_sequence.dcm (JPEG lossless, a 14.7 cm field round the spine) and CT_small.dcm
    # (a crop of a chest): the patient runs off the image, so Dw is only a lower bound
    read = read_ct_size_image(sample(name))
    sizes = axial_sizes(read.ct_numbers_hu, pixel_spacing_mm=read.pixel_spacing_mm)  # type: ignore[union-attr]
    assert sizes.truncated_fraction[0] > 0.3
    assert sizes.water_equivalent_diameter_cm[0] > 5.0


# ---- choosing what to read ---------------------------------------------------------------
def _header_only(**kwargs: object):
    ds = ct_dataset(np.zeros((4, 4)), **kwargs)  # type: ignore[arg-type]
    ds.Rows = ds.Columns = 512
    del ds.PixelData
    return ct_image_header(ds)


def test_selection_reads_the_localizer_and_a_sample_of_one_series() -> None:
    study, frame = "1.2.3.4", "1.2.3.5"
    common = {"study_uid": study, "frame_of_reference_uid": frame}
    localizer = _header_only(
        pixel_mm=1.0, localizer=True, orientation=(1, 0, 0, 0, 0, -1), **common
    )
    thick = [  # 5 mm slices, 50 cm field: the series to sample
        _header_only(
            pixel_mm=500 / 512, z_mm=float(z), series_uid="1.2.3.6", instance_number=i, **common
        )
        for i, z in enumerate(np.arange(-400.0, 0.1, 5.0))
    ]
    thin = [  # 1 mm lung slices, 35 cm field, same acquisition
        _header_only(
            pixel_mm=350 / 512, z_mm=float(z), series_uid="1.2.3.7", instance_number=i, **common
        )
        for i, z in enumerate(np.arange(-400.0, 0.1, 1.0))
    ]
    coronal = _header_only(pixel_mm=1.0, orientation=(1, 0, 0, 0, 0, -1), **common)
    selection = select_size_images([localizer, *thin, *thick, coronal], axial_spacing_mm=50.0)
    kinds = [s.kind for s in selection.selected]
    assert kinds.count("localizer") == 1
    axial = [s for s in selection.selected if s.kind == "axial"]
    assert {s.series_instance_uid for s in axial} == {"1.2.3.6"}  # the widest field
    assert len(axial) == 9  # -400 to 0 mm every 50 mm, the ends and the centre among them
    assert selection.images == 1 + 81 + 401 + 1
    assert selection.pixel_data_bytes_selected == 10 * 512 * 512 * 2
    assert selection.pixel_data_bytes_selected < 0.03 * selection.pixel_data_bytes_all
    no_localizer = select_size_images([localizer, *thick], localizers=False)
    assert all(s.kind == "axial" for s in no_localizer.selected)


def test_selection_keeps_acquisitions_apart() -> None:
    a = [
        _header_only(
            pixel_mm=1.0, z_mm=float(z), acquisition_number=1, frame_of_reference_uid="1.9"
        )
        for z in (0.0, 100.0)
    ]
    b = [
        _header_only(
            pixel_mm=1.0, z_mm=float(z), acquisition_number=2, frame_of_reference_uid="1.9"
        )
        for z in (0.0, 100.0)
    ]
    selection = select_size_images([*a, *b], axial_spacing_mm=500.0)
    groups = {s.acquisition_group for s in selection.selected}
    assert groups == {"1.9/acquisition 1", "1.9/acquisition 2"}


# ---- bad input --------------------------------------------------------------------------
def test_pixel_path_errors() -> None:
    ds, _ = _cylinder_dataset(100.0)
    ds.ImageOrientationPatient = [1, 0, 0, 0, 0, -1]
    ds.ImageType = ["DERIVED", "SECONDARY", "REFORMATTED"]
    with pytest.raises(IngestError, match="neither an axial image nor a localizer"):
        ct_size_image(ds, source="reformat.dcm")
    ds, _ = _cylinder_dataset(100.0)
    del ds.PixelData
    with pytest.raises(IngestError, match="PixelData is absent") as caught:
        ct_size_image(ds)
    assert caught.value.code == "missing_attribute"
    ds, _ = _cylinder_dataset(100.0)
    ds.PixelData = ds.PixelData[:1000]
    with pytest.raises(IngestError, match="cannot decode the pixel data") as caught:
        ct_size_image(ds)
    assert caught.value.code == "bad_value"
    with pytest.raises(IngestError, match="no 'DICM' marker") as caught:
        read_ct_size_image(b"not a dicom object at all")
    assert caught.value.code == "not_dicom" and caught.value.source == "<bytes>"
    with pytest.raises(IngestError, match="cannot read") as caught:
        read_ct_size_image("/nonexistent/ct.dcm")
    assert caught.value.code == "unreadable"


def test_compressed_pixels_without_a_transfer_syntax_are_refused() -> None:
    ds = dcmread(sample("bad_sequence.dcm"))
    del ds.file_meta
    with pytest.raises(IngestError, match="compressed and no \\(0002,0010\\)"):
        ct_size_image(ds)


def test_attribute_table_matches_ps3_6() -> None:
    # every (tag, keyword, VR) read here, against pydicom's data dictionary
    from pydicom.datadict import dictionary_VR, keyword_for_tag

    from beamaudit.ingest.ct_images import _TAGS

    for tag, keyword, vr in _TAGS.values():
        assert keyword_for_tag(tag) == keyword
        assert vr in dictionary_VR(tag)
