"""Recurrent exposure: cumulative effective dose per pseudonymised patient, for quality assurance.

The IAEA's studies of recurrent imaging counted patients whose cumulative effective dose from CT
reached 100 mSv within a few years (1.33 % of 2.5 million patients; PUBLISHED-VALUES n, high;
Rehani et al., Eur Radiol 2020, citation from memory): :data:`DEFAULT_LEVEL_MSV` and
:data:`DEFAULT_WINDOW_YEARS` follow them. :func:`cumulative_effective_dose` sums the effective-dose
estimates of :mod:`beamaudit.model.effective_dose` per patient

* over the window that ends on ``as_of`` (the exams of :math:`(t_{as\\_of} - W, t_{as\\_of}]`), and
* over the worst window of the same length anywhere in the history given (for each exam, the sum
  over the same patient's exams in :math:`(t - W, t]`; the largest),

and :meth:`CumulativeDoses.above` lists the patients above a level. An exam without an estimate adds
nothing and is counted (``n_without_estimate``), so such a sum is a lower bound.

What comes out identifies no one: the patient appears only by the pseudonymised key the caller
passes (ingest's keyed hash; never a name, ID or birth date), with counts and sums; no exam dates
per patient. And the caution that goes with it (:data:`RECURRENT_EXPOSURE_CAUTION`): **prior dose
must never decide whether a justified examination is done.** The list serves the review of
imaging pathways and protocols, not the justification of the next examination.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.effective_dose import POPULATION_AVERAGE_CAUTION
from beamaudit.model.errors import ModelError

__all__ = [
    "DEFAULT_LEVEL_MSV",
    "DEFAULT_WINDOW_YEARS",
    "RECURRENT_EXPOSURE_CAUTION",
    "CumulativeDoses",
    "cumulative_effective_dose",
]

#: Cumulative effective dose of interest (the IAEA recurrent-imaging studies' 100 mSv).
DEFAULT_LEVEL_MSV = 100.0
#: Window of the sum (the IAEA studies looked back 1 to 5 years).
DEFAULT_WINDOW_YEARS = 5.0
_DAYS_PER_YEAR = 365.2425  # mean Gregorian year
_NS_PER_DAY = 86_400 * 10**9

RECURRENT_EXPOSURE_CAUTION = (
    "For quality assurance of recurrent imaging only. Prior dose must never decide whether a "
    "justified examination is done: each examination is justified by its own clinical benefit. "
    + POPULATION_AVERAGE_CAUTION
)


@dataclass(frozen=True)
class CumulativeDoses:
    """Per pseudonymised patient: exams, exams without an estimate and cumulative doses (mSv).

    Arrays are aligned, one entry per patient, sorted by ``peak_window_dose_msv`` then
    ``cumulative_dose_msv`` (highest first), then key.
    """

    patient_key: NDArray[np.object_]
    n_exams: NDArray[np.int64]
    n_exams_in_window: NDArray[np.int64]
    n_without_estimate: NDArray[np.int64]
    cumulative_dose_msv: NDArray[np.float64]
    peak_window_dose_msv: NDArray[np.float64]
    window_years: float
    window_start: datetime
    as_of: datetime
    caution: str = RECURRENT_EXPOSURE_CAUTION

    def __len__(self) -> int:
        return len(self.patient_key)

    def above(self, level_msv: float = DEFAULT_LEVEL_MSV, *, peak: bool = False) -> CumulativeDoses:
        """The patients whose cumulative dose in the window ending ``as_of`` (or, with ``peak``,
        in their worst window) is at least ``level_msv``."""
        if not level_msv > 0:
            raise ModelError("the level must be a positive dose in mSv")
        values = self.peak_window_dose_msv if peak else self.cumulative_dose_msv
        keep = values >= level_msv
        return CumulativeDoses(
            self.patient_key[keep],
            self.n_exams[keep],
            self.n_exams_in_window[keep],
            self.n_without_estimate[keep],
            self.cumulative_dose_msv[keep],
            self.peak_window_dose_msv[keep],
            self.window_years,
            self.window_start,
            self.as_of,
        )

    def to_records(self) -> list[dict[str, Any]]:
        """One plain dict per patient: the pseudonymised key, counts and sums, nothing more."""
        return [
            {
                "patient_key": str(k),
                "n_exams": int(n),
                "n_exams_in_window": int(w),
                "n_without_estimate": int(m),
                "cumulative_dose_msv": float(c),
                "peak_window_dose_msv": float(p),
            }
            for k, n, w, m, c, p in zip(
                self.patient_key,
                self.n_exams,
                self.n_exams_in_window,
                self.n_without_estimate,
                self.cumulative_dose_msv,
                self.peak_window_dose_msv,
                strict=True,
            )
        ]


def _instant(value: datetime | date) -> np.datetime64:
    if isinstance(value, datetime) and value.tzinfo is not None:
        value = value.astimezone(UTC).replace(tzinfo=None)
    return np.datetime64(value, "ns")


def _years_before(end: np.datetime64, years: float) -> np.datetime64:
    """The same instant ``years`` calendar years earlier (29 February becomes 28 February)."""
    moment = end.astype("datetime64[us]").item()
    try:
        earlier = moment.replace(year=moment.year - int(years))
    except ValueError:
        earlier = moment.replace(year=moment.year - int(years), day=28)
    return np.datetime64(earlier, "ns")


def cumulative_effective_dose(
    patient_key: ArrayLike,
    exam_datetime: ArrayLike,
    effective_dose_msv: ArrayLike,
    *,
    window_years: float = DEFAULT_WINDOW_YEARS,
    as_of: datetime | date | None = None,
) -> CumulativeDoses:
    """Cumulative effective dose per patient (see the module docstring).

    Parameters
    ----------
    patient_key : array_like of str
        The pseudonymised patient key of each examination (never empty).
    exam_datetime : array_like of datetime64
        When each examination was done (naive values are taken as UTC).
    effective_dose_msv : array_like of float
        Its effective-dose estimate, mSv; NaN where there is none.
    window_years : float
        Length of the window: whole calendar years (default 5: the window ending on 31 December
        2024 holds the exams from 1 January 2020), else years of 365.2425 days.
    as_of : datetime or date, optional
        End of the window (included); default the latest examination.

    Returns
    -------
    CumulativeDoses

    Raises
    ------
    ModelError
        Mismatched lengths, an empty or missing key, a missing time, a negative dose, or a
        window that is not positive.
    """
    keys = np.asarray(patient_key, dtype=object)
    when = np.asarray(exam_datetime, dtype="datetime64[ns]")
    dose = np.asarray(effective_dose_msv, dtype=np.float64)
    if not (keys.shape == when.shape == dose.shape) or keys.ndim != 1:
        raise ModelError("patient_key, exam_datetime and effective_dose_msv must be aligned 1-D")
    if not window_years > 0:
        raise ModelError(f"window_years must be positive, got {window_years!r}")
    if any(not isinstance(k, str) or not k.strip() for k in keys):
        raise ModelError("every examination needs its pseudonymised patient key")
    if np.isnat(when).any():
        raise ModelError("every examination needs its date and time")
    if (dose < 0).any():
        raise ModelError("effective doses must not be negative")
    days = np.timedelta64(round(window_years * _DAYS_PER_YEAR * _NS_PER_DAY), "ns")
    end = _instant(as_of) if as_of is not None else (when.max() if len(when) else None)
    if end is None:
        end = np.datetime64("1970-01-01", "ns")
    if isinstance(as_of, date) and not isinstance(as_of, datetime):
        end = end + np.timedelta64(_NS_PER_DAY - 1, "ns")  # the whole day is in the window
    start = _years_before(end, window_years) if float(window_years).is_integer() else end - days
    window_ns = int((end - start) // np.timedelta64(1, "ns"))
    uniques, codes = np.unique(keys.astype(str), return_inverse=True)
    n_patients = len(uniques)
    has = ~np.isnan(dose)
    value = np.where(has, dose, 0.0)
    in_window = (when > start) & (when <= end)
    n_exams = np.bincount(codes, minlength=n_patients).astype(np.int64)
    n_in_window = np.bincount(codes, weights=in_window, minlength=n_patients).astype(np.int64)
    missing = np.bincount(codes, weights=~has, minlength=n_patients).astype(np.int64)
    cumulative = np.bincount(codes, weights=value * in_window, minlength=n_patients).astype(
        np.float64
    )
    # worst window: exams sorted by (patient, time); for exam i the sum over (t_i - W, t_i].
    # Times in whole seconds: patient code x span must fit in int64 (in nanoseconds a 5-year
    # span times more than about 58 patients would overflow)
    t = when.astype("datetime64[s]").astype(np.int64)
    window_s = -(-window_ns // 10**9)  # the window rounded up to whole seconds
    order = np.lexsort((t, codes))
    t_sorted, codes_sorted = t[order], codes[order]
    running = np.concatenate(([0.0], np.cumsum(value[order])))
    span = int(t_sorted.max() - t_sorted.min()) + window_s + 1 if len(t) else 1
    combined = codes_sorted.astype(np.int64) * span + (t_sorted - (t_sorted.min() if len(t) else 0))
    first = np.searchsorted(combined, combined - window_s, side="right")
    last = np.searchsorted(combined, combined, side="right")  # same-time exams together
    sums = running[last] - running[first]
    peak = np.zeros(n_patients)
    np.maximum.at(peak, codes_sorted, sums)
    rank = np.lexsort((uniques, -cumulative, -peak))
    return CumulativeDoses(
        patient_key=uniques[rank].astype(object),
        n_exams=n_exams[rank],
        n_exams_in_window=n_in_window[rank],
        n_without_estimate=missing[rank],
        cumulative_dose_msv=cumulative[rank],
        peak_window_dose_msv=peak[rank],
        window_years=float(window_years),
        window_start=start.astype("datetime64[us]").item(),
        as_of=end.astype("datetime64[us]").item(),
    )
