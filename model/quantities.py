r"""Beam quantities from a photon fluence spectrum: air kerma, HVLs, mean and effective energy.

All functions take the fluence on the fixed energy grid
(:func:`beamaudit.model.attenuation.energy_bin_centres_kev`), in photons per mm² per bin.

Air kerma (collision kerma; :math:`g \approx 0` in air at these energies):

.. math::

    K = \sum_i \Phi_i\, E_i \left(\frac{\mu_{en}}{\rho}\right)_{air}(E_i)

Half-value layers are found by root-finding on the full spectrum (no fitted formula): the first
HVL :math:`t_1` solves :math:`K(t_1) = K(0)/2` and the second is :math:`t_2 - t_1` with
:math:`K(t_2) = K(0)/4`, where :math:`K(t)` is the air kerma behind an extra absorber of
thickness *t* in narrow-beam geometry (ICRU Report 74; IAEA TRS 457, section 6). The homogeneity
coefficient is :math:`h = t_1/(t_2 - t_1)`. The effective energy is that of the monoenergetic beam
with the same first HVL in aluminium, :math:`\mu_{Al}(E_{eff}) = \ln 2 / t_1`.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy.optimize import brentq

from beamaudit.model.attenuation import (
    energy_bin_centres_kev,
    grid_linear_attenuation_per_mm,
    grid_mass_energy_absorption_cm2_g,
)
from beamaudit.model.errors import ModelError

__all__ = [
    "KEV_PER_G_TO_UGY",
    "air_kerma_ugy",
    "effective_energy_kev",
    "half_value_layers_mm",
    "mean_energy_kev",
]

FloatArray = npt.NDArray[np.float64]

#: Conversion of sum(Phi [1/mm²] * E [keV] * mu_en/rho [cm²/g]) to µGy:
#: 100 mm²/cm² * 1.602176634e-16 J/keV * 1000 g/kg * 1e6 µGy/Gy.
KEV_PER_G_TO_UGY = 100.0 * 1.602176634e-16 * 1.0e3 * 1.0e6
#: Relative tolerance of the HVL root-finding (on the thickness).
_HVL_RTOL = 1.0e-9
#: Lowest energy of the effective-energy search, keV: above the Al K-edge (1.56 keV), where
#: mu_Al falls monotonically.
_EFFECTIVE_ENERGY_MIN_KEV = 2.0


def _check(fluence: npt.ArrayLike) -> FloatArray:
    phi = np.asarray(fluence, dtype=np.float64)
    if phi.shape != energy_bin_centres_kev().shape:
        raise ModelError("fluence must be given on the model's energy grid")
    if not np.all(np.isfinite(phi)) or np.any(phi < 0.0) or not np.any(phi > 0.0):
        raise ModelError("fluence must be finite, non-negative and not all zero")
    return phi


def air_kerma_ugy(fluence_per_mm2: npt.ArrayLike) -> float:
    """Air kerma of a fluence spectrum, µGy.

    Parameters
    ----------
    fluence_per_mm2 : array_like
        Photons per mm² per bin on the model's energy grid.

    Returns
    -------
    float
        Air kerma in µGy.
    """
    phi = _check(fluence_per_mm2)
    weights = phi * energy_bin_centres_kev() * grid_mass_energy_absorption_cm2_g("air")
    return float(np.sum(weights) * KEV_PER_G_TO_UGY)


def half_value_layers_mm(
    fluence_per_mm2: npt.ArrayLike, *, absorber: str = "Al"
) -> tuple[float, float]:
    """First and second half-value layers of a beam in an absorber, mm.

    Parameters
    ----------
    fluence_per_mm2 : array_like
        Photons per mm² per bin on the model's energy grid.
    absorber : str
        Absorber material (``"Al"`` or ``"Cu"`` by convention).

    Returns
    -------
    hvl1_mm, hvl2_mm : float
        First HVL and second HVL (the extra thickness from 1/2 to 1/4 of the air kerma).
    """
    phi = _check(fluence_per_mm2)
    weights = phi * energy_bin_centres_kev() * grid_mass_energy_absorption_cm2_g("air")
    keep = weights > weights.max() * 1e-15
    w = weights[keep] / np.sum(weights[keep])
    mu = grid_linear_attenuation_per_mm(absorber)[keep]

    def thickness_for(fraction: float) -> float:
        def f(t: float) -> float:
            return float(np.dot(w, np.exp(-mu * t))) - fraction

        upper = math.log(1.0 / fraction) / float(mu.min())  # kerma at upper <= fraction
        return float(brentq(f, 0.0, upper, rtol=_HVL_RTOL, xtol=1e-12))

    t1 = thickness_for(0.5)
    t2 = thickness_for(0.25)
    return t1, t2 - t1


def mean_energy_kev(fluence_per_mm2: npt.ArrayLike) -> float:
    """Fluence-weighted mean photon energy, keV.

    Parameters
    ----------
    fluence_per_mm2 : array_like
        Photons per mm² per bin on the model's energy grid.

    Returns
    -------
    float
        :math:`\\sum \\Phi_i E_i / \\sum \\Phi_i`.
    """
    phi = _check(fluence_per_mm2)
    return float(np.sum(phi * energy_bin_centres_kev()) / np.sum(phi))


def effective_energy_kev(hvl1_mm_al: float) -> float:
    """Energy of the monoenergetic beam with the same first HVL in aluminium, keV.

    Parameters
    ----------
    hvl1_mm_al : float
        First HVL in mm Al.

    Returns
    -------
    float
        Effective energy, keV (log-log interpolation of mu_Al on the energy grid).

    Raises
    ------
    ModelError
        HVL outside what the grid's energies can give.
    """
    energies = energy_bin_centres_kev()
    keep = energies >= _EFFECTIVE_ENERGY_MIN_KEV
    log_mu = np.log(grid_linear_attenuation_per_mm("Al")[keep])
    target = math.log(math.log(2.0) / hvl1_mm_al)
    if not log_mu[-1] <= target <= log_mu[0]:
        raise ModelError(f"first HVL {hvl1_mm_al} mm Al is outside the energy grid's range")
    return float(np.exp(np.interp(target, log_mu[::-1], np.log(energies[keep])[::-1])))
