"""Benchmark: a folder scan of one CT study with and without the patient size from the images.

One invented CT study (an axial series of 512 x 512 slices every 5 mm over 40 cm, water
ellipses growing along the table, explicit VR little endian) is scanned into a fresh SQLite
store twice per round, in turns (median of ROUNDS):

* **baseline**: ``scan_paths(..., ct_size=False)``, headers only, as before issue #27;
* **with size**: ``scan_paths(...)``: the headers kept, the chosen images' pixels read, Dw and
  SSDE stored on the events.

Reported: the pixel data read per study (MB and its share of the study's), the time of the
size step and the whole scan as a ratio to the baseline. Targets: at most 15 % of the study's
pixel data read, and the scan with sizes within 15 times the header-only baseline (the header
scan of 81 files takes about 0.1 s; the contour of each 512 x 512 image read, about 80 ms, is
most of the size step: on 2026-12-05 on the shared two-core machine, 4.7 of 42.5 MB read,
0.85 s against 0.09 s, ratio 9).
Plain script: ``python benchmarks/bench_ct_sizing_scan.py``; exits 1 below target.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import CTImageStorage, ExplicitVRLittleEndian, generate_uid

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import make_engine, make_session_factory, upgrade
from beamaudit.ingest.pseudonym import load_or_create_key

ROUNDS = 3
N = 512
PIXEL_MM = 0.8
STEP_MM = 5.0
LENGTH_MM = 400.0
MAX_SHARE = 0.15
MAX_RATIO = 15.0


def _write_study(folder: Path) -> int:
    study, series, frame = generate_uid(), generate_uid(), generate_uid()
    c = (np.arange(N) + 0.5) * PIXEL_MM - N * PIXEL_MM / 2
    x, y = np.meshgrid(c, c)
    count = 0
    for k, z in enumerate(np.arange(0.0, LENGTH_MM + 1e-9, STEP_MM)):
        a = 120.0 + 0.1 * z
        hu = np.where((x / a) ** 2 + (y / (0.7 * a)) ** 2 < 1.0, 0.0, -1000.0)
        ds = Dataset()
        ds.file_meta = FileMetaDataset()
        ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
        ds.file_meta.MediaStorageSOPClassUID = CTImageStorage
        ds.SOPClassUID = CTImageStorage
        ds.SOPInstanceUID = generate_uid()
        ds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
        ds.StudyInstanceUID, ds.SeriesInstanceUID, ds.FrameOfReferenceUID = study, series, frame
        ds.Modality, ds.PatientID, ds.StudyDate = "CT", "BENCH-1", "20240305"
        ds.Manufacturer = "Hollowbrook Test Phantoms"
        ds.ImageType = ["ORIGINAL", "PRIMARY", "AXIAL"]
        ds.AcquisitionNumber, ds.InstanceNumber = 1, k + 1
        ds.KVP, ds.SliceThickness, ds.CTDIvol = "120", "5", 12.0
        ds.ImagePositionPatient = [f"{-N * PIXEL_MM / 2:.6g}", f"{-N * PIXEL_MM / 2:.6g}", f"{z:g}"]
        ds.ImageOrientationPatient = ["1", "0", "0", "0", "1", "0"]
        ds.PixelSpacing = [f"{PIXEL_MM:g}", f"{PIXEL_MM:g}"]
        ds.Rows = ds.Columns = N
        ds.SamplesPerPixel, ds.PhotometricInterpretation = 1, "MONOCHROME2"
        ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation = 16, 16, 15, 1
        ds.RescaleIntercept, ds.RescaleSlope = "-1024", "1"
        ds.PixelData = np.round(hu + 1024).astype(np.int16).tobytes()
        ds.save_as(folder / f"im{k:04d}.dcm", enforce_file_format=True)
        count += 1
    return count


def _scan(folder: Path, work: Path, *, ct_size: bool) -> tuple[float, dict[str, object] | None]:
    db = work / f"s{time.perf_counter_ns()}.db"
    engine = make_engine(f"sqlite:///{db}")
    upgrade(engine)
    try:
        started = time.perf_counter()
        summary = scan_paths(
            [folder],
            pipeline=Pipeline(make_session_factory(engine)),
            key=load_or_create_key(work / "k.key"),
            ct_size=ct_size,
        )
        return time.perf_counter() - started, summary.ct_size
    finally:
        engine.dispose()
        db.unlink(missing_ok=True)


def main() -> int:
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        folder = work / "study"
        folder.mkdir()
        images = _write_study(folder)
        base, sized, size_step = [], [], []
        report: dict[str, object] | None = None
        for _ in range(ROUNDS):
            base.append(_scan(folder, work, ct_size=False)[0])
            seconds, report = _scan(folder, work, ct_size=True)
            sized.append(seconds)
            size_step.append(float(report["seconds"]) if report else float("nan"))  # type: ignore[arg-type]
    assert report is not None
    read = int(report["pixel_data_bytes_read"])  # type: ignore[call-overload]
    total = int(report["pixel_data_bytes_all"])  # type: ignore[call-overload]
    share = read / total
    ratio = statistics.median(sized) / statistics.median(base)
    print(f"one CT study of {images} images, {total / 1e6:.1f} MB of pixel data")
    print(f"pixel data read for its size: {read / 1e6:.2f} MB ({share:.1%}), "
          f"{report['images_read']} images")  # fmt: skip
    print(f"baseline scan {statistics.median(base):.2f} s; "
          f"with size {statistics.median(sized):.2f} s (ratio {ratio:.2f}); "
          f"size step {statistics.median(size_step):.2f} s")  # fmt: skip
    ok = share <= MAX_SHARE and ratio <= MAX_RATIO
    print("within target" if ok else f"BELOW TARGET (share <= {MAX_SHARE}, ratio <= {MAX_RATIO})")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
