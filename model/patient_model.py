r"""The patient for skin-dose maps: an elliptical cylinder, its size, and its skin cells.

The body is one elliptical cylinder along the patient's long axis, of the trunk's cross-section
and the patient's height. In the *patient frame* (mm; right-handed):

- :math:`l` toward the patient's left, :math:`s` toward the head (superior), :math:`a` toward
  the front (anterior);
- the cylinder's axis is the :math:`s` axis, the vertex (top of the head) at :math:`s = 0`, the
  feet at :math:`s = -H`;
- the skin is :math:`(l/w)^2 + (a/t)^2 = 1` with :math:`w` the half-width and :math:`t` the
  half-thickness.

Size. The reference body is the MIRD adult phantom (Snyder et al., MIRD Pamphlet 5 revised,
1978; Cristy & Eckerman, ORNL/TM-8381, 1987): trunk an elliptical cylinder 40 cm wide and
20 cm deep, body 1.74 m and 70 kg (from memory; ``data/skin_dose_defaults.csv``). A patient of
height :math:`H` and mass :math:`m` keeps the reference shape, the cross-section scaled so that
the body's volume per unit height follows the mass per unit height (equal density):

.. math::

    w = w_0 \sqrt{\frac{m / H}{m_0 / H_0}}, \qquad t = t_0 \sqrt{\frac{m / H}{m_0 / H_0}}

Without a recorded height or mass the ICRP Publication 89 reference adult of the patient's sex
stands in (male 1.76 m, 73 kg; female 1.63 m, 60 kg), and without a sex the MIRD reference
(the ICRP 135 standard-size adult of 70 kg), every such choice noted as assumed.

A single cylinder is a trunk: over the head and the legs its sides lie further out than the
body's (in a lateral projection the skin is taken nearer the source than it is, which
overestimates). Said in every map's assumptions.

Skin cells. The surface is unrolled into cells of about ``cell_mm`` on a side: around the body
by arc length :math:`u` from the back's midline (the spine), increasing toward the patient's
left, from the right side line (:math:`u = -P/4`) through the spine (0), the left side line
(:math:`P/4`), the front's midline (:math:`P/2`) back to the right side line (:math:`3P/4`),
with :math:`P` the perimeter; along the body by the distance :math:`y` below the vertex. The
ellipse is symmetric about both axes, so each side line lies a quarter perimeter from the
spine; the cells around are a multiple of four, and the first half of them is the back.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from beamaudit.model.defaults import DefaultValue, load_named_constants
from beamaudit.model.errors import ModelError

__all__ = [
    "BODY_LANDMARKS",
    "PatientModel",
    "SkinGrid",
    "body_landmark_fraction",
    "landmark_for_region",
    "patient_model",
    "skin_default",
    "skin_grid",
]

FloatArray = NDArray[np.float64]

#: Named levels along the body (``landmark_<name>`` rows of ``data/skin_dose_defaults.csv``,
#: fractions of the body height below the vertex).
BODY_LANDMARKS = ("head", "neck", "shoulder", "chest", "abdomen", "pelvis", "knee", "foot", "trunk")

#: Words of a target region (DICOM Body Part Examined, or a dose report's Target Region meaning,
#: upper-cased) and the landmark each points to, first match wins.
_REGION_WORDS: tuple[tuple[tuple[str, ...], str], ...] = (
    (("HEAD", "BRAIN", "SKULL", "CEREBR", "CRANI", "INTRACRAN", "FACE"), "head"),
    (("NECK", "CAROTID", "CSPINE", "CERVICAL"), "neck"),
    (("CHEST", "THORA", "HEART", "CORONARY", "CARDIAC", "LUNG", "AORTIC ARCH", "TSPINE"), "chest"),
    (
        ("ABDOMEN", "LIVER", "KIDNEY", "RENAL", "HEPAT", "BILIARY", "PORTAL", "LSPINE", "LUMBAR"),
        "abdomen",
    ),
    (("PELVIS", "HIP", "ILIAC", "UTER", "PROSTAT", "BLADDER"), "pelvis"),
    (("KNEE", "LEG", "FEMOR", "THIGH", "POPLIT", "LOWER LIMB"), "knee"),
    (("FOOT", "ANKLE", "TIBIA"), "foot"),
)

_HEIGHT_RANGE_MM = (500.0, 2500.0)
_MASS_RANGE_KG = (3.0, 400.0)
_ADULT_AGE_YEARS = 18.0


def skin_default(key: str) -> DefaultValue:
    """One named constant of ``data/skin_dose_defaults.csv``.

    Raises
    ------
    ModelError
        For a key not in the table.
    """
    try:
        return load_named_constants("skin_dose_defaults.csv")[key]
    except KeyError:
        raise ModelError(f"no skin-dose default named {key!r}") from None


def body_landmark_fraction(name: str) -> float:
    """Fraction of the body height below the vertex of a named landmark (:data:`BODY_LANDMARKS`)."""
    if name not in BODY_LANDMARKS:
        raise ModelError(f"unknown body landmark {name!r} (known: {', '.join(BODY_LANDMARKS)})")
    return skin_default(f"landmark_{name}").value


def landmark_for_region(region: str | None) -> str | None:
    """The landmark a target region points to (``None`` when no word of it is known)."""
    if not region:
        return None
    text = region.upper().replace("_", " ")
    for words, landmark in _REGION_WORDS:
        if any(w in text for w in words):
            return landmark
    return None


@dataclass(frozen=True)
class PatientModel:
    """An elliptical-cylinder patient (see the module docstring).

    Attributes
    ----------
    height_mm, mass_kg : the body used (recorded, or a reference body's).
    half_width_mm, half_thickness_mm : semi-axes of the cross-section, left-right and
        front-back.
    size_basis : how the size was found (``"height_and_mass"``, ``"mass"``, ``"height"``,
        ``"reference_male"``, ``"reference_female"``, ``"reference_adult"``).
    assumptions : one sentence per assumption made.
    """

    height_mm: float
    mass_kg: float
    half_width_mm: float
    half_thickness_mm: float
    size_basis: str
    assumptions: tuple[str, ...] = ()

    @property
    def perimeter_mm(self) -> float:
        """Perimeter of the cross-section (numerical arc length of the ellipse)."""
        return float(_arc_table(self.half_width_mm, self.half_thickness_mm)[1][-1])

    def as_dict(self) -> dict[str, object]:
        """A JSON-ready description."""
        return {
            "height_mm": self.height_mm,
            "mass_kg": self.mass_kg,
            "half_width_mm": self.half_width_mm,
            "half_thickness_mm": self.half_thickness_mm,
            "size_basis": self.size_basis,
            "assumptions": list(self.assumptions),
        }


def _checked(name: str, value: float | None, low: float, high: float, unit: str) -> float | None:
    if value is None:
        return None
    number = float(value)
    if not (math.isfinite(number) and low <= number <= high):
        raise ModelError(f"{name} {value!r} {unit} is outside {low:g}-{high:g} {unit}")
    return number


def patient_model(
    *,
    height_m: float | None = None,
    mass_kg: float | None = None,
    sex: str | None = None,
    age_years: float | None = None,
) -> PatientModel:
    """The elliptical cylinder for a patient of the given height, mass and sex.

    .. math::

        w = w_0 \\sqrt{\\frac{m / H}{m_0 / H_0}}, \\qquad
        t = t_0 \\sqrt{\\frac{m / H}{m_0 / H_0}}

    with the MIRD adult trunk :math:`w_0 = 200` mm, :math:`t_0 = 100` mm at :math:`H_0 = 1.74`
    m, :math:`m_0 = 70` kg (module docstring). A missing height or mass is the ICRP 89 reference
    adult's of the patient's sex (the MIRD reference without a sex); when only one is missing the
    other keeps its recorded value.

    Parameters
    ----------
    height_m : float, optional
        Patient's height, m (DICOM Patient's Size (0010,1020)).
    mass_kg : float, optional
        Patient's mass, kg (Patient's Weight (0010,1030)).
    sex : {"M", "F", "O"}, optional
    age_years : float, optional
        Below 18 years the adult body model is noted as uncertain for the patient.

    Raises
    ------
    ModelError
        A height outside 0.5-2.5 m or a mass outside 3-400 kg.

    Examples
    --------
    >>> p = patient_model()
    >>> (p.half_width_mm, p.half_thickness_mm, p.size_basis)
    (200.0, 100.0, 'reference_adult')
    """
    height = _checked(
        "height", None if height_m is None else height_m * 1000.0, *_HEIGHT_RANGE_MM, "mm"
    )
    mass = _checked("mass", mass_kg, *_MASS_RANGE_KG, "kg")
    ref_h = skin_default("reference_body_height_mm").value
    ref_m = skin_default("reference_body_mass_kg").value
    assumptions: list[str] = []
    sex_key = {"M": "male", "F": "female"}.get((sex or "").strip().upper())
    if height is None or mass is None:
        if sex_key is not None:
            fill_h = skin_default(f"reference_{sex_key}_height_mm").value
            fill_m = skin_default(f"reference_{sex_key}_mass_kg").value
            who = f"the ICRP 89 reference adult {sex_key}"
        else:
            fill_h, fill_m, who = ref_h, ref_m, "the MIRD reference adult (70 kg)"
        missing = [n for n, v in (("height", height), ("mass", mass)) if v is None]
        assumptions.append(
            f"patient {' and '.join(missing)} not recorded: those of {who} used "
            f"({fill_h / 1000.0:.2f} m, {fill_m:g} kg)"
        )
        if height is None and mass is None:
            basis = f"reference_{sex_key}" if sex_key else "reference_adult"
        else:
            basis = "mass" if mass is not None else "height"
        height = fill_h if height is None else height
        mass = fill_m if mass is None else mass
    else:
        basis = "height_and_mass"
    scale = math.sqrt((mass / height) / (ref_m / ref_h))
    assumptions.append(
        "patient modelled as one elliptical cylinder of the trunk's cross-section over the "
        "whole height (MIRD adult shape scaled by mass per height): over the head and limbs its "
        "sides lie further out than the body's, so lateral skin doses there are overestimated"
    )
    if age_years is not None and age_years < _ADULT_AGE_YEARS:
        assumptions.append(
            f"patient aged {age_years:g} years: the body model is an adult's, the estimate is "
            "less certain for a child"
        )
    return PatientModel(
        height_mm=float(height),
        mass_kg=float(mass),
        half_width_mm=skin_default("reference_trunk_half_width_mm").value * scale,
        half_thickness_mm=skin_default("reference_trunk_half_thickness_mm").value * scale,
        size_basis=basis,
        assumptions=tuple(assumptions),
    )


_ARC_SAMPLES = 20_000


@functools.lru_cache(maxsize=32)
def _arc_table(half_width: float, half_thickness: float) -> tuple[FloatArray, FloatArray]:
    """Parametric angle and arc length from the spine, for :math:`(w \\sin\\tau, -t\\cos\\tau)`."""
    tau = np.linspace(0.0, 2.0 * math.pi, _ARC_SAMPLES + 1)
    speed = np.hypot(half_width * np.cos(tau), half_thickness * np.sin(tau))
    arc = np.concatenate(([0.0], np.cumsum(0.5 * (speed[1:] + speed[:-1]) * np.diff(tau))))
    tau.setflags(write=False)
    arc.setflags(write=False)
    return tau, arc


@dataclass(frozen=True)
class SkinGrid:
    """The patient's skin unrolled into cells (module docstring for the coordinates).

    Attributes
    ----------
    patient : PatientModel
    around_mm : ndarray, shape (n_around,)
        Cell centres around the body, arc length from the spine, + toward the patient's left,
        from -P/4 to 3P/4.
    along_mm : ndarray, shape (n_along,)
        Cell centres along the body, mm below the vertex.
    cell_around_mm, cell_along_mm : float
        Cell sizes; every cell has the same area.
    """

    patient: PatientModel
    around_mm: FloatArray
    along_mm: FloatArray
    cell_around_mm: float
    cell_along_mm: float

    @property
    def shape(self) -> tuple[int, int]:
        """(n_along, n_around)."""
        return self.along_mm.size, self.around_mm.size

    @property
    def perimeter_mm(self) -> float:
        return self.around_mm.size * self.cell_around_mm

    @property
    def cell_area_cm2(self) -> float:
        return self.cell_around_mm * self.cell_along_mm / 100.0

    def surface_points(self, around_mm: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Cross-section points and outward unit normals at arc lengths ``around_mm``.

        Returns
        -------
        points, normals : ndarray, shape (..., 2)
            ``(l, a)`` coordinates of the skin and of its outward normal.
        """
        w, t = self.patient.half_width_mm, self.patient.half_thickness_mm
        tau_table, arc_table = _arc_table(w, t)
        arc = np.mod(np.asarray(around_mm, dtype=np.float64), arc_table[-1])
        tau = np.interp(arc, arc_table, tau_table)
        points = np.stack((w * np.sin(tau), -t * np.cos(tau)), axis=-1)
        normal = np.stack((np.sin(tau) / w, -np.cos(tau) / t), axis=-1)
        normal /= np.linalg.norm(normal, axis=-1, keepdims=True)
        return points, normal


def skin_grid(patient: PatientModel, *, cell_mm: float = 10.0) -> SkinGrid:
    """Cells of about ``cell_mm`` covering the patient's skin (module docstring).

    Raises
    ------
    ModelError
        A cell size outside 2-50 mm.
    """
    if not (math.isfinite(cell_mm) and 2.0 <= cell_mm <= 50.0):
        raise ModelError(f"skin cell size {cell_mm!r} mm is outside 2-50 mm")
    perimeter = patient.perimeter_mm
    n_around = max(4, 4 * round(perimeter / (4.0 * cell_mm)))
    n_along = max(1, round(patient.height_mm / cell_mm))
    d_around = perimeter / n_around
    d_along = patient.height_mm / n_along
    around = -perimeter / 4.0 + (np.arange(n_around, dtype=np.float64) + 0.5) * d_around
    along = (np.arange(n_along, dtype=np.float64) + 0.5) * d_along
    around.setflags(write=False)
    along.setflags(write=False)
    return SkinGrid(patient, around, along, d_around, d_along)
