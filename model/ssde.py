"""Size-specific dose estimate for CT (AAPM Reports 204 and 220).

CTDIvol describes a dosimetry phantom (16 cm or 32 cm PMMA), not the patient. AAPM Report 204
(2011) scales it by a conversion factor that depends on the patient's size; its appendix fits
the factor as an exponential in the effective diameter :math:`D` (cm):

.. math::

    \\mathrm{SSDE} = f(D)\\,\\mathrm{CTDI_{vol}}, \\qquad f(D) = a\\,e^{-bD}

with (AAPM 204 appendix) :math:`a = 3.704369`, :math:`b = 0.03671937\\ \\mathrm{cm^{-1}}` for
CTDIvol referred to the 32 cm phantom and :math:`a = 1.874799`,
:math:`b = 0.03871313\\ \\mathrm{cm^{-1}}` for the 16 cm phantom.

The effective diameter of AAPM 204 is :math:`D = \\sqrt{AP \\cdot LAT}`. AAPM Report 220 (2014)
replaces it with the water-equivalent diameter, which accounts for the patient's attenuation
(eq. 2-3 there):

.. math::

    A_w = \\sum_{ROI} \\left(\\frac{\\mathrm{CT}(x, y)}{1000} + 1\\right) A_{pixel}
        = \\left(\\frac{\\overline{\\mathrm{CT}}_{ROI}}{1000} + 1\\right) A_{ROI},
    \\qquad D_w = 2\\sqrt{\\frac{A_w}{\\pi}}

and uses :math:`D_w` in place of :math:`D` in the AAPM 204 fit.

The fits are tabulated in AAPM 204 for diameters of about 8 to 45 cm (memory, medium
confidence); outside that range :func:`ssde_conversion_factor` raises unless extrapolation is
asked for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.errors import ModelError
from beamaudit.model.trail import WhyTrail

__all__ = [
    "AAPM204_FIT",
    "AAPM204_VALID_DIAMETER_CM",
    "SizeSpecificDose",
    "effective_diameter_cm",
    "size_specific_dose_estimate",
    "ssde_conversion_factor",
    "water_equivalent_diameter_cm",
    "water_equivalent_diameter_from_image_cm",
]

#: AAPM Report 204 (2011) appendix fit f = a·exp(-b·D): phantom diameter (cm) -> (a, b in 1/cm).
AAPM204_FIT: dict[int, tuple[float, float]] = {
    32: (3.704369, 0.03671937),
    16: (1.874799, 0.03871313),
}
#: Range of diameters (cm) over which AAPM 204 tabulates the factors (memory, medium confidence).
AAPM204_VALID_DIAMETER_CM = (8.0, 45.0)
_MM2_PER_CM2 = 100.0


def _fit(phantom_diameter_cm: float) -> tuple[float, float]:
    key = round(float(phantom_diameter_cm))
    if key not in AAPM204_FIT or abs(key - float(phantom_diameter_cm)) > 1e-9:
        raise ModelError(
            f"CTDIvol phantom must be 16 or 32 cm for the AAPM 204 fit, not {phantom_diameter_cm!r}"
        )
    return AAPM204_FIT[key]


def ssde_conversion_factor(
    *,
    diameter_cm: ArrayLike,
    phantom_diameter_cm: float = 32.0,
    allow_extrapolation: bool = False,
) -> NDArray[np.float64]:
    """AAPM 204 size conversion factor :math:`f = a\\,e^{-bD}` (vectorised).

    Parameters
    ----------
    diameter_cm : array_like
        Effective diameter (AAPM 204) or water-equivalent diameter (AAPM 220), cm.
    phantom_diameter_cm : {32, 16}
        Phantom the CTDIvol refers to.
    allow_extrapolation : bool
        Evaluate the fit outside the tabulated range (8-45 cm) instead of raising.

    Examples
    --------
    >>> round(float(ssde_conversion_factor(diameter_cm=20.0)), 3)
    1.777
    """
    a, b = _fit(phantom_diameter_cm)
    d = np.asarray(diameter_cm, dtype=np.float64)
    if not np.all(np.isfinite(d) & (d > 0)):
        raise ModelError("diameter must be a positive finite number of cm")
    lo, hi = AAPM204_VALID_DIAMETER_CM
    if not allow_extrapolation and np.any((d < lo) | (d > hi)):
        bad = float(np.ravel(d[(d < lo) | (d > hi)] if d.ndim else d)[0])
        raise ModelError(
            f"diameter {bad:g} cm is outside the AAPM 204 range ({lo:g}-{hi:g} cm); "
            "pass allow_extrapolation=True to extend the fit"
        )
    return np.asarray(a * np.exp(-b * d))


def effective_diameter_cm(*, ap_cm: ArrayLike, lat_cm: ArrayLike) -> NDArray[np.float64]:
    """Effective diameter :math:`D = \\sqrt{AP \\cdot LAT}` (AAPM Report 204), cm."""
    ap = np.asarray(ap_cm, dtype=np.float64)
    lat = np.asarray(lat_cm, dtype=np.float64)
    if not (np.all(np.isfinite(ap) & (ap > 0)) and np.all(np.isfinite(lat) & (lat > 0))):
        raise ModelError("AP and LAT dimensions must be positive finite numbers of cm")
    return np.asarray(np.sqrt(ap * lat))


def water_equivalent_diameter_cm(
    *, roi_area_cm2: ArrayLike, mean_ct_number_hu: ArrayLike
) -> NDArray[np.float64]:
    """Water-equivalent diameter from an ROI's area and mean CT number (AAPM Report 220), cm.

    .. math::

        D_w = 2\\sqrt{\\frac{(\\overline{\\mathrm{CT}}/1000 + 1)\\,A_{ROI}}{\\pi}}

    Examples
    --------
    A water cylinder's water-equivalent diameter is its diameter:

    >>> round(float(water_equivalent_diameter_cm(roi_area_cm2=math.pi * 100.0,
    ...                                          mean_ct_number_hu=0.0)), 6)
    20.0
    """
    area = np.asarray(roi_area_cm2, dtype=np.float64)
    ct = np.asarray(mean_ct_number_hu, dtype=np.float64)
    if not np.all(np.isfinite(area) & (area > 0)):
        raise ModelError("ROI area must be a positive finite number of cm²")
    if not np.all(np.isfinite(ct) & (ct > -1000.0)):
        raise ModelError("mean CT number must be finite and above -1000 HU (air)")
    water_area = (ct / 1000.0 + 1.0) * area
    return np.asarray(2.0 * np.sqrt(water_area / math.pi))


def water_equivalent_diameter_from_image_cm(
    *, ct_numbers_hu: ArrayLike, pixel_area_mm2: float, threshold_hu: float | None = None
) -> float:
    """Water-equivalent diameter from the CT numbers of one axial image (AAPM Report 220), cm.

    .. math::

        A_w = \\sum_{x,y \\in ROI} \\left(\\frac{\\mathrm{CT}(x,y)}{1000} + 1\\right) A_{pixel}

    Parameters
    ----------
    ct_numbers_hu : array_like
        CT numbers of the pixels of the patient ROI (or of the whole image with
        ``threshold_hu`` to select the patient).
    pixel_area_mm2 : float
        Area of one pixel (row spacing x column spacing), mm².
    threshold_hu : float, optional
        Keep only pixels above this CT number (a simple patient contour, e.g. -500 HU;
        AAPM 220 leaves the segmentation to the user).

    Pixels below -1000 HU (padding, noise in air) count as air, contributing zero water area.
    """
    ct = np.asarray(ct_numbers_hu, dtype=np.float64)
    if not (math.isfinite(pixel_area_mm2) and pixel_area_mm2 > 0):
        raise ModelError("pixel area must be a positive finite number of mm²")
    if threshold_hu is not None:
        ct = ct[ct > threshold_hu]
    if ct.size == 0 or not np.all(np.isfinite(ct)):
        raise ModelError("no finite CT numbers in the ROI")
    water_area_cm2 = float(np.sum(np.clip(ct / 1000.0 + 1.0, 0.0, None))) * (
        pixel_area_mm2 / _MM2_PER_CM2
    )
    return 2.0 * math.sqrt(water_area_cm2 / math.pi)


@dataclass(frozen=True)
class SizeSpecificDose:
    """One SSDE with its factor, the size it used and the trail of how it was made."""

    ssde_mgy: float
    conversion_factor: float
    diameter_cm: float
    diameter_kind: str
    phantom_diameter_cm: float
    ctdivol_mgy: float
    extrapolated: bool
    trail: WhyTrail


def size_specific_dose_estimate(
    *,
    ctdivol_mgy: float,
    diameter_cm: float,
    phantom_diameter_cm: float = 32.0,
    diameter_kind: str = "water_equivalent",
    diameter_source: str = "recorded",
    allow_extrapolation: bool = False,
) -> SizeSpecificDose:
    """SSDE of one CT acquisition: :math:`\\mathrm{SSDE} = a e^{-bD}\\,\\mathrm{CTDI_{vol}}`.

    Parameters
    ----------
    ctdivol_mgy : float
        CTDIvol of the acquisition, mGy (zero allowed, e.g. a localiser recorded as 0).
    diameter_cm : float
        Patient size, cm.
    phantom_diameter_cm : {32, 16}
        Phantom the CTDIvol refers to.
    diameter_kind : {"water_equivalent", "effective"}
        Which size ``diameter_cm`` is (AAPM 220 D_w or AAPM 204 effective diameter).
    diameter_source : str
        Where the diameter came from (for the trail).
    allow_extrapolation : bool
        As for :func:`ssde_conversion_factor`; recorded as an assumption when used.
    """
    if not (math.isfinite(ctdivol_mgy) and ctdivol_mgy >= 0):
        raise ModelError(f"CTDIvol must be zero or a positive finite number, not {ctdivol_mgy!r}")
    if diameter_kind not in ("water_equivalent", "effective"):
        raise ModelError(
            f"diameter_kind must be water_equivalent or effective, not {diameter_kind!r}"
        )
    lo, hi = AAPM204_VALID_DIAMETER_CM
    extrapolated = not (lo <= diameter_cm <= hi)
    f = float(
        ssde_conversion_factor(
            diameter_cm=diameter_cm,
            phantom_diameter_cm=phantom_diameter_cm,
            allow_extrapolation=allow_extrapolation,
        )
    )
    a, b = _fit(phantom_diameter_cm)
    trail = WhyTrail()
    size_ref = "AAPM Report 220 (2014)" if diameter_kind == "water_equivalent" else "AAPM 204"
    trail.add(
        f"{diameter_kind}_diameter_cm",
        float(diameter_cm),
        "cm",
        equation="recorded" if diameter_source == "recorded" else "computed",
        source=f"{diameter_source}; size as defined in {size_ref}",
    )
    trail.add(
        "ssde_conversion_factor",
        f,
        "1",
        equation="f = a · exp(-b · D)",
        source=f"AAPM Report 204 (2011) appendix fit, {round(phantom_diameter_cm)} cm phantom",
        inputs={"a": a, "b_per_cm": b, "diameter_cm": float(diameter_cm)},
        assumed=extrapolated,
        note=(
            f"diameter {diameter_cm:g} cm outside the AAPM 204 range ({lo:g}-{hi:g} cm); "
            "fit extrapolated"
            if extrapolated
            else None
        ),
    )
    ssde = f * ctdivol_mgy
    trail.add(
        "ssde_mgy",
        ssde,
        "mGy",
        equation="SSDE = f · CTDIvol",
        source="AAPM Report 204 (2011)",
        inputs={"ctdivol_mgy": float(ctdivol_mgy), "ssde_conversion_factor": f},
    )
    return SizeSpecificDose(
        ssde_mgy=ssde,
        conversion_factor=f,
        diameter_cm=float(diameter_cm),
        diameter_kind=diameter_kind,
        phantom_diameter_cm=float(phantom_diameter_cm),
        ctdivol_mgy=float(ctdivol_mgy),
        extrapolated=extrapolated,
        trail=trail,
    )
