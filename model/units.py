"""Unit conversions for dose quantities, each factor named once with its source.

DICOM carries the same quantity in different units depending on where it sits:

- image headers give the air kerma-area product (DAP) in dGy·cm²
  (Image and Fluoroscopy Area Dose Product (0018,115E), DICOM PS3.3 C.8.7.8),
- Radiation Dose SRs give it in Gy·m² ((122130, DCM) "Dose Area Product",
  (113722, DCM) "Dose Area Product Total", units per DICOM PS3.16 TID 10001-10004),
- Entrance Dose (0040,0302) is in dGy, Entrance Dose in mGy (0040,8302) in mGy,
  the reference-point air kerma of a dose report ((113738, DCM) "Dose (RP)") in Gy,
- the collimated field area of a dose report ((113790, DCM)) is in m².

beamaudit stores DAP in Gy·cm², air kerma and dose in mGy and areas in cm²; these functions
convert once, at the edge. They are plain multiplications, vectorised over numpy arrays, with no
range checking (a negative DAP stays negative, for the caller to reject with its own context).

The identities behind the factors (SI prefixes, BIPM SI Brochure, 9th edition 2019):
1 dGy = 0.1 Gy, 1 m² = 10⁴ cm², 1 mm² = 10⁻² cm², so 1 dGy·cm² = 0.1 Gy·cm² = 10⁻⁵ Gy·m²
= 100 mGy·cm², and 1 Gy·m² = 10⁴ Gy·cm².
"""

from __future__ import annotations

from typing import TypeVar

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "CM2_PER_M2",
    "CM2_PER_MM2",
    "GY_CM2_PER_DGY_CM2",
    "GY_CM2_PER_GY_M2",
    "MGY_PER_DGY",
    "MGY_PER_GY",
    "cgy_cm2_to_gy_cm2",
    "dgy_cm2_to_gy_cm2",
    "dgy_to_mgy",
    "gy_cm2_to_dgy_cm2",
    "gy_cm2_to_gy_m2",
    "gy_m2_to_gy_cm2",
    "gy_to_mgy",
    "m2_to_cm2",
    "mgy_cm2_to_gy_cm2",
    "mgy_to_gy",
    "mm2_to_cm2",
    "s_to_min",
    "ugy_m2_to_gy_cm2",
]

Quantity = TypeVar("Quantity", float, NDArray[np.float64])

#: cm² in one m² (SI prefix centi = 10⁻²).
CM2_PER_M2 = 1.0e4
#: cm² in one mm² (SI prefixes).
CM2_PER_MM2 = 1.0e-2
#: Gy·cm² in one dGy·cm² (SI prefix deci = 10⁻¹); the unit of (0018,115E), DICOM PS3.3.
GY_CM2_PER_DGY_CM2 = 0.1
#: Gy·cm² in one Gy·m²; Gy·m² is the unit of DAP in dose reports, DICOM PS3.16.
GY_CM2_PER_GY_M2 = CM2_PER_M2
#: mGy in one Gy.
MGY_PER_GY = 1.0e3
#: mGy in one dGy; dGy is the unit of Entrance Dose (0040,0302) and Organ Dose (0040,0316).
MGY_PER_DGY = 1.0e2

_GY_CM2_PER_CGY_CM2 = 1.0e-2
_GY_CM2_PER_MGY_CM2 = 1.0e-3
_GY_CM2_PER_UGY_M2 = 1.0e-6 * CM2_PER_M2
_S_PER_MIN = 60.0


def dgy_cm2_to_gy_cm2(dap_dgy_cm2: Quantity) -> Quantity:
    """DAP from dGy·cm² (image headers, (0018,115E), DICOM PS3.3 C.8.7.8) to Gy·cm²."""
    return dap_dgy_cm2 * GY_CM2_PER_DGY_CM2


def gy_cm2_to_dgy_cm2(dap_gy_cm2: Quantity) -> Quantity:
    """DAP from Gy·cm² to dGy·cm² (the unit of image headers)."""
    return dap_gy_cm2 / GY_CM2_PER_DGY_CM2


def gy_m2_to_gy_cm2(dap_gy_m2: Quantity) -> Quantity:
    """DAP from Gy·m² (dose reports, (122130, DCM), DICOM PS3.16) to Gy·cm²."""
    return dap_gy_m2 * GY_CM2_PER_GY_M2


def gy_cm2_to_gy_m2(dap_gy_cm2: Quantity) -> Quantity:
    """DAP from Gy·cm² to Gy·m² (the unit of dose reports)."""
    return dap_gy_cm2 / GY_CM2_PER_GY_M2


def cgy_cm2_to_gy_cm2(dap_cgy_cm2: Quantity) -> Quantity:
    """DAP from cGy·cm² (shown by some DAP meters) to Gy·cm²."""
    return dap_cgy_cm2 * _GY_CM2_PER_CGY_CM2


def mgy_cm2_to_gy_cm2(dap_mgy_cm2: Quantity) -> Quantity:
    """DAP from mGy·cm² to Gy·cm²."""
    return dap_mgy_cm2 * _GY_CM2_PER_MGY_CM2


def ugy_m2_to_gy_cm2(dap_ugy_m2: Quantity) -> Quantity:
    """DAP from µGy·m² (shown by some DAP meters) to Gy·cm²; 1 µGy·m² = 0.01 Gy·cm²."""
    return dap_ugy_m2 * _GY_CM2_PER_UGY_M2


def gy_to_mgy(dose_gy: Quantity) -> Quantity:
    """Air kerma or dose from Gy (dose reports, e.g. (113738, DCM) "Dose (RP)") to mGy."""
    return dose_gy * MGY_PER_GY


def mgy_to_gy(dose_mgy: Quantity) -> Quantity:
    """Air kerma or dose from mGy to Gy."""
    return dose_mgy / MGY_PER_GY


def dgy_to_mgy(dose_dgy: Quantity) -> Quantity:
    """Dose from dGy (Entrance Dose (0040,0302), Organ Dose (0040,0316), PS3.3) to mGy."""
    return dose_dgy * MGY_PER_DGY


def m2_to_cm2(area_m2: Quantity) -> Quantity:
    """Area from m² (dose reports, (113790, DCM) "Collimated Field Area") to cm²."""
    return area_m2 * CM2_PER_M2


def mm2_to_cm2(area_mm2: Quantity) -> Quantity:
    """Area from mm² to cm²."""
    return area_mm2 * CM2_PER_MM2


def s_to_min(time_s: Quantity) -> Quantity:
    """Time from seconds (dose reports, (113730, DCM) "Total Fluoro Time") to minutes."""
    return time_s / _S_PER_MIN
