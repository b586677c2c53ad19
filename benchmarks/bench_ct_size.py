"""Benchmark: a CT study's patient size from its images, and what it costs to read.

One invented CT study is written as DICOM files (explicit VR little endian, 512 x 512 slices):
a frontal localizer, a 5 mm series (50 cm field) and a 2 mm series (36 cm field) of the same
acquisition, of a soft-tissue torso whose size varies along the table, lying on a table plate,
with 15 HU of noise. Three ways through the study are timed in turns (median of ROUNDS):

* **baseline**: ``dcmread(stop_before_pixels=True)`` of every file, the header read that every
  ingest path already does;
* **size path**: the same header read with :func:`ct_image_header`, :func:`select_size_images`
  (the localizer, and the 5 mm series sampled every 50 mm), the chosen files read with their
  pixels (:func:`read_ct_size_image`) and their water-equivalent diameters computed
  (:func:`axial_sizes`, :func:`localizer_sizes`, :func:`scan_range_size`);
* **every pixel**: ``dcmread`` of every file and its pixels decoded, for scale.

Reported per study: pixel data read (MB and share of the study's), time as a ratio to the
baseline, and the size found against the phantom's exact water-equivalent diameter. Target:
the size path reads at most 5 % of the study's pixel data and finds the mean Dw within 1 %.
Plain script: ``python benchmarks/bench_ct_size.py``; exits 1 below target.
"""

from __future__ import annotations

import math
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from pydicom import dcmread
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import CTImageStorage, ExplicitVRLittleEndian, generate_uid

from beamaudit.ingest.ct_images import (
    AxialImage,
    LocalizerImage,
    ct_image_header,
    read_ct_size_image,
    select_size_images,
)
from beamaudit.model import (
    LocalizerCalibration,
    axial_sizes,
    localizer_sizes,
    scan_range_size,
)

ROUNDS = 3
N = 512
Z_START_MM, Z_END_MM = -400.0, 0.0
SPACING_MM = 50.0
TARGET_PIXEL_SHARE = 0.05
TARGET_DW_AGREEMENT = 0.01
TISSUE_HU = 40.0


def half_axes_mm(z_mm: float | np.ndarray) -> tuple[float | np.ndarray, float | np.ndarray]:
    """The torso's half-width and half-depth at table position z."""
    a = 150.0 + 25.0 * np.sin((np.asarray(z_mm) - Z_START_MM) / 130.0)
    return a, 0.72 * a


def true_dw_cm(z_mm: float | np.ndarray) -> float | np.ndarray:
    a, b = half_axes_mm(z_mm)
    return 2.0 * np.sqrt(a * b * (1.0 + TISSUE_HU / 1000.0)) / 10.0


def _dataset(values: np.ndarray, **attrs: object) -> Dataset:
    ds = Dataset()
    ds.SOPClassUID = CTImageStorage
    ds.SOPInstanceUID = generate_uid()
    ds.Modality = "CT"
    ds.PatientID = "BENCH-1"
    ds.Rows, ds.Columns = values.shape
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.BitsAllocated = ds.BitsStored = 16
    ds.HighBit = 15
    ds.PixelRepresentation = 1
    ds.RescaleSlope = "1"
    for keyword, value in attrs.items():
        setattr(ds, keyword, value)
    intercept = float(ds.RescaleIntercept)
    ds.PixelData = np.round(values - intercept).astype(np.int16).tobytes()
    ds["PixelData"].VR = "OW"
    ds.file_meta = FileMetaDataset()  # the rest is filled in when it is written
    ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
    return ds


def _slice(z_mm: float, pixel_mm: float, rng: np.random.Generator) -> np.ndarray:
    c = (np.arange(N) + 0.5) * pixel_mm - N * pixel_mm / 2
    x, y = c[np.newaxis, :], c[:, np.newaxis] + 30.0
    a, b = half_axes_mm(z_mm)
    image = np.where((x / a) ** 2 + (y / b) ** 2 < 1.0, TISSUE_HU, -1000.0)
    top = float(b) - 30.0 + 40.0  # a table plate 40 mm below the back
    plate = (np.abs(x) < 220.0) & (
        ((y >= top) & (y < top + 3)) | ((y >= top + 27) & (y < top + 30))
    )
    image = np.where(np.broadcast_to(plate, image.shape), 300.0, image)
    return image + rng.normal(0.0, 15.0, image.shape)


def detector_signal(water_mm: np.ndarray) -> np.ndarray:
    """Localizer pixel value 1000 ln(I0/I) of a two-energy beam through water (beam hardening)."""
    t_cm = water_mm / 10.0
    return 1000.0 * -np.log(0.5 * np.exp(-0.25 * t_cm) + 0.5 * np.exp(-0.17 * t_cm))


def write_study(folder: Path, rng: np.random.Generator) -> None:
    study, frame = generate_uid(), generate_uid()
    common = {"StudyInstanceUID": study, "FrameOfReferenceUID": frame, "AcquisitionNumber": 1}
    # frontal localizer: rows 1 mm apart along the table from z = 100 down to -900 mm
    rows_z = 100.0 - np.arange(1000.0)
    across = (np.arange(N) + 0.5) * 1.0 - N / 2
    a, b = half_axes_mm(rows_z)
    u = across[np.newaxis, :] / np.asarray(a)[:, np.newaxis]
    chord = np.where(
        np.abs(u) < 1, 2 * np.asarray(b)[:, np.newaxis] * np.sqrt(np.clip(1 - u * u, 0, None)), 0
    )
    water = chord * (1.0 + TISSUE_HU / 1000.0)
    localizer = detector_signal(water) + rng.normal(0.0, 2.0, water.shape)
    _dataset(
        localizer, SeriesInstanceUID=generate_uid(), ImageType=["ORIGINAL", "PRIMARY", "LOCALIZER"],
        ImagePositionPatient=["-256", "0", "100"], ImageOrientationPatient=[1, 0, 0, 0, 0, -1],
        PixelSpacing=["1", "1"], RescaleIntercept="0", InstanceNumber=1, **common,
    ).save_as(folder / "localizer.dcm", enforce_file_format=True)  # fmt: skip
    for name, thickness, pixel_mm in (("thick", 5.0, 500.0 / N), ("thin", 2.0, 360.0 / N)):
        series = generate_uid()
        for k, z in enumerate(np.arange(Z_START_MM, Z_END_MM + 0.1, thickness)):
            corner = -N * pixel_mm / 2
            _dataset(
                _slice(float(z), pixel_mm, rng), SeriesInstanceUID=series,
                ImageType=["ORIGINAL", "PRIMARY", "AXIAL"], InstanceNumber=k + 1,
                ImagePositionPatient=[f"{corner:.4f}", f"{corner:.4f}", f"{z:g}"],
                ImageOrientationPatient=[1, 0, 0, 0, 1, 0], SliceThickness=f"{thickness:g}",
                PixelSpacing=[f"{pixel_mm:.6f}"] * 2, RescaleIntercept="-1024", **common,
            ).save_as(folder / f"{name}_{k:04d}.dcm", enforce_file_format=True)  # fmt: skip


def baseline(files: list[Path]) -> None:
    for f in files:
        dcmread(f, stop_before_pixels=True)


def every_pixel(files: list[Path]) -> None:
    for f in files:
        dcmread(f).pixel_array  # noqa: B018 - decoding is the point


CALIBRATION = LocalizerCalibration(
    tuple(map(float, detector_signal(np.linspace(0, 800, 401)))),
    tuple(map(float, np.linspace(0, 800, 401))),
    source="the benchmark's forward model",
)


def size_path(files: list[Path]) -> dict[str, float]:
    paths = {}
    headers = []
    for f in files:
        h = ct_image_header(dcmread(f, stop_before_pixels=True))
        paths[h.sop_instance_uid] = f
        headers.append(h)
    selection = select_size_images(headers, axial_spacing_mm=SPACING_MM)
    z: list[float] = []
    dw: list[float] = []
    localizer_mean = math.nan
    for chosen in selection.selected:
        image = read_ct_size_image(paths[chosen.sop_instance_uid])
        if isinstance(image, AxialImage):
            sizes = axial_sizes(image.ct_numbers_hu, pixel_spacing_mm=image.pixel_spacing_mm)
            z.append(float(image.z_mm or 0.0))
            dw.append(float(sizes.water_equivalent_diameter_cm[0]))
        elif isinstance(image, LocalizerImage) and image.row_z_mm is not None:
            rows = localizer_sizes(
                image.values, column_spacing_mm=image.column_spacing_mm, calibration=CALIBRATION
            )
            localizer_mean = scan_range_size(
                z_mm=image.row_z_mm, dw_cm=rows.water_equivalent_diameter_cm,
                z_start_mm=Z_START_MM, z_end_mm=Z_END_MM, samples="localizer rows",
            ).mean_dw_cm  # fmt: skip
        del image  # no pixel data kept
    axial_mean = scan_range_size(z_mm=z, dw_cm=dw, z_start_mm=Z_START_MM, z_end_mm=Z_END_MM)
    return {
        "selected": len(selection.selected),
        "images": selection.images,
        "bytes_selected": selection.pixel_data_bytes_selected,
        "bytes_all": selection.pixel_data_bytes_all,
        "axial_mean_dw_cm": axial_mean.mean_dw_cm,
        "localizer_mean_dw_cm": localizer_mean,
    }


def main() -> int:
    rng = np.random.default_rng(20140220)
    zz = np.linspace(Z_START_MM, Z_END_MM, 40001)
    exact_mean = float(np.mean(true_dw_cm(zz)))
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write_study(folder, rng)
        files = sorted(folder.glob("*.dcm"))
        size_path(files)  # warm up imports and caches once
        times: dict[str, list[float]] = {"baseline": [], "size path": [], "every pixel": []}
        result: dict[str, float] = {}
        for _ in range(ROUNDS):
            for name, run in (
                ("baseline", baseline),
                ("size path", size_path),
                ("every pixel", every_pixel),
            ):
                start = time.perf_counter()
                out = run(files)
                times[name].append(time.perf_counter() - start)
                if isinstance(out, dict):
                    result = out
    median = {k: statistics.median(v) for k, v in times.items()}
    share = result["bytes_selected"] / result["bytes_all"]
    axial_error = result["axial_mean_dw_cm"] / exact_mean - 1.0
    localizer_error = result["localizer_mean_dw_cm"] / exact_mean - 1.0
    print(
        f"study: {int(result['images'])} CT images, "
        f"{result['bytes_all'] / 1e6:.1f} MB of pixel data"
    )
    print(
        f"size path reads {int(result['selected'])} images' pixels: "
        f"{result['bytes_selected'] / 1e6:.2f} MB = {share:.1%} of the study's"
    )
    print(
        f"time per study: baseline (headers only) {median['baseline']:.3f} s; size path "
        f"{median['size path'] / median['baseline']:.2f} x baseline; every pixel decoded "
        f"{median['every pixel'] / median['baseline']:.2f} x baseline "
        f"(median of {ROUNDS}, in turns)"
    )
    print(
        f"mean Dw over the scan range: exact {exact_mean:.2f} cm; from axial samples "
        f"{result['axial_mean_dw_cm']:.2f} cm ({axial_error:+.2%}); from the localizer "
        f"{result['localizer_mean_dw_cm']:.2f} cm ({localizer_error:+.2%})"
    )
    ok = (
        share <= TARGET_PIXEL_SHARE
        and max(abs(axial_error), abs(localizer_error)) <= TARGET_DW_AGREEMENT
    )
    print("target met" if ok else "TARGET MISSED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
