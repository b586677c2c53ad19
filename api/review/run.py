"""A review run: every parameter, the review itself, and its reproducible result.

:func:`review` takes the events of a period (the table documented in
:mod:`beamaudit.api.review.events`), the reference-level sets and a :class:`ReviewParameters`, and
returns a :class:`ReviewResult`: one row per group (``site``, ``room``, ``device`` as chosen by
``group_by``, exam type and quantity) and applicable level, the flags, the unmapped events, and the
period's monthly medians (to be stored as history for the next runs' change-points).

The method is ICRP Publication 135's (2017): the facility value is the **median** of the group's
standard-size patients (70 ± 10 kg mean weight, by including patients of 50-90 kg;
PUBLISHED-VALUES e, high confidence), compared with each applicable local or national level as a
ratio; groups with fewer patients than the minimum for their modality group get
``insufficient_sample``, never a verdict;
"above the level" is said with the confidence interval of the median (see
:mod:`beamaudit.api.review.stats`).

The levels are those in effect on ``levels_on`` (default: the first day of the period): a level that
takes effect in the middle of a period applies from the next period on.

Groups are also split by **clinical indication** (the events' optional ``clinical_indication``) and
**patient group**: children (``patient_age_years`` below ``paediatric_age_limit_years``) of an exam
type with ``paediatric_bands`` are grouped by the ICRP 135 / EC RP 185 weight or age bands of
:mod:`beamaudit.api.review.bands`, all of a band's patients used (``basis`` ``band``); adults and
patients of unrecorded age form the main group (``patient_group`` None) as before. A level applies
to the groups of its patient group, and to those of its indication (a level without one to every
indication). Each group row carries ICRP 135's sample rule (``n_minimum``, ``n_preferred``,
``sample_check``) and, for the main group, whether the sample's mean weight is near the standard
70 kg (``mean_weight_check``: within ``standard_mean_weight_kg`` ±
``standard_mean_weight_tolerance_kg``, 70 ± 10 kg after the ICRP 135 glossary's standard-size adult,
PUBLISHED-VALUES e, high); ``n_no_weight`` and ``n_no_age`` count patients without them.

Over the rooms of a site, :mod:`beamaudit.api.review.site_values` gives ICRP 135's typical value
and a proposed local DRL (``site_values_df``), and the ``low_dose_review`` flag asks for an image-
quality review of groups far below their level or the site's other rooms.

Determinism: the events are sorted by ``event_id`` first and every table is sorted by its keys, so
the same events and parameters give an identical result whatever order the rows come in.
Re-running a stored run: ``review(events, levels=..., params=ReviewParameters.from_json_dict(d))``.

Every figure is an estimate for quality assurance and optimisation; clinical decisions need a
qualified medical physicist, and local regulations take precedence.
"""

from __future__ import annotations

import calendar
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields
from datetime import date, datetime
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
import pandas as pd

import beamaudit
from beamaudit.api.review import flags as fl
from beamaudit.api.review.bands import (
    SPECIAL_GROUPS,
    PatientGroups,
    assign_patient_groups,
    load_default_patient_groups,
)
from beamaudit.api.review.ct_size import (
    SIZE_SPECIAL_GROUPS,
    assign_size_bands,
    check_edges,
    size_band_names,
)
from beamaudit.api.review.errors import ReviewError, ReviewInputError
from beamaudit.api.review.events import (
    DOSE_COLUMNS,
    build_units,
    group_codes,
    month_labels,
    prepare_events,
    study_table,
)
from beamaudit.api.review.examtypes import (
    MODALITY_GROUPS,
    ExamCatalogue,
    MappingRules,
    load_default_catalogue,
    map_events_with_indication,
    unmapped_summary,
)
from beamaudit.api.review.levels import ReferenceLevelSet, levels_in_effect, levels_table
from beamaudit.api.review.mammography import (
    DEFAULT_THICKNESS_BAND_MM,
    OUTSIDE_THICKNESS_BAND,
    THICKNESS_NOT_RECORDED,
    assign_thickness_bands,
    band_name,
    check_band,
)
from beamaudit.api.review.quantities import QUANTITIES
from beamaudit.api.review.ratio_baseline import ratio_baselines
from beamaudit.api.review.site_values import SITE_VALUE_COLUMNS as _SITE_VALUE_COLUMNS
from beamaudit.api.review.site_values import site_values
from beamaudit.api.review.stats import (
    DEFAULT_MINIMUM_SAMPLES,
    PREFERRED_SAMPLES,
    classify_status,
    group_medians,
    group_statistics,
    sample_checks,
)

__all__ = [
    "GROUP_COLUMNS",
    "LOCATION_KEYS",
    "MONTHLY_COLUMNS",
    "Period",
    "ReviewParameters",
    "ReviewResult",
    "monthly_history",
    "review",
]

#: Location columns a review can group by (exam type and quantity are always group keys).
LOCATION_KEYS = ("site", "room", "device")

#: Columns of :attr:`ReviewResult.groups_df`.
GROUP_COLUMNS = (
    *fl.GROUP_KEYS,
    "unit",
    "modality_group",
    "level_applies_per",
    "n",
    "n_standard",
    "n_used",
    "basis",
    "n_minimum",
    "median",
    "q1",
    "q3",
    "mean",
    "upper_percentile_value",
    "ci_low",
    "ci_high",
    "ci_coverage",
    "mean_weight_kg",
    "level_set",
    "level_kind",
    "level_version",
    "level_effective_from",
    "reference_level",
    "level_source",
    "ratio_to_level",
    "status",
    "patient_group_label",
    "n_no_weight",
    "n_no_age",
    "n_preferred",
    "sample_check",
    "mean_weight_check",
    "level_clinical_indication",
)

#: Columns of :attr:`ReviewResult.monthly_df` and of the ``history_df`` table :func:`review` takes:
#: one row per series and month (``YYYY-MM``); ``quantity`` is a quantity name, ``"dap_ratio"``
#: (reported / reconstructed DAP) or ``"mgd_ratio"`` (the device's AGD / reconstructed D_G), both
#: with ``exam_type`` None; ``n`` values and their ``median``.
MONTHLY_COLUMNS = ("month", "site", "room", "device", "exam_type", "quantity", "n", "median")

_MONTH = re.compile(r"^(\d{4})-(\d{2})$")


@dataclass(frozen=True, slots=True)
class Period:
    """A review period ``[start, end)`` in UTC dates (``end`` exclusive)."""

    start: date
    end: date

    def __post_init__(self) -> None:
        if not self.start < self.end:
            raise ReviewError(f"period start {self.start} must be before its end {self.end}")

    @classmethod
    def month(cls, year: int, month: int) -> Period:
        """The calendar month ``year-month``."""
        if not 1 <= month <= 12:
            raise ReviewError(f"month must be 1-12, got {month}")
        last = calendar.monthrange(year, month)[1]
        start = date(year, month, 1)
        return cls(start, date.fromordinal(start.toordinal() + last))

    @classmethod
    def parse(cls, text: str) -> Period:
        """``"2025-03"`` (a calendar month) or ``"2025-01-01/2025-04-01"`` (end exclusive)."""
        m = _MONTH.match(text.strip())
        if m:
            return cls.month(int(m.group(1)), int(m.group(2)))
        start, sep, end = text.strip().partition("/")
        try:
            if sep:
                return cls(date.fromisoformat(start), date.fromisoformat(end))
        except ValueError:
            pass
        raise ReviewError(f"period {text!r} must be YYYY-MM or YYYY-MM-DD/YYYY-MM-DD")

    @property
    def label(self) -> str:
        """``YYYY-MM`` for a calendar month, else ``start/end``."""
        if self.start.day == 1 and Period.month(self.start.year, self.start.month) == self:
            return f"{self.start.year:04d}-{self.start.month:02d}"
        return f"{self.start.isoformat()}/{self.end.isoformat()}"

    def to_json_dict(self) -> dict[str, str]:
        return {"start": self.start.isoformat(), "end": self.end.isoformat(), "label": self.label}


THICKNESS_SPECIAL_GROUPS = (OUTSIDE_THICKNESS_BAND, THICKNESS_NOT_RECORDED)


def _month_key(d: date) -> int:
    return d.year * 12 + d.month - 1


@dataclass(frozen=True, slots=True)
class ReviewParameters:
    """Every parameter of a review run (stored with the run so that it can be re-run).

    Attributes
    ----------
    period : Period
        The events reviewed (UTC).
    sites, rooms, devices, exam_types : tuple of str or None
        Scope filters; ``None`` is everything. The exam-type filter does not hide unmapped events
        from the unmapped list.
    group_by : tuple of str
        Location keys of a group, from ``site``, ``room``, ``device`` (exam type and quantity are
        always keys). Default site and room: ICRP 135 counts samples per room.
    weight_window_kg : (float, float)
        Standard-size patient window, inclusive. Default 50-90 kg, ICRP 135's example of how to
        reach a mean of 70 ± 10 kg (PUBLISHED-VALUES e, high).
    basis : {"standard", "all"}
        Which patients the statistics use: standard-size only (ICRP 135), or all patients (where
        weights are not recorded; the result then says so in each group's ``basis``).
    minimum_samples : mapping
        Minimum patients per modality group; merged over :data:`DEFAULT_MINIMUM_SAMPLES`.
    confidence_level : float
        Of the median's confidence interval (default 0.95).
    levels_on : date or None
        Date the levels are taken in effect on; default the period's first day.
    investigation_multiple : float or None
        Single examinations above this multiple of the strictest applicable level are flagged.
        Default 2, **common practice** (no standard fixes it); ``None`` switches the rule off.
    upper_percentile : float
        Group percentile reported (default 95) and used by ``investigate_above_percentile``.
    investigate_above_percentile : bool
        Also flag single examinations above their group's upper percentile (off by default: by
        construction about 5 % of all examinations are above the 95th percentile).
    investigate_standard_only : bool
        Apply the single-examination rules to standard-size patients only (default all, with the
        patient's weight in the reason).
    max_exam_flags_per_group : int or None
        At most this many single-examination flags (investigation level, deviation index) per
        group, the most extreme first; the rest are counted in one flag per group (default 50: a
        review is read by people, and a group with hundreds of exceedances has one cause to find).
        ``None`` lists every one.
    dap_ratio_tolerance : float
        Allowed deviation of a room's monthly median reported / reconstructed DAP from 1. Default
        0.25 after the ±25 % overall accuracy IEC 60580 asks of DAP meters (**from memory**, not
        read in the standard).
    dap_ratio_min_events : int
        Months with fewer events having both DAPs are not judged (default 20).
    mgd_ratio_tolerance : float
        Allowed relative deviation of a mammography room's monthly median of the device's AGD /
        reconstructed D_G from the room's own baseline (:mod:`.ratio_baseline`). Default 0.2,
        a **project choice**: vendors' dosimetry methods differ, so there is no standard's
        tolerance around 1 to borrow; 20 % is the shift the change-points also take as worth a
        look, well above the month-to-month scatter of a median of tens of views.
    mgd_ratio_min_events : int
        Months with fewer views having both figures are not judged (default 20, as for DAP).
    mgd_ratio_baseline_months : int
        The baseline is the median of at most this many preceding judged months, and needs at
        least 3 (default 6, the CUSUM baseline's length; **project choice**).
    di_range : (float, float)
        Deviation-index range; exposures outside are flagged. Default ±3, the AAPM TG-116 action
        limits (from memory, medium confidence).
    srdl_thresholds : mapping
        NCRP 168 substantial radiation dose levels per study total (default :data:`NCRP168_SRDL`).
    srdl_modalities : tuple of str
        Modalities whose studies are checked against the SRDLs (default RF, XA).
    cusum_k, cusum_h : float
        CUSUM reference value and decision interval in robust SDs (default 0.5 and 5, Montgomery).
    cusum_baseline_months : int
        Leading months whose median is the CUSUM target (default 6).
    changepoint_min_relative_change : float
        Changes smaller than this fraction of the level before are not flagged (default 0.2:
        common practice for dose audits, where a 20 % shift in a room's median is worth a look;
        smaller ones are within month-to-month noise of typical sample sizes).
    changepoint_lookback_months : int
        Months of history (before the period) searched for change-points (default 24).
    paediatric_age_limit_years : float
        Patients younger than this are children, grouped by the paediatric bands of their exam type
        (default 18, the age of majority: **common practice**).
    preferred_samples : mapping
        Preferred patients per modality group; merged over :data:`PREFERRED_SAMPLES` (ICRP 135).
    standard_mean_weight_kg, standard_mean_weight_tolerance_kg : float
        A main group's sample is near the standard patient when its mean weight is within
        this tolerance of this weight (default 70 ± 10 kg, the ICRP 135 glossary's standard-size
        adult, PUBLISHED-VALUES e, high).
    min_rooms_for_local_level : int
        Rooms (with enough patients each) a site needs for a proposed local DRL and for the
        25th-percentile rule of the low-dose review (default 10, the low end of ICRP 135's
        "reasonable number (e.g. 10-20)" of rooms, PUBLISHED-VALUES e, high).
    low_dose_fraction : float or None
        A judged group whose median is below this fraction of a level gets a ``low_dose_review``
        flag (default 0.5, **common practice**, no standard fixes it); ``None`` switches it off.
    low_dose_below_site_p25 : bool
        Also flag groups below the 25th percentile of their site's room medians (default on).
    """

    period: Period
    sites: tuple[str, ...] | None = None
    rooms: tuple[str, ...] | None = None
    devices: tuple[str, ...] | None = None
    exam_types: tuple[str, ...] | None = None
    group_by: tuple[str, ...] = ("site", "room")
    weight_window_kg: tuple[float, float] = (50.0, 90.0)
    basis: Literal["standard", "all"] = "standard"
    minimum_samples: Mapping[str, int] = field(
        default_factory=lambda: dict(DEFAULT_MINIMUM_SAMPLES)
    )
    confidence_level: float = 0.95
    levels_on: date | None = None
    investigation_multiple: float | None = 2.0
    upper_percentile: float = 95.0
    investigate_above_percentile: bool = False
    investigate_standard_only: bool = False
    max_exam_flags_per_group: int | None = 50
    dap_ratio_tolerance: float = 0.25
    dap_ratio_min_events: int = 20
    mgd_ratio_tolerance: float = 0.2
    mgd_ratio_min_events: int = 20
    mgd_ratio_baseline_months: int = 6
    di_range: tuple[float, float] = fl.TG116_DI_RANGE
    srdl_thresholds: Mapping[str, float] = field(default_factory=lambda: dict(fl.NCRP168_SRDL))
    srdl_modalities: tuple[str, ...] = ("RF", "XA")
    cusum_k: float = 0.5
    cusum_h: float = 5.0
    cusum_baseline_months: int = 6
    changepoint_lookback_months: int = 24
    changepoint_min_relative_change: float = 0.2
    paediatric_age_limit_years: float = 18.0
    preferred_samples: Mapping[str, int] = field(default_factory=lambda: dict(PREFERRED_SAMPLES))
    standard_mean_weight_kg: float = 70.0
    standard_mean_weight_tolerance_kg: float = 10.0
    min_rooms_for_local_level: int = 10
    low_dose_fraction: float | None = 0.5
    low_dose_below_site_p25: bool = True
    #: mammography: the compressed-thickness band the views are compared in (mm, low <= t < high)
    breast_thickness_band_mm: tuple[float, float] = DEFAULT_THICKNESS_BAND_MM
    #: CT: edges of the Dw bands adult CT groups are formed by (cm; empty: no size bands;
    #: review/ct_size.py, no published edges)
    ct_size_band_edges_cm: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        problems = [
            *self._normalise_grouping(),
            *self._merge_sample_counts(),
            *self._check_limits(),
            *self._normalise_flag_rules(),
        ]
        if problems:
            raise ReviewError("bad review parameters: " + "; ".join(problems))

    def _normalise_grouping(self) -> list[str]:
        """Scope filters, group keys, weight window, size bands and basis: normalised; problems."""
        problems = []
        for name in ("sites", "rooms", "devices", "exam_types"):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, tuple(str(v) for v in value))
        object.__setattr__(self, "group_by", tuple(self.group_by))
        bad_keys = [k for k in self.group_by if k not in LOCATION_KEYS]
        if bad_keys or len(set(self.group_by)) != len(self.group_by):
            problems.append(f"group_by must be distinct keys of {', '.join(LOCATION_KEYS)}")
        low, high = (float(v) for v in self.weight_window_kg)
        if not 0 < low < high:
            problems.append("weight_window_kg must be (low, high) with 0 < low < high")
        object.__setattr__(self, "weight_window_kg", (low, high))
        band = check_band(self.breast_thickness_band_mm)
        if band is None:
            problems.append("breast_thickness_band_mm must be (low, high) with 0 < low < high")
        else:
            object.__setattr__(self, "breast_thickness_band_mm", band)
        edges = check_edges(self.ct_size_band_edges_cm)
        if edges is None:
            problems.append(
                "ct_size_band_edges_cm must be empty or at least two increasing values in "
                "(0, 100] cm"
            )
        else:
            object.__setattr__(self, "ct_size_band_edges_cm", edges)
        if self.basis not in ("standard", "all"):
            problems.append("basis must be 'standard' or 'all'")
        return problems

    def _merge_sample_counts(self) -> list[str]:
        """Minimum and preferred samples merged over their defaults; problems."""
        problems = []
        for name, defaults in (
            ("minimum_samples", DEFAULT_MINIMUM_SAMPLES),
            ("preferred_samples", PREFERRED_SAMPLES),
        ):
            merged = dict(defaults)
            for group, n in getattr(self, name).items():
                if group not in MODALITY_GROUPS:
                    problems.append(f"{name}: unknown modality group {group!r}")
                elif int(n) != n or n < 1:
                    problems.append(f"{name}[{group!r}] must be a positive integer")
                else:
                    merged[group] = int(n)
            object.__setattr__(self, name, MappingProxyType(merged))
        return problems

    def _check_limits(self) -> list[str]:
        """Problems of the numeric limits (age, standard weight, rooms, fractions, percentiles)."""
        problems = []
        if not self.paediatric_age_limit_years > 0:
            problems.append("paediatric_age_limit_years must be positive")
        if not (self.standard_mean_weight_kg > 0 and self.standard_mean_weight_tolerance_kg >= 0):
            problems.append(
                "standard_mean_weight_kg must be positive and its tolerance not negative"
            )
        if int(self.min_rooms_for_local_level) != self.min_rooms_for_local_level or (
            self.min_rooms_for_local_level < 2
        ):
            problems.append("min_rooms_for_local_level must be an integer of at least 2")
        if self.low_dose_fraction is not None and not 0 < self.low_dose_fraction < 1:
            problems.append("low_dose_fraction must be between 0 and 1, or None")
        if not 0 < self.confidence_level < 1:
            problems.append("confidence_level must be between 0 and 1")
        if self.investigation_multiple is not None and not self.investigation_multiple > 0:
            problems.append("investigation_multiple must be positive or None")
        if self.max_exam_flags_per_group is not None and self.max_exam_flags_per_group < 1:
            problems.append("max_exam_flags_per_group must be at least 1 or None")
        if not 0 < self.upper_percentile < 100:
            problems.append("upper_percentile must be between 0 and 100")
        for name in ("dap_ratio", "mgd_ratio"):
            if not 0 < getattr(self, f"{name}_tolerance") < 1:
                problems.append(f"{name}_tolerance must be between 0 and 1")
            if getattr(self, f"{name}_min_events") < 1:
                problems.append(f"{name}_min_events must be at least 1")
        if self.mgd_ratio_baseline_months < MGD_RATIO_MIN_BASELINE_MONTHS:
            problems.append(
                f"mgd_ratio_baseline_months must be at least {MGD_RATIO_MIN_BASELINE_MONTHS}"
            )
        return problems

    def _normalise_flag_rules(self) -> list[str]:
        """DI range, SRDL thresholds and modalities, CUSUM: normalised; problems."""
        problems = []
        di_low, di_high = (float(v) for v in self.di_range)
        if not di_low < di_high:
            problems.append("di_range must be (low, high) with low < high")
        object.__setattr__(self, "di_range", (di_low, di_high))
        srdl = {}
        for column, level in self.srdl_thresholds.items():
            if column not in fl.NCRP168_SRDL:
                problems.append(
                    f"srdl_thresholds: {column!r} is not one of {', '.join(fl.NCRP168_SRDL)}"
                )
            elif not float(level) > 0:
                problems.append(f"srdl_thresholds[{column!r}] must be positive")
            else:
                srdl[column] = float(level)
        object.__setattr__(self, "srdl_thresholds", MappingProxyType(srdl))
        object.__setattr__(self, "srdl_modalities", tuple(m.upper() for m in self.srdl_modalities))
        if not (self.cusum_k > 0 and self.cusum_h > 0):
            problems.append("cusum_k and cusum_h must be positive")
        if self.cusum_baseline_months < 2 or self.changepoint_lookback_months < 0:
            problems.append("cusum_baseline_months must be >= 2, changepoint_lookback_months >= 0")
        return problems

    @classmethod
    def for_month(cls, year: int, month: int, **kwargs: Any) -> ReviewParameters:
        """Parameters for the calendar month ``year-month`` (the default kind of period)."""
        return cls(period=Period.month(year, month), **kwargs)

    @property
    def effective_levels_on(self) -> date:
        """The date reference levels are taken in effect on."""
        return self.levels_on or self.period.start

    def to_json_dict(self) -> dict[str, Any]:
        """Every parameter as plain JSON types (see :meth:`from_json_dict`)."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, Period):
                value = value.to_json_dict()
            elif isinstance(value, date):
                value = value.isoformat()
            elif isinstance(value, Mapping):
                value = dict(sorted(value.items()))
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out

    @classmethod
    def from_json_dict(cls, data: Mapping[str, Any]) -> ReviewParameters:
        """Parameters from :meth:`to_json_dict`'s output.

        Raises
        ------
        ReviewError
            Unknown keys or bad values.
        """
        known = {f.name for f in fields(cls)}
        unknown = set(data) - known
        if unknown:
            raise ReviewError(f"unknown review parameter(s): {', '.join(sorted(unknown))}")
        kwargs: dict[str, Any] = {}
        for key, value in data.items():
            if key == "period":
                try:
                    value = Period(
                        date.fromisoformat(value["start"]), date.fromisoformat(value["end"])
                    )
                except (KeyError, TypeError, ValueError) as exc:
                    raise ReviewError(f"bad period {value!r}") from exc
            elif key == "levels_on" and value is not None:
                value = date.fromisoformat(value)
            elif isinstance(value, list):
                value = tuple(value)
            kwargs[key] = value
        return cls(**kwargs)


@dataclass(frozen=True)
class ReviewResult:
    """The outcome of :func:`review`.

    Attributes
    ----------
    period, parameters
        As given.
    groups_df : DataFrame
        Columns :data:`GROUP_COLUMNS`, one row per group and applicable level (a group without a
        level has one row with status ``no_level``), sorted by the group keys, local levels first.
    flags : tuple of Flag
        Sorted by :func:`~beamaudit.api.review.flags.sort_flags`.
    unmapped_df : DataFrame
        :func:`~beamaudit.api.review.examtypes.unmapped_summary` of the period's events.
    monthly_df : DataFrame
        Columns :data:`MONTHLY_COLUMNS`: this period's monthly medians (the next run's history).
    level_sets : tuple of dict
        Identity (name, kind, version, date, source) of each level-set version in effect.
    catalogue_fingerprint, software_version : str
    n_events : int
        Events in the period and scope.
    site_values_df : DataFrame
        Columns :data:`~beamaudit.api.review.site_values.SITE_VALUE_COLUMNS`: typical values and
        proposed local DRLs over each site's rooms.
    patient_groups : dict
        Identity (source, fingerprint) of the paediatric bands used.
    """

    period: Period
    parameters: ReviewParameters
    groups_df: pd.DataFrame
    flags: tuple[fl.Flag, ...]
    unmapped_df: pd.DataFrame
    monthly_df: pd.DataFrame
    level_sets: tuple[dict[str, str], ...]
    catalogue_fingerprint: str
    software_version: str
    n_events: int
    site_values_df: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=list(_SITE_VALUE_COLUMNS))
    )
    patient_groups: dict[str, str] = field(default_factory=dict)

    def to_json_dict(self) -> dict[str, Any]:
        """The whole result in plain JSON types (NaN as ``None``, times as ISO strings)."""
        return {
            "period": self.period.to_json_dict(),
            "software_version": self.software_version,
            "parameters": self.parameters.to_json_dict(),
            "level_sets": [dict(s) for s in self.level_sets],
            "catalogue_fingerprint": self.catalogue_fingerprint,
            "n_events": self.n_events,
            "groups": _records(self.groups_df),
            "flags": [f.to_json_dict() for f in self.flags],
            "unmapped": _records(self.unmapped_df),
            "monthly": _records(self.monthly_df),
            "site_values": _records(self.site_values_df),
            "patient_groups": dict(self.patient_groups),
        }


def _json_value(v: Any) -> Any:
    if v is None or v is pd.NA:
        return None
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, pd.Timestamp | datetime):
        return v.isoformat()
    return v


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    columns = list(frame.columns)
    return [
        {c: _json_value(v) for c, v in zip(columns, row, strict=True)}
        for row in frame.itertuples(index=False, name=None)
    ]


# --------------------------------------------------------------------------------------- the review
def _select(events: pd.DataFrame, params: ReviewParameters) -> pd.DataFrame:
    start = np.datetime64(params.period.start.isoformat(), "ns")
    end = np.datetime64(params.period.end.isoformat(), "ns")
    when = events["event_datetime"].to_numpy()
    keep = (when >= start) & (when < end)
    for column, allowed in (
        ("site", params.sites),
        ("room", params.rooms),
        ("device", params.devices),
    ):
        if allowed is not None:
            keep &= events[column].isin(list(allowed)).to_numpy()
    return events.loc[keep].reset_index(drop=True)


def _with_location_keys(frame: pd.DataFrame, group_by: Sequence[str]) -> pd.DataFrame:
    """Blank the location columns that are not group keys (so they do not split groups)."""
    for c in LOCATION_KEYS:
        if c not in group_by:
            frame[c] = pd.Categorical.from_codes(np.full(len(frame), -1), categories=[])
    return frame


def _group_table(
    units: pd.DataFrame,
    levels: pd.DataFrame,
    catalogue: ExamCatalogue,
    params: ReviewParameters,
    bands: PatientGroups,
) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """The group table, each unit's group code, and each group's upper percentile."""
    if len(units) == 0:
        return pd.DataFrame(columns=list(GROUP_COLUMNS)), np.zeros(0, np.int64), np.zeros(0)
    codes, table = group_codes(units, list(fl.GROUP_KEYS))
    upper = _add_group_statistics(table, units, codes, params)
    _add_sample_checks(table, catalogue, params)
    _add_mean_weight_check(table, params, bands)
    return _with_levels(table, levels), codes, upper


def _add_group_statistics(
    table: pd.DataFrame, units: pd.DataFrame, codes: np.ndarray, params: ReviewParameters
) -> np.ndarray:
    """Add the counts, the median statistics and the mean weight to ``table`` (in place);
    return each group's upper percentile."""
    n_groups = len(table)
    weight = units["patient_weight_kg"].to_numpy(dtype=np.float64)
    low, high = params.weight_window_kg
    standard = (weight >= low) & (weight <= high)
    banded = units["patient_group"].notna().to_numpy()
    used = (standard | banded) if params.basis == "standard" else np.ones(len(units), dtype=bool)
    table["n"] = np.bincount(codes, minlength=n_groups).astype(np.int64)
    values = units["value"].to_numpy(dtype=np.float64)
    stats = group_statistics(
        codes,
        np.where(used, values, np.nan),
        n_groups,
        confidence_level=params.confidence_level,
        upper_percentile=params.upper_percentile,
    )
    table["n_standard"] = np.bincount(codes, weights=standard, minlength=n_groups).astype(np.int64)
    table["n_used"] = stats.n
    group_banded = table["patient_group"].notna().to_numpy()
    table["basis"] = np.where(group_banded, "band", params.basis).astype(object)
    table["n_no_weight"] = np.bincount(codes, weights=np.isnan(weight), minlength=n_groups).astype(
        np.int64
    )
    age = units["patient_age_years"].to_numpy(dtype=np.float64)
    table["n_no_age"] = np.bincount(codes, weights=np.isnan(age), minlength=n_groups).astype(
        np.int64
    )
    for column, series in stats.to_frame().drop(columns="n").items():
        table[column] = series.to_numpy()
    has_weight = used & ~np.isnan(weight)
    weight_sum = np.bincount(codes, weights=np.where(has_weight, weight, 0.0), minlength=n_groups)
    weight_n = np.bincount(codes, weights=has_weight, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        table["mean_weight_kg"] = np.where(weight_n > 0, weight_sum / weight_n, np.nan)
    return stats.upper


def _add_sample_checks(
    table: pd.DataFrame, catalogue: ExamCatalogue, params: ReviewParameters
) -> None:
    """Add each group's modality group, level basis, unit and sample-size check (in place)."""
    exam = {t.exam_type: t for t in catalogue}
    table["modality_group"] = table["exam_type"].map(lambda e: exam[e].modality_group)
    table["level_applies_per"] = table["exam_type"].map(lambda e: exam[e].level_applies_per)
    table["unit"] = table["quantity"].map(lambda q: QUANTITIES[q].unit)
    table["n_minimum"] = table["modality_group"].map(dict(params.minimum_samples)).astype(np.int64)
    table["n_preferred"] = np.maximum(
        table["modality_group"].map(dict(params.preferred_samples)).to_numpy(dtype=np.int64),
        table["n_minimum"].to_numpy(),
    )
    table["sample_check"] = sample_checks(
        table["n_used"].to_numpy(), table["n_minimum"].to_numpy(), table["n_preferred"].to_numpy()
    )


def _add_mean_weight_check(
    table: pd.DataFrame, params: ReviewParameters, bands: PatientGroups
) -> None:
    """Add the mean-weight check against the standard patient and the patient group's label."""
    group_banded = table["patient_group"].notna().to_numpy()
    mean_weight = table["mean_weight_kg"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore"):
        near = (
            np.abs(mean_weight - params.standard_mean_weight_kg)
            <= params.standard_mean_weight_tolerance_kg
        )
    table["mean_weight_check"] = np.select(
        [group_banded, np.isnan(mean_weight), near],
        ["not_applicable", "not_recorded", "ok"],
        default="outside_tolerance",
    ).astype(object)
    table["patient_group_label"] = [
        None if g is None else bands.label(g) for g in table["patient_group"].tolist()
    ]


def _with_levels(table: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """One row per group and applicable level (local first), with its ratio and status."""
    table["_group"] = np.arange(len(table))
    merged = table.merge(
        _applicable_levels(table, levels).drop(columns=["exam_type", "quantity"]),
        on="_group",
        how="left",
        sort=False,
    )
    merged["_local_first"] = (merged["level_kind"] != "local").astype(int)
    merged = merged.sort_values(
        ["_group", "_local_first", "level_set"], kind="mergesort", na_position="last"
    ).reset_index(drop=True)
    level = merged["reference_level"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        merged["ratio_to_level"] = merged["median"].to_numpy(dtype=np.float64) / level
    merged["status"] = classify_status(
        n=merged["n_used"].to_numpy(),
        n_minimum=merged["n_minimum"].to_numpy(),
        median=merged["median"].to_numpy(dtype=np.float64),
        ci_low=merged["ci_low"].to_numpy(dtype=np.float64),
        level=level,
    )
    out = merged.loc[:, list(GROUP_COLUMNS)]
    for c in (
        "level_set",
        "level_kind",
        "level_version",
        "level_effective_from",
        "level_source",
        "level_clinical_indication",
    ):
        out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out


def _applicable_levels(keys: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """The levels that apply to each row of ``keys`` (``_group``, ``exam_type``, ``quantity``,
    ``patient_group``, ``clinical_indication``): one row per key row and level set, those without
    a level left out.

    A level applies to its own patient group (an empty one to the main group, ``None``), and to
    every indication when it has none, or to its own; a set's level for the row's indication takes
    the place of the same set's level without one (``level_clinical_indication`` says which).
    A mammography thickness band (:mod:`.mammography`) takes the levels of its own band, and the
    levels without a patient group; a set's level of the band takes the place of the same set's
    level without one (before the indication is asked); the groups outside the band take none.
    """
    frame = keys.loc[:, ["_group", "exam_type", "quantity"]].copy()
    frame["_pg"] = keys["patient_group"].astype(object).where(keys["patient_group"].notna(), "")
    frame["_band"] = 1
    band = frame["_pg"].str.startswith("breast_", na=False) & ~frame["_pg"].isin(
        THICKNESS_SPECIAL_GROUPS
    )
    # the band's rows once more, asking for the levels that name no band
    frame = pd.concat([frame, frame.loc[band].assign(_pg="", _band=0)], ignore_index=True)
    frame["_ind"] = pd.concat(
        [keys["clinical_indication"], keys["clinical_indication"].loc[band.to_numpy()]],
        ignore_index=True,
    ).astype(object)
    frame["_ind"] = frame["_ind"].where(frame["_ind"].notna(), "")
    for c in ("exam_type", "quantity"):
        frame[c] = frame[c].astype(object)
    lv = levels.rename(
        columns={"patient_group": "_pg", "clinical_indication": "level_clinical_indication"}
    )
    merged = frame.merge(lv, on=["exam_type", "quantity", "_pg"], how="inner", sort=False)
    level_indication = merged["level_clinical_indication"].astype(object)
    applies = (level_indication == "") | (level_indication == merged["_ind"])
    merged = merged.loc[applies.to_numpy()].copy()
    merged["_specific"] = (merged["level_clinical_indication"] != "").astype(int)
    merged = merged.sort_values(["_group", "level_set", "_band", "_specific"], kind="mergesort")
    merged = merged.drop_duplicates(["_group", "level_set"], keep="last")
    merged["level_clinical_indication"] = merged["level_clinical_indication"].where(
        merged["level_clinical_indication"] != "", None
    )
    return merged.drop(columns=["_pg", "_ind", "_specific", "_band"])


def _group_labels(patient_groups: pd.Series, bands: PatientGroups) -> np.ndarray:
    """The review's label of each row's patient group (None for the main group), each distinct
    group labelled once."""
    codes, uniques = pd.factorize(patient_groups.astype(object), use_na_sentinel=True)
    labels = np.array([bands.label(str(g)) for g in uniques] + [None], dtype=object)
    return labels[codes]


def _investigation_units(
    units: pd.DataFrame,
    levels: pd.DataFrame,
    upper: np.ndarray,
    codes: np.ndarray,
    params: ReviewParameters,
) -> pd.DataFrame:
    """Units with their strictest applicable level and their group's upper percentile."""
    frame = units.copy(deep=False)  # new columns only: the units' own stay shared (copy on write)
    frame["percentile_value"] = upper[codes] if len(codes) else np.zeros(0)
    frame["percentile"] = params.upper_percentile
    # the strictest applicable level of each distinct (exam type, quantity, group, indication)
    key_codes, keys = group_codes(
        frame, ["exam_type", "quantity", "patient_group", "clinical_indication"]
    )
    keys["_group"] = np.arange(len(keys))
    applied = _applicable_levels(keys, levels)
    strictest = applied.sort_values(["_group", "reference_level", "level_set"], kind="mergesort")
    strictest = strictest.drop_duplicates("_group", keep="first").set_index("_group")
    position = strictest.index.get_indexer(key_codes)  # -1 (no level) takes the padding
    frame["level_value"] = np.append(strictest["reference_level"].to_numpy(np.float64), np.nan)[
        position
    ]
    for c in ("level_set", "level_version"):
        frame[c] = np.append(strictest[c].to_numpy(dtype=object), np.array([None], object))[
            position
        ]
    if params.investigate_standard_only:
        low, high = params.weight_window_kg
        w = frame["patient_weight_kg"].to_numpy(dtype=np.float64)
        frame = frame.loc[(w >= low) & (w <= high)]
    return frame


#: Ratio series -> (reported column, reconstructed column) of the events table: the device's
#: DAP over the beam model's, the device's AGD (Organ Dose of the breast) over the Dance D_G.
RATIO_COLUMNS: MappingProxyType[str, tuple[str, str]] = MappingProxyType(
    {
        fl.DAP_RATIO_QUANTITY: ("dap_gy_cm2", "recon_dap_gy_cm2"),
        fl.MGD_RATIO_QUANTITY: ("mgd_mgy", "recon_mgd_mgy"),
    }
)
#: The fewest preceding months an MGD-ratio baseline is made of (:mod:`.ratio_baseline`).
MGD_RATIO_MIN_BASELINE_MONTHS = 3


def _ratios(events: pd.DataFrame, group_by: Sequence[str]) -> pd.DataFrame:
    """Monthly medians of reported / reconstructed per location, one series per
    :data:`RATIO_COLUMNS` entry (``exam_type`` None); events lacking either figure are left out.

    .. math:: r_{room, month} = \\operatorname{median}_i (x_{reported,i} / x_{reconstructed,i})
    """
    parts = []
    for quantity, (reported, reconstructed) in RATIO_COLUMNS.items():
        x = events[reported].to_numpy(dtype=np.float64)
        recon = events[reconstructed].to_numpy(dtype=np.float64)
        both = (x > 0) & (recon > 0)
        frame = events.loc[both, [*LOCATION_KEYS, "month_key"]].copy()
        frame["ratio"] = x[both] / recon[both]
        frame = _with_location_keys(frame, group_by)
        out = _median_by(frame, [*LOCATION_KEYS, "month_key"], "ratio")
        out["month"] = month_labels(out["month_key"])
        out["exam_type"] = None
        out["quantity"] = quantity
        parts.append(out.loc[:, list(MONTHLY_COLUMNS)])
    return pd.concat(parts, ignore_index=True)


def _ratio_flags(
    ratios: pd.DataFrame, series: pd.DataFrame, params: ReviewParameters
) -> list[fl.Flag]:
    """The reported / reconstructed ratio flags: the period's DAP ratios against 1, the MGD
    ratios against their room's baseline (from ``series``, the change-point series)."""
    return fl.dap_ratio_out_of_tolerance(
        ratios.loc[(ratios["quantity"] == fl.DAP_RATIO_QUANTITY).to_numpy()],
        tolerance=params.dap_ratio_tolerance,
        min_events=params.dap_ratio_min_events,
    ) + fl.mgd_ratio_off_baseline(
        _mgd_ratio_baselines(series, params),
        tolerance=params.mgd_ratio_tolerance,
        min_events=params.mgd_ratio_min_events,
    )


def _mgd_ratio_baselines(series: pd.DataFrame, params: ReviewParameters) -> pd.DataFrame:
    """The period's MGD-ratio months with their room's baseline (:mod:`.ratio_baseline`), from
    the change-point series (history and period, thin months dropped)."""
    mgd = series.loc[(series["quantity"] == fl.MGD_RATIO_QUANTITY).to_numpy()]
    mgd = ratio_baselines(
        mgd,
        keys=list(LOCATION_KEYS),
        months=params.mgd_ratio_baseline_months,
        min_months=MGD_RATIO_MIN_BASELINE_MONTHS,
    )
    return mgd.loc[(mgd["month"] >= f"{params.period.start:%Y-%m}").to_numpy()]


def _median_by(frame: pd.DataFrame, keys: list[str], column: str) -> pd.DataFrame:
    """The number of rows and the median of ``column`` per distinct ``keys``."""
    codes, table = group_codes(frame, keys)
    values = frame[column].to_numpy(dtype=np.float64)
    table["n"] = np.bincount(codes, minlength=len(table)).astype(np.int64)
    if np.isnan(values).any():  # the median leaves NaN out (the units and ratios have none)
        table["median"] = pd.Series(values).groupby(codes, sort=True).median().to_numpy()
    else:
        table["median"] = group_medians(codes, values, len(table))
    return table


def _monthly_medians(units: pd.DataFrame, params: ReviewParameters) -> pd.DataFrame:
    """Monthly medians of the main groups: adults (standard-size ones under the ``standard``
    basis) and, for mammography, the views in the review's compressed-thickness band (a
    breast is compared by its thickness, not the patient's weight: ICRP 135). Children in
    bands have series of their own in no history table yet."""
    group = units["patient_group"].astype(object)
    in_band = (group == band_name(params.breast_thickness_band_mm)).to_numpy()
    main = group.isna().to_numpy() | in_band
    if params.basis == "standard":
        low, high = params.weight_window_kg
        w = units["patient_weight_kg"].to_numpy(dtype=np.float64)
        main &= ((w >= low) & (w <= high)) | in_band
    keys = [*LOCATION_KEYS, "exam_type", "quantity", "month_key"]
    out = _median_by(units.loc[main, [*keys, "value"]], keys, "value")
    out["month"] = month_labels(out["month_key"])
    return out.loc[:, list(MONTHLY_COLUMNS)]


def _check_history(history: pd.DataFrame) -> pd.DataFrame:
    missing = [c for c in MONTHLY_COLUMNS if c not in history.columns]
    if missing:
        raise ReviewInputError(f"the history table lacks the column(s) {', '.join(missing)}")
    out = history.loc[:, list(MONTHLY_COLUMNS)].copy()
    months = out["month"].astype(str)
    if not months.str.fullmatch(r"\d{4}-\d{2}").all():
        raise ReviewInputError("history month values must be YYYY-MM")
    out["month"] = months
    for c in ("site", "room", "device", "exam_type", "quantity"):
        out[c] = out[c].astype(object).where(out[c].notna(), None)
    try:
        out["n"] = pd.to_numeric(out["n"]).astype(np.int64)
        out["median"] = pd.to_numeric(out["median"]).astype(np.float64)
    except (ValueError, TypeError) as exc:
        raise ReviewInputError(f"history n and median must be numeric: {exc}") from exc
    return out


def _changepoint_series(
    monthly: pd.DataFrame,
    history: pd.DataFrame | None,
    catalogue: ExamCatalogue,
    params: ReviewParameters,
) -> pd.DataFrame:
    """History (within the lookback, before the period) plus this period, thin months dropped."""
    frames = [monthly]
    if history is not None and len(history):
        past = _check_history(history)
        first = _month_key(params.period.start)
        keys = np.array([int(m[:4]) * 12 + int(m[5:7]) - 1 for m in past["month"]], dtype=np.int64)
        keep = (keys < first) & (keys >= first - params.changepoint_lookback_months)
        past = _with_location_keys(past.loc[keep].copy(), params.group_by)
        frames.insert(0, past)
    series = pd.concat(frames, ignore_index=True) if len(frames) > 1 else monthly.copy()
    group_of = {t.exam_type: t.modality_group for t in catalogue}
    minimum = dict(params.minimum_samples)
    # months thinner than the group's minimum sample (unknown exam types: never enough) are dropped
    needed = series["exam_type"].map(group_of).map(minimum).fillna(np.iinfo(np.int64).max)
    needed = needed.to_numpy(dtype=np.float64)
    for quantity, least in (
        (fl.DAP_RATIO_QUANTITY, params.dap_ratio_min_events),
        (fl.MGD_RATIO_QUANTITY, params.mgd_ratio_min_events),
    ):
        needed = np.where((series["quantity"] == quantity).to_numpy(), least, needed)
    series = series.loc[series["n"].to_numpy() >= needed]
    return series.drop_duplicates([*LOCATION_KEYS, "exam_type", "quantity", "month"], keep="last")


def _studies_that_may_flag(events: pd.DataFrame, params: ReviewParameters) -> np.ndarray:
    """The events of the studies a study-level flag can concern: those with no dose value on any
    event (``no_dose_data``) and those with an event of an SRDL modality (``srdl_exceeded``
    looks at studies whose first modality is one). The study table of these events has the same
    rows for these studies as the study table of all events."""
    study = events["study_code"].to_numpy()
    if len(study) == 0:
        return np.zeros(0, dtype=bool)
    n_studies = int(study.max()) + 1
    has_dose = events.loc[:, list(DOSE_COLUMNS)].notna().to_numpy().any(axis=1)
    keep = np.bincount(study, weights=has_dose, minlength=n_studies) == 0
    if params.srdl_thresholds:
        srdl = events["modality"].isin(list(params.srdl_modalities)).to_numpy()
        keep |= np.bincount(study, weights=srdl, minlength=n_studies) > 0
    return keep[study]


def _units(
    events: pd.DataFrame,
    params: ReviewParameters,
    catalogue: ExamCatalogue,
    rules: MappingRules | None,
    bands: PatientGroups,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """The events of the period and scope, mapped, made into units (a study or an event) and
    put in their patient groups: what the group table and the monthly medians are made from.
    Returns the unmapped summary, the events in scope, the units with their location and the
    units with their location keys."""
    prepared = _select(prepare_events(events), params)
    missing_type = prepared["exam_type"].isna().to_numpy()
    if rules is not None and missing_type.any():  # the rules map each event on its own values
        mapped = map_events_with_indication(prepared.loc[missing_type], rules)
        for column in ("exam_type", "clinical_indication"):
            given = prepared[column].astype(object).to_numpy(copy=True)
            fill = missing_type & pd.isna(given)
            given[fill] = mapped[column].to_numpy()[pd.isna(given[missing_type])]
            filled = pd.Series(given, dtype=object)
            prepared[column] = pd.Categorical(filled.where(filled.notna(), None))
    unmapped = unmapped_summary(prepared)
    scoped = prepared
    if params.exam_types is not None:
        scoped = prepared.loc[prepared["exam_type"].isin(list(params.exam_types))].reset_index(
            drop=True
        )
    located = build_units(scoped, catalogue)  # each unit keeps its own location
    banding = {t.exam_type: t.paediatric_bands for t in catalogue}
    exam_types = located["exam_type"]
    if isinstance(exam_types.dtype, pd.CategoricalDtype):  # map the categories, not the rows
        per_code = np.array([banding.get(c, "") for c in exam_types.cat.categories] + [""], object)
        exam_banding = per_code[exam_types.cat.codes.to_numpy()]
    else:
        exam_banding = exam_types.astype(object).map(banding).to_numpy(dtype=object)
    groups_of_units = assign_patient_groups(
        bands,
        banding=exam_banding,
        age_years=located["patient_age_years"].to_numpy(dtype=np.float64),
        weight_kg=located["patient_weight_kg"].to_numpy(dtype=np.float64),
        paediatric_age_limit_years=params.paediatric_age_limit_years,
    )
    mammography = {t.exam_type for t in catalogue if t.modality_group == "mammography"}
    groups_of_units = assign_thickness_bands(
        groups_of_units,
        mammography=located["exam_type"].isin(list(mammography)).to_numpy(),
        thickness_mm=located["breast_thickness_mm"].to_numpy(dtype=np.float64),
        band_mm=params.breast_thickness_band_mm,
    )
    if params.ct_size_band_edges_cm:  # adult CT groups by patient size (.ct_size)
        ct = located["exam_type"].isin([t.exam_type for t in catalogue if t.modality_group == "ct"])
        dw = located["ct_dw_cm"].to_numpy(dtype=np.float64)
        edges = params.ct_size_band_edges_cm
        groups_of_units = assign_size_bands(
            groups_of_units, ct=ct.to_numpy(), dw_cm=dw, edges_cm=edges
        )
    names = [g.patient_group for g in bands] + list(SPECIAL_GROUPS)  # grouped by their codes
    names += [band_name(params.breast_thickness_band_mm), *THICKNESS_SPECIAL_GROUPS]
    if params.ct_size_band_edges_cm:
        names += [*size_band_names(params.ct_size_band_edges_cm), *SIZE_SPECIAL_GROUPS]
    located["patient_group"] = pd.Categorical(groups_of_units, categories=names)
    units = _with_location_keys(located.copy(deep=False), params.group_by)  # (copy on write)
    return unmapped, scoped, located, units


def monthly_history(
    events: pd.DataFrame,
    *,
    params: ReviewParameters,
    catalogue: ExamCatalogue | None = None,
    patient_groups: PatientGroups | None = None,
) -> pd.DataFrame:
    """The monthly medians of :func:`review`'s ``monthly_df`` alone (columns
    :data:`MONTHLY_COLUMNS`): the history of earlier months for change-points, without the
    group table, site values and flags a whole review makes (and so without levels)."""
    catalogue = catalogue or load_default_catalogue()
    bands = patient_groups if patient_groups is not None else load_default_patient_groups()
    _, scoped, _, units = _units(events, params, catalogue, None, bands)
    ratios = _ratios(scoped, params.group_by)
    return pd.concat([_monthly_medians(units, params), ratios], ignore_index=True)


def review(
    events: pd.DataFrame,
    *,
    levels: Sequence[ReferenceLevelSet],
    params: ReviewParameters,
    history_df: pd.DataFrame | None = None,
    catalogue: ExamCatalogue | None = None,
    rules: MappingRules | None = None,
    patient_groups: PatientGroups | None = None,
) -> ReviewResult:
    """Review the events of ``params.period`` against reference levels.

    Parameters
    ----------
    events : DataFrame
        The events table (contract in :mod:`beamaudit.api.review.events`); events outside the
        period or scope are ignored, so a superset may be passed.
    levels : sequence of ReferenceLevelSet
        Every version of every set (local and national); those in effect are chosen here.
    params : ReviewParameters
        Every parameter of the run.
    history_df : DataFrame, optional
        Earlier months' medians (columns :data:`MONTHLY_COLUMNS`, e.g. earlier results'
        ``monthly_df``) for change-points; months inside the period are ignored.
    catalogue : ExamCatalogue, optional
        Default: the shipped catalogue.
    rules : MappingRules, optional
        When given, events without an exam type are mapped with them first (mapped ones are kept),
        and so is their clinical indication when the events carry none.
    patient_groups : PatientGroups, optional
        The paediatric bands. Default: the shipped ones (ICRP 135, EC RP 185).

    Returns
    -------
    ReviewResult

    Raises
    ------
    ReviewInputError
        The events or history table breaks its contract.
    ReviewError
        Inconsistent level sets.
    """
    catalogue = catalogue or load_default_catalogue()
    bands = patient_groups if patient_groups is not None else load_default_patient_groups()
    in_effect = levels_in_effect(levels, params.effective_levels_on)
    level_rows = levels_table(in_effect, params.effective_levels_on)
    unmapped, scoped, located, units = _units(events, params, catalogue, rules, bands)
    groups, codes, upper = _group_table(units, level_rows, catalogue, params, bands)
    sites = site_values(
        groups,
        location_keys=params.group_by,
        min_rooms=params.min_rooms_for_local_level,
        confidence_level=params.confidence_level,
    )
    names = {t.exam_type: t.name for t in catalogue}  # the reasons name exams as people do
    flags: list[fl.Flag] = []
    flags += fl.groups_above_level(groups, exam_names=names)
    investigated = _investigation_units(located, level_rows, upper, codes, params)
    investigated = investigated.assign(
        patient_group_label=_group_labels(investigated["patient_group"], bands)
    )
    flags += fl.exams_above_investigation_level(
        investigated,
        multiple=params.investigation_multiple,
        above_percentile=params.investigate_above_percentile,
        max_per_group=params.max_exam_flags_per_group,
        exam_names=names,
    )
    studies = study_table(
        scoped.loc[_studies_that_may_flag(scoped, params)], list(params.srdl_thresholds)
    )
    fluoro = studies.loc[studies["modality"].isin(list(params.srdl_modalities))]
    flags += fl.srdl_exceeded(fluoro, thresholds=params.srdl_thresholds, exam_names=names)
    ratios = _ratios(scoped, params.group_by)
    monthly = pd.concat([_monthly_medians(units, params), ratios], ignore_index=True)
    series = _changepoint_series(monthly, history_df, catalogue, params)
    flags += _ratio_flags(ratios, series, params)
    flags += fl.changepoints(
        series,
        series_keys=[*LOCATION_KEYS, "exam_type", "quantity"],
        k=params.cusum_k,
        h=params.cusum_h,
        baseline_points=params.cusum_baseline_months,
        min_relative_change=params.changepoint_min_relative_change,
        exam_names=names,
    )
    flags += fl.deviation_index_out_of_range(
        scoped,
        di_range=params.di_range,
        max_per_group=params.max_exam_flags_per_group,
        exam_names=names,
    )
    flags += fl.no_dose_data(studies, exam_names=names)
    flags += fl.unknown_exam_types(scoped, {t.exam_type for t in catalogue})
    flags += fl.unmapped_events(unmapped)
    flags += fl.low_dose_review(
        groups,
        sites,
        fraction=params.low_dose_fraction,
        use_site_percentile=params.low_dose_below_site_p25,
        exam_names=names,
    )
    return ReviewResult(
        period=params.period,
        parameters=params,
        groups_df=groups,
        flags=tuple(fl.sort_flags(flags)),
        unmapped_df=unmapped,
        monthly_df=monthly,
        level_sets=tuple(s.describe() for s in in_effect),
        catalogue_fingerprint=catalogue.fingerprint(),
        software_version=beamaudit.__version__,
        n_events=len(scoped),
        site_values_df=sites,
        patient_groups=bands.describe(),
    )
