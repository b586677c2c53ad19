"""The events table a review reads, its checks, and the tables derived from it.

Input table contract
--------------------
One row per irradiation event (DICOM PS3.16: one continuous irradiation), with these columns
(extra columns are ignored):

=============================  ==========  ======================================================
column                         type        content
=============================  ==========  ======================================================
event_id                       int         unique per event
study_uid                      str         Study Instance UID (the examination); never missing
event_datetime                 datetime64  UTC; naive values are taken as UTC, aware ones
                                           converted
site, room, device             str or None where the event happened
modality                       str or None DICOM modality: CR, DX, MG, RF, XA, CT
exam_type                      str or None catalogue exam type; None = not mapped
patient_weight_kg              float       NaN when not recorded
study_description,             str or None raw header values (for mapping and the unmapped list)
series_description,
protocol_name, body_part,
view_position
dap_gy_cm2                     float       reported air kerma-area product
recon_dap_gy_cm2               float       DAP reconstructed by the beam model
esak_mgy                       float       entrance surface air kerma
reference_point_air_kerma_mgy  float       K_a,r
ctdivol_mgy, dlp_mgy_cm        float       CT dose indices
mgd_mgy                        float       mean glandular dose
deviation_index                float       IEC 62494-1 DI
fluoro_time_s                  float       fluoroscopy time of the event
=============================  ==========  ======================================================

The dose columns are named by quantity (:data:`~beamaudit.api.review.quantities.QUANTITIES`);
which stored column each is read from (``esak_mgy`` from beamaudit's ``recon_esak_mgy``,
``mgd_mgy`` from the device's ``organ_dose_mgy``) is ``Quantity.column``, the one mapping.

All float columns are NaN when absent. Doses, DAP, times and weights must not be negative (a
negative value is rejected, never clamped).

Optional columns (:data:`OPTIONAL_COLUMNS`; a table without them reads as if every value were
missing):

=========================  ============  ==========================================================
patient_age_years          float         age at the examination; NaN when not recorded; paediatric
                                         patients are grouped by it (:mod:`.bands`)
clinical_indication        str or None   the examination's clinical indication (``acute_stroke``),
                                         e.g. set by a mapping rule; levels may be set for one
breast_thickness_mm        float         mammography: the compressed breast thickness (NaN when not
                                         recorded); mammography groups are set by its band
                                         (:mod:`.mammography`)
ct_dw_cm                   float         CT: the water-equivalent diameter, cm (NaN when not
                                         known); CT groups may be set by its bands (:mod:`.ct_size`)
recon_mgd_mgy              float         mammography: beamaudit's reconstructed D_G (NaN when not
                                         made); a room's ratio of ``mgd_mgy`` to it is watched
=========================  ============  ==========================================================

Units of analysis
-----------------
For an exam type whose level applies **per projection** every event is one examination value. For
one that applies **per examination** the events of a study with that exam type are aggregated into
one value per quantity, by :data:`~beamaudit.api.review.examtypes.DEFAULT_AGGREGATION` or the
catalogue's override (DAP, DLP, K_a,r summed; CTDIvol and ESAK the largest), with the study's
first event giving its time, site, room and device, and its first recorded weight, age and
indication its own.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from beamaudit.api.review.errors import ReviewInputError
from beamaudit.api.review.examtypes import ExamCatalogue
from beamaudit.api.review.quantities import QUANTITIES

__all__ = [
    "DOSE_COLUMNS",
    "EVENT_COLUMNS",
    "FLOAT_COLUMNS",
    "KEY_COLUMNS",
    "OPTIONAL_COLUMNS",
    "TEXT_COLUMNS",
    "UNIT_COLUMNS",
    "build_units",
    "group_codes",
    "month_labels",
    "prepare_events",
    "study_table",
]

TEXT_COLUMNS = (
    "study_uid",
    "site",
    "room",
    "device",
    "modality",
    "exam_type",
    "study_description",
    "series_description",
    "protocol_name",
    "body_part",
    "view_position",
)
#: Text columns stored as categoricals by :func:`prepare_events` (they are grouped on).
KEY_COLUMNS = ("site", "room", "device", "modality", "exam_type")
#: Every column that carries a dose value (for "no dose data at all").
DOSE_COLUMNS = (
    "dap_gy_cm2",
    "recon_dap_gy_cm2",
    "esak_mgy",
    "reference_point_air_kerma_mgy",
    "ctdivol_mgy",
    "dlp_mgy_cm",
    "mgd_mgy",
)
FLOAT_COLUMNS = ("patient_weight_kg", *DOSE_COLUMNS, "deviation_index", "fluoro_time_s")
_NON_NEGATIVE = (*DOSE_COLUMNS, "fluoro_time_s")
EVENT_COLUMNS = ("event_id", "event_datetime", *TEXT_COLUMNS, *FLOAT_COLUMNS)
#: Columns an events table may carry beyond :data:`EVENT_COLUMNS` (missing values when absent).
OPTIONAL_COLUMNS = (
    "patient_age_years",
    "clinical_indication",
    "breast_thickness_mm",
    "ct_dw_cm",
    "recon_mgd_mgy",
)
_LOCATION = ("site", "room", "device")
_OPTIONAL_FLOATS = ("patient_age_years", "breast_thickness_mm", "ct_dw_cm", "recon_mgd_mgy")

#: What a unit carries of its examination, per event or summed per study.
_EXAM_COLUMNS = (
    "study_uid",
    *_LOCATION,
    "exam_type",
    "month_key",
    "patient_weight_kg",
    "patient_age_years",
    "clinical_indication",
    "breast_thickness_mm",
    "ct_dw_cm",
)

#: Columns of :func:`build_units` (one row per examination value).
UNIT_COLUMNS = ("unit_kind", "event_id", *_EXAM_COLUMNS, "quantity", "value")

_SHOWN_IDS = 5


def _bad_ids(frame: pd.DataFrame, mask: np.ndarray) -> str:
    ids = frame.loc[mask, "event_id"].head(_SHOWN_IDS).tolist()
    more = int(mask.sum()) - len(ids)
    return ", ".join(str(i) for i in ids) + (f" and {more} more" if more > 0 else "")


def _add_ids_and_times(out: pd.DataFrame, events: pd.DataFrame) -> None:
    """Add the checked ``event_id`` and ``event_datetime`` (naive UTC) columns to ``out``."""
    ids = pd.to_numeric(events["event_id"].reset_index(drop=True), errors="coerce")
    if ids.isna().any() or (len(ids) and not np.all(np.mod(ids.to_numpy(dtype=float), 1) == 0)):
        raise ReviewInputError("event_id must be an integer on every row")
    out["event_id"] = ids.astype(np.int64)
    if out["event_id"].duplicated().any():
        dup = out["event_id"][out["event_id"].duplicated()].head(_SHOWN_IDS).tolist()
        raise ReviewInputError(f"event_id must be unique; repeated: {dup}")
    try:
        when = pd.to_datetime(events["event_datetime"].reset_index(drop=True), utc=True)
    except (ValueError, TypeError) as exc:
        raise ReviewInputError(f"event_datetime is not a date-time column: {exc}") from exc
    out["event_datetime"] = when.dt.tz_localize(None).astype("datetime64[ns]")
    if out["event_datetime"].isna().any():
        raise ReviewInputError(
            "event_datetime is missing for event(s) "
            + _bad_ids(out, out["event_datetime"].isna().to_numpy())
        )


def _add_text_columns(out: pd.DataFrame, events: pd.DataFrame) -> np.ndarray | None:
    """Add the text columns (keys as categoricals); return the study codes of an already
    factorised ``study_uid`` column, else None."""
    study_codes = None
    n_rows = len(events)
    for c in (*TEXT_COLUMNS, "clinical_indication"):
        if c not in events.columns:  # an optional column: every value missing
            out[c] = pd.Categorical.from_codes(np.full(n_rows, -1), categories=pd.Index([], object))
            continue
        col = events[c].reset_index(drop=True)
        is_key = c in KEY_COLUMNS or c == "clinical_indication"
        if _is_text_categorical(col):  # already factorised (as the store hands events over)
            if is_key:
                out[c] = _sorted_categories(col.array)
                continue
            if c == "study_uid":  # kept as it is: a million texts cost more than their codes
                study_codes = col.cat.codes.to_numpy(dtype=np.int64)
                out[c] = col
                continue
        elif not isinstance(col.dtype, pd.StringDtype) and pd.api.types.infer_dtype(
            col, skipna=True
        ) not in ("string", "empty"):
            col = col.astype(object)
            present = col.notna().to_numpy()  # numbers in a text column (room 3): as text
            col[present] = col[present].astype(str)
        if is_key:  # categorical: factorised once here, not at every grouping
            out[c] = pd.Categorical(col)
        else:
            col = col.astype(object)
            out[c] = col.where(col.notna(), None)
    return study_codes


def _add_numbers(out: pd.DataFrame, events: pd.DataFrame) -> None:
    """Add the float columns, checked numeric, finite, not negative, weights positive."""
    n_rows = len(events)
    for c in (*FLOAT_COLUMNS, *_OPTIONAL_FLOATS):
        if c not in events.columns:
            out[c] = np.full(n_rows, np.nan)
            continue
        try:
            out[c] = pd.to_numeric(events[c].reset_index(drop=True), errors="raise").astype(
                np.float64
            )
        except (ValueError, TypeError) as exc:
            raise ReviewInputError(f"{c} must be numeric (NaN when absent): {exc}") from exc
        values = out[c].to_numpy()
        if np.isinf(values).any():
            raise ReviewInputError(
                f"{c} is infinite for event(s) {_bad_ids(out, np.isinf(values))}"
            )
    for c in (*_NON_NEGATIVE, *_OPTIONAL_FLOATS):
        bad = out[c].to_numpy() < 0
        if bad.any():
            raise ReviewInputError(f"{c} is negative for event(s) {_bad_ids(out, bad)}")
    bad = out["patient_weight_kg"].to_numpy() <= 0
    if bad.any():
        raise ReviewInputError(
            f"patient_weight_kg is not positive for event(s) {_bad_ids(out, bad)}"
        )


def _sorted_by_event_id(out: pd.DataFrame, study_codes: np.ndarray | None) -> pd.DataFrame:
    """Add ``month_key``, sort by ``event_id`` and add the integer ``study_code``."""
    dt = out["event_datetime"].dt
    out["month_key"] = (dt.year * 12 + dt.month - 1).astype(np.int64)
    ids = out["event_id"].to_numpy()
    if not (np.diff(ids) > 0).all():  # (a stable sort of sorted rows would change nothing)
        order = np.argsort(ids, kind="stable")
        out = out.take(order).reset_index(drop=True)
        if study_codes is not None:
            study_codes = study_codes[order]
    # integer study codes (by first appearance in event_id order) for grouping by study
    by = out["study_uid"] if study_codes is None else study_codes  # same partition, faster
    out["study_code"] = pd.factorize(by)[0].astype(np.int64)
    return out


def prepare_events(events: pd.DataFrame) -> pd.DataFrame:
    """Check ``events`` against the contract and return a typed copy sorted by ``event_id``.

    Text columns become ``object`` with ``None`` for missing (the :data:`KEY_COLUMNS` become
    categoricals, so that grouping on them is fast), float columns ``float64``,
    ``event_datetime`` naive UTC ``datetime64[ns]``, plus an integer ``month_key``
    (``year * 12 + month - 1``) and an integer ``study_code`` per study. Sorting by ``event_id``
    makes every later step independent of the order rows arrive in, so the same events always give
    the same review.

    Raises
    ------
    ReviewInputError
        Missing columns, missing or repeated event ids, missing study UIDs or times, non-numeric
        or negative values (naming up to five offending event ids).
    """
    missing = [c for c in EVENT_COLUMNS if c not in events.columns]
    if missing:
        raise ReviewInputError(f"the events table lacks the column(s) {', '.join(missing)}")
    out = pd.DataFrame(index=pd.RangeIndex(len(events)))
    _add_ids_and_times(out, events)
    study_codes = _add_text_columns(out, events)
    if out["study_uid"].isna().any():
        raise ReviewInputError(
            "study_uid is missing for event(s) " + _bad_ids(out, out["study_uid"].isna().to_numpy())
        )
    _add_numbers(out, events)
    return _sorted_by_event_id(out, study_codes)


def _is_text_categorical(col: pd.Series) -> bool:
    return isinstance(col.dtype, pd.CategoricalDtype) and pd.api.types.infer_dtype(
        col.cat.categories, skipna=True
    ) in ("string", "empty")


def _sorted_categories(values: pd.Categorical) -> pd.Categorical:
    """The categorical ``pd.Categorical(values.astype(object))`` would give: only the categories
    in use, sorted, with object categories (computed on the categories, not the rows)."""
    codes = np.asarray(values.codes, dtype=np.int64)
    # the categories in use, by counting (pandas' remove_unused_categories sorts every row)
    in_use = np.flatnonzero(np.bincount(codes + 1, minlength=len(values.categories) + 1)[1:])
    categories = pd.Index(list(values.categories[in_use]))
    order = np.argsort(categories.to_numpy(), kind="stable")
    dense = np.full(len(values.categories) + 1, -1, dtype=np.int64)  # old code -> in-use code
    dense[in_use] = np.arange(len(in_use))
    return pd.Categorical.from_codes(
        _recode(dense[codes], order), categories=categories[order], validate=False
    )


def _recode(codes: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Codes into ``categories`` as codes into ``categories[order]`` (-1 stays -1)."""
    position = np.empty(len(order) + 1, dtype=np.int64)
    position[order] = np.arange(len(order))
    position[-1] = -1
    return position[codes.astype(np.int64)]


def group_codes(frame: pd.DataFrame, keys: Sequence[str]) -> tuple[np.ndarray, pd.DataFrame]:
    """Group code of each row of ``frame`` by ``keys``, and the table of distinct keys.

    The equivalent of ``frame.groupby(keys, sort=True, dropna=False).ngroup()`` and its group
    index, computed by factorising each key column once and combining the integer codes, which is
    several times faster on a million rows of text keys. Groups are numbered in the sorted order of
    their keys (missing values last), so the numbering depends on the data only, not on row order.
    """
    n = len(frame)
    key = np.zeros(n, dtype=np.int64)
    key_size = 1
    for column in keys:
        series = frame[column]
        if isinstance(series.dtype, pd.CategoricalDtype):  # already factorised: its codes
            codes = series.cat.codes.to_numpy()  # (its own small integers: no copy)
            size = len(series.cat.categories)
        else:
            codes, uniques = pd.factorize(series, use_na_sentinel=True)
            size = len(uniques)
        if key_size * (size + 1) >= 2**62:  # keep the mixed-radix key inside int64
            key = pd.factorize(key)[0].astype(np.int64)
            key_size = int(key.max()) + 1 if n else 1
        key *= size + 1  # key * (size + 1) + (codes + 1), in place: no array per step
        key += codes
        key += 1
        key_size *= size + 1
    if n == 0:
        empty = pd.DataFrame({c: pd.Series([], dtype=object) for c in keys})
        return np.zeros(0, dtype=np.int64), empty
    # codes by first appearance (hashing, no sort of the rows); the first row of each code is
    # where the running maximum of the codes steps up
    inverse, _ = pd.factorize(key)
    steps = np.maximum.accumulate(inverse)
    first = np.flatnonzero(np.concatenate(([True], steps[1:] > steps[:-1])))
    table = frame.loc[:, list(keys)].iloc[first].reset_index(drop=True)
    order = table.sort_values(list(keys), na_position="last", kind="mergesort").index.to_numpy()
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    table = table.iloc[order].reset_index(drop=True)
    for column in keys:  # the small key table in plain objects, None for missing
        values = table[column].astype(object)
        table[column] = values.where(values.notna(), None)
    return rank[inverse.reshape(-1)].astype(np.int64), table


def month_labels(month_keys: pd.Series | np.ndarray) -> np.ndarray:
    """``YYYY-MM`` labels of integer month keys (``year * 12 + month - 1``)."""
    keys = np.asarray(month_keys, dtype=np.int64)
    uniques, inverse = np.unique(keys, return_inverse=True)
    labels = np.array([f"{k // 12:04d}-{k % 12 + 1:02d}" for k in uniques], dtype=object)
    return labels[inverse]


def _study_values(
    events: pd.DataFrame, is_study: np.ndarray, catalogue: ExamCatalogue
) -> pd.DataFrame:
    """One row per study and exam type judged per examination, its quantities aggregated."""
    quantity_columns = list(QUANTITIES)
    exams = events.loc[is_study]
    codes, studies = group_codes(exams, ["study_code", "exam_type"])
    grouped = exams.groupby(codes, sort=True)
    # groupby().first() skips missing values: the location comes from the first event that has it
    firsts = grouped[
        [
            "study_uid",
            *_LOCATION,
            "month_key",
            "patient_weight_kg",
            "patient_age_years",
            "clinical_indication",
            "breast_thickness_mm",
            "ct_dw_cm",
        ]
    ].first()
    for c in firsts.columns:  # categoricals stay categoricals (with the events' categories)
        column = firsts[c]
        studies[c] = (
            column.array if isinstance(column.dtype, pd.CategoricalDtype) else column.to_numpy()
        )
    sums = grouped[quantity_columns].sum(min_count=1)
    maxima = grouped[quantity_columns].max()
    means = grouped[quantity_columns].mean()
    exam_codes, exam_names = pd.factorize(studies["exam_type"])
    for q in quantity_columns:
        rules = np.array([_aggregation(catalogue, e, q) for e in exam_names], dtype=object)
        rule_of_row = rules[exam_codes] if len(exam_codes) else np.zeros(0, dtype=object)
        studies[q] = np.select(
            [rule_of_row == "sum", rule_of_row == "max"],
            [sums[q].to_numpy(), maxima[q].to_numpy()],
            default=means[q].to_numpy(),
        )
    for c in (*_LOCATION, "exam_type", "clinical_indication"):
        if isinstance(events[c].dtype, pd.CategoricalDtype):  # keep the events' categories
            studies[c] = pd.Categorical(studies[c], dtype=events[c].dtype)
    return studies


def _stacked_units(
    projections: pd.DataFrame, studies: pd.DataFrame, catalogue: ExamCatalogue, base: list[str]
) -> pd.DataFrame:
    """The projections' and the studies' values stacked, one row per value that is not NaN."""
    quantity_columns = list(QUANTITIES)
    n_events = len(projections)
    # the projections' rows, then the examinations' ("wide"), one column at a time
    event_ids = np.concatenate(
        [projections["event_id"].to_numpy(dtype=np.int64), np.full(len(studies), -1, np.int64)]
    )
    wide_exam_type = pd.Series(_stacked(projections["exam_type"], studies["exam_type"]))
    # one row per (examination, quantity) with a value: positions into the wide rows
    positions, quantity_codes, value_parts = [], [], []
    for index, q in enumerate(quantity_columns):
        with_q = [t.exam_type for t in catalogue if q in t.quantities]
        wide_q = np.concatenate(
            [projections[q].to_numpy(dtype=np.float64), studies[q].to_numpy(dtype=np.float64)]
        )
        rows = wide_exam_type.isin(with_q).to_numpy() & ~np.isnan(wide_q)
        positions.append(np.flatnonzero(rows))
        value_parts.append(wide_q[rows])
        quantity_codes.append(np.full(int(rows.sum()), index, dtype=np.int64))
    taken = np.concatenate(positions)
    units = pd.DataFrame(  # fresh arrays: taken as they are, not copied into blocks
        {c: _stacked(projections[c], studies[c], taken) for c in base},
        index=pd.RangeIndex(len(taken)),
        copy=False,
    )
    values = np.concatenate(value_parts)
    from_event = taken < n_events
    units.insert(
        0, "unit_kind", pd.Categorical.from_codes(np.where(from_event, 0, 1), ["event", "study"])
    )
    ids = pd.array(event_ids[taken], dtype="Int64")
    ids[~from_event] = pd.NA
    units.insert(1, "event_id", ids)
    units["quantity"] = pd.Categorical.from_codes(np.concatenate(quantity_codes), quantity_columns)
    units["value"] = values
    return units


def build_units(
    events: pd.DataFrame, catalogue: ExamCatalogue, include: np.ndarray | None = None
) -> pd.DataFrame:
    """One row per examination value: the events (or study aggregates) of each reviewed quantity.

    Parameters
    ----------
    events : DataFrame
        Prepared events (:func:`prepare_events`).
    catalogue : ExamCatalogue
        Says per exam type whether its level applies per projection or per examination, its
        quantities and the study aggregation.
    include : array of bool, optional
        The events to use (default: those whose exam type is in the catalogue); an event whose
        exam type is not in the catalogue is never used.

    Returns
    -------
    DataFrame
        Columns :data:`UNIT_COLUMNS`; ``unit_kind`` is ``"event"`` (``event_id`` set) or
        ``"study"`` (``event_id`` NA). Values that are NaN are left out.
    """
    per_study = [t.exam_type for t in catalogue if t.level_applies_per == "examination"]
    per_event = [t.exam_type for t in catalogue if t.level_applies_per == "projection"]
    use = np.ones(len(events), dtype=bool) if include is None else np.asarray(include, dtype=bool)
    is_study = use & events["exam_type"].isin(per_study).to_numpy()
    is_event = use & events["exam_type"].isin(per_event).to_numpy()
    quantity_columns = list(QUANTITIES)
    base = list(_EXAM_COLUMNS)

    studies = _study_values(events, is_study, catalogue)
    projections = events.loc[is_event, ["event_id", *base, *quantity_columns]]
    units = _stacked_units(projections, studies, catalogue, base)
    return units.loc[:, list(UNIT_COLUMNS)]


def _stacked(first: pd.Series, second: pd.Series, taken: np.ndarray | None = None) -> Any:
    """The values of ``first`` then ``second`` (at positions ``taken``, default all) as one
    array: a categorical when both are categoricals of the same categories (their codes stacked,
    no object per row), otherwise as ``pd.concat`` would give them."""
    if (
        isinstance(first.dtype, pd.CategoricalDtype)
        and isinstance(second.dtype, pd.CategoricalDtype)
        and first.cat.categories.equals(second.cat.categories)  # in the same order
        and first.cat.ordered == second.cat.ordered
    ):
        codes = np.concatenate([first.cat.codes.to_numpy(), second.cat.codes.to_numpy()])
        if taken is not None:
            codes = codes[taken]
        return pd.Categorical.from_codes(codes, dtype=first.dtype)
    both = pd.concat([first, second], ignore_index=True)
    return (both if taken is None else both.iloc[taken]).array


def _aggregation(catalogue: ExamCatalogue, exam_type: str, quantity: str) -> str:
    exam = catalogue.get(exam_type)
    if exam is None:
        raise ReviewInputError(f"exam type {exam_type!r} is not in the catalogue")
    return exam.aggregation_for(quantity)


def study_table(events: pd.DataFrame, total_columns: Sequence[str]) -> pd.DataFrame:
    """One row per study: location, modality and exam type of its first event that has them,
    ``n_events``, ``has_dose`` (any dose value on any event) and the totals of ``total_columns``
    (NaN when no event records them)."""
    codes, out = group_codes(events, ["study_code"])
    grouped = events.groupby(codes, sort=True)
    firsts = grouped[["study_uid", *_LOCATION, "modality", "exam_type"]].first()
    for c in firsts.columns:
        out[c] = firsts[c].to_numpy()
    out["n_events"] = grouped.size().to_numpy()
    has_dose = events.loc[:, list(DOSE_COLUMNS)].notna().any(axis=1)
    out["has_dose"] = has_dose.groupby(codes, sort=True).any().to_numpy(dtype=bool)
    totals = grouped[list(total_columns)].sum(min_count=1)
    for c in total_columns:
        out[c] = totals[c].to_numpy()
    return out.drop(columns="study_code")
