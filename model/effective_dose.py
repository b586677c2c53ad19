r"""Effective dose estimates: population averages for a reference patient, from DLP or DAP.

Effective dose (ICRP Publication 103, 2007, eq. 4.5) weights the equivalent doses of the organs and
tissues of the reference male and female,

.. math::

    E = \sum_T w_T \, \frac{H_T^{M} + H_T^{F}}{2},

with the tissue weighting factors :math:`w_T` of ICRP 103 Table 3
(``data/tissue_weights_icrp103.csv``, :func:`effective_dose_from_equivalent_doses`). It is a
protection quantity for a **reference person**: ICRP Publication 147 (2021) allows it in
medicine for comparing procedures, protocols and facilities and for summing exposures, not as the
dose or the risk of an individual patient. Every figure here says so
(:data:`POPULATION_AVERAGE_CAUTION`) and carries its coefficient's source and confidence.

Two shortcuts estimate it from what a dose report holds:

* **CT**: :math:`E = k \cdot \mathrm{DLP}` with a conversion coefficient :math:`k` per anatomical
  region and age (``data/ct_k_factors.csv``: AAPM Report 96 (2008) Table 4, regions head, head and
  neck, neck, chest, abdomen and pelvis, trunk at ages 0, 1, 5, 10 years and adult; and the adult
  coefficients of the European CT guidelines, EUR 16262). Both rest on **ICRP 60** tissue weights
  and are **from memory** (medium confidence; the phantom of the paediatric rows low), as the file
  header says; the DLP must refer to the row's CTDI phantom (16 or 32 cm), else no estimate is
  made. A patient takes the row of the nearest tabulated age (bands in the file, common practice).
* **Projection radiography and fluoroscopy**: :math:`E = c \cdot P_{KA}` with a coefficient per exam
  type from a named national survey (``data/dap_effective_dose_coefficients.csv``). No such table
  could be read for beamaudit, so the shipped table is empty and every such exam gets no estimate,
  with the reason; a physicist loads the national survey's coefficients in the same layout
  (:func:`load_dap_coefficients`). Nothing is estimated without a sourced coefficient.
"""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model._datafile import parse_commented_csv
from beamaudit.model.errors import ModelError

__all__ = [
    "POPULATION_AVERAGE_CAUTION",
    "DapCoefficient",
    "DapCoefficientTable",
    "EffectiveDoseEstimates",
    "KFactor",
    "KFactorTable",
    "ct_effective_dose_msv",
    "dap_effective_dose_msv",
    "effective_dose_from_equivalent_doses",
    "load_ct_k_factors",
    "load_dap_coefficients",
    "load_tissue_weights_icrp103",
]

#: The caution every effective-dose figure carries.
POPULATION_AVERAGE_CAUTION = (
    "Effective dose is a population-average estimate for a reference patient of the stated age "
    "(ICRP Publication 103 weighting; ICRP Publication 147 on its use): it serves to compare "
    "procedures and sum exposures for quality assurance, not as an individual patient's dose or "
    "risk."
)

_DATA_PACKAGE = "beamaudit.model.data"
DEFAULT_K_SET = "AAPM Report 96"


def _parse(text: str, source: str) -> tuple[dict[str, str], list[dict[str, str]]]:
    """``# key: value`` header lines and the CSV rows of a self-describing data file."""
    if not any(line.strip() and not line.startswith("#") for line in text.splitlines()):
        raise ModelError(f"{source}: no header row")
    return parse_commented_csv(text)


def _text(path: str | os.PathLike[str] | None, name: str) -> tuple[str, str]:
    if path is None:
        return resources.files(_DATA_PACKAGE).joinpath(name).read_text(encoding="utf-8"), name
    try:
        with open(path, encoding="utf-8") as handle:
            return handle.read(), str(path)
    except OSError as exc:
        raise ModelError(f"cannot read {path}: {exc.strerror}") from exc


def _number(row: Mapping[str, str], key: str, source: str, *, empty: float | None = None) -> float:
    text = (row.get(key) or "").strip()
    if not text and empty is not None:
        return empty
    try:
        return float(text)
    except ValueError:
        raise ModelError(f"{source}: {key} {text!r} is not a number") from None


# --------------------------------------------------------------------------------- CT: k x DLP
@dataclass(frozen=True, slots=True)
class KFactor:
    """One CT conversion coefficient (a row of ``ct_k_factors.csv``)."""

    coefficient_set: str
    region: str
    age_label: str
    age_from_years: float
    age_to_years: float
    phantom_cm: float
    k_msv_per_mgy_cm: float
    tissue_weighting: str
    table: str
    original: str
    confidence: str
    phantom_confidence: str

    @property
    def citation(self) -> str:
        """Table, row and basis in one line (for a trail)."""
        return (
            f"{self.table}: {self.region}, {self.age_label}, k = {self.k_msv_per_mgy_cm:g} "
            f"mSv/(mGy·cm) for DLP in the {self.phantom_cm:g} cm phantom ({self.tissue_weighting} "
            f"tissue weights; confidence {self.confidence})"
        )


@dataclass(frozen=True)
class KFactorTable:
    """The CT coefficients with the file's header (``metadata``)."""

    rows: tuple[KFactor, ...]
    metadata: Mapping[str, str] = field(default_factory=dict)

    def regions(self, coefficient_set: str = DEFAULT_K_SET) -> tuple[str, ...]:
        """The regions of one coefficient set, in file order."""
        seen: dict[str, None] = {}
        for r in self.rows:
            if r.coefficient_set == coefficient_set:
                seen.setdefault(r.region)
        return tuple(seen)

    def lookup(
        self, region: str, age_years: float, coefficient_set: str = DEFAULT_K_SET
    ) -> KFactor | None:
        """The row of ``region`` whose age band holds ``age_years`` (``None`` if none does)."""
        for r in self.rows:
            if (
                r.coefficient_set == coefficient_set
                and r.region == region
                and r.age_from_years <= age_years < r.age_to_years
            ):
                return r
        return None


def _read_k_factors(text: str, source: str) -> KFactorTable:
    header, rows = _parse(text, source)
    out = []
    for row in rows:
        out.append(
            KFactor(
                coefficient_set=row["coefficient_set"],
                region=row["region"],
                age_label=row["age_label"],
                age_from_years=_number(row, "age_from_years", source),
                age_to_years=_number(row, "age_to_years", source, empty=math.inf),
                phantom_cm=_number(row, "phantom_cm", source),
                k_msv_per_mgy_cm=_number(row, "k_msv_per_mgy_cm", source),
                tissue_weighting=row["tissue_weighting"],
                table=row["table"],
                original=row["original"],
                confidence=row["confidence"],
                phantom_confidence=row["phantom_confidence"],
            )
        )
        if not out[-1].k_msv_per_mgy_cm > 0:
            raise ModelError(f"{source}: k must be positive ({row['region']}, {row['age_label']})")
    return KFactorTable(rows=tuple(out), metadata=MappingProxyType(header))


@functools.cache
def _shipped_k_factors() -> KFactorTable:
    return _read_k_factors(*_text(None, "ct_k_factors.csv"))


def load_ct_k_factors(path: str | os.PathLike[str] | None = None) -> KFactorTable:
    """The CT coefficients: the shipped table (read once), or a site's file in the same layout.

    Raises
    ------
    ModelError
        An unreadable file or a bad number, naming the file.
    """
    return _shipped_k_factors() if path is None else _read_k_factors(*_text(path, "file"))


# ---------------------------------------------------------------- radiography and fluoro: c x DAP
@dataclass(frozen=True, slots=True)
class DapCoefficient:
    """One coefficient of effective dose per DAP (a row of the DAP coefficient file)."""

    exam_type: str
    c_msv_per_gy_cm2: float
    tissue_weighting: str
    patient: str
    table: str
    original: str
    confidence: str

    @property
    def citation(self) -> str:
        return (
            f"{self.table}: {self.exam_type}, c = {self.c_msv_per_gy_cm2:g} mSv/(Gy·cm²) "
            f"({self.patient}; {self.tissue_weighting} tissue weights; confidence "
            f"{self.confidence})"
        )


@dataclass(frozen=True)
class DapCoefficientTable:
    """DAP coefficients by exam type, with the file's header (``metadata``)."""

    rows: Mapping[str, DapCoefficient]
    metadata: Mapping[str, str] = field(default_factory=dict)


def _read_dap(text: str, source: str) -> DapCoefficientTable:
    header, rows = _parse(text, source)
    out: dict[str, DapCoefficient] = {}
    for row in rows:
        if not row.get("table") or not row.get("confidence"):
            raise ModelError(
                f"{source}: {row.get('exam_type')!r} needs the table it comes from and a confidence"
            )
        if row["exam_type"] in out:
            raise ModelError(f"{source}: exam type {row['exam_type']!r} is given twice")
        c = _number(row, "c_msv_per_gy_cm2", source)
        if not c > 0:
            raise ModelError(f"{source}: {row['exam_type']!r} coefficient must be positive")
        out[row["exam_type"]] = DapCoefficient(
            exam_type=row["exam_type"],
            c_msv_per_gy_cm2=c,
            tissue_weighting=row["tissue_weighting"],
            patient=row["patient"],
            table=row["table"],
            original=row["original"],
            confidence=row["confidence"],
        )
    return DapCoefficientTable(rows=MappingProxyType(out), metadata=MappingProxyType(header))


def load_dap_coefficients(path: str | os.PathLike[str] | None = None) -> DapCoefficientTable:
    """The DAP coefficients: the shipped table (empty: see the module docstring), or a site's file
    in the same layout, each row naming the published survey table it comes from.

    Raises
    ------
    ModelError
        An unreadable file, a row without its source or confidence, a bad or repeated value.
    """
    return _read_dap(*_text(path, "dap_effective_dose_coefficients.csv"))


# ------------------------------------------------------------------------------------- estimates
@dataclass(frozen=True)
class EffectiveDoseEstimates:
    """Effective doses of many examinations, each with its coefficient's source, or the reason
    there is none (NaN dose, empty source).

    Attributes
    ----------
    effective_dose_msv : ndarray
        mSv; NaN where no estimate is made.
    coefficient : ndarray
        k (mSv per mGy·cm) or c (mSv per Gy·cm²); NaN where none applies.
    coefficient_unit : str
    source, confidence, reason : ndarray of str
        Per examination: the coefficient's citation and confidence, or (``reason``) why there is
        no estimate (empty where there is one).
    caution : str
        :data:`POPULATION_AVERAGE_CAUTION`.
    """

    effective_dose_msv: NDArray[np.float64]
    coefficient: NDArray[np.float64]
    coefficient_unit: str
    source: NDArray[np.object_]
    confidence: NDArray[np.object_]
    reason: NDArray[np.object_]
    caution: str = POPULATION_AVERAGE_CAUTION


def _as_array(values: ArrayLike | str | None, n: int, dtype: Any) -> NDArray[Any]:
    array = np.asarray(values, dtype=dtype)
    if array.ndim == 0:
        array = np.full(n, array.item(), dtype=dtype)
    if array.shape != (n,):
        raise ModelError(f"every argument must be a scalar or have {n} values")
    return array


def _blank(n: int) -> tuple[NDArray[Any], NDArray[Any], NDArray[Any], NDArray[Any], NDArray[Any]]:
    """Doses and coefficients NaN, source, confidence and reason empty, for ``n`` exams."""
    return (
        np.full(n, np.nan),
        np.full(n, np.nan),
        np.full(n, "", dtype=object),
        np.full(n, "", dtype=object),
        np.full(n, "", dtype=object),
    )


def ct_effective_dose_msv(
    dlp_mgy_cm: ArrayLike,
    *,
    region: ArrayLike | str,
    age_years: ArrayLike,
    phantom_cm: ArrayLike | None = None,
    coefficient_set: str = DEFAULT_K_SET,
    table: KFactorTable | None = None,
) -> EffectiveDoseEstimates:
    r"""Effective dose of CT examinations, :math:`E = k \cdot \mathrm{DLP}` (module docstring).

    Parameters
    ----------
    dlp_mgy_cm : array_like
        Dose-length product of each examination, mGy·cm.
    region : str or array_like of str
        Anatomical region of each examination, one of ``table.regions(coefficient_set)``.
    age_years : array_like
        Patient age; NaN where not recorded (no estimate: the coefficients depend on age).
    phantom_cm : array_like, optional
        CTDI phantom (16 or 32 cm) the DLP refers to. When given, an examination whose phantom is
        not its coefficient's gets no estimate (the coefficients differ by about 2 between them).
    coefficient_set : str
        ``"AAPM Report 96"`` (default) or ``"EUR 16262"``.
    table : KFactorTable, optional
        Default: the shipped table.

    Returns
    -------
    EffectiveDoseEstimates
        mSv per examination, NaN with the reason where there is none.

    Raises
    ------
    ModelError
        Mismatched lengths, an unknown coefficient set, a negative DLP or age.

    Examples
    --------
    >>> e = ct_effective_dose_msv([800.0], region="head", age_years=[45.0])
    >>> round(float(e.effective_dose_msv[0]), 2)
    1.68
    """
    table = table if table is not None else load_ct_k_factors()
    dlp = np.atleast_1d(np.asarray(dlp_mgy_cm, dtype=np.float64))
    n = len(dlp)
    regions = _as_array(region, n, object)
    ages = _as_array(age_years, n, np.float64)
    phantoms = None if phantom_cm is None else _as_array(phantom_cm, n, np.float64)
    known = table.regions(coefficient_set)
    if not known:
        raise ModelError(f"unknown coefficient set {coefficient_set!r}")
    if (dlp < 0).any() or (ages < 0).any():
        raise ModelError("DLP and age must not be negative")
    out, k, source, confidence, reason = _blank(n)
    for i in range(n):  # few distinct (region, age band) pairs; a plain loop keeps it readable
        if regions[i] not in known:
            reason[i] = (
                f"no {coefficient_set} coefficient for region {regions[i]!r} (regions: "
                f"{', '.join(known)})"
            )
            continue
        if math.isnan(ages[i]):
            reason[i] = "age not recorded: the CT coefficients depend on age"
            continue
        if math.isnan(dlp[i]):
            reason[i] = "DLP not recorded"
            continue
        row = table.lookup(str(regions[i]), float(ages[i]), coefficient_set)
        if row is None:
            reason[i] = f"no {coefficient_set} coefficient for age {ages[i]:g} years"
            continue
        if phantoms is not None and phantoms[i] != row.phantom_cm:
            reason[i] = (
                f"the DLP refers to the {phantoms[i]:g} cm phantom; the coefficient to the "
                f"{row.phantom_cm:g} cm phantom"
            )
            continue
        k[i] = row.k_msv_per_mgy_cm
        out[i] = row.k_msv_per_mgy_cm * dlp[i]
        source[i] = row.citation
        confidence[i] = row.confidence
    return EffectiveDoseEstimates(out, k, "mSv/(mGy·cm)", source, confidence, reason)


def dap_effective_dose_msv(
    dap_gy_cm2: ArrayLike,
    *,
    exam_type: ArrayLike | str,
    table: DapCoefficientTable | None = None,
) -> EffectiveDoseEstimates:
    r"""Effective dose of radiography and fluoroscopy, :math:`E = c \cdot P_{KA}`.

    An exam type without a sourced coefficient gets no estimate and the reason (the shipped table
    is empty; see the module docstring).

    Raises
    ------
    ModelError
        Mismatched lengths or a negative DAP.
    """
    table = table if table is not None else load_dap_coefficients()
    dap = np.atleast_1d(np.asarray(dap_gy_cm2, dtype=np.float64))
    n = len(dap)
    exams = _as_array(exam_type, n, object)
    if (dap < 0).any():
        raise ModelError("DAP must not be negative")
    out, c, source, confidence, reason = _blank(n)
    for i in range(n):
        row = table.rows.get(str(exams[i]))
        if row is None:
            reason[i] = f"no sourced effective-dose coefficient for exam type {exams[i]!r}"
        elif math.isnan(dap[i]):
            reason[i] = "DAP not recorded"
        else:
            c[i] = row.c_msv_per_gy_cm2
            out[i] = row.c_msv_per_gy_cm2 * dap[i]
            source[i] = row.citation
            confidence[i] = row.confidence
    return EffectiveDoseEstimates(out, c, "mSv/(Gy·cm²)", source, confidence, reason)


# ------------------------------------------------------------------------------ ICRP 103 weights
@functools.cache
def load_tissue_weights_icrp103() -> Mapping[str, float]:
    """ICRP Publication 103 Table 3 tissue weighting factors by tissue (sum 1)."""
    _, rows = _parse(*_text(None, "tissue_weights_icrp103.csv"))
    return MappingProxyType({r["tissue"]: float(r["w_t"]) for r in rows})


def effective_dose_from_equivalent_doses(
    h_male_msv: Mapping[str, float], h_female_msv: Mapping[str, float]
) -> float:
    r"""Effective dose from equivalent doses, ICRP 103 eq. 4.5 (module docstring), in mSv.

    Parameters
    ----------
    h_male_msv, h_female_msv : mapping
        Equivalent dose (mSv) of every tissue of :func:`load_tissue_weights_icrp103` for the
        reference male and female (``remainder`` the mean over its 13 tissues).

    Raises
    ------
    ModelError
        A tissue missing or unknown, or a negative dose.
    """
    weights = load_tissue_weights_icrp103()
    for name, doses in (("male", h_male_msv), ("female", h_female_msv)):
        missing = set(weights) - set(doses)
        unknown = set(doses) - set(weights)
        if missing or unknown:
            raise ModelError(
                f"{name} equivalent doses: missing {sorted(missing)}, unknown {sorted(unknown)}"
            )
        if any(v < 0 for v in doses.values()):
            raise ModelError(f"{name} equivalent doses must not be negative")
    return float(sum(w * (h_male_msv[t] + h_female_msv[t]) / 2.0 for t, w in weights.items()))
