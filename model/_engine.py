"""Unscaled beam physics: the tube spectrum filtered and converted to fluence and beam figures.

Private: the public entry points are :func:`beamaudit.model.compute_beam`,
:func:`beamaudit.model.calibrate_room` and :class:`beamaudit.model.BeamTable`, which apply the
output scale of a room calibration (or the documented default) on top of this.

Fluence per mAs at 1 m (photons per mm² per bin), for isotropic emission:

.. math::

    \\Phi(E) = \\frac{N_e}{\\text{mAs}}\\;\\frac{d^2N}{dE\\,d\\Omega}\\;\\frac{1}{r^2}\\;T(E),
    \\qquad r = 1000\\ \\text{mm}

with :math:`N_e/\\text{mAs} = 10^{-3}/e` electrons, the tube spectrum of
:mod:`beamaudit.model.spectrum` per electron per steradian and the transmission :math:`T` of the
filtration and of the air path (:mod:`beamaudit.model.filtration`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from beamaudit.model.filtration import FilterSpec, transmission
from beamaudit.model.quantities import (
    air_kerma_ugy,
    effective_energy_kev,
    half_value_layers_mm,
    mean_energy_kev,
)
from beamaudit.model.spectrum import ELECTRONS_PER_MAS, tube_spectrum

__all__ = ["REFERENCE_DISTANCE_MM", "UnscaledBeam", "evaluate_unscaled"]

FloatArray = npt.NDArray[np.float64]

#: Distance at which tube output is quoted, mm (1 m, common practice).
REFERENCE_DISTANCE_MM = 1000.0


@dataclass(frozen=True)
class UnscaledBeam:
    """Beam figures of the physics model before any output scale is applied."""

    energies_kev: FloatArray
    fluence_per_mas_1m: FloatArray
    characteristic_fluence_per_mas_1m: FloatArray
    output_ugy_per_mas_1m: float
    characteristic_kerma_fraction: float
    hvl1_mm_al: float
    hvl2_mm_al: float
    hvl1_mm_cu: float
    mean_energy_kev: float
    effective_energy_kev: float


def evaluate_unscaled(
    *,
    kv: float,
    filters: tuple[FilterSpec, ...],
    anode: str,
    anode_angle_deg: float,
    ripple_percent: float,
    air_path_mm: float,
    with_hvl: bool = True,
) -> UnscaledBeam:
    """Filtered beam of the physics model, without output scale.

    Parameters
    ----------
    kv, filters, anode, anode_angle_deg, ripple_percent, air_path_mm
        As in :class:`beamaudit.model.BeamSpec`.
    with_hvl : bool
        Compute HVLs and effective energy (root-finding); otherwise they are NaN.

    Returns
    -------
    UnscaledBeam
    """
    spectrum = tube_spectrum(
        kv=kv, anode=anode, anode_angle_deg=anode_angle_deg, ripple_percent=ripple_percent
    )
    factor = (
        ELECTRONS_PER_MAS
        / REFERENCE_DISTANCE_MM**2
        * transmission(filters, air_path_mm=air_path_mm)
    )
    fluence = spectrum.total * factor
    characteristic = spectrum.characteristic * factor
    output = air_kerma_ugy(fluence)
    char_fraction = air_kerma_ugy(characteristic) / output if np.any(characteristic > 0) else 0.0
    if with_hvl:
        hvl1, hvl2 = half_value_layers_mm(fluence, absorber="Al")
        hvl1_cu, _ = half_value_layers_mm(fluence, absorber="Cu")
        e_eff = effective_energy_kev(hvl1)
    else:
        hvl1 = hvl2 = hvl1_cu = e_eff = float("nan")
    return UnscaledBeam(
        energies_kev=spectrum.energies_kev,
        fluence_per_mas_1m=fluence,
        characteristic_fluence_per_mas_1m=characteristic,
        output_ugy_per_mas_1m=output,
        characteristic_kerma_fraction=char_fraction,
        hvl1_mm_al=hvl1,
        hvl2_mm_al=hvl2,
        hvl1_mm_cu=hvl1_cu,
        mean_energy_kev=mean_energy_kev(fluence),
        effective_energy_kev=e_eff,
    )
