r"""Mean glandular dose by the Dance method: :math:`D_G = K\,g\,c\,s` (:math:`\times\,T`).

The method (Dance, Phys Med Biol 35:1211, 1990; Dance et al., Phys Med Biol 45:3225, 2000;
54:4361, 2009; 56:453, 2011; used by DICOM's dose reports and IAEA Human Health Series 17):

.. math::

    D_G = K\,g\,c\,s \qquad\text{(standard projection)}, \qquad
    D_G = K_T\,g\,c\,s\,T \qquad\text{(tomosynthesis)}

- :math:`K`: incident air kerma at the upper breast surface, free in air, without
  backscatter (:mod:`beamaudit.model.mammography`); for tomosynthesis :math:`K_T`, that of the
  whole acquisition's tube loading at the standard-projection tube position;
- :math:`g`: :math:`D_G/K` of a 50 % glandular breast of this thickness for the *reference
  beam* of the same first HVL;
- :math:`c`: the change from 50 % to the breast's glandularity, for the reference beam;
- :math:`s`: the change from the reference beam to this beam's spectrum;
- :math:`T = \sum_i \alpha_i\,t(\theta_i)`: the tomosynthesis factor, :math:`\alpha_i` the share
  of the tube loading of the projection at tube angle :math:`\theta_i`.

beamaudit computes each from its own Monte Carlo's monoenergetic table
(:mod:`beamaudit.model.dance_coefficients`) folded with a beam's air-kerma spectrum
:math:`\kappa_i` (normalised to sum 1 over the energy bins):

.. math::

    \frac{D_G}{K}(\text{beam}, T, g_w) = \sum_i \kappa_i\, DgN(E_i, T, g_w), \qquad
    \bar t(\theta) = \frac{\sum_i \kappa_i\, DgN(E_i, T, 0.5)\, t(E_i, T, \theta)}
                          {\sum_i \kappa_i\, DgN(E_i, T, 0.5)}

The reference beam is the kind the published g and c tables were made for, a molybdenum anode
with a molybdenum filter: here 1 mm Be, 0.030 mm Mo and the 3 mm PMMA paddle at 28 kV (the
commonest clinical Mo/Mo voltage and that of RQR-M 2), with the aluminium that brings its first
HVL to this beam's; an HVL below that of 28 kV without aluminium takes the voltage (20-28 kV)
that gives it. How the papers' Mo/Mo spectra reached each HVL could not be read here, so this
family is our choice, and it matters: at equal HVL a 40 kV family with aluminium gives g up to
9 % higher and every s 3-5 % lower. Of the families tried (28, 30, 35 and 40 kV before
aluminium is added), the 28 kV one reproduces the published s of Mo/Rh, Rh/Rh, W/Rh and W/Ag
best (within 1.5 %) and the Dance et al. (2000) g recalled from memory within about 6 %; the
test against the published s therefore checks the spectra and the Monte Carlo, but the family
was chosen with it. Then

.. math::

    g = \frac{D_G}{K}(\text{ref}, T, 0.5), \quad
    c = \frac{D_G}{K}(\text{ref}, T, g_w)\Big/g, \quad
    s = \frac{D_G}{K}(\text{beam}, T, g_w)\Big/(g\,c)

so that :math:`K g c s` equals the directly folded dose: the factors show where the dose comes
from, and :math:`s` of a Mo/Mo beam is 1 by construction. The published :math:`s` are averages
over typical breasts; ours are those of the exposure at hand.

An imported official table (:func:`beamaudit.model.dance_coefficients.load_official_coefficients`)
takes precedence for each factor it covers; every factor's source is in the trail, beside the
Monte Carlo's value.

Below 8 keV (the table's lowest energy) a photon is given :math:`DgN(8\ \text{keV})`, an upper
bound (a note says so when such photons carry more than 0.1 % of :math:`K`). Every figure is
an estimate for quality assurance and optimisation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy.optimize import brentq

from beamaudit import CAUTION
from beamaudit.model._engine import evaluate_unscaled
from beamaudit.model.attenuation import energy_bin_centres_kev, grid_mass_energy_absorption_cm2_g
from beamaudit.model.calibration import RoomCalibration
from beamaudit.model.dance_coefficients import (
    OfficialCoefficients,
    load_dgn_table,
    load_tomo_table,
    typical_glandularity,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec
from beamaudit.model.mammography import (
    DEFAULT_ANODE_ANGLE_DEG,
    DEFAULT_PADDLE,
    DEFAULT_WINDOW,
    BreastBeam,
    MammographyTechnique,
    breast_beam,
)
from beamaudit.model.trail import WhyTrail

__all__ = [
    "REFERENCE_FILTER",
    "DanceFactors",
    "GlandularDose",
    "TomosynthesisAcquisition",
    "dance_factors",
    "mean_glandular_dose",
    "reference_beam_weights",
]

FloatArray = npt.NDArray[np.float64]

#: The reference beam's filter (the Mo/Mo beams of the Dance g and c tables).
REFERENCE_FILTER = FilterSpec("Mo", 0.030)
#: The reference beams: this voltage with aluminium added, or a lower voltage (down to 20 kV)
#: without (module docstring).
_REFERENCE_KV = (20.0, 28.0)
_REFERENCE_MAX_AL_MM = 10.0
_METHOD = "Dance method: Dance 1990; Dance et al. 2000, 2009, 2011"
_NOTICE = CAUTION


@dataclass(frozen=True)
class TomosynthesisAcquisition:
    """The projections of a tomosynthesis acquisition.

    Parameters
    ----------
    angles_deg : sequence of float
        Tube angle of each projection, degrees (within +-30).
    mas_fractions : sequence of float or None
        Share of the tube loading of each projection (None: equal shares).
    label : str
        Name of the acquisition (looked up in an official table's T rows).
    """

    angles_deg: tuple[float, ...]
    mas_fractions: tuple[float, ...] | None = None
    label: str = ""

    def __post_init__(self) -> None:
        angles = tuple(float(a) for a in self.angles_deg)
        if not angles or not all(math.isfinite(a) and abs(a) <= 30.0 for a in angles):
            raise ModelError("tomosynthesis tube angles must be one or more values within +-30")
        object.__setattr__(self, "angles_deg", angles)
        if self.mas_fractions is not None:
            shares = tuple(float(x) for x in self.mas_fractions)
            if len(shares) != len(angles) or not all(x >= 0 and math.isfinite(x) for x in shares):
                raise ModelError("one non-negative tube-loading share per projection is needed")
            total = sum(shares)
            if total <= 0:
                raise ModelError("the tube-loading shares must not all be zero")
            object.__setattr__(self, "mas_fractions", tuple(x / total for x in shares))

    @classmethod
    def uniform(cls, arc_deg: float, projections: int) -> TomosynthesisAcquisition:
        """Equally spaced projections over a total arc, equal tube loading, e.g. (50, 25)."""
        if not (math.isfinite(arc_deg) and 0.0 <= arc_deg <= 60.0):
            raise ModelError(f"tomosynthesis arc {arc_deg} degrees is outside 0-60")
        if not (1 <= int(projections) <= 200) or int(projections) != projections:
            raise ModelError(f"tomosynthesis projections {projections} is outside 1-200")
        n = int(projections)
        angles = np.linspace(-arc_deg / 2.0, arc_deg / 2.0, n) if n > 1 else np.zeros(1)
        return cls(tuple(float(a) for a in angles), None, f"±{arc_deg / 2:g}° {n} projections")

    def shares(self) -> tuple[float, ...]:
        """The tube-loading share of each projection."""
        if self.mas_fractions is None:
            return tuple(1.0 / len(self.angles_deg) for _ in self.angles_deg)
        return self.mas_fractions


def _fold(weights: FloatArray, values: FloatArray) -> tuple[float, FloatArray]:
    """Fold table values at the table's energies with air-kerma weights on the model grid."""
    table = load_dgn_table()
    grid = energy_bin_centres_kev()
    on_grid = np.interp(grid, table.energies_kev, values)  # DgN(8 keV) below 8 keV
    if np.any(weights[grid > table.energies_kev[-1] + 0.125] > 0):
        raise ModelError("the beam holds photons above 50 keV, beyond the coefficient table")
    return float(np.sum(weights * on_grid)), on_grid


def _dgn_of(weights: FloatArray, thickness_mm: float, glandularity: float) -> tuple[float, float]:
    """Folded D_G/K and its statistical standard uncertainty (errors taken as correlated)."""
    dgn, u = load_dgn_table().at(thickness_mm, glandularity)
    value, _ = _fold(weights, dgn)
    spread, _ = _fold(weights, u)
    return value, spread


@lru_cache(maxsize=256)
def _reference_weights_cached(hvl_key: int, air_path_key: int) -> tuple[tuple[float, ...], str]:
    hvl = hvl_key / 1.0e5
    air = air_path_key / 10.0

    def beam(kv: float, al_mm: float) -> Any:
        layers: tuple[FilterSpec, ...] = (DEFAULT_WINDOW, REFERENCE_FILTER, DEFAULT_PADDLE)
        if al_mm > 0:
            layers = (*layers, FilterSpec("Al", al_mm))
        return evaluate_unscaled(
            kv=kv,
            filters=layers,
            anode="Mo",
            anode_angle_deg=DEFAULT_ANODE_ANGLE_DEG,
            ripple_percent=0.0,
            air_path_mm=air,
        )

    lo_kv, hi_kv = _REFERENCE_KV
    h_lo, h_hi = beam(lo_kv, 0.0).hvl1_mm_al, beam(hi_kv, 0.0).hvl1_mm_al
    if hvl < h_lo:
        raise ModelError(
            f"first HVL {hvl:.3f} mm Al is below that of the softest reference beam "
            f"(Mo/Mo at {lo_kv:g} kV: {h_lo:.3f} mm Al)"
        )
    if hvl <= h_hi:
        kv = brentq(lambda k: beam(k, 0.0).hvl1_mm_al - hvl, lo_kv, hi_kv, xtol=1e-4)
        chosen, how = beam(kv, 0.0), f"Mo/Mo at {kv:.2f} kV"
    else:
        if beam(hi_kv, _REFERENCE_MAX_AL_MM).hvl1_mm_al < hvl:
            raise ModelError(f"first HVL {hvl:.3f} mm Al is beyond the reference beams")
        al = brentq(lambda t: beam(hi_kv, t).hvl1_mm_al - hvl, 0.0, _REFERENCE_MAX_AL_MM, xtol=1e-5)
        chosen, how = beam(hi_kv, al), f"Mo/Mo at {hi_kv:g} kV + {al:.3f} mm Al"
    phi = chosen.fluence_per_mas_1m
    w = phi * energy_bin_centres_kev() * grid_mass_energy_absorption_cm2_g("air")
    return tuple(float(x) for x in w / w.sum()), how


def reference_beam_weights(hvl_mm_al: float, air_path_mm: float) -> tuple[FloatArray, str]:
    """Air-kerma weights of the reference (Mo/Mo) beam of a given first HVL, and its name.

    Parameters
    ----------
    hvl_mm_al : float
        First HVL to match (with the paddle), mm Al.
    air_path_mm : float
        Air between the focus and the breast surface, mm (as in the beam matched).

    Raises
    ------
    ModelError
        An HVL no reference beam reaches.
    """
    weights, how = _reference_weights_cached(round(hvl_mm_al * 1e5), round(air_path_mm * 10))
    return np.asarray(weights), how


@dataclass(frozen=True)
class DanceFactors:
    """The factors of one exposure (from our Monte Carlo), with the folded dose per kerma."""

    g: float
    c: float
    s: float
    tomo: float | None
    dgn: float  # D_G / K of this beam, folded directly (equals g c s)
    dgn_uncertainty: float
    reference_beam: str
    below_table_kerma_fraction: float


def dance_factors(
    beam: BreastBeam,
    *,
    glandularity: float,
    tomosynthesis: TomosynthesisAcquisition | None = None,
) -> DanceFactors:
    """g, c, s (and T) of one beam on one breast from the Monte Carlo tables.

    Raises
    ------
    ModelError
        Breast or beam outside the tables.
    """
    thickness = beam.technique.thickness_mm
    weights = beam.air_kerma_spectrum
    ref, how = reference_beam_weights(beam.hvl1_mm_al, beam.reference_distance_mm)
    g, _ = _dgn_of(ref, thickness, 0.5)
    ref_g, _ = _dgn_of(ref, thickness, glandularity)
    direct, u_direct = _dgn_of(weights, thickness, glandularity)
    tomo = None
    if tomosynthesis is not None:
        tomo = _tomo_factor(weights, thickness, tomosynthesis)
    grid = energy_bin_centres_kev()
    below = float(np.sum(weights[grid < load_dgn_table().energies_kev[0]]))
    return DanceFactors(
        g=g,
        c=ref_g / g,
        s=direct / ref_g,
        tomo=tomo,
        dgn=direct,
        dgn_uncertainty=u_direct,
        reference_beam=how,
        below_table_kerma_fraction=below,
    )


def _tomo_factor(
    weights: FloatArray, thickness_mm: float, acquisition: TomosynthesisAcquisition
) -> float:
    table = load_tomo_table()
    dgn50, _ = load_dgn_table().at(thickness_mm, 0.5)
    dose_weights = weights * np.interp(
        energy_bin_centres_kev(), load_dgn_table().energies_kev, dgn50
    )
    grid = energy_bin_centres_kev()
    total = 0.0
    for angle, share in zip(acquisition.angles_deg, acquisition.shares(), strict=True):
        t = np.interp(grid, table.energies_kev, table.at(thickness_mm, angle))
        total += share * float(np.sum(dose_weights * t) / np.sum(dose_weights))
    return total


@dataclass(frozen=True)
class GlandularDose:
    """Mean glandular dose of one exposure, its factors and how it was made.

    Attributes
    ----------
    mgd_mgy, mgd_uncertainty_mgy : float
        :math:`D_G` and its standard uncertainty, mGy.
    incident_air_kerma_mgy, incident_air_kerma_uncertainty_mgy : float
        :math:`K` (for tomosynthesis :math:`K_T`), mGy.
    hvl1_mm_al : float
    g, c, s : float
        The factors used (official where the official table covers them).
    tomo_factor : float or None
        T (None for a standard projection).
    glandularity : float
        Glandular mass fraction used.
    thickness_mm : float
    coefficients : str
        ``"beamaudit Monte Carlo"`` or the official table's description.
    monte_carlo : dict of str to float
        The Monte Carlo's g, c, s (and T, and D_G) beside whatever was used.
    assumptions : list of str
    trail : WhyTrail
    beam : BreastBeam
    """

    mgd_mgy: float
    mgd_uncertainty_mgy: float
    incident_air_kerma_mgy: float
    incident_air_kerma_uncertainty_mgy: float
    hvl1_mm_al: float
    g: float
    c: float
    s: float
    tomo_factor: float | None
    glandularity: float
    thickness_mm: float
    coefficients: str
    monte_carlo: dict[str, float]
    assumptions: list[str]
    trail: WhyTrail = field(repr=False)
    beam: BreastBeam = field(repr=False)

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready mapping (the trail as a list of steps)."""
        t = self.beam.technique
        return {
            "mgd_mgy": self.mgd_mgy,
            "mgd_uncertainty_mgy": self.mgd_uncertainty_mgy,
            "incident_air_kerma_mgy": self.incident_air_kerma_mgy,
            "incident_air_kerma_uncertainty_mgy": self.incident_air_kerma_uncertainty_mgy,
            "hvl1_mm_al": self.hvl1_mm_al,
            "g": self.g,
            "c": self.c,
            "s": self.s,
            "tomo_factor": self.tomo_factor,
            "glandularity_percent": 100.0 * self.glandularity,
            "thickness_mm": self.thickness_mm,
            "kv": t.kv,
            "target_filter": t.target_filter,
            "calibrated": self.beam.beam.calibrated,
            "coefficients": self.coefficients,
            "monte_carlo": dict(self.monte_carlo),
            "assumptions": list(self.assumptions),
            "trail": self.trail.as_list(),
            "notice": _NOTICE,
        }


def _choose_glandularity(
    thickness_mm: float, glandularity: float | None, age_years: float | None, trail: WhyTrail
) -> float:
    if glandularity is not None:
        g = float(glandularity)
        if not (math.isfinite(g) and 0.001 <= g <= 1.0):
            raise ModelError(
                f"glandularity {glandularity} is outside 0.001-1: it is a mass fraction "
                "(0.3 for 30 %)"
            )
        trail.add("glandularity", g, "1", equation="given", source="caller")
        return g
    if age_years is not None and not (math.isfinite(age_years) and 0.0 < age_years < 130.0):
        raise ModelError(f"age {age_years} is not an age in years")
    typical = typical_glandularity(thickness_mm, age_years)
    trail.add(
        "glandularity",
        typical.glandularity,
        "1",
        equation="typical glandularity by thickness and age group",
        source="Dance et al., Phys Med Biol 45:3225 (2000)",
        inputs={"thickness_mm": thickness_mm, "age_years": age_years},
        assumed=True,
        note=typical.note,
    )
    return typical.glandularity


def _official(notes: list[str], name: str, lookup: Any, *args: Any) -> float | None:
    """A factor from the official table, or None (with a note) where it does not cover it."""
    try:
        value = lookup(*args)
    except ModelError as exc:
        notes.append(f"official table does not cover {name} ({exc}): Monte Carlo value used")
        return None
    if value is None:
        notes.append(f"official table lists no {name}: Monte Carlo value used")
        return None
    return float(value)


@dataclass(frozen=True)
class _Factors:
    """The factors chosen for one exposure: official where covered, else the Monte Carlo's."""

    g: float
    c: float
    s: float
    tomo: float | None
    official: tuple[float | None, float | None, float | None, float | None]  # g, c, s, T
    notes: list[str]


def _trail_technique(trail: WhyTrail, beam: BreastBeam) -> None:
    """Record the technique, the beam model's assumptions and the first HVL in the trail."""
    t = beam.technique
    trail.add("kvp_kv", t.kv, "kV", equation="given", source="technique")
    trail.add("target_filter", t.target_filter, "", equation="given", source="technique")
    trail.add("thickness_mm", t.thickness_mm, "mm", equation="given", source="technique")
    for note in beam.assumptions:
        trail.add(
            "beam_model",
            None,
            "",
            equation="assumption of the beam model",
            source="beamaudit.model.mammography",
            assumed=True,
            note=note,
        )
    trail.add(
        "hvl1_mm_al",
        beam.hvl1_mm_al,
        "mm Al",
        equation="first HVL of the spectrum with the paddle (root of K(t) = K(0)/2)",
        source="beamaudit beam model",
        inputs={"layers": [f.as_dict() for f in beam.layers]},
    )


def _incident_air_kerma(
    beam: BreastBeam,
    exposure_mas: float | None,
    incident_air_kerma_mgy: float | None,
    trail: WhyTrail,
) -> tuple[float, float]:
    """K and its standard uncertainty, mGy: given, or from the beam's output and the mAs."""
    if incident_air_kerma_mgy is not None:
        k = float(incident_air_kerma_mgy)
        if not (math.isfinite(k) and k > 0):
            raise ModelError(f"incident air kerma {incident_air_kerma_mgy} mGy is not positive")
        trail.add("incident_air_kerma_mgy", k, "mGy", equation="given", source="caller")
        return k, 0.0
    if exposure_mas is None:
        raise ModelError("either the exposure in mAs or the incident air kerma is needed")
    mas = float(exposure_mas)
    if not (math.isfinite(mas) and mas > 0):
        raise ModelError(f"exposure {exposure_mas} mAs is not a positive number")
    k = beam.air_kerma_per_mas_mgy * mas
    u_k = beam.air_kerma_per_mas_uncertainty_mgy * mas
    trail.add(
        "incident_air_kerma_mgy",
        k,
        "mGy",
        equation="K = Y(1 m) · mAs · (1000 mm / r_ref)², r_ref = √((d_support − T)² + 60²)",
        source="inverse-square law; reference point of the UK and European protocols",
        inputs={
            "output_ugy_per_mas_1m": beam.beam.output_ugy_per_mas_1m,
            "exposure_mas": mas,
            "reference_distance_mm": beam.reference_distance_mm,
            "standard_uncertainty_mgy": u_k,
        },
    )
    return k, u_k


def _choose_factors(
    beam: BreastBeam,
    mc: DanceFactors,
    gw: float,
    tomosynthesis: TomosynthesisAcquisition | None,
    official: OfficialCoefficients | None,
) -> _Factors:
    """g, c, s (and T) from the official table where it covers them, else the Monte Carlo's."""
    t = beam.technique
    hvl = beam.hvl1_mm_al
    notes: list[str] = []
    g_off = c_off = s_off = t_off = None
    if official is not None:
        g_off = _official(notes, "g", official.g, hvl, t.thickness_mm)
        c_off = _official(notes, "c", official.c, hvl, t.thickness_mm, gw)
        s_off = _official(
            notes, f"s of {t.target_filter}", official.s, t.target_filter, t.thickness_mm
        )
        if tomosynthesis is not None:
            t_off = _official(
                notes,
                f"T of {tomosynthesis.label or 'the acquisition'}",
                official.tomo_factor,
                tomosynthesis.label,
                t.thickness_mm,
            )
    return _Factors(
        g=g_off if g_off is not None else mc.g,
        c=c_off if c_off is not None else mc.c,
        s=s_off if s_off is not None else mc.s,
        tomo=None if tomosynthesis is None else (t_off if t_off is not None else mc.tomo),
        official=(g_off, c_off, s_off, t_off),
        notes=notes,
    )


def _trail_factors(
    trail: WhyTrail,
    factors: _Factors,
    mc: DanceFactors,
    gw: float,
    hvl: float,
    tomosynthesis: TomosynthesisAcquisition | None,
    official: OfficialCoefficients | None,
) -> None:
    """Record g, c, s (and T) in the trail, each with its source and the Monte Carlo's value."""
    g_off, c_off, s_off, t_off = factors.official
    mc_source = (
        f"beamaudit Monte Carlo (model/data/breast_dgn_mc.csv); reference {mc.reference_beam}"
    )
    for name, value, official_value, mc_value in (
        ("g", factors.g, g_off, mc.g),
        ("c", factors.c, c_off, mc.c),
        ("s", factors.s, s_off, mc.s),
    ):
        trail.add(
            name,
            value,
            "1",
            equation={
                "g": "D_G/K, 50 % glandular, reference beam of the same HVL",
                "c": "D_G/K(glandularity) / D_G/K(50 %), reference beam",
                "s": "D_G/K(this beam) / D_G/K(reference beam)",
            }[name],
            source=official.describe() if official_value is not None and official else mc_source,
            inputs={"monte_carlo": mc_value, "glandularity": gw, "hvl1_mm_al": hvl},
        )
    if factors.tomo is not None:
        assert tomosynthesis is not None
        trail.add(
            "tomo_factor",
            factors.tomo,
            "1",
            equation="T = Σ α_i t(θ_i), t folded with the spectrum",
            source=official.describe()
            if t_off is not None and official
            else "beamaudit Monte Carlo (model/data/breast_tomo_t_mc.csv), Dance et al. 2011",
            inputs={
                "angles_deg": list(tomosynthesis.angles_deg),
                "shares": list(tomosynthesis.shares()),
                "monte_carlo": mc.tomo,
            },
        )


def _assumptions(trail: WhyTrail, notes: list[str], mc: DanceFactors) -> list[str]:
    """The trail's assumptions, the official table's notes and the below-8-keV note."""
    assumptions = list(trail.assumptions)
    assumptions.extend(notes)
    if mc.below_table_kerma_fraction > 1e-3:
        assumptions.append(
            f"{100 * mc.below_table_kerma_fraction:.1f} % of K is carried by photons below "
            "8 keV, given the 8 keV coefficient (an upper bound)"
        )
    return assumptions


def _monte_carlo_summary(mc: DanceFactors, k: float) -> dict[str, float]:
    """The Monte Carlo's g, c, s, D_G (and T) to show beside the factors used."""
    monte_carlo = {"g": mc.g, "c": mc.c, "s": mc.s, "mgd_mgy": k * mc.dgn * (mc.tomo or 1.0)}
    if mc.tomo is not None:
        monte_carlo["tomo_factor"] = mc.tomo
    return monte_carlo


def mean_glandular_dose(
    technique: MammographyTechnique,
    *,
    exposure_mas: float | None = None,
    incident_air_kerma_mgy: float | None = None,
    glandularity: float | None = None,
    age_years: float | None = None,
    tomosynthesis: TomosynthesisAcquisition | None = None,
    calibration: RoomCalibration | None = None,
    official: OfficialCoefficients | None = None,
) -> GlandularDose:
    """Mean glandular dose of one exposure (module docstring).

    Parameters
    ----------
    technique : MammographyTechnique
    exposure_mas : float, optional
        Tube loading, mAs (for tomosynthesis, of the whole acquisition). Required unless
        ``incident_air_kerma_mgy`` is given.
    incident_air_kerma_mgy : float, optional
        K measured or reported; replaces the one computed from the output and mAs.
    glandularity : float, optional
        Glandular mass fraction (0.001-1); None: typical for the thickness and ``age_years``
        (Dance et al. 2000), flagged assumed.
    age_years : float, optional
    tomosynthesis : TomosynthesisAcquisition, optional
        The acquisition's projections; None for a standard projection.
    calibration : RoomCalibration, optional
    official : OfficialCoefficients, optional
        An imported table; its factors take precedence where it covers them.

    Returns
    -------
    GlandularDose

    Raises
    ------
    ModelError
        Input out of range, neither mAs nor K given, or a breast outside the tables.
    """
    trail = WhyTrail()
    beam = breast_beam(technique, calibration=calibration)
    _trail_technique(trail, beam)
    k, u_k = _incident_air_kerma(beam, exposure_mas, incident_air_kerma_mgy, trail)
    gw = _choose_glandularity(technique.thickness_mm, glandularity, age_years, trail)
    mc = dance_factors(beam, glandularity=gw, tomosynthesis=tomosynthesis)
    hvl = beam.hvl1_mm_al
    f = _choose_factors(beam, mc, gw, tomosynthesis, official)
    _trail_factors(trail, f, mc, gw, hvl, tomosynthesis, official)
    mgd = k * f.g * f.c * f.s * (f.tomo if f.tomo is not None else 1.0)
    rel = math.hypot(u_k / k if k else 0.0, mc.dgn_uncertainty / mc.dgn)
    trail.add(
        "mgd_mgy",
        mgd,
        "mGy",
        equation="D_G = K g c s" + (" T" if f.tomo is not None else ""),
        source=_METHOD,
        inputs={
            "incident_air_kerma_mgy": k,
            "g": f.g,
            "c": f.c,
            "s": f.s,
            "tomo_factor": f.tomo,
            "relative_uncertainty": rel,
        },
    )
    return GlandularDose(
        mgd_mgy=mgd,
        mgd_uncertainty_mgy=mgd * rel,
        incident_air_kerma_mgy=k,
        incident_air_kerma_uncertainty_mgy=u_k,
        hvl1_mm_al=hvl,
        g=f.g,
        c=f.c,
        s=f.s,
        tomo_factor=f.tomo,
        glandularity=gw,
        thickness_mm=technique.thickness_mm,
        coefficients=(
            official.describe()
            if official is not None and any(v is not None for v in f.official)
            else "beamaudit Monte Carlo"
        ),
        monte_carlo=_monte_carlo_summary(mc, k),
        assumptions=_assumptions(trail, f.notes, mc),
        trail=trail,
        beam=beam,
    )
