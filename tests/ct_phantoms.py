"""Synthetic CT phantoms of known size, as arrays and as real DICOM CT images (test data only).

Water cylinders and ellipses are drawn with partial volume: each pixel holds the mean of
``supersample``² sub-pixel samples, as a reconstructed image averages over its pixel. Their
water-equivalent area is then known exactly (AAPM Report 220, eq. 2-3: the sum over the pixels
of (CT/1000 + 1) times the pixel area), up to the sampling of the edge pixels, which
``supersample`` makes small (well under 0.01 % of the area for the sizes used).

Localizers are drawn from the exact chord lengths of ellipses (water-equivalent path along
each ray), through a forward model of the detector signal with beam hardening: the
transmission of a two-energy beam, written as ``1000 ln(I0 / I)``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import CTImageStorage, ExplicitVRLittleEndian, generate_uid

AIR_HU = -1000.0


def grid_mm(n: int, pixel_mm: float, supersample: int) -> NDArray[np.float64]:
    """Sub-pixel centres (mm) across ``n`` pixels, the image centre at 0."""
    return (np.arange(n * supersample) + 0.5) / supersample * pixel_mm - n * pixel_mm / 2.0


def ellipse_fraction(
    n: int,
    pixel_mm: float,
    *,
    a_mm: float,
    b_mm: float,
    centre_mm: tuple[float, float] = (0.0, 0.0),
    supersample: int = 4,
) -> NDArray[np.float64]:
    """Share of each pixel inside the ellipse x²/a² + y²/b² < 1 (x across columns, y down
    the rows), ``centre_mm`` = (x, y)."""
    c = grid_mm(n, pixel_mm, supersample)
    x = (c - centre_mm[0])[np.newaxis, :]
    y = (c - centre_mm[1])[:, np.newaxis]
    inside = (x / a_mm) ** 2 + (y / b_mm) ** 2 < 1.0
    return inside.reshape(n, supersample, n, supersample).mean(axis=(1, 3))


def rectangle_fraction(
    n: int,
    pixel_mm: float,
    *,
    x_mm: tuple[float, float],
    y_mm: tuple[float, float],
    supersample: int = 4,
) -> NDArray[np.float64]:
    """Share of each pixel inside the rectangle x in ``x_mm``, y in ``y_mm``."""
    c = grid_mm(n, pixel_mm, supersample)
    inside = ((c >= x_mm[0]) & (c < x_mm[1]))[np.newaxis, :] & ((c >= y_mm[0]) & (c < y_mm[1]))[
        :, np.newaxis
    ]
    return inside.reshape(n, supersample, n, supersample).mean(axis=(1, 3))


def paint(image: NDArray[np.float64], fraction: NDArray[np.float64], hu: float) -> None:
    """Put material of ``hu`` over ``fraction`` of each pixel, replacing what was there."""
    image *= 1.0 - fraction
    image += fraction * hu


def blank(n: int) -> NDArray[np.float64]:
    return np.full((n, n), AIR_HU)


def water_area_cm2(image: NDArray[np.float64], pixel_mm: float) -> float:
    """The image's water-equivalent area, every pixel counted (AAPM 220, eq. 2-3)."""
    return float(np.sum(image / 1000.0 + 1.0)) * pixel_mm**2 / 100.0


def dw_cm(water_area: float) -> float:
    return 2.0 * math.sqrt(water_area / math.pi)


# ---- localizers -------------------------------------------------------------------------------
def chords_mm(x_mm: NDArray[np.float64], a_mm: float, b_mm: float, centre_mm: float = 0.0):
    """Path length across an ellipse of half-widths a (across) and b (along the ray)."""
    u = (x_mm - centre_mm) / a_mm
    return np.where(np.abs(u) < 1.0, 2.0 * b_mm * np.sqrt(np.clip(1.0 - u * u, 0.0, None)), 0.0)


def detector_signal(water_mm: NDArray[np.float64]) -> NDArray[np.float64]:
    """A localizer pixel value for a water path: 1000 ln(I0/I) of a two-energy beam (0.25 and
    0.17 /cm: beam hardening makes it grow less than linearly)."""
    t_cm = np.asarray(water_mm, dtype=np.float64) / 10.0
    transmitted = 0.5 * np.exp(-0.25 * t_cm) + 0.5 * np.exp(-0.17 * t_cm)
    return 1000.0 * -np.log(transmitted)


def signal_calibration_points(max_mm: float = 700.0) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """The forward model as (pixel value, water path mm) points: the known calibration."""
    t = np.linspace(0.0, max_mm, 351)
    return tuple(map(float, detector_signal(t))), tuple(map(float, t))


def row_profile(
    n: int, pixel_mm: float, parts: Sequence[tuple[float, float, float]], supersample: int = 8
) -> NDArray[np.float64]:
    """Water path per column (mm) across ellipses ``(a_mm, b_mm, centre_mm)``, each column
    averaged over ``supersample`` rays."""
    x = grid_mm(n, pixel_mm, supersample)
    total = np.zeros_like(x)
    for a, b, c in parts:
        total += chords_mm(x, a, b, c)
    return total.reshape(n, supersample).mean(axis=1)


# ---- DICOM ---------------------------------------------------------------------------------
def ct_dataset(
    values: NDArray[np.float64],
    *,
    pixel_mm: float | tuple[float, float],
    z_mm: float = 0.0,
    slope: float = 1.0,
    intercept: float = -1024.0,
    localizer: bool = False,
    orientation: Sequence[float] = (1, 0, 0, 0, 1, 0),
    position: Sequence[float] | None = None,
    study_uid: str | None = None,
    series_uid: str | None = None,
    frame_of_reference_uid: str | None = None,
    acquisition_number: int = 1,
    instance_number: int = 1,
    padding_value: int | None = None,
    padding_mask: NDArray[np.bool_] | None = None,
) -> Dataset:
    """A CT Image Storage object with pixel data: stored = round((value - intercept) / slope)
    as signed 16-bit, the pixels in ``padding_mask`` stored as ``padding_value``."""
    spacing = (pixel_mm, pixel_mm) if isinstance(pixel_mm, int | float) else pixel_mm
    rows, cols = values.shape
    stored = np.round((values - intercept) / slope)
    stored = np.clip(stored, -32768, 32767).astype(np.int16)
    if padding_mask is not None:
        assert padding_value is not None
        stored[padding_mask] = padding_value
    ds = Dataset()
    ds.SOPClassUID = CTImageStorage
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = study_uid or generate_uid()
    ds.SeriesInstanceUID = series_uid or generate_uid()
    ds.FrameOfReferenceUID = frame_of_reference_uid or generate_uid()
    ds.Modality = "CT"
    ds.PatientID = "PHANTOM-1"
    ds.StudyDate = "20240305"
    ds.Manufacturer = "Hollowbrook Test Phantoms"
    ds.ImageType = ["ORIGINAL", "PRIMARY", "LOCALIZER" if localizer else "AXIAL"]
    ds.AcquisitionNumber = acquisition_number
    ds.InstanceNumber = instance_number
    ds.KVP = "120"
    ds.SliceThickness = "5"
    if position is None:
        position = (-cols * spacing[1] / 2 + spacing[1] / 2, -rows * spacing[0] / 2, z_mm)
    ds.ImagePositionPatient = [f"{v:.6g}" for v in position]
    ds.ImageOrientationPatient = [f"{v:.6g}" for v in orientation]
    ds.SliceLocation = f"{z_mm:.6g}"
    ds.PixelSpacing = [f"{spacing[0]:.8g}", f"{spacing[1]:.8g}"]
    ds.Rows, ds.Columns = rows, cols
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.BitsAllocated = 16
    ds.BitsStored = 16
    ds.HighBit = 15
    ds.PixelRepresentation = 1
    ds.RescaleIntercept = f"{intercept:g}"
    ds.RescaleSlope = f"{slope:g}"
    ds.RescaleType = "HU"
    if padding_value is not None:
        ds.PixelPaddingValue = padding_value
    ds.PixelData = stored.tobytes()
    ds["PixelData"].VR = "OW"
    ds.file_meta = FileMetaDataset()  # the rest is filled in when it is written
    ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
    return ds
