"""Benchmark: a folder scan into SQLite against a bare pydicom read loop (issue #5).

Target: ``beamaudit scan`` over at least 5,000 image-header files, end to end into a SQLite
store (content sniffing, one ``dcmread`` per file, pseudonymisation, parsing, storing in batched
transactions, reconstruction of the stored events), runs at no less than 70 % of the rate of a
bare ``dcmread(path, stop_before_pixels=True)`` loop over the same files, measured in the same
run. Prints both rates and their ratio; exits 1 when the ratio is below the target. Plain script:
``python benchmarks/bench_scan.py [N_FILES] [--minimal]``. The files are invented DX/CR/MG
headers written with pydicom into a temporary folder (no pixel data: headers are what a dose
audit reads), with the modules a projection image carries besides those ingest reads and a
small private block: 109 elements, within the range of the CR and CT headers pydicom and
pydicom-data ship (50 to 260, median 81; stripped test files, so fewer than a clinical
device writes). ``--minimal`` writes only the 28 elements ingest reads: reading is then
cheapest and everything else weighs most (reported, not the target).
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import random
import sys
import tempfile
import time
from pathlib import Path

from pydicom import dcmread
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

N_FILES = 5_000
TARGET_RATIO = 0.70
ROUNDS = 5  # the best of five for each side, taken in turns: the machine is shared

# SOP Class UIDs, PS3.4 Table B.5-1
_CLASSES = {
    "DX": "1.2.840.10008.5.1.4.1.1.1.1",
    "CR": "1.2.840.10008.5.1.4.1.1.1",
    "MG": "1.2.840.10008.5.1.4.1.1.1.2",
}


def _header(i: int, rng: random.Random, *, typical: bool = True) -> Dataset:
    """An invented projection header (demo values; the patient is made up).

    ``typical``: with the other modules a projection image carries (image pixel, VOI LUT,
    detector, collimator, filtration, exposure index, ...) and a small private block, 109
    elements (the CR and CT headers pydicom and pydicom-data ship have 50 to 260). Without:
    the 28 elements ingest reads, and nothing else.
    """
    modality = ("DX", "DX", "CR", "MG")[i % 4]
    ds = Dataset()
    ds.SpecificCharacterSet = "ISO_IR 100"
    ds.SOPClassUID = _CLASSES[modality]
    ds.SOPInstanceUID = generate_uid()
    ds.StudyDate = f"2024{1 + i % 12:02d}{1 + i % 28:02d}"
    ds.StudyTime = "101500"
    ds.AccessionNumber = f"BENCH{i // 3:06d}"
    ds.Modality = modality
    ds.Manufacturer = "Bench Imaging (invented)"
    ds.InstitutionName = "Kestrel Bay General (invented)"
    ds.StationName = f"ROOM{i % 6}"
    ds.StudyDescription = "XR CHEST" if modality != "MG" else "MAMMO SCREENING"
    ds.ManufacturerModelName = "BenchDR"
    ds.PatientName = f"Invented^Patient{i // 3}"
    ds.PatientID = f"BENCH-{i // 3:06d}"
    ds.PatientBirthDate = "19700101"
    ds.PatientSex = "F"
    ds.PatientAge = "054Y"
    ds.BodyPartExamined = "CHEST" if modality != "MG" else "BREAST"
    ds.KVP = f"{rng.choice((70, 81, 90, 102, 110, 125)) if modality != 'MG' else 28}"
    ds.DistanceSourceToDetector = "1800" if modality != "MG" else "650"
    ds.ExposureTime = rng.randint(4, 40)
    ds.XRayTubeCurrent = rng.randint(100, 500)
    ds.ExposureInuAs = rng.randint(800, 20_000)
    ds.ImageAndFluoroscopyAreaDoseProduct = f"{rng.uniform(0.2, 2.5):.3f}"
    ds.ProtocolName = "Chest PA" if modality != "MG" else "CC"
    ds.StudyInstanceUID = generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.ViewPosition = "PA" if modality != "MG" else "CC"
    if typical:
        _typical_modules(ds, i, rng, modality)
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    return ds


def _typical_modules(ds: Dataset, i: int, rng: random.Random, modality: str) -> None:
    """The rest of a projection image's header (PS3.3 A.26 DX, A.2 CR, A.27 MG), invented."""
    mammo = modality == "MG"
    ds.ImageType = ["ORIGINAL", "PRIMARY"]
    ds.InstanceCreationDate = ds.StudyDate
    ds.InstanceCreationTime = "101512"
    ds.SeriesDate = ds.ContentDate = ds.AcquisitionDate = ds.StudyDate
    ds.SeriesTime = "101505"
    ds.ContentTime = ds.AcquisitionTime = "101510.250000"
    ds.ReferringPhysicianName = "Invented^Referrer"
    ds.OperatorsName = "Invented^Radiographer"
    ds.SeriesDescription = ds.ProtocolName
    ds.PerformedProcedureStepDescription = ds.StudyDescription
    ds.DeviceSerialNumber = f"BENCH-SN-{i % 6:03d}"
    ds.SoftwareVersions = ["bench 1.0 (invented)"]
    ds.DateOfLastCalibration = "20240101"
    ds.PatientWeight = f"{rng.randint(50, 95)}"
    ds.PatientSize = f"{rng.uniform(1.5, 1.95):.2f}"
    ds.StudyID = f"{i // 3}"
    ds.SeriesNumber = 1
    ds.InstanceNumber = 1 + i % 3
    ds.AcquisitionNumber = 1
    ds.PatientOrientation = ["L", "F"] if not mammo else ["P", "L"]
    ds.Laterality = "" if not mammo else ("L", "R")[i % 2]
    ds.PresentationIntentType = "FOR PRESENTATION"
    ds.BurnedInAnnotation = "NO"
    ds.LossyImageCompression = "00"
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows, ds.Columns = (3000, 2500) if not mammo else (3328, 2560)
    ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation = 16, 12, 11, 0
    ds.PixelSpacing = ds.ImagerPixelSpacing = ["0.139", "0.139"] if not mammo else ["0.07", "0.07"]
    ds.RescaleIntercept, ds.RescaleSlope, ds.RescaleType = "0", "1", "US"
    ds.WindowCenter, ds.WindowWidth = "2048", "4096"
    ds.WindowCenterWidthExplanation = "DEFAULT"
    ds.VOILUTFunction = "SIGMOID"
    ds.DetectorType = "SCINTILLATOR"
    ds.DetectorConfiguration = "AREA"
    ds.DetectorID = f"DET-{i % 6:02d}"
    ds.DetectorTemperature = "31.5"
    ds.DetectorBinning = ["1", "1"]
    ds.DetectorElementSpacing = ds.ImagerPixelSpacing
    ds.FieldOfViewShape = "RECTANGLE"
    ds.FieldOfViewDimensions = [430, 350] if not mammo else [240, 300]
    ds.CollimatorShape = "RECTANGULAR"
    ds.CollimatorLeftVerticalEdge, ds.CollimatorRightVerticalEdge = 120, 2380
    ds.CollimatorUpperHorizontalEdge, ds.CollimatorLowerHorizontalEdge = 90, 2900
    ds.Grid = ["FOCUSED", "RECIPROCATING"] if not mammo else ["NONE"]
    ds.FocalSpots = "1.2" if not mammo else "0.3"
    ds.AnodeTargetMaterial = "TUNGSTEN" if not mammo else "MOLYBDENUM"
    ds.FilterType = "FLAT"
    ds.FilterMaterial = "ALUMINUM" if not mammo else "MOLYBDENUM"
    ds.FilterThicknessMinimum = ds.FilterThicknessMaximum = "0.1" if not mammo else "0.03"
    ds.DistanceSourceToPatient = "1700" if not mammo else "620"
    ds.EstimatedRadiographicMagnificationFactor = "1.06"
    ds.BodyPartThickness = f"{rng.randint(180, 280)}" if not mammo else f"{rng.randint(35, 70)}"
    ds.RelativeXRayExposure = rng.randint(200, 900)
    ds.ExposureIndex = f"{rng.uniform(250, 600):.1f}"
    ds.TargetExposureIndex = "400"
    ds.DeviationIndex = f"{rng.uniform(-2.5, 2.5):.2f}"
    ds.Sensitivity = "200"
    ds.PositionerType = "COLUMN" if not mammo else "MAMMOGRAPHIC"
    ds.EntranceDoseInmGy = f"{rng.uniform(0.05, 2.0):.3f}"
    ds.RequestedProcedureDescription = ds.StudyDescription
    # a vendor's private block (PS3.5 7.8.1): creator and a few values, as most devices write
    ds.add_new(0x00190010, "LO", "BENCH IMAGING (INVENTED) 1.0")
    ds.add_new(0x00191001, "LO", f"PROC-{i % 7}")
    ds.add_new(0x00191002, "DS", f"{rng.uniform(0.5, 2.5):.2f}")
    ds.add_new(0x00191003, "US", rng.randint(0, 4))
    ds.add_new(0x00191004, "SH", "GRAD-A")
    ds.add_new(0x00191005, "OB", bytes(64))


def _write_files(folder: Path, n: int, *, typical: bool) -> list[Path]:
    rng = random.Random(20240305)
    paths = []
    for i in range(n):
        sub = folder / f"{i // 500:03d}"
        sub.mkdir(exist_ok=True)
        path = sub / f"IM{i:06d}"  # no extension, as PACS exports
        _header(i, rng, typical=typical).save_as(path, enforce_file_format=True)
        paths.append(path)
    return paths


def _bare_loop(paths: list[Path]) -> float:
    start = time.perf_counter()
    for path in paths:
        dcmread(path, stop_before_pixels=True)
    return time.perf_counter() - start


def _scan(folder: Path, work: Path, round_no: int) -> tuple[float, dict[str, object]]:
    from beamaudit.api.cli import main

    os.environ["BEAMAUDIT_DATABASE_URL"] = f"sqlite:///{work / f'bench-{round_no}.db'}"
    os.environ["BEAMAUDIT_SECRET_KEY_PATH"] = str(work / "bench.key")
    out = io.StringIO()
    start = time.perf_counter()
    with contextlib.redirect_stdout(out):
        code = main(["scan", str(folder), "--json"])
    elapsed = time.perf_counter() - start
    if code != 0:
        raise SystemExit(f"the scan exited {code}: {out.getvalue()[-2000:]}")
    summary: dict[str, object] = json.loads(out.getvalue())
    return elapsed, summary


def main(argv: list[str]) -> int:
    typical = "--minimal" not in argv
    numbers = [a for a in argv[1:] if not a.startswith("--")]
    n = int(numbers[0]) if numbers else N_FILES
    with tempfile.TemporaryDirectory(prefix="beamaudit-bench-scan-") as tmp:
        work = Path(tmp)
        folder = work / "export"
        folder.mkdir()
        paths = _write_files(folder, n, typical=typical)
        elements = sum(1 for _ in dcmread(paths[0], stop_before_pixels=True).iterall())
        os.environ.pop("BEAMAUDIT_CONFIG", None)
        _bare_loop(paths[:200])  # warm the page cache and pydicom's dictionaries
        _scan_warm = work / "warm"
        _scan_warm.mkdir()
        for path in paths[:50]:
            (_scan_warm / path.name).write_bytes(path.read_bytes())
        _scan(_scan_warm, work, 99)  # imports, migrations, the beam model's data
        # in turns, so that a slow spell of the machine falls on both sides alike
        bares: list[float] = []
        scans: list[tuple[float, dict[str, object]]] = []
        for r in range(ROUNDS):
            bares.append(_bare_loop(paths))
            scans.append(_scan(folder, work, r))
        bare_s = min(bares)
        scan_s, summary = min(scans, key=lambda s: s[0])
    if summary.get("objects") != n or summary.get("errors"):
        print(f"the scan did not store every file: {summary}", file=sys.stderr)
        return 1
    bare_rate = n / bare_s
    scan_rate = n / scan_s
    ratio = scan_rate / bare_rate
    kind = "typical" if typical else "minimal (--minimal)"
    print(f"files: {n} invented DX/CR/MG headers, {kind}: {elements} elements each, no pixels")
    turns = ", ".join(f"{b / s[0]:.2f}" for b, s in zip(bares, scans, strict=True))
    print(f"ratio of each turn (bare loop then scan): {turns}")
    print(f"bare dcmread(stop_before_pixels=True) loop: {bare_rate:8.0f} files/s ({bare_s:.2f} s)")
    print(f"beamaudit scan into SQLite, end to end:     {scan_rate:8.0f} files/s ({scan_s:.2f} s)")
    print(f"ratio scan / bare read: {ratio:.2f} (target >= {TARGET_RATIO:.2f})")
    return 0 if ratio >= TARGET_RATIO else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv))
