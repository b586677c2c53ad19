"""Pixel data of the demo CT scanner's images: patients drawn as water-like ellipses on a table.

**Invented.** The demo's patients have no anatomy; each cross-section is a few nested ellipses
whose CT numbers are of the usual size (soft tissue +30 HU, lung -800 HU, skull +1000 HU), lying
on a carbon-fibre-like table (two 2 mm skins of +300 HU round a foam core of -900 HU, 30 mm in
all), so that beamaudit finds the patient's water-equivalent diameter Dw (AAPM Report 220,
eq. 2-3) from the images as it would on a scanner's. Matrices are small (96 x 96 axial images, a
localizer of 4 mm pixels) to keep the demo fast; a reconstructed pixel averages its area
(partial volume: a ramp one pixel wide across each edge; each localizer column averages 3 rays).

The localizer is a frontal (AP) projection; its pixel value is ``1000 ln(I0 / I)`` of a
two-energy beam (0.25 and 0.17 per cm of water: beam hardening makes it grow less than linearly)
through each ray's water-equivalent path (the chords of the nested ellipses, each weighted by
``1 + HU / 1000``), the table being part of the reference (a physicist calibrates the scanner
with water phantoms lying on it, IEC 62985:2019). :func:`localizer_calibration_points` gives the
same relation as the calibration points a physicist would store for the scanner.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from beamaudit.api.demo.records import Patient

__all__ = [
    "AXIAL_MATRIX",
    "LOCALIZER_PIXEL_MM",
    "axial_hu",
    "localizer_calibration_points",
    "localizer_signal",
    "water_equivalent_diameter_cm",
]

AXIAL_MATRIX = 96
LOCALIZER_PIXEL_MM = 4.0
_SUPERSAMPLE = 3
_AIR_HU = -1000.0
_MU_PER_MM = (0.025, 0.017)  # the two energies' attenuation in water, per mm (invented)
_STANDARD_BMI = 24.5

#: (half-width across, half-depth AP, centre across, CT number) of nested ellipses, in units
#: of the body's own half-axes; painted in order, each replacing what lies under it
_LAYERS: dict[str, tuple[tuple[float, float, float, float], ...]] = {
    "body": ((1.0, 1.0, 0.0, 30.0),),
    "chest": (
        (1.0, 1.0, 0.0, 30.0),
        (0.36, 0.62, -0.45, -800.0),
        (0.36, 0.62, 0.45, -800.0),
    ),
    "head": ((1.0, 1.0, 0.0, 1000.0), (0.92, 0.935, 0.0, 35.0)),
}


def _half_axes_mm(patient: Patient, region: str, z_fraction: float) -> tuple[float, float]:
    """Half-axes (across, AP) of the patient's section: body sections grow with the square root
    of the body-mass index; the abdomen widens toward the pelvis (invented shapes)."""
    if region == "head":
        scale = (patient.weight_kg / 75.0) ** 0.05
        return 74.0 * scale, 94.0 * scale
    scale = math.sqrt(patient.weight_kg / patient.height_m**2 / _STANDARD_BMI)
    if region == "chest":
        return 168.0 * scale, 112.0 * scale
    return (158.0 + 22.0 * z_fraction) * scale, (112.0 - 6.0 * z_fraction) * scale


def _ellipse_share(
    x: NDArray[np.float64], y: NDArray[np.float64], a: float, b: float, cx: float, pixel: float
) -> NDArray[np.float64]:
    """Share of each pixel (centres ``x``, ``y``) inside the ellipse: a ramp one pixel wide
    across its edge, from the distance to the edge (the level set's value over its gradient)."""
    u, v = (x - cx) / a, y / b
    r = np.sqrt(u * u + v * v)
    gradient = np.sqrt((u / a) ** 2 + (v / b) ** 2) / np.maximum(r, 1e-12)
    distance = (r - 1.0) / np.maximum(gradient, 1e-12)
    return np.clip(0.5 - distance / pixel, 0.0, 1.0)


def _interval_share(
    c: NDArray[np.float64], pixel: float, lo: float, hi: float
) -> NDArray[np.float64]:
    """Share of each pixel (centres ``c``) inside ``lo``..``hi`` along one axis."""
    return np.clip(
        (np.minimum(c + pixel / 2, hi) - np.maximum(c - pixel / 2, lo)) / pixel, 0.0, 1.0
    )


def axial_hu(
    patient: Patient, region: str, *, z_fraction: float, fov_mm: float
) -> NDArray[np.float64]:
    """One axial image in HU (``AXIAL_MATRIX`` square over ``fov_mm``); ``region`` is ``head``,
    ``chest`` or ``body``; ``z_fraction`` 0 at the start of the scan, 1 at its end."""
    n = AXIAL_MATRIX
    pixel = fov_mm / n
    c: NDArray[np.float64] = (np.arange(n, dtype=np.float64) + 0.5) * pixel - fov_mm / 2.0
    x, y = c[np.newaxis, :], c[:, np.newaxis]
    image = np.full((n, n), _AIR_HU)
    a, b = _half_axes_mm(patient, region, z_fraction)
    centre_y = -10.0
    for ka, kb, kc, hu in _LAYERS[region]:
        share = _ellipse_share(x, y - centre_y, ka * a, kb * b, kc * a, pixel)
        image += share * (hu - image)
    top = centre_y + b  # the table touches the patient's back (rows run toward the back)
    across = _interval_share(c, pixel, -200.0, 200.0)[np.newaxis, :]
    plates = ((top, top + 30.0, -900.0), (top, top + 2.0, 300.0), (top + 28.0, top + 30.0, 300.0))
    for y0, y1, hu in plates:
        share = _interval_share(c, pixel, y0, y1)[:, np.newaxis] * across
        image += share * (hu - image)
    return image


def _signal(water_mm: NDArray[np.float64]) -> NDArray[np.float64]:
    transmitted = 0.5 * np.exp(-_MU_PER_MM[0] * water_mm) + 0.5 * np.exp(-_MU_PER_MM[1] * water_mm)
    return 1000.0 * -np.log(transmitted)


def localizer_signal(
    patient: Patient, region: str, *, rows: int, width_mm: float
) -> NDArray[np.float64]:
    """A frontal localizer (``rows`` table positions, columns of ``LOCALIZER_PIXEL_MM`` across
    ``width_mm``): ``1000 ln(I0/I)`` of each ray's water-equivalent path (module text)."""
    columns = round(width_mm / LOCALIZER_PIXEL_MM)
    x = (np.arange(columns * _SUPERSAMPLE) + 0.5) / _SUPERSAMPLE * LOCALIZER_PIXEL_MM
    x = (x - columns * LOCALIZER_PIXEL_MM / 2.0)[np.newaxis, :]
    axes = [_half_axes_mm(patient, region, r / max(rows - 1, 1)) for r in range(rows)]
    a = np.array([ab[0] for ab in axes])[:, np.newaxis]
    b = np.array([ab[1] for ab in axes])[:, np.newaxis]
    layers = _LAYERS[region]
    w0 = 1.0 + layers[0][3] / 1000.0  # every inner layer replaces the outer one
    water = np.zeros((rows, x.shape[1]))
    for i, (ka, kb, kc, hu) in enumerate(layers):
        u = (x - kc * a) / (ka * a)
        chord = 2.0 * kb * b * np.sqrt(np.clip(1.0 - u * u, 0.0, None))
        water += chord * (w0 if i == 0 else 1.0 + hu / 1000.0 - w0)
    return _signal(water).reshape(rows, columns, _SUPERSAMPLE).mean(axis=2)


def localizer_calibration_points(max_mm: float = 700.0) -> tuple[list[float], list[float]]:
    """The scanner's localizer calibration to water: (pixel value, mm of water) points, as a
    physicist measures them with water phantoms on the table (invented scanner, 120 kV)."""
    t = np.linspace(0.0, max_mm, 71)
    return [round(float(v), 3) for v in _signal(t)], [float(x) for x in t]


def water_equivalent_diameter_cm(patient: Patient, region: str, *, z_fraction: float) -> float:
    """Dw of the drawn section, exact (AAPM Report 220, eq. 2-3): the ellipses' areas, each
    weighted by ``1 + HU/1000`` over what it replaces."""
    a, b = _half_axes_mm(patient, region, z_fraction)
    layers = _LAYERS[region]
    w0 = 1.0 + layers[0][3] / 1000.0
    area_mm2 = sum(
        math.pi * ka * a * kb * b * (w0 if i == 0 else 1.0 + hu / 1000.0 - w0)
        for i, (ka, kb, _, hu) in enumerate(layers)
    )
    return 2.0 * math.sqrt(area_mm2 / 100.0 / math.pi)
