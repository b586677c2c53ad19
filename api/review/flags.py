"""Flags of a review: what needs attention, each with its reason and the numbers behind it.

Each flag kind has its own function taking a plain table (documented per function) and returning a
list of :class:`Flag`. The functions are vectorised: the table is filtered with array operations and
a :class:`Flag` is built only for the rows that are flagged.

Kinds, in the order results list them:

=================================  ========  =======================================================
kind                               severity  fires when
=================================  ========  =======================================================
``group_above_level``              action /  a group's median is above a local or national level:
                                   warning   ``action`` if the confidence interval's lower bound is
                                             above it, ``warning`` if the interval includes it
``exam_above_investigation_level`` warning   one examination above ``multiple`` x the strictest
                                             applicable level, or above its group's upper percentile
``srdl_exceeded``                  action    a fluoroscopy study above an NCRP 168 substantial
                                             radiation dose level
``dap_ratio_out_of_tolerance``     warning   a room's monthly median of reported / reconstructed
                                             DAP is outside 1 +/- tolerance (a meter or
                                             configuration fault)
``mgd_ratio_off_baseline``         warning   a mammography room's monthly median of the device's AGD
                                             / reconstructed D_G is far from the room's own usual
                                             ratio (a change in the unit's dosimetry or beam)
``changepoint``                    warning   a CUSUM change in a room's monthly median, DAP ratio
                                             or MGD ratio
``deviation_index_out_of_range``   warning   an exposure's deviation index outside the range
``no_dose_data``                   warning   a study whose events carry no dose value at all
``unknown_exam_type``              warning   events carry an exam type the catalogue does not know
``unmapped_events``                info      events that map to no exam type (listed for mapping)
``low_dose_review``                info      a group's median is below a fraction of its lowest
                                             level, or below the site's 25th percentile of room
                                             medians: review image quality (optimisation works
                                             both ways)
=================================  ========  =======================================================

Flags about a group carry its clinical indication and patient group (``clinical_indication``,
``patient_group``; ``None`` for the main group of adults and patients of unrecorded age).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
import pandas as pd

from beamaudit.api.review.changepoint import cusum
from beamaudit.api.review.events import group_codes
from beamaudit.api.review.quantities import QUANTITIES

__all__ = [
    "DAP_RATIO_QUANTITY",
    "FLAG_KINDS",
    "GROUP_KEYS",
    "MGD_RATIO_QUANTITY",
    "NCRP168_SRDL",
    "TG116_DI_RANGE",
    "Flag",
    "changepoints",
    "dap_ratio_out_of_tolerance",
    "deviation_index_out_of_range",
    "exams_above_investigation_level",
    "groups_above_level",
    "low_dose_review",
    "mgd_ratio_off_baseline",
    "no_dose_data",
    "sort_flags",
    "srdl_exceeded",
    "unknown_exam_types",
    "unmapped_events",
]

FlagKind = Literal[
    "group_above_level",
    "exam_above_investigation_level",
    "srdl_exceeded",
    "dap_ratio_out_of_tolerance",
    "mgd_ratio_off_baseline",
    "changepoint",
    "deviation_index_out_of_range",
    "no_dose_data",
    "unknown_exam_type",
    "unmapped_events",
    "low_dose_review",
]
FLAG_KINDS: tuple[FlagKind, ...] = (
    "group_above_level",
    "exam_above_investigation_level",
    "srdl_exceeded",
    "dap_ratio_out_of_tolerance",
    "mgd_ratio_off_baseline",
    "changepoint",
    "deviation_index_out_of_range",
    "no_dose_data",
    "unknown_exam_type",
    "unmapped_events",
    "low_dose_review",
)
Severity = Literal["action", "warning", "info"]

#: The keys of a review group (the first columns of the group table).
GROUP_KEYS = (
    "site",
    "room",
    "device",
    "exam_type",
    "clinical_indication",
    "patient_group",
    "quantity",
)

#: Name of the reported / reconstructed DAP ratio series in monthly tables.
DAP_RATIO_QUANTITY = "dap_ratio"
#: Name of the device's AGD / reconstructed D_G ratio series (mammography) in monthly tables.
MGD_RATIO_QUANTITY = "mgd_ratio"
#: What a ratio series compares, for the reasons.
_RATIO_WHAT = MappingProxyType(
    {
        DAP_RATIO_QUANTITY: "median ratio of reported to reconstructed DAP",
        MGD_RATIO_QUANTITY: "median ratio of the device's AGD to the reconstructed D_G",
    }
)

#: NCRP Report 168 (2010) substantial radiation dose levels, from memory (PUBLISHED-VALUES h, high):
#: K_a,r 5 Gy, P_KA 500 Gy·cm² (assumes a 100 cm² field at the skin), fluoroscopy time 60 min. The
#: SRDL for peak skin dose (3 Gy) needs a skin-dose estimate the events table does not carry.
NCRP168_SRDL: MappingProxyType[str, float] = MappingProxyType(
    {"reference_point_air_kerma_mgy": 5000.0, "dap_gy_cm2": 500.0, "fluoro_time_s": 3600.0}
)
_SRDL_LABEL = MappingProxyType(
    {
        "reference_point_air_kerma_mgy": ("K_a,r", "mGy"),
        "dap_gy_cm2": ("DAP", "Gy·cm²"),
        "fluoro_time_s": ("fluoroscopy time", "s"),
    }
)

#: Deviation-index range outside which an exposure is flagged: AAPM TG-116 (2009) action table as
#: recalled (PUBLISHED-VALUES k, medium): DI > +3 excessive exposure, DI < -3 repeat; configurable.
TG116_DI_RANGE = (-3.0, 3.0)

Number = float | int | str | None


@dataclass(frozen=True, slots=True)
class Flag:
    """One flag: what, how serious, why (a sentence with the numbers), and what it concerns.

    ``numbers`` holds the figures the reason quotes (values in the units their names carry).
    The concern fields that do not apply are ``None``; ``date`` is an ISO date or a ``YYYY-MM``
    month (the month of a DAP ratio, the month a change-point starts).
    """

    kind: FlagKind
    severity: Severity
    reason: str
    numbers: Mapping[str, Number] = field(default_factory=dict)
    event_id: int | None = None
    study_uid: str | None = None
    site: str | None = None
    room: str | None = None
    device: str | None = None
    exam_type: str | None = None
    quantity: str | None = None
    date: str | None = None
    clinical_indication: str | None = None
    patient_group: str | None = None

    def concerns(self) -> dict[str, Any]:
        """The non-empty concern fields."""
        fields = (
            "event_id",
            "study_uid",
            "site",
            "room",
            "device",
            "exam_type",
            "quantity",
            "date",
            "clinical_indication",
            "patient_group",
        )
        return {f: getattr(self, f) for f in fields if getattr(self, f) is not None}

    def to_json_dict(self) -> dict[str, Any]:
        """Plain JSON types only (NaN becomes ``None``)."""
        return {
            "kind": self.kind,
            "severity": self.severity,
            "reason": self.reason,
            "numbers": {k: _json_number(v) for k, v in self.numbers.items()},
            "concerns": self.concerns(),
        }


def sort_flags(flags: Sequence[Flag]) -> list[Flag]:
    """Flags in a stable order: by kind (as :data:`FLAG_KINDS`), then by what they concern."""
    rank = {k: i for i, k in enumerate(FLAG_KINDS)}

    def key(f: Flag) -> tuple[Any, ...]:
        return (
            rank[f.kind],
            f.site or "",
            f.room or "",
            f.device or "",
            f.exam_type or "",
            f.quantity or "",
            f.date or "",
            f.study_uid or "",
            -1 if f.event_id is None else f.event_id,
            f.clinical_indication or "",
            f.patient_group or "",
            f.reason,
        )

    return sorted(flags, key=key)


# ------------------------------------------------------------------------------------------ helpers
def _json_number(v: Number) -> Number:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def _sig(x: float, digits: int) -> str:
    """``x`` to ``digits`` significant figures, never in exponent form, trailing zeros dropped
    (integers of more digits are shown whole: 5200, not 5.2e+03)."""
    if x == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(x)))
    text = f"{x:.{max(digits - 1 - magnitude, 0)}f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def _fmt(x: float) -> str:
    """A number for a sentence: 3 significant figures."""
    if x is None or not math.isfinite(x):
        return "n/a"
    return _sig(x, 3)


def _str_or_none(v: object) -> str | None:
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return None
    return str(v)


def _int_or_none(v: object) -> int | None:
    if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
        return None
    return int(v)  # type: ignore[call-overload]


def _float(v: object) -> float:
    if v is None or v is pd.NA:
        return float("nan")
    return float(v)  # type: ignore[arg-type]


def _where(row: Mapping[str, Any]) -> str:
    parts = [
        f"{key} {value}"
        for key in ("room", "device", "site")
        if (value := _str_or_none(row.get(key))) is not None
    ]
    return (" in " + ", ".join(parts)) if parts else ""


def _fmt_apart(*values: float) -> list[str]:
    """Format numbers with 3 to 6 significant figures: as few as keep distinct values distinct."""
    finite = [v for v in values if math.isfinite(v)]
    for digits in range(3, 7):
        texts = [_sig(v, digits) if math.isfinite(v) else "n/a" for v in values]
        if len({_sig(v, digits) for v in finite}) == len(set(finite)):
            break
    return texts


def _unit(quantity: str) -> str:
    return QUANTITIES[quantity].display_unit if quantity in QUANTITIES else ""


def _label(quantity: str) -> str:
    return QUANTITIES[quantity].label if quantity in QUANTITIES else quantity


def _concern(row: Mapping[str, Any]) -> dict[str, Any]:
    return {
        "site": _str_or_none(row.get("site")),
        "room": _str_or_none(row.get("room")),
        "device": _str_or_none(row.get("device")),
        "exam_type": _str_or_none(row.get("exam_type")),
        "clinical_indication": _str_or_none(row.get("clinical_indication")),
        "patient_group": _str_or_none(row.get("patient_group")),
    }


def _who(row: Mapping[str, Any]) -> str:
    """Whom a group's median is of: ICRP 135's standard-size patients, or all its patients."""
    return "standard-size patients" if row.get("basis") == "standard" else "patients"


def _exam_name(code: object, names: Mapping[str, str] | None) -> str | None:
    """The catalogue's name of an exam type code (the code when the catalogue has no name)."""
    text = _str_or_none(code)
    if text is None:
        return None
    return (names or {}).get(text) or text


def _exam_text(row: Mapping[str, Any], names: Mapping[str, str] | None = None) -> str:
    """The examination by its catalogue name, with its clinical indication and patient group in
    words: ``CT head (acute stroke; children 1-<6 years)``; ``exam type not mapped`` for an
    event that maps to none. ``names`` maps exam type codes to the catalogue's names (without
    it, or for a code it lacks, the code is shown); the patient group is the row's
    ``patient_group_label`` (the review's label) where the row has a ``patient_group``."""
    indication = _str_or_none(row.get("clinical_indication"))
    parts = [
        text
        for text in (
            indication.replace("_", " ") if indication else None,
            _str_or_none(row.get("patient_group_label"))
            if _str_or_none(row.get("patient_group")) is not None
            else None,
        )
        if text
    ]
    name = _exam_name(row.get("exam_type"), names) or "exam type not mapped"
    return name + (f" ({'; '.join(parts)})" if parts else "")


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """Rows as dicts, built from whole columns (``to_dict`` boxes every cell and is slow)."""
    columns = {c: frame[c].tolist() for c in frame.columns}
    names = list(columns)
    return [dict(zip(names, row, strict=True)) for row in zip(*columns.values(), strict=True)]


# --------------------------------------------------------------------------------------- the kinds
def groups_above_level(
    groups: pd.DataFrame, *, exam_names: Mapping[str, str] | None = None
) -> list[Flag]:
    """Groups whose median is above a reference level.

    Parameters
    ----------
    groups : DataFrame
        The review's group table (:data:`beamaudit.api.review.run.GROUP_COLUMNS`); used columns:
        ``status``, ``site``/``room``/``device`` (those present), ``exam_type``, ``quantity``,
        ``basis``, ``n_used``, ``median``, ``ci_low``, ``ci_high``, ``ci_coverage``,
        ``reference_level``, ``ratio_to_level``, ``level_set``, ``level_kind``, ``level_version``,
        and ``clinical_indication``, ``patient_group`` with ``patient_group_label`` where present.
    exam_names : mapping, optional
        Exam type code -> the catalogue's name, for the reason (the code where it has none).

    Returns
    -------
    list of Flag
        ``action`` for status ``above_level``, ``warning`` for ``possibly_above``.
    """
    flagged = groups[groups["status"].isin(["above_level", "possibly_above"])]
    flags = []
    for row in _records(flagged):
        quantity = row["quantity"]
        unit = _unit(quantity)
        certain = row["status"] == "above_level"
        who = _who(row)
        coverage = _float(row["ci_coverage"])
        median, low, high, level = _fmt_apart(
            _float(row["median"]),
            _float(row["ci_low"]),
            _float(row["ci_high"]),
            _float(row["reference_level"]),
        )
        if math.isnan(coverage):
            ci_text = (
                "no confidence interval exists at this sample size, so the excess is not certain"
            )
        else:
            ci_text = (
                f"the {coverage:.0%} confidence interval of the median, {low} to {high} {unit}, "
                + (
                    "lies above the level"
                    if certain
                    else "includes the level, so the excess is not certain"
                )
            )
        reason = (
            f"Median {_label(quantity)} {median} {unit} of {_exam_text(row, exam_names)}"
            f"{_where(row)} ({row['n_used']} {who}) is {row['ratio_to_level']:.3g} × the "
            f"{row['level_kind']} level {level} {unit} "
            f"({row['level_set']}, version {row['level_version']}); {ci_text}."
        )
        flags.append(
            Flag(
                kind="group_above_level",
                severity="action" if certain else "warning",
                reason=reason,
                numbers={
                    "median": _float(row["median"]),
                    "ci_low": _float(row["ci_low"]),
                    "ci_high": _float(row["ci_high"]),
                    "ci_coverage": coverage,
                    "n_used": int(row["n_used"]),
                    "reference_level": _float(row["reference_level"]),
                    "ratio_to_level": _float(row["ratio_to_level"]),
                    "level_set": row["level_set"],
                    "level_version": row["level_version"],
                },
                quantity=quantity,
                **_concern(row),
            )
        )
    return flags


def _limit_per_group(
    frame: pd.DataFrame, keys: list[str], score: np.ndarray, limit: int | None
) -> tuple[np.ndarray, pd.DataFrame]:
    """Positions of at most ``limit`` rows per group of ``keys`` (highest ``score`` first, then
    frame order), in frame order, and the groups that had more (their keys, ``n`` and ``limit``)."""
    n = len(frame)
    if limit is None or n == 0:
        return np.arange(n), pd.DataFrame(columns=[*keys, "n"])
    codes, table = group_codes(frame, keys)
    order = np.lexsort((np.arange(n), -score, codes))
    counts = np.bincount(codes, minlength=len(table))
    starts = np.cumsum(counts) - counts
    rank = np.arange(n) - starts[codes[order]]
    kept = np.sort(order[rank < limit])
    over = counts > limit
    table = table.loc[over].reset_index(drop=True)
    table["n"] = counts[over]
    return kept, table


def _overflow_flags(
    overflow: pd.DataFrame,
    kind: FlagKind,
    limit: int | None,
    what: str,
    exam_names: Mapping[str, str] | None,
) -> list[Flag]:
    flags = []
    for row in _records(overflow):
        quantity = _str_or_none(row.get("quantity"))
        name = _exam_name(row.get("exam_type"), exam_names)
        exam = f"examinations of {name}" if name else "examinations without an exam type"
        about = f" ({_label(quantity)})" if quantity else ""
        flags.append(
            Flag(
                kind=kind,
                severity="warning",
                reason=(
                    f"{int(row['n'])} {exam}{_where(row)}{about} {what}; the "
                    f"{limit} most extreme are flagged one by one (limit per group: {limit})."
                ),
                numbers={"n_exceeding": int(row["n"]), "n_listed": limit},
                quantity=quantity,
                **_concern(row),
            )
        )
    return flags


def exams_above_investigation_level(
    units: pd.DataFrame,
    *,
    multiple: float | None,
    above_percentile: bool,
    max_per_group: int | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> list[Flag]:
    """Single examinations above an investigation level.

    An examination (an event for projection-level types, a study for examination-level ones) is
    flagged when its value exceeds ``multiple`` x the strictest (lowest) applicable reference level,
    or, with ``above_percentile``, when it exceeds its group's upper percentile.

    Parameters
    ----------
    units : DataFrame
        One row per examination and quantity with ``value``, ``quantity``, ``exam_type``,
        ``event_id`` (for events, else NA), ``study_uid``, ``site``/``room``/``device`` (those
        present), ``patient_weight_kg``, ``level_value``, ``level_set``, ``level_version``
        (NaN/None without a level) and ``percentile_value`` with ``percentile`` (the group's
        upper percentile and which percentile it is); ``clinical_indication``, ``patient_group``
        and ``patient_group_label`` name the examination's group in the reason where present.
    multiple : float or None
        Multiple of the level; ``None`` switches the level rule off.
    above_percentile : bool
        Switches the percentile rule on.
    max_per_group : int or None
        At most this many examinations per group (location, exam type, quantity) get a flag of
        their own, the highest values first; a group with more gets one more flag counting them.
        ``None``: no limit.
    exam_names : mapping, optional
        Exam type code -> the catalogue's name, for the reason (the code where it has none).
    """
    value = units["value"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore"):
        by_level = (
            value > multiple * units["level_value"].to_numpy(dtype=np.float64)
            if multiple is not None
            else np.zeros(len(units), dtype=bool)
        )
        by_pct = (
            value > units["percentile_value"].to_numpy(dtype=np.float64)
            if above_percentile
            else np.zeros(len(units), dtype=bool)
        )
    hit = by_level | by_pct
    exceeding = units.loc[hit]
    keys = [c for c in ("site", "room", "device", "exam_type", "quantity") if c in units.columns]
    kept, overflow = _limit_per_group(exceeding, keys, value[hit], max_per_group)
    flags = _overflow_flags(
        overflow,
        "exam_above_investigation_level",
        max_per_group,
        "exceed the investigation level",
        exam_names,
    )
    for row, lvl, pct in zip(
        _records(exceeding.iloc[kept]), by_level[hit][kept], by_pct[hit][kept], strict=True
    ):
        quantity = row["quantity"]
        unit = _unit(quantity)
        event_id = _int_or_none(row.get("event_id"))
        what = f"exposure {event_id}" if event_id is not None else f"study {row['study_uid']}"
        reasons = []
        if lvl:
            reasons.append(
                f"{_float(row['value']) / _float(row['level_value']):.2f} × the level "
                f"{_fmt(row['level_value'])} {unit} ({row['level_set']}, version "
                f"{row['level_version']}), above the investigation level of {_fmt(multiple or 0)} ×"
            )
        if pct:
            reasons.append(
                f"above the group's {_fmt(row['percentile'])}th percentile "
                f"{_fmt(row['percentile_value'])} {unit}"
            )
        weight = _float(row.get("patient_weight_kg"))
        weight_text = (
            f"patient weight {_fmt(weight)} kg" if not math.isnan(weight) else "weight not recorded"
        )
        reason = (
            f"{_label(quantity)} {_fmt(row['value'])} {unit} of {what} "
            f"({_exam_text(row, exam_names)}{_where(row)}; {weight_text}) is "
            + " and ".join(reasons)
            + "."
        )
        flags.append(
            Flag(
                kind="exam_above_investigation_level",
                severity="warning",
                reason=reason,
                numbers={
                    "value": _float(row["value"]),
                    "reference_level": _float(row["level_value"]),
                    "investigation_multiple": multiple,
                    "percentile": _float(row["percentile"]) if above_percentile else None,
                    "percentile_value": _float(row["percentile_value"])
                    if above_percentile
                    else None,
                    "patient_weight_kg": weight,
                },
                event_id=event_id,
                study_uid=_str_or_none(row.get("study_uid")),
                quantity=quantity,
                **_concern(row),
            )
        )
    return flags


def srdl_exceeded(
    studies: pd.DataFrame,
    *,
    thresholds: Mapping[str, float],
    exam_names: Mapping[str, str] | None = None,
) -> list[Flag]:
    """Fluoroscopy studies above an NCRP 168 substantial radiation dose level.

    Parameters
    ----------
    studies : DataFrame
        One row per study: ``study_uid``, ``site``/``room``/``device``, ``exam_type``, and the
        study totals of the columns named in ``thresholds`` (NaN when not recorded).
    thresholds : mapping
        Column name -> level, e.g. :data:`NCRP168_SRDL`; one flag per study lists every level
        exceeded (strictly above).
    exam_names : mapping, optional
        Exam type code -> the catalogue's name, for the reason (the code where it has none).
    """
    if len(studies) == 0 or not thresholds:
        return []
    masks = {}
    with np.errstate(invalid="ignore"):
        for column, level in thresholds.items():
            masks[column] = studies[column].to_numpy(dtype=np.float64) > level
    hit = np.logical_or.reduce(list(masks.values()))
    flags = []
    for position in np.flatnonzero(hit):
        row = studies.iloc[position]
        exceeded = [c for c in thresholds if masks[c][position]]
        parts = []
        numbers: dict[str, Number] = {}
        for c in exceeded:
            label, unit = _SRDL_LABEL.get(c, (c, ""))
            parts.append(f"{label} {_fmt(row[c])} {unit} > {_fmt(thresholds[c])} {unit}")
            numbers[c] = float(row[c])
            numbers[f"{c}_srdl"] = float(thresholds[c])
        reason = (
            f"Study {row['study_uid']} ({_exam_text(row, exam_names)}"
            f"{_where(row)}) exceeds the NCRP 168 substantial radiation dose level: "
            + "; ".join(parts)
            + ". Follow the patient up for possible skin effects as local procedure requires."
        )
        flags.append(
            Flag(
                kind="srdl_exceeded",
                severity="action",
                reason=reason,
                numbers=numbers,
                study_uid=str(row["study_uid"]),
                **_concern(row),
            )
        )
    return flags


def dap_ratio_out_of_tolerance(
    ratios: pd.DataFrame, *, tolerance: float, min_events: int
) -> list[Flag]:
    """Rooms whose monthly median of reported / reconstructed DAP is outside ``1 ± tolerance``.

    Parameters
    ----------
    ratios : DataFrame
        One row per room (and the other group keys present: ``site``, ``device``) and month with
        ``month`` (``YYYY-MM``), ``n`` (events with both values) and ``median``.
    tolerance : float
        Allowed relative deviation of the ratio from 1.
    min_events : int
        Months with fewer events are not judged.
    """

    def reason(row: Mapping[str, Any], m: float) -> str:
        return (
            f"Median ratio of reported to reconstructed DAP{_where(row)} in {row['month']} is "
            f"{m:.2f} over {int(row['n'])} exposures, outside 1 ± {tolerance:.2f}: the reported "
            f"DAP is {'higher' if m > 1 else 'lower'} than the beam model predicts; check the DAP "
            f"meter's calibration and the room's model configuration (filtration, tube output)."
        )

    return _ratio_flags(
        ratios.assign(reference=1.0),
        kind="dap_ratio_out_of_tolerance",
        quantity=DAP_RATIO_QUANTITY,
        tolerance=tolerance,
        min_events=min_events,
        reason=reason,
    )


def mgd_ratio_off_baseline(
    ratios: pd.DataFrame, *, tolerance: float, min_events: int
) -> list[Flag]:
    """Mammography rooms whose monthly median of the device's AGD / reconstructed D_G is far from
    the room's own usual ratio.

    Units use different dosimetry methods for the average glandular dose they report (Dance's
    g, c, s with different tables or spectra, other breast models), so the ratio of their figure
    to beamaudit's Dance-method D_G is not 1 and differs between vendors; what matters is that it
    stays put. The reference is therefore the room's own baseline (see
    :func:`beamaudit.api.review.ratio_baseline.ratio_baselines`: the median of its preceding
    judged months), not 1. A month is flagged when

    .. math:: |r_m / r_b - 1| > t

    with :math:`r_m` the month's median ratio, :math:`r_b` the baseline and :math:`t` the
    tolerance (**project choice**, see ``ReviewParameters.mgd_ratio_tolerance``).

    Parameters
    ----------
    ratios : DataFrame
        One row per room (and the other group keys present) and month with ``month``
        (``YYYY-MM``), ``n`` (events with both values), ``median``, ``baseline`` (NaN: not
        judged, too little history) and ``baseline_months`` (months the baseline is made of).
    tolerance : float
        Allowed relative deviation of the month's median from the baseline.
    min_events : int
        Months with fewer events are not judged.
    """

    def reason(row: Mapping[str, Any], m: float) -> str:
        base = float(row["reference"])
        return (
            f"Median ratio of the device's AGD to the reconstructed D_G{_where(row)} in "
            f"{row['month']} is {m:.2f} over {int(row['n'])} views, "
            f"{'above' if m > base else 'below'} the room's usual {base:.2f} (median of its "
            f"{int(row['baseline_months'])} preceding months) by more than "
            f"{100 * tolerance:.0f} %: the unit's dose figure or its beam changed against the "
            f"model; check the unit's dosimetry settings, a recent service or software update, "
            f"and the room's model configuration (target, filter, tube output)."
        )

    return _ratio_flags(
        ratios.assign(reference=ratios["baseline"]),
        kind="mgd_ratio_off_baseline",
        quantity=MGD_RATIO_QUANTITY,
        tolerance=tolerance,
        min_events=min_events,
        reason=reason,
        numbers=lambda row: {
            "baseline_ratio": float(row["reference"]),
            "baseline_months": int(row["baseline_months"]),
        },
    )


def _ratio_flags(
    ratios: pd.DataFrame,
    *,
    kind: FlagKind,
    quantity: str,
    tolerance: float,
    min_events: int,
    reason: Callable[[Mapping[str, Any], float], str],
    numbers: Callable[[Mapping[str, Any]], dict[str, Number]] | None = None,
) -> list[Flag]:
    """One flag per row (room and month) whose ``median`` is off its ``reference`` by more than
    ``tolerance`` (relative), with at least ``min_events`` events; ``reason(row, median)`` words
    it and ``numbers(row)`` adds to its numbers. The reference is 1 for the DAP ratio and the
    room's baseline for the MGD ratio."""
    median = ratios["median"].to_numpy(dtype=np.float64)
    reference = ratios["reference"].to_numpy(dtype=np.float64)
    n = ratios["n"].to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        hit = (n >= min_events) & (reference > 0) & (np.abs(median / reference - 1.0) > tolerance)
    flags = []
    for row in _records(ratios[hit]):
        m = float(row["median"])
        figures: dict[str, Number] = {"median_ratio": m, "n": int(row["n"]), "tolerance": tolerance}
        figures.update(numbers(row) if numbers else {})
        flags.append(
            Flag(
                kind=kind,
                severity="warning",
                reason=reason(row, m),
                numbers=figures,
                date=str(row["month"]),
                quantity=quantity,
                site=_str_or_none(row.get("site")),
                room=_str_or_none(row.get("room")),
                device=_str_or_none(row.get("device")),
            )
        )
    return flags


def changepoints(
    monthly: pd.DataFrame,
    *,
    series_keys: Sequence[str],
    k: float,
    h: float,
    baseline_points: int,
    min_relative_change: float = 0.0,
    exam_names: Mapping[str, str] | None = None,
) -> list[Flag]:
    """Change-points by CUSUM (:func:`beamaudit.api.review.changepoint.cusum`) in monthly series.

    Parameters
    ----------
    monthly : DataFrame
        One row per series and month: the ``series_keys`` columns, ``month`` (``YYYY-MM``) and
        ``median``. Months too thin to use must already be dropped. ``quantity`` equal to
        :data:`DAP_RATIO_QUANTITY` or :data:`MGD_RATIO_QUANTITY` marks a ratio series.
    series_keys : sequence of str
        Columns that identify a series (e.g. site, room, exam_type, quantity).
    k, h, baseline_points
        CUSUM parameters (units of the series' robust SD; see :mod:`.changepoint`).
    min_relative_change : float
        A change whose level after differs from the level before by less than this fraction
        is not flagged: with a few months the robust SD is estimated from very few points and
        CUSUM alarms on shifts too small to matter to a dose audit.
    exam_names : mapping, optional
        Exam type code -> the catalogue's name, for the reason (the code where it has none).
    """
    flags: list[Flag] = []
    if len(monthly) == 0:
        return flags
    ordered = monthly.sort_values([*series_keys, "month"], kind="mergesort", na_position="first")
    for key, series in ordered.groupby(list(series_keys), dropna=False, sort=False, observed=True):
        values = series["median"].to_numpy(dtype=np.float64)
        months = series["month"].astype(str).to_list()
        result = cusum(values, k=k, h=h, baseline_points=baseline_points)
        context = dict(zip(series_keys, key if isinstance(key, tuple) else (key,), strict=True))
        quantity = str(context.get("quantity"))
        if quantity in _RATIO_WHAT:
            what, unit = _RATIO_WHAT[quantity], ""
        else:
            what = f"monthly median {_label(quantity)} of {_exam_text(context, exam_names)}"
            unit = " " + _unit(quantity)
        for change in result.changes:
            base = abs(change.before) if change.before else 0.0
            if base and abs(change.after - change.before) / base < min_relative_change:
                continue
            reason = (
                f"The {what}{_where(context)} shifted {change.direction} from about "
                f"{_fmt(change.before)}{unit} to about {_fmt(change.after)}{unit} starting "
                f"{months[change.index]} (CUSUM alarm in {months[change.alarm_index]}; k = {k:g}, "
                f"h = {h:g} robust SD, SD {_fmt(result.sigma)}{unit}, {len(values)} months)."
            )
            flags.append(
                Flag(
                    kind="changepoint",
                    severity="warning",
                    reason=reason,
                    numbers={
                        "before": change.before,
                        "after": change.after,
                        "sigma": result.sigma,
                        "k": k,
                        "h": h,
                        "cusum_value": change.cusum_value,
                        "change_month": months[change.index],
                        "alarm_month": months[change.alarm_index],
                        "n_months": len(values),
                    },
                    date=months[change.index],
                    quantity=quantity,
                    site=_str_or_none(context.get("site")),
                    room=_str_or_none(context.get("room")),
                    device=_str_or_none(context.get("device")),
                    exam_type=_str_or_none(context.get("exam_type")),
                )
            )
    return flags


def deviation_index_out_of_range(
    events: pd.DataFrame,
    *,
    di_range: tuple[float, float],
    max_per_group: int | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> list[Flag]:
    """Exposures whose deviation index (IEC 62494-1) lies outside ``di_range``.

    ``events`` needs ``event_id``, ``study_uid``, ``deviation_index``, ``exam_type`` and the
    location columns present. DI = 10 log10(EI/EI_T), so the detector received
    :math:`10^{DI/10}` times its target exposure. ``max_per_group`` limits the flags per location
    and exam type as in :func:`exams_above_investigation_level` (largest ``|DI|`` first).
    ``exam_names`` maps exam type codes to the catalogue's names for the reason.
    """
    low, high = di_range
    di = events["deviation_index"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore"):
        hit = (di < low) | (di > high)
    outside = events.loc[hit]
    keys = [c for c in ("site", "room", "device", "exam_type") if c in events.columns]
    kept, overflow = _limit_per_group(outside, keys, np.abs(di[hit]), max_per_group)
    flags = _overflow_flags(
        overflow,
        "deviation_index_out_of_range",
        max_per_group,
        f"have a deviation index outside {low:+g} to {high:+g}",
        exam_names,
    )
    for row in _records(outside.iloc[kept]):
        value = float(row["deviation_index"])
        factor = 10.0 ** (value / 10.0)
        reason = (
            f"Exposure {int(row['event_id'])} ({_exam_text(row, exam_names)}"
            f"{_where(row)}) has deviation index {value:+.1f}, outside {low:+g} to {high:+g}: the "
            f"detector received about {factor:.2g} × its target exposure "
            f"({'over' if value > high else 'under'}exposure)."
        )
        flags.append(
            Flag(
                kind="deviation_index_out_of_range",
                severity="warning",
                reason=reason,
                numbers={
                    "deviation_index": value,
                    "exposure_ratio_to_target": factor,
                    "di_low": low,
                    "di_high": high,
                },
                event_id=int(row["event_id"]),
                study_uid=_str_or_none(row.get("study_uid")),
                **_concern(row),
            )
        )
    return flags


def no_dose_data(
    studies: pd.DataFrame, *, exam_names: Mapping[str, str] | None = None
) -> list[Flag]:
    """Studies none of whose events carries any dose value.

    ``studies`` needs ``study_uid``, ``modality``, ``n_events``, ``has_dose`` (bool) and the
    location and ``exam_type`` columns present; ``exam_names`` maps exam type codes to the
    catalogue's names for the reason.
    """
    flagged = studies[~studies["has_dose"].to_numpy(dtype=bool)]
    flags = []
    for row in _records(flagged):
        reason = (
            f"Study {row['study_uid']} ({_str_or_none(row.get('modality')) or 'modality unknown'}, "
            f"{_exam_text(row, exam_names)}{_where(row)}) has "
            f"{int(row['n_events'])} event(s) and no dose value at all: check that the device "
            f"sends dose headers or a dose report."
        )
        flags.append(
            Flag(
                kind="no_dose_data",
                severity="warning",
                reason=reason,
                numbers={"n_events": int(row["n_events"])},
                study_uid=str(row["study_uid"]),
                **_concern(row),
            )
        )
    return flags


def unknown_exam_types(events: pd.DataFrame, known: Sequence[str] | set[str]) -> list[Flag]:
    """One flag per exam type in ``events["exam_type"]`` that the catalogue does not know."""
    exam = events["exam_type"]
    unknown = exam[exam.notna() & ~exam.isin(list(known))].astype(object)
    counts = unknown.value_counts(sort=False).sort_index()
    return [
        Flag(
            kind="unknown_exam_type",
            severity="warning",
            reason=(
                f"{int(n)} event(s) carry the exam type {name!r}, which the catalogue does not "
                f"know; they are left out of the groups until it is added or they are re-mapped."
            ),
            numbers={"n_events": int(n)},
            exam_type=str(name),
        )
        for name, n in counts.items()
    ]


def unmapped_events(summary: pd.DataFrame) -> list[Flag]:
    """One flag summarising the events that map to no exam type (from ``unmapped_summary``)."""
    if len(summary) == 0:
        return []
    n_events = int(summary["n_events"].sum())
    return [
        Flag(
            kind="unmapped_events",
            severity="info",
            reason=(
                f"{n_events} event(s) in {len(summary)} distinct combination(s) of header values "
                f"map to no exam type; they are listed for mapping and are not in any group."
            ),
            numbers={"n_events": n_events, "n_combinations": len(summary)},
        )
    ]


def low_dose_review(
    groups: pd.DataFrame,
    site_values: pd.DataFrame,
    *,
    fraction: float | None,
    use_site_percentile: bool,
    exam_names: Mapping[str, str] | None = None,
) -> list[Flag]:
    """Groups whose median is far below the levels or the site's other rooms: review image quality.

    IAEA GSR Part 3 (2014) asks for optimisation of protection, which a dose far below the level
    does not complete by itself: the images must still answer the clinical question. One flag per
    group that has a verdict (``n_used`` at least ``n_minimum``) when its median is below
    ``fraction`` x its strictest (lowest) applicable level, or below the 25th percentile of the
    room medians of its site (``site_values``'s ``room_median_p25``, present only where enough
    rooms contribute). The wording asks for an image-quality review and does not suggest raising
    the dose.

    Parameters
    ----------
    groups : DataFrame
        The review's group table (one row per group and level).
    site_values : DataFrame
        :func:`beamaudit.api.review.site_values.site_values` of the same groups.
    fraction : float or None
        Fraction of a level below which a median is flagged; ``None`` switches the rule off.
    use_site_percentile : bool
        Switches the site's 25th-percentile rule on.
    exam_names : mapping, optional
        Exam type code -> the catalogue's name, for the reason (the code where it has none).
    """
    if len(groups) == 0:
        return []
    rows = _strictest_level_rows(groups)
    median = rows["median"].to_numpy(dtype=np.float64)
    level = rows["reference_level"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore"):
        below_level = (
            median < fraction * level if fraction is not None else np.zeros(len(rows), bool)
        )
    p25 = np.full(len(rows), np.nan)
    n_rooms_of = np.zeros(len(rows), dtype=np.int64)
    if use_site_percentile and len(site_values) and len(rows):
        p25, n_rooms_of = _site_room_median_p25(rows, site_values)
    with np.errstate(invalid="ignore"):
        below_p25 = median < p25
    flagged = below_level | below_p25
    return [
        _low_dose_flag(
            row,
            hit_level=hit_level,
            fraction=fraction,
            site_p25=percentile_value if hit_p25 else None,
            n_rooms=int(n_rooms),
            exam_names=exam_names,
        )
        for row, hit_level, hit_p25, percentile_value, n_rooms in zip(
            _records(rows.loc[flagged]),
            below_level[flagged],
            below_p25[flagged],
            p25[flagged],
            n_rooms_of[flagged],
            strict=True,
        )
    ]


def _strictest_level_rows(groups: pd.DataFrame) -> pd.DataFrame:
    """One row per group that has a verdict (``n_used`` at least ``n_minimum``): its strictest
    (lowest) level decides, so a group far below an old, high level but near the local one is not
    "far below the level" (levels sort before no level)."""
    judged = groups.loc[groups["n_used"].to_numpy() >= groups["n_minimum"].to_numpy()]
    group_keys = [c for c in GROUP_KEYS if c in judged.columns]
    ordered = judged.sort_values(
        [*group_keys, "reference_level", "level_set"], kind="mergesort", na_position="last"
    )
    return ordered.drop_duplicates(group_keys, keep="first").copy()


def _site_room_median_p25(
    rows: pd.DataFrame, site_values: pd.DataFrame
) -> tuple[np.ndarray, np.ndarray]:
    """For each row, the 25th percentile of the room medians of its site (NaN where the site has
    none) and the number of rooms it comes from (0 where none), matched on site, exam type,
    clinical indication, patient group and quantity (a missing key matches a missing key)."""
    site_keys = ["site", "exam_type", "clinical_indication", "patient_group", "quantity"]

    def key_frame(frame: pd.DataFrame) -> pd.DataFrame:
        return pd.DataFrame(
            {k: frame[k].astype(object).where(frame[k].notna(), "\x00") for k in site_keys}
        )

    lookup = key_frame(site_values)
    lookup["_p25"] = site_values["room_median_p25"].to_numpy(dtype=np.float64)
    lookup["_n_rooms"] = site_values["n_rooms"].to_numpy(dtype=np.int64)
    merged = key_frame(rows).merge(lookup, on=site_keys, how="left", sort=False)
    p25 = merged["_p25"].to_numpy(dtype=np.float64)
    n_rooms_of = merged["_n_rooms"].fillna(0).to_numpy(dtype=np.int64)
    return p25, n_rooms_of


def _low_dose_flag(
    row: Mapping[str, Any],
    *,
    hit_level: bool,
    fraction: float | None,
    site_p25: float | None,
    n_rooms: int,
    exam_names: Mapping[str, str] | None,
) -> Flag:
    """The image-quality review flag of one group: below ``fraction`` x its strictest level
    (``hit_level``), below its site's 25th percentile ``site_p25`` of ``n_rooms`` room medians
    (not ``None``), or both."""
    quantity = row["quantity"]
    unit = _unit(quantity)
    parts = []
    numbers: dict[str, Number] = {"median": _float(row["median"]), "n_used": int(row["n_used"])}
    if hit_level:
        parts.append(
            f"{_float(row['ratio_to_level']):.2f} × the {row['level_kind']} level "
            f"{_fmt(_float(row['reference_level']))} {unit} ({row['level_set']}, version "
            f"{row['level_version']}), below {_fmt(fraction or 0)} × the level"
        )
        numbers.update(
            {
                "reference_level": _float(row["reference_level"]),
                "ratio_to_level": _float(row["ratio_to_level"]),
                "level_set": str(row["level_set"]),
                "level_version": str(row["level_version"]),
                "low_dose_fraction": fraction,
            }
        )
    if site_p25 is not None:
        parts.append(
            f"below the 25th percentile {_fmt(site_p25)} {unit} of the medians of "
            f"the site's {n_rooms} rooms"
        )
        numbers.update({"site_room_median_p25": float(site_p25), "site_n_rooms": n_rooms})
    reason = (
        f"Median {_label(quantity)} {_fmt(_float(row['median']))} {unit} of "
        f"{_exam_text(row, exam_names)}"
        f"{_where(row)} ({int(row['n_used'])} {_who(row)}) is " + " and ".join(parts) + ". "
        "Review the image quality of a sample of these examinations with the reporting "
        "radiologists: a low dose is not a fault in itself, and the protocol needs a change "
        "only if the images do not answer the clinical question (optimisation, IAEA GSR "
        "Part 3)."
    )
    return Flag(
        kind="low_dose_review",
        severity="info",
        reason=reason,
        numbers=numbers,
        quantity=quantity,
        **_concern(row),
    )
