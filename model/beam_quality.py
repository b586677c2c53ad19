r"""Uncertainty of a beam's quality figures (HVL1, HVL2, homogeneity, HVL in Cu, energies).

The quality of a beam is computed by the spectrum model from the tube voltage, the total
filtration and the attenuation coefficients of the filters and of the HVL absorber; none of them
is known exactly. Their standard uncertainties :math:`u(x_i)` are propagated to each figure
:math:`q` by linearisation (GUM, JCGM 100:2008, 5.1.2, eq. 10, uncorrelated inputs):

.. math::

    u(q) = \sqrt{\sum_i \left(c_i\, u(x_i)\right)^2}, \qquad
    c_i \approx \frac{q(x_i + u_i) - q(x_i - u_i)}{2 u_i}

(central differences of the spectrum model over one standard uncertainty,
:func:`beamaudit.model.uncertainty.propagate_linearised`), and the expanded uncertainty is
:math:`U = k\,u(q)` with :math:`k = 2` (GUM 6.2.1, 6.3.3: about 95 % for a near-normal output).

The inputs and their standard uncertainties:

- **Tube voltage.** Without a measured accuracy, the tolerance of IEC 60601-2-54:2009
  (subclause 203.6.4.3.104.2, from memory, low confidence: the indicated tube voltage within
  ± 10 %) taken as the half-width :math:`a` of a rectangular distribution, :math:`u = a/\sqrt 3`
  (GUM 4.3.7).
- **Total filtration**, as mm Al added or removed: a stated filtration within ± 0.5 mm Al, the
  assumed IEC 60601-1-3 minimum (nothing known) within ± 1.0 mm Al, both rectangular (our
  judgement); a calibration that fitted the inherent filtration gives its own standard
  uncertainty.
- **Attenuation coefficients** (mass attenuation of every filter and of the HVL absorber), taken
  as one scale :math:`1 + \varepsilon` on all of them, fully correlated across energies and
  materials (the conservative case): relative standard uncertainty 2 % (Hubbell, Phys Med Biol
  44 (1999) R1, for photon cross sections of 10-150 keV; from memory, medium confidence).
  Scaling every :math:`\mu` by :math:`1 + \varepsilon` equals filters :math:`1 + \varepsilon`
  times as thick and an HVL absorber whose half-value thickness is :math:`1/(1 + \varepsilon)`
  times as large, which is how it is evaluated (exact within the model).

The output per mAs is not propagated here: a room calibration fits its scale at the indicated
tube voltage, so the voltage's deviation is already in the calibration's uncertainty.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from beamaudit.model._engine import evaluate_unscaled
from beamaudit.model.beam import BeamSpec, _setup, _with_al_change
from beamaudit.model.calibration import RoomCalibration
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec
from beamaudit.model.spectrum import get_anode
from beamaudit.model.uncertainty import propagate_linearised

__all__ = [
    "ATTENUATION_RELATIVE_UNCERTAINTY",
    "COVERAGE_FACTOR",
    "FILTRATION_ASSUMED_TOLERANCE_MM_AL",
    "FILTRATION_STATED_TOLERANCE_MM_AL",
    "KV_TOLERANCE_REL",
    "BeamQualityUncertainty",
    "beam_quality_uncertainty",
    "kv_standard_uncertainty_kv",
]

#: IEC 60601-2-54:2009 tolerance of the tube voltage, relative half-width (from memory, low
#: confidence; older IEC 60601-2-7 gave the same ± 10 %).
KV_TOLERANCE_REL = 0.10
#: Half-width of a stated total filtration, mm Al (our judgement).
FILTRATION_STATED_TOLERANCE_MM_AL = 0.5
#: Half-width of the assumed IEC 60601-1-3 minimum filtration, mm Al (our judgement).
FILTRATION_ASSUMED_TOLERANCE_MM_AL = 1.0
#: Relative standard uncertainty of the attenuation coefficients, 10-150 keV (Hubbell, Phys Med
#: Biol 44 (1999) R1; from memory, medium confidence).
ATTENUATION_RELATIVE_UNCERTAINTY = 0.02
#: Coverage factor of the expanded uncertainty (GUM 6.3.3).
COVERAGE_FACTOR = 2.0

_QUALITY = (
    "hvl1_mm_al",
    "hvl2_mm_al",
    "homogeneity",
    "hvl1_mm_cu",
    "mean_energy_kev",
    "effective_energy_kev",
)
_SQRT3 = math.sqrt(3.0)


def kv_standard_uncertainty_kv(kv: float, tolerance_rel: float = KV_TOLERANCE_REL) -> float:
    """Standard uncertainty of a tube voltage known only to lie within ``± tolerance_rel``:
    the half-width over :math:`\\sqrt 3` (rectangular distribution, GUM 4.3.7)."""
    return tolerance_rel * kv / _SQRT3


@dataclass(frozen=True)
class BeamQualityUncertainty:
    """Standard uncertainties of a beam's quality figures, how they were made and from what.

    Attributes
    ----------
    values : dict of str to float
        The nominal figures (as :func:`beamaudit.model.compute_beam` gives them).
    standard_uncertainties : dict of str to float
        Combined standard uncertainty per figure, in its unit.
    contributions : dict of str to dict of str to float
        ``contributions[figure][input]`` = :math:`|c_i|\\, u(x_i)`.
    inputs : dict of str to float
        The standard uncertainty of each input: ``kv`` (kV), ``filtration_mm_al`` (mm Al),
        ``attenuation_rel`` (relative).
    method : str
        The method in one sentence, for the why trail.
    coverage_factor : float
    """

    values: dict[str, float]
    standard_uncertainties: dict[str, float]
    contributions: dict[str, dict[str, float]]
    inputs: dict[str, float]
    method: str
    coverage_factor: float = COVERAGE_FACTOR
    notes: tuple[str, ...] = field(default=())

    def expanded(self, figure: str) -> float:
        """The expanded uncertainty :math:`U = k\\,u` of ``figure``."""
        return self.coverage_factor * self.standard_uncertainties[figure]

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready mapping."""
        return {
            "values": dict(self.values),
            "standard_uncertainties": dict(self.standard_uncertainties),
            "contributions": {k: dict(v) for k, v in self.contributions.items()},
            "inputs": dict(self.inputs),
            "method": self.method,
            "coverage_factor": self.coverage_factor,
        }


def _scaled(filters: tuple[FilterSpec, ...], factor: float) -> tuple[FilterSpec, ...]:
    return tuple(FilterSpec(f.material, f.thickness_mm * factor) for f in filters)


def beam_quality_uncertainty(
    spec: BeamSpec,
    *,
    calibration: RoomCalibration | None = None,
    kv_uncertainty_kv: float | None = None,
    filtration_uncertainty_mm_al: float | None = None,
    attenuation_relative_uncertainty: float = ATTENUATION_RELATIVE_UNCERTAINTY,
) -> BeamQualityUncertainty:
    """Propagate the inputs' uncertainties through the spectrum model to the quality figures.

    Parameters
    ----------
    spec : BeamSpec
    calibration : RoomCalibration, optional
        As for :func:`beamaudit.model.compute_beam` (its fitted inherent filtration is part of the
        beam, its uncertainty the filtration's when known).
    kv_uncertainty_kv : float, optional
        Standard uncertainty of the tube voltage; None: the IEC 60601-2-54 tolerance
        (:func:`kv_standard_uncertainty_kv`).
    filtration_uncertainty_mm_al : float, optional
        Standard uncertainty of the total filtration in mm Al; None: the calibration's fitted
        value, else the stated or assumed tolerance over :math:`\\sqrt 3`.
    attenuation_relative_uncertainty : float
        Relative standard uncertainty of the attenuation coefficients.

    Returns
    -------
    BeamQualityUncertainty

    Raises
    ------
    ModelError
        A negative or non-finite uncertainty, or the calibration of another tube.
    """
    _, filters, assumed, _, fitted_u = _setup(spec, calibration, filtration_uncertainty_mm_al)
    kv_how = "as given"
    if kv_uncertainty_kv is None:
        kv_uncertainty_kv = kv_standard_uncertainty_kv(spec.kv)
        kv_how = f"IEC 60601-2-54 tolerance ± {KV_TOLERANCE_REL:.0%}, rectangular"
    if filtration_uncertainty_mm_al is not None:
        filt_how = "as given"
    elif fitted_u is not None:
        filtration_uncertainty_mm_al, filt_how = fitted_u, "fitted by the room calibration"
    else:
        half = FILTRATION_ASSUMED_TOLERANCE_MM_AL if assumed else FILTRATION_STATED_TOLERANCE_MM_AL
        filtration_uncertainty_mm_al = half / _SQRT3
        filt_how = f"{'assumed' if assumed else 'stated'} filtration ± {half:g} mm Al, rectangular"
    for name, u in (
        ("tube voltage", kv_uncertainty_kv),
        ("filtration", filtration_uncertainty_mm_al),
        ("attenuation coefficients", attenuation_relative_uncertainty),
    ):
        if not (math.isfinite(u) and u >= 0.0):
            raise ModelError(f"standard uncertainty of the {name} must be zero or positive")
    if not attenuation_relative_uncertainty < 0.5:
        raise ModelError("relative uncertainty of the attenuation coefficients must be below 50 %")

    def figures(inputs: Mapping[str, float]) -> dict[str, float]:
        scale = 1.0 + inputs["attenuation_rel"]
        raw = evaluate_unscaled(
            kv=inputs["kv"],
            filters=_scaled(_with_al_change(filters, inputs["filtration_mm_al"]), scale),
            anode=spec.anode,
            anode_angle_deg=spec.anode_angle_deg,
            ripple_percent=spec.ripple_percent,
            air_path_mm=spec.air_path_mm * scale,
        )
        # the HVL absorber's coefficients scaled too: its half-value thicknesses divided
        hvl1, hvl2, cu = raw.hvl1_mm_al / scale, raw.hvl2_mm_al / scale, raw.hvl1_mm_cu / scale
        return {
            "hvl1_mm_al": hvl1,
            "hvl2_mm_al": hvl2,
            "homogeneity": hvl1 / hvl2,
            "hvl1_mm_cu": cu,
            "mean_energy_kev": raw.mean_energy_kev,
            "effective_energy_kev": raw.effective_energy_kev,
        }

    anode = get_anode(spec.anode)
    total_al = sum(f.thickness_mm for f in filters if f.material == "Al")
    nominal_inputs = {"kv": spec.kv, "filtration_mm_al": 0.0, "attenuation_rel": 0.0}
    nominal = figures(nominal_inputs)
    inputs = {
        "kv": kv_uncertainty_kv,
        "filtration_mm_al": filtration_uncertainty_mm_al,
        "attenuation_rel": attenuation_relative_uncertainty,
    }
    budget = propagate_linearised(
        figures,
        nominal_inputs,
        inputs,
        bounds={"kv": (anode.kv_min, anode.kv_max), "filtration_mm_al": (-total_al, math.inf)},
        nominal_outputs=nominal,
    )
    method = (
        "GUM (JCGM 100:2008) 5.1 linearisation: central differences of the spectrum model over "
        f"one standard uncertainty of the tube voltage ({kv_uncertainty_kv:.2g} kV: {kv_how}), "
        f"the total filtration ({filtration_uncertainty_mm_al:.2g} mm Al: {filt_how}) and the "
        f"attenuation coefficients ({attenuation_relative_uncertainty:.0%}, one scale on all); "
        f"expanded uncertainty k = {COVERAGE_FACTOR:g}"
    )
    return BeamQualityUncertainty(
        values={q: float(nominal[q]) for q in _QUALITY},
        standard_uncertainties={q: float(budget.standard_uncertainties[q]) for q in _QUALITY},
        contributions={q: dict(budget.contributions[q]) for q in _QUALITY},
        inputs=inputs,
        method=method,
    )
