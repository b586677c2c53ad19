"""The demo's manifest: what was generated, where, and what the reviews must find.

Written as ``<output>/manifest.json`` (UTF-8, sorted keys, 2-space indent); read back with
:meth:`ScenarioManifest.load`. Layout (``format`` ``"beamaudit-demo-manifest"``, ``format_version``
1):

* ``seed``, ``months`` (``YYYY-MM``, oldest first), ``start_date``, ``end_date``, ``institution``,
  ``invented`` (always true) and ``notice``;
* ``rooms``: one :class:`RoomEntry` each (identity as the devices write it, delivery path, beam
  configuration in the shape of the store's ``rooms`` and ``qa_measurements`` tables);
* ``counts``: studies, files and events, per room and in total;
* ``planted_findings``: one :class:`PlantedFinding` each, ``kind`` being the review's flag kind
  (``dap_ratio``, ``change_point``, ``exam_above_investigation_level``, ``no_dose_data``,
  ``unmapped_protocol``), ``ingest_error`` for a broken file, or ``recurrent_exposure`` for the
  patient the recurrent-exposure list must name;
* ``not_planted``: findings the scenario deliberately does **not** plant, with the numbers that
  keep them quiet (``group_above_level``...);
* ``group_medians``: per room, exam type, month and reported quantity, the number of values, the
  median and the applicable shipped levels, for all patients and for standard-size patients
  (50-90 kg with a recorded weight, the review's default basis);
* ``review_parameters``: the review settings the plants were designed against;
* ``files``: relative paths of ``README.md`` and ``truth_events.csv``.

All paths are relative to the manifest's folder, with ``/`` separators.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from beamaudit.api.demo.errors import DemoError

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "PlantedFinding",
    "QARecord",
    "RoomEntry",
    "ScenarioManifest",
]

FORMAT = "beamaudit-demo-manifest"
FORMAT_VERSION = 1


@dataclass(slots=True)
class QARecord:
    """One invented QA measurement of a calibrated room (columns of ``qa_measurements``).

    ``filtration`` holds the filters in the beam during the measurement besides the tube's
    inherent filtration (the room's added filter), since an HVL is given and the calibration fits
    the inherent filtration (see :mod:`beamaudit.model.calibration`).
    """

    measured_on: str
    kvp_kv: float
    filtration: list[dict[str, Any]]
    distance_mm: float
    output_ugy_per_mas: float
    hvl_mm_al: float | None
    note: str


@dataclass(slots=True)
class RoomEntry:
    """One room of the scenario.

    ``filtration`` is the total filtration, inherent first; ``inherent_filtration`` and
    ``added_filtration`` split it. Image headers and dose reports carry only the added filters
    (DICOM's X-Ray Filtration module and TID 10003B name the filters in the beam, not the tube's
    inherent filtration). :mod:`beamaudit.api.intake.reconstruct` adds each event's recorded
    filters to the room's configured filtration, so configure the store's ``rooms.filtration`` with
    ``inherent_filtration`` (configuring ``filtration`` would count the added filter twice).
    ``qa_measurements`` (RAD 1 only) list the added filter as their filtration: they carry HVLs,
    so the calibration fits the inherent filtration.
    """

    key: str
    site: str
    name: str
    station_name: str
    manufacturer: str
    model_name: str
    serial_number: str
    device_observer_uid: str
    modality: str
    kind: str
    delivery: str
    path: str
    anode_material: str
    anode_angle_deg: float
    ripple_percent: float
    inherent_filtration: list[dict[str, Any]]
    added_filtration: list[dict[str, Any]]
    filtration: list[dict[str, Any]]
    table_to_detector_mm: float | None
    calibrated: bool
    qa_measurements: list[QARecord]
    studies: int
    files: int
    events: int
    sop_classes: list[str]
    #: the CT scanner's localizer calibration to water (IEC 62985), as its physicist measured
    #: it: ``kvp_kv``, ``view``, ``pixel_values``, ``water_thickness_mm``, ``measured_on``,
    #: ``source``; stored by the demo before the scan (``None``: not a CT scanner)
    ct_localizer_calibration: dict[str, Any] | None = None


@dataclass(slots=True)
class PlantedFinding:
    """One finding the scenario plants.

    ``kind`` is the review core's flag kind (:data:`beamaudit.api.review.flags.FLAG_KINDS`),
    ``ingest_error``, or ``recurrent_exposure`` (a patient the recurrent-exposure list must
    name). ``date`` is the first affected day (ISO), ``month`` its month; ``expected``
    holds the numbers (computed from the generated data); ``study_instance_uids`` /
    ``sop_instance_uids`` list the objects concerned when they are few. ``consequence_of`` names
    the finding this one follows from (an outlier's deviation index, a meter fault's step in the
    monthly medians); ``required`` is False for a consequence the review *may* surface, depending
    on sample sizes and its change-point settings.
    """

    id: str
    kind: str
    room: str | None
    room_key: str | None
    station_name: str | None
    exam_type: str | None
    quantity: str | None
    date: str | None
    month: str | None
    description: str
    expected: dict[str, Any] = field(default_factory=dict)
    study_instance_uids: list[str] = field(default_factory=list)
    sop_instance_uids: list[str] = field(default_factory=list)
    paths: list[str] = field(default_factory=list)
    consequence_of: str | None = None
    required: bool = True


@dataclass(slots=True)
class ScenarioManifest:
    """Everything :func:`~beamaudit.api.demo.generate.generate_scenario` made."""

    seed: int
    months: list[str]
    start_date: str
    end_date: str
    institution: str
    notice: str
    rooms: list[RoomEntry]
    counts: dict[str, Any]
    planted_findings: list[PlantedFinding]
    not_planted: list[dict[str, Any]]
    group_medians: list[dict[str, Any]]
    files: dict[str, str]
    review_parameters: dict[str, Any]
    software_version: str
    invented: bool = True
    format: str = FORMAT
    format_version: int = FORMAT_VERSION

    def findings(self, kind: str) -> list[PlantedFinding]:
        """The planted findings of one ``kind``."""
        return [f for f in self.planted_findings if f.kind == kind]

    def room(self, key: str) -> RoomEntry:
        """The room with ``key``.

        Raises
        ------
        KeyError
            No such room.
        """
        for room in self.rooms:
            if room.key == key:
                return room
        raise KeyError(f"no room {key!r} in the manifest")

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict."""
        return asdict(self)

    def write(self, path: Path) -> None:
        """Write the manifest as JSON to ``path``."""
        text = json.dumps(self.to_dict(), indent=2, sort_keys=True, ensure_ascii=False)
        path.write_text(text + "\n", encoding="utf-8")

    @classmethod
    def load(cls, path: Path) -> ScenarioManifest:
        """Read a manifest written by :meth:`write`.

        Raises
        ------
        DemoError
            Not a demo manifest, another format version, or a file that does not parse.
        """
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise DemoError(f"{path}: cannot read the demo manifest: {exc}") from None
        if not isinstance(data, dict) or data.get("format") != FORMAT:
            raise DemoError(f"{path} is not a beamaudit demo manifest")
        if data.get("format_version") != FORMAT_VERSION:
            raise DemoError(
                f"{path}: manifest format version {data.get('format_version')!r}, "
                f"this beamaudit reads version {FORMAT_VERSION}"
            )
        try:
            rooms = [
                RoomEntry(**{**r, "qa_measurements": [QARecord(**q) for q in r["qa_measurements"]]})
                for r in data.pop("rooms")
            ]
            findings = [PlantedFinding(**f) for f in data.pop("planted_findings")]
            return cls(rooms=rooms, planted_findings=findings, **data)
        except (KeyError, TypeError) as exc:
            raise DemoError(f"{path}: the demo manifest is incomplete: {exc}") from None
