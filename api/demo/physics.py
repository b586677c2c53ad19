r"""The demo's own physics: how the invented rooms expose their invented patients.

Everything here serves the invented scenario only (see :mod:`beamaudit.api.demo.scenario`). It
decides the *true* exposure of each invented examination, from which the DICOM headers and dose
reports are written; the reported dose values then carry each room's invented DAP-meter error.

Tube output
-----------
The output of a room's tube, :math:`Y(U)` in µGy/mAs at 1 m, is the output that beamaudit's own
beam model (:func:`beamaudit.model.compute_beam`, uncalibrated, that is scaled to the published
typical output of a fleet of radiographic units, PUBLISHED-VALUES section j) predicts for the
room's total filtration, times the room's invented ``output_efficiency``:

.. math::

    Y_{room}(U) = \epsilon_{room}\,Y_{model}(U, \text{filtration})

The model is evaluated on a 10 kV grid and interpolated in log-log (output grows about as
:math:`U^2`, so the interpolation error is far below 0.1 %). Taking the model for the truth makes
the invented rooms physically coherent (filtered fluoroscopy beams included), so that beamaudit's
reconstruction of a healthy room agrees with what the room reports; the demo's planted meter
fault is the only large disagreement. It is an invented world, not a check of the model.

Dose chain (IAEA TRS 457 §7; the same functions as :mod:`beamaudit.model.dose`)
------------------------------------------------------------------------------

.. math::

    K_D = Y(U)\,P_{It}\left(\frac{1\ \mathrm{m}}{d_{SID}}\right)^2, \qquad
    P_{KA} = K_D\,A_D

with :math:`A_D` the collimated field at the image receptor. The reported DAP is
:math:`P_{KA}` times the room's DAP-meter factor and a per-exposure meter reading spread.

Automatic exposure control
--------------------------
Behind a patient of thickness :math:`t` the AEC ends the exposure at a fixed detector air kerma,
so the tube charge grows exponentially with thickness (an invented rule of thumb of the trade:
about 4-5 cm of extra soft tissue doubles the mAs at 70-90 kV):

.. math::

    P_{It}(t) = \frac{P_{It,ref}}{\epsilon_{room}}\;2^{(t - t_{ref})/t_{1/2}}

A tube of lower output needs proportionally more mAs for the same detector kerma, hence the
division by :math:`\epsilon_{room}`. Patient thickness follows weight as
:math:`t = t_{ref}\,(W / 75\ \mathrm{kg})^{p}` with an exponent :math:`p` per view (invented).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.beam import BeamSpec, compute_beam
from beamaudit.model.dose import air_kerma_at_distance_mgy, dap_gy_cm2
from beamaudit.model.filtration import FilterSpec

__all__ = [
    "KV_GRID",
    "STANDARD_WEIGHT_KG",
    "TubeOutput",
    "aec_exposure_mas",
    "detector_air_kerma_mgy",
    "exposure_dap_gy_cm2",
    "patient_thickness_mm",
]

#: Tube voltages at which the beam model is evaluated, kV (interpolated in log-log between).
KV_GRID = tuple(float(k) for k in range(40, 151, 10))
#: Weight of the invented standard patient, kg (ICRP 135's standard-size adult is 70 +/- 10 kg;
#: 75 kg is the centre of the demo's adult weight distribution).
STANDARD_WEIGHT_KG = 75.0


@dataclass
class TubeOutput:
    """Output and first HVL of one beam configuration, as a function of tube voltage.

    Parameters
    ----------
    filters : tuple of (material, thickness_mm)
        Total filtration, inherent included (``("Al", 2.5)``, ``("Cu", 0.2)``...).
    anode_angle_deg, ripple_percent : float
        The tube.
    efficiency : float
        The room's invented output relative to the model's typical tube.
    """

    filters: tuple[tuple[str, float], ...]
    anode_angle_deg: float = 12.0
    ripple_percent: float = 0.0
    efficiency: float = 1.0
    _table: tuple[NDArray[np.float64], NDArray[np.float64]] | None = field(
        default=None, init=False, repr=False
    )

    def _grid(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        if self._table is None:
            layers = tuple(FilterSpec(m, t) for m, t in self.filters)
            outputs, hvls = [], []
            for kv in KV_GRID:
                beam = compute_beam(
                    BeamSpec(
                        kv=kv,
                        filters=layers,
                        anode_angle_deg=self.anode_angle_deg,
                        ripple_percent=self.ripple_percent,
                    )
                )
                outputs.append(beam.output_ugy_per_mas_1m)
                hvls.append(beam.hvl1_mm_al)
            self._table = (np.asarray(outputs), np.asarray(hvls))
        return self._table

    def output_ugy_per_mas_1m(self, kv: ArrayLike) -> NDArray[np.float64]:
        """Air kerma per mAs at 1 m, µGy/mAs, at tube voltages ``kv`` (40-150 kV)."""
        outputs, _ = self._grid()
        x = np.log(np.asarray(kv, dtype=np.float64))
        y = np.interp(x, np.log(KV_GRID), np.log(outputs))
        return np.asarray(self.efficiency * np.exp(y))

    def hvl1_mm_al(self, kv: ArrayLike) -> NDArray[np.float64]:
        """First half-value layer, mm Al, at tube voltages ``kv``."""
        _, hvls = self._grid()
        return np.asarray(np.interp(np.asarray(kv, dtype=np.float64), KV_GRID, hvls))


def patient_thickness_mm(
    *, thickness_ref_mm: ArrayLike, weight_kg: ArrayLike, exponent: ArrayLike
) -> NDArray[np.float64]:
    """Thickness along the beam of a patient of ``weight_kg`` (invented scaling).

    .. math:: t = t_{ref}\\,(W / 75\\ \\mathrm{kg})^{p}
    """
    w = np.asarray(weight_kg, dtype=np.float64) / STANDARD_WEIGHT_KG
    return np.asarray(np.asarray(thickness_ref_mm, dtype=np.float64) * w ** np.asarray(exponent))


def aec_exposure_mas(
    *,
    mas_ref: ArrayLike,
    thickness_mm: ArrayLike,
    thickness_ref_mm: ArrayLike,
    doubling_mm: ArrayLike,
    efficiency: ArrayLike = 1.0,
) -> NDArray[np.float64]:
    """Tube charge an AEC delivers behind a patient of ``thickness_mm`` (see the module docstring).

    .. math:: P_{It} = \\frac{P_{It,ref}}{\\epsilon}\\,2^{(t - t_{ref})/t_{1/2}}
    """
    dt = np.asarray(thickness_mm, dtype=np.float64) - np.asarray(thickness_ref_mm)
    return np.asarray(
        np.asarray(mas_ref, dtype=np.float64)
        / np.asarray(efficiency)
        * np.exp2(dt / np.asarray(doubling_mm))
    )


def detector_air_kerma_mgy(
    *, output_ugy_per_mas_1m: ArrayLike, exposure_mas: ArrayLike, sid_mm: ArrayLike
) -> NDArray[np.float64]:
    """Air kerma free in air at the image receptor plane, mGy (inverse-square law)."""
    return air_kerma_at_distance_mgy(
        output_ugy_per_mas_1m=output_ugy_per_mas_1m, exposure_mas=exposure_mas, distance_mm=sid_mm
    )


def exposure_dap_gy_cm2(
    *,
    output_ugy_per_mas_1m: ArrayLike,
    exposure_mas: ArrayLike,
    sid_mm: ArrayLike,
    field_area_cm2: ArrayLike,
) -> NDArray[np.float64]:
    """True air kerma-area product of an exposure, Gy·cm² (field given at the receptor)."""
    kerma = detector_air_kerma_mgy(
        output_ugy_per_mas_1m=output_ugy_per_mas_1m, exposure_mas=exposure_mas, sid_mm=sid_mm
    )
    return dap_gy_cm2(air_kerma_mgy=kerma, field_area_cm2=field_area_cm2)
