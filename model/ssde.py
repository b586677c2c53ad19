r"""Size-specific dose estimate for CT (AAPM Reports 204, 220 and 293).

CTDIvol describes a dosimetry phantom (16 cm or 32 cm PMMA), not the patient. AAPM Report 204
(2011) scales it by a conversion factor that depends on the patient's size; its appendix fits
the factor as an exponential in the effective diameter :math:`D` (cm):

.. math::

    \mathrm{SSDE} = f(D)\,\mathrm{CTDI_{vol}}, \qquad f(D) = a\,e^{-bD}

with (AAPM 204 appendix) :math:`a = 3.704369`, :math:`b = 0.03671937\ \mathrm{cm^{-1}}` for
CTDIvol referred to the 32 cm phantom and :math:`a = 1.874799`,
:math:`b = 0.03871313\ \mathrm{cm^{-1}}` for the 16 cm phantom. These are fits for the
**body** (trunk).

The effective diameter of AAPM 204 is :math:`D = \sqrt{AP \cdot LAT}`. AAPM Report 220 (2014)
replaces it with the water-equivalent diameter, which accounts for the patient's attenuation
(eq. 2-3 there):

.. math::

    A_w = \sum_{ROI} \left(\frac{\mathrm{CT}(x, y)}{1000} + 1\right) A_{pixel}
        = \left(\frac{\overline{\mathrm{CT}}_{ROI}}{1000} + 1\right) A_{ROI},
    \qquad D_w = 2\sqrt{\frac{A_w}{\pi}}

and uses :math:`D_w` in place of :math:`D` in the AAPM 204 fit.

For the **head**, AAPM Report 293 (2019) gives its own fit against the CTDIvol of the 16 cm
phantom, in the water-equivalent diameter (from memory, medium confidence; the coefficients are
those of PUBLISHED-VALUES section n):

.. math::

    f_{head}(D_w) = 1.9852\,e^{-0.0486\,D_w}

so a 16 cm adult head gets :math:`f \approx 0.91` and an infant's 10 cm head
:math:`f \approx 1.22`. Each :class:`SizeSpecificDose` says which report's fit it used.

The body fits are tabulated in AAPM 204 for diameters of about 8 to 45 cm and the head fit in
AAPM 293 for about 6 to 24 cm (both from memory, medium and low confidence); outside those
ranges :func:`ssde_conversion_factor` raises unless extrapolation is asked for.
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
    "AAPM293_HEAD_FIT",
    "AAPM293_VALID_DIAMETER_CM",
    "SizeSpecificDose",
    "effective_diameter_cm",
    "size_specific_dose_estimate",
    "ssde_conversion_factor",
    "ssde_standard_uncertainty",
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
#: AAPM Report 293 (2019) head fit f = a·exp(-b·Dw), CTDIvol of the 16 cm phantom: (a, b in 1/cm)
#: (from memory, medium confidence; PUBLISHED-VALUES section n).
AAPM293_HEAD_FIT = (1.9852, 0.0486)
#: Range of water-equivalent head diameters (cm) AAPM 293 tabulates (from memory, low confidence).
AAPM293_VALID_DIAMETER_CM = (6.0, 24.0)
#: The report whose fit each region uses, for trails and records.
SSDE_REPORT = {"body": "AAPM Report 204 (2011)", "head": "AAPM Report 293 (2019)"}
_SHORT = {"body": "AAPM 204", "head": "AAPM 293"}
#: Relative standard uncertainty of the conversion factor f itself, for a patient of known size
#: (from memory, low confidence: AAPM 204 puts the spread of the four data sets behind its fit
#: at roughly 10 to 20 %; the lower end is taken as a standard uncertainty).
CONVERSION_FACTOR_RELATIVE_UNCERTAINTY = 0.10
_MM2_PER_CM2 = 100.0


def _fit(phantom_diameter_cm: float, body_region: str = "body") -> tuple[float, float]:
    if body_region not in SSDE_REPORT:
        raise ModelError(f"body region must be 'body' or 'head', not {body_region!r}")
    key = round(float(phantom_diameter_cm))
    if body_region == "head":
        if key != 16 or abs(key - float(phantom_diameter_cm)) > 1e-9:
            raise ModelError(
                "the AAPM 293 head fit refers to the CTDIvol of the 16 cm phantom, not "
                f"{phantom_diameter_cm!r} cm"
            )
        return AAPM293_HEAD_FIT
    if key not in AAPM204_FIT or abs(key - float(phantom_diameter_cm)) > 1e-9:
        raise ModelError(
            f"CTDIvol phantom must be 16 or 32 cm for the AAPM 204 fit, not {phantom_diameter_cm!r}"
        )
    return AAPM204_FIT[key]


def _valid_range(body_region: str) -> tuple[float, float]:
    return AAPM293_VALID_DIAMETER_CM if body_region == "head" else AAPM204_VALID_DIAMETER_CM


def ssde_conversion_factor(
    *,
    diameter_cm: ArrayLike,
    phantom_diameter_cm: float = 32.0,
    allow_extrapolation: bool = False,
    body_region: str = "body",
) -> NDArray[np.float64]:
    r"""Size conversion factor :math:`f = a\,e^{-bD}` (vectorised): AAPM 204 for the body,
    AAPM 293 for the head.

    Parameters
    ----------
    diameter_cm : array_like
        Effective diameter (AAPM 204) or water-equivalent diameter (AAPM 220, 293), cm.
    phantom_diameter_cm : {32, 16}
        Phantom the CTDIvol refers to (16 for the head).
    allow_extrapolation : bool
        Evaluate the fit outside its tabulated range instead of raising.
    body_region : {"body", "head"}
        Which fit: AAPM 204 (body) or AAPM 293 (head).

    Examples
    --------
    >>> round(float(ssde_conversion_factor(diameter_cm=20.0)), 3)
    1.777
    >>> round(float(ssde_conversion_factor(diameter_cm=16.0, phantom_diameter_cm=16,
    ...                                    body_region="head")), 3)
    0.912
    """
    a, b = _fit(phantom_diameter_cm, body_region)
    d = np.asarray(diameter_cm, dtype=np.float64)
    if not np.all(np.isfinite(d) & (d > 0)):
        raise ModelError("diameter must be a positive finite number of cm")
    lo, hi = _valid_range(body_region)
    if not allow_extrapolation and np.any((d < lo) | (d > hi)):
        bad = float(np.ravel(d[(d < lo) | (d > hi)] if d.ndim else d)[0])
        raise ModelError(
            f"diameter {bad:g} cm is outside the {_SHORT[body_region]} range "
            f"({lo:g}-{hi:g} cm); pass allow_extrapolation=True to extend the fit"
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
    """One SSDE with its factor, the size it used, the report whose fit it used (``report``)
    and the trail of how it was made."""

    ssde_mgy: float
    conversion_factor: float
    diameter_cm: float
    diameter_kind: str
    phantom_diameter_cm: float
    ctdivol_mgy: float
    extrapolated: bool
    trail: WhyTrail
    body_region: str = "body"
    report: str = SSDE_REPORT["body"]


def size_specific_dose_estimate(
    *,
    ctdivol_mgy: float,
    diameter_cm: float,
    phantom_diameter_cm: float = 32.0,
    diameter_kind: str = "water_equivalent",
    diameter_source: str = "recorded",
    allow_extrapolation: bool = False,
    body_region: str = "body",
) -> SizeSpecificDose:
    r"""SSDE of one CT acquisition: :math:`\mathrm{SSDE} = a e^{-bD}\,\mathrm{CTDI_{vol}}`.

    Parameters
    ----------
    ctdivol_mgy : float
        CTDIvol of the acquisition, mGy (zero allowed, e.g. a localiser recorded as 0).
    diameter_cm : float
        Patient size, cm.
    phantom_diameter_cm : {32, 16}
        Phantom the CTDIvol refers to (16 for the head).
    diameter_kind : {"water_equivalent", "effective"}
        Which size ``diameter_cm`` is (AAPM 220 D_w or AAPM 204 effective diameter).
    diameter_source : str
        Where the diameter came from (for the trail).
    allow_extrapolation : bool
        As for :func:`ssde_conversion_factor`; recorded as an assumption when used.
    body_region : {"body", "head"}
        The AAPM 204 body fit or the AAPM 293 head fit (module docstring).
    """
    if not (math.isfinite(ctdivol_mgy) and ctdivol_mgy >= 0):
        raise ModelError(f"CTDIvol must be zero or a positive finite number, not {ctdivol_mgy!r}")
    if diameter_kind not in ("water_equivalent", "effective"):
        raise ModelError(
            f"diameter_kind must be water_equivalent or effective, not {diameter_kind!r}"
        )
    f = float(
        ssde_conversion_factor(
            diameter_cm=diameter_cm,
            phantom_diameter_cm=phantom_diameter_cm,
            allow_extrapolation=allow_extrapolation,
            body_region=body_region,
        )
    )
    lo, hi = _valid_range(body_region)
    extrapolated = not (lo <= diameter_cm <= hi)
    trail = _ssde_trail(
        f, ctdivol_mgy=ctdivol_mgy, diameter_cm=diameter_cm,
        phantom_diameter_cm=phantom_diameter_cm, diameter_kind=diameter_kind,
        diameter_source=diameter_source, body_region=body_region, extrapolated=extrapolated,
    )  # fmt: skip
    return SizeSpecificDose(
        ssde_mgy=f * ctdivol_mgy,
        conversion_factor=f,
        diameter_cm=float(diameter_cm),
        diameter_kind=diameter_kind,
        phantom_diameter_cm=float(phantom_diameter_cm),
        ctdivol_mgy=float(ctdivol_mgy),
        extrapolated=extrapolated,
        trail=trail,
        body_region=body_region,
        report=SSDE_REPORT[body_region],
    )


def _ssde_trail(
    f: float,
    *,
    ctdivol_mgy: float,
    diameter_cm: float,
    phantom_diameter_cm: float,
    diameter_kind: str,
    diameter_source: str,
    body_region: str,
    extrapolated: bool,
) -> WhyTrail:
    """The three steps of an SSDE: the size, the factor (which report's fit), the product."""
    a, b = _fit(phantom_diameter_cm, body_region)
    report = SSDE_REPORT[body_region]
    lo, hi = _valid_range(body_region)
    trail = WhyTrail()
    size_ref = "AAPM Report 220 (2014)" if diameter_kind == "water_equivalent" else "AAPM 204"
    trail.add(
        f"{diameter_kind}_diameter_cm",
        float(diameter_cm),
        "cm",
        equation="recorded" if diameter_source == "recorded" else "computed",
        source=f"{diameter_source}; size as defined in {size_ref}",
        assumed=body_region == "head" and diameter_kind == "effective",
        note="effective diameter used for a head, whose fit (AAPM 293) is defined in the "
        "water-equivalent diameter (the skull makes them differ)"
        if body_region == "head" and diameter_kind == "effective"
        else None,
    )
    fit = (
        "AAPM Report 293 (2019) head fit, 16 cm phantom (coefficients from memory, medium "
        "confidence)"
        if body_region == "head"
        else f"AAPM Report 204 (2011) appendix fit, body, {round(phantom_diameter_cm)} cm phantom"
    )
    trail.add(
        "ssde_conversion_factor",
        f,
        "1",
        equation="f = a · exp(-b · D)",
        source=fit,
        inputs={"a": a, "b_per_cm": b, "diameter_cm": float(diameter_cm)},
        assumed=extrapolated,
        note=(
            f"diameter {diameter_cm:g} cm outside the {_SHORT[body_region]} range "
            f"({lo:g}-{hi:g} cm); "
            "fit extrapolated"
            if extrapolated
            else None
        ),
    )
    trail.add(
        "ssde_mgy",
        f * ctdivol_mgy,
        "mGy",
        equation="SSDE = f · CTDIvol",
        source=report,
        inputs={"ctdivol_mgy": float(ctdivol_mgy), "ssde_conversion_factor": f},
    )
    return trail


def ssde_standard_uncertainty(ssde: SizeSpecificDose, diameter_uncertainty_cm: float) -> float:
    r"""Standard uncertainty of an SSDE (mGy) for a given CTDIvol, from the size and the fit.

    With :math:`\mathrm{SSDE} = a e^{-bD}\,\mathrm{CTDI_{vol}}`, a size uncertainty
    :math:`u(D)` gives :math:`u_D/\mathrm{SSDE} = b\,u(D)` (the fit's derivative; GUM eq. 10),
    and the fit itself :data:`CONVERSION_FACTOR_RELATIVE_UNCERTAINTY`; in quadrature:

    .. math::

        \frac{u(\mathrm{SSDE})}{\mathrm{SSDE}} = \sqrt{(b\,u(D))^2 + u_f^2}

    The CTDIvol is taken as the scanner reported it (its own display tolerance is not in
    :math:`u`: the SSDE is compared with the scanner's SSDE for the same CTDIvol).
    """
    if not (math.isfinite(diameter_uncertainty_cm) and diameter_uncertainty_cm >= 0):
        raise ModelError(
            f"size uncertainty must be zero or a positive number, not {diameter_uncertainty_cm!r}"
        )
    _, b = _fit(ssde.phantom_diameter_cm, ssde.body_region)
    relative = math.hypot(b * diameter_uncertainty_cm, CONVERSION_FACTOR_RELATIVE_UNCERTAINTY)
    return relative * ssde.ssde_mgy
