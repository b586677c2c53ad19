"""Patient size for CT from axial images: the water-equivalent diameter (AAPM Report 220).

AAPM Report 220 (2014), eq. 2-3, defines the water-equivalent area and diameter of one axial
cross-section from its CT numbers :math:`\\mathrm{CT}(x, y)` (HU) over a region of interest
(ROI) holding the patient:

.. math::

    A_w = \\sum_{x,y \\in ROI} \\left(\\frac{\\mathrm{CT}(x,y)}{1000} + 1\\right) A_{pixel}
        = \\left(\\frac{\\overline{\\mathrm{CT}}_{ROI}}{1000} + 1\\right) A_{ROI},
    \\qquad D_w = 2\\sqrt{\\frac{A_w}{\\pi}}

A pixel of air (-1000 HU) adds nothing to :math:`A_w`, so the ROI may hold some air around the
patient; it must hold all of the patient and nothing else that is not the patient (the table,
positioning aids). AAPM 220 leaves the segmentation to the user; IEC 62985:2019 asks for the
patient's contour found automatically. The contour here (:class:`ContourMethod`) is:

1. **Threshold.** Pixels above ``threshold_hu`` (-500 HU, midway between air and water:
   common practice) are "body"; pixels below ``outside_field_hu`` (-1500 HU, below any physical
   CT number) or NaN are outside the reconstructed field (padding, the corners outside the
   reconstruction circle).
2. **Table removed by an opening.** The body is eroded by a disc of radius ``table_cut_mm``
   (Euclidean distance transform, :func:`scipy.ndimage.distance_transform_edt`), which
   detaches the thin shells of the table, mattress and head holder from the patient.
3. **Connected components.** Of the eroded body's 8-connected components the largest is the
   patient, and so is every other one whose inscribed radius reaches ``min_part_radius_mm``
   (arms at the side, the other leg); thin parts (the table plate, cables) are dropped.
4. **Restored and filled.** The kept parts are dilated back by ``table_cut_mm`` and intersected
   with the body (the skin edge comes back, the table does not); parts the opening cut off
   that touch the patient and lie wholly within ``reattach_mm`` of it are given back (ears,
   nose, fingers: a table reaches farther); holes are filled
   (:func:`scipy.ndimage.binary_fill_holes`: the lungs and bowel gas belong to the
   cross-section and count with their own CT numbers), and a rim of ``rim_mm`` of
   below-threshold pixels is added so that partial-volume pixels at the skin count with the
   fraction of water they hold.

A patient touching the edge of the reconstructed field is truncated: its :math:`D_w` is too
small (AAPM 220 discusses this). The share of the contour lying on that edge is returned as
``truncated_fraction`` (0 when the whole patient is in view).

:func:`scan_range_size` then averages :math:`D_w(z)` over an acquisition's scan range and gives
its value at the centre of the range (AAPM 220 and IEC 62985 use either as the acquisition's
size). SSDE itself is :func:`beamaudit.model.ssde.size_specific_dose_estimate`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

from beamaudit.model.errors import ModelError
from beamaudit.model.ssde import water_equivalent_diameter_cm
from beamaudit.model.trail import WhyTrail

__all__ = [
    "AAPM220_SOURCE",
    "DW_METHOD_RELATIVE_UNCERTAINTY",
    "AxialSizes",
    "ContourMethod",
    "ScanRangeSize",
    "axial_sizes",
    "patient_mask",
    "scan_range_dw_uncertainty",
    "scan_range_size",
]

AAPM220_SOURCE = "AAPM Report 220 (2014), eq. 2-3"
_MM2_PER_CM2 = 100.0
#: samples this close to a scan range (or half its length, if more) may stand for its ends
_MIN_REACH_MM = 20.0
_EIGHT_CONNECTED = np.ones((3, 3), dtype=bool)


@dataclass(frozen=True, slots=True)
class ContourMethod:
    """How the patient's contour is found on an axial CT image (see the module text).

    Attributes
    ----------
    threshold_hu : float
        Pixels above are body (-500 HU: midway between air and water, common practice).
    outside_field_hu : float
        Pixels below (or NaN) are outside the reconstructed field.
    table_cut_mm : float
        Radius of the opening that detaches the table; 0 turns it off.
    min_part_radius_mm : float
        Components other than the largest are kept when their inscribed radius reaches this
        (an adult's arm is about 40 mm, a table plate a few mm: common practice).
    reattach_mm : float
        Parts the opening cut off that touch the patient and lie wholly within this distance
        of it are given back (ears, nose, fingers); the table reaches farther.
    rim_mm : float
        Below-threshold pixels within this distance of the contour are added (partial volume).
    """

    threshold_hu: float = -500.0
    outside_field_hu: float = -1500.0
    table_cut_mm: float = 6.0
    min_part_radius_mm: float = 15.0
    reattach_mm: float = 30.0
    rim_mm: float = 2.0

    def __post_init__(self) -> None:
        if not (-1000.0 < self.threshold_hu < 0.0):
            raise ModelError(
                f"contour threshold {self.threshold_hu:g} HU must lie between air "
                "(-1000 HU) and water (0 HU)"
            )
        if not self.outside_field_hu < -1000.0:
            raise ModelError("the outside-field level must lie below air (-1000 HU)")
        for name in ("table_cut_mm", "min_part_radius_mm", "reattach_mm", "rim_mm"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise ModelError(f"{name} must be zero or a positive number of mm, not {value!r}")

    def describe(self) -> str:
        """The method in one line, for a why trail."""
        return (
            f"threshold {self.threshold_hu:g} HU; table cut by an opening of "
            f"{self.table_cut_mm:g} mm; largest component plus parts of inscribed radius >= "
            f"{self.min_part_radius_mm:g} mm; attachments within {self.reattach_mm:g} mm "
            f"given back; holes filled; rim {self.rim_mm:g} mm"
        )


DEFAULT_CONTOUR = ContourMethod()


def _spacing(pixel_spacing_mm: ArrayLike) -> tuple[float, float]:
    spacing = np.asarray(pixel_spacing_mm, dtype=np.float64).ravel()
    if spacing.size == 1:
        spacing = np.repeat(spacing, 2)
    if spacing.size != 2 or not np.all(np.isfinite(spacing) & (spacing > 0)):
        raise ModelError(
            "pixel spacing must be two positive numbers of mm (row, column), "
            f"not {pixel_spacing_mm!r}"
        )
    return float(spacing[0]), float(spacing[1])


def _label_max(
    values: NDArray[np.float64], labels: NDArray[np.int_], n: int
) -> NDArray[np.float64]:
    """The largest of ``values`` in each of the labels 1..n (one pass, no sort)."""
    out = np.full(n + 1, -np.inf)
    inside = labels > 0
    np.maximum.at(out, labels[inside], values[inside])
    return out[1:]


def _box(mask: NDArray[np.bool_], margin: tuple[int, int]) -> tuple[slice, slice]:
    """The rows and columns of ``mask``'s pixels, widened by ``margin`` (rows, columns) and kept
    inside the image."""
    rows = np.flatnonzero(mask.any(axis=1))
    cols = np.flatnonzero(mask.any(axis=0))
    return (
        slice(max(int(rows[0]) - margin[0], 0), min(int(rows[-1]) + margin[0] + 1, mask.shape[0])),
        slice(max(int(cols[0]) - margin[1], 0), min(int(cols[-1]) + margin[1] + 1, mask.shape[1])),
    )


def _distance_to(inside: NDArray[np.bool_], spacing: tuple[float, float]) -> NDArray[np.float64]:
    """Distance (mm) from each pixel of ``inside`` to the nearest pixel outside it, the image
    border counting as outside (0 outside).

    Computed on ``inside``'s bounding box widened by one pixel (and the border beyond the image):
    the same distances, since that ring is all outside and any pixel beyond it is farther than
    its nearest point on the ring, along each axis (a patient smaller than the field costs the
    transform of its box only)."""
    depth = np.zeros(inside.shape, dtype=np.float64)
    if not inside.any():
        return depth
    box = _box(inside, (1, 1))
    padded = np.pad(inside[box], 1, constant_values=False)
    depth[box] = ndimage.distance_transform_edt(padded, sampling=spacing)[1:-1, 1:-1]
    return depth


def _within(
    region: NDArray[np.bool_], distance_mm: float, spacing: tuple[float, float]
) -> NDArray[np.bool_]:
    """Pixels within ``distance_mm`` of ``region`` (a Euclidean dilation).

    Computed on ``region``'s bounding box widened by ``distance_mm`` and a pixel: every pixel
    beyond lies farther from it, and every pixel of ``region`` lies in the box, so the distances
    in the box are the whole image's."""
    if not region.any():
        return region.copy()
    margin = (
        math.ceil(distance_mm / spacing[0]) + 1,
        math.ceil(distance_mm / spacing[1]) + 1,
    )
    box = _box(region, margin)
    out = np.zeros(region.shape, dtype=bool)
    gap = ndimage.distance_transform_edt(~region[box], sampling=spacing)
    out[box] = gap <= distance_mm + 1e-9
    return out


def _mask_and_truncation(
    hu: NDArray[np.float64], spacing: tuple[float, float], method: ContourMethod
) -> tuple[NDArray[np.bool_], float]:
    field = np.isfinite(hu) & (hu >= method.outside_field_hu)
    body = field & (hu > method.threshold_hu)
    if not body.any():
        return body, 0.0
    depth = _distance_to(body, spacing)
    core = depth > method.table_cut_mm if method.table_cut_mm > 0 else body
    if not core.any():
        core = body  # an object thinner than the cut: nothing to detach it from
    labels, n = ndimage.label(core, structure=_EIGHT_CONNECTED)
    ids = np.arange(1, n + 1)
    sizes = np.bincount(labels.ravel(), minlength=n + 1)[1:]
    radius = _label_max(depth, labels, n)
    keep = (sizes == sizes.max()) | (radius >= method.min_part_radius_mm)
    kept = np.isin(labels, ids[keep])
    if method.table_cut_mm > 0:
        kept = body & _within(kept, method.table_cut_mm, spacing)
        kept = kept | _small_attachments(body & ~kept, kept, spacing, method.reattach_mm)
    patient = ndimage.binary_fill_holes(kept) & field
    truncated = _truncated_fraction(patient, field)
    if method.rim_mm > 0:
        patient = patient | (_within(patient, method.rim_mm, spacing) & field & ~body)
    return np.asarray(patient, dtype=bool), truncated


def _small_attachments(
    rest: NDArray[np.bool_],
    patient: NDArray[np.bool_],
    spacing: tuple[float, float],
    reach_mm: float,
) -> NDArray[np.bool_]:
    """Parts of ``rest`` touching ``patient`` and lying wholly within ``reach_mm`` of it (ears,
    a nose, fingers cut by the opening); a table reaches far beyond the patient."""
    if reach_mm <= 0 or not rest.any():
        return np.zeros_like(rest)
    labels, n = ndimage.label(rest, structure=_EIGHT_CONNECTED)
    gap = ndimage.distance_transform_edt(~patient, sampling=spacing)
    ids = np.arange(1, n + 1)
    nearest = -_label_max(-gap, labels, n)
    farthest = _label_max(gap, labels, n)
    touching = nearest <= 1.5 * max(spacing) + 1e-9
    return np.isin(labels, ids[touching & (farthest <= reach_mm)])


def _truncated_fraction(patient: NDArray[np.bool_], field: NDArray[np.bool_]) -> float:
    """Share of the contour's pixels that lie on the edge of the reconstructed field."""
    inside = np.pad(patient, 1, constant_values=False)
    in_field = np.pad(field, 1, constant_values=False)
    shifts = [
        (slice(0, -2), slice(1, -1)),
        (slice(2, None), slice(1, -1)),
        (slice(1, -1), slice(0, -2)),
        (slice(1, -1), slice(2, None)),
    ]
    on_contour = np.zeros(patient.shape, dtype=bool)
    on_field_edge = np.zeros(patient.shape, dtype=bool)
    for shift in shifts:
        on_contour |= ~inside[shift]
        on_field_edge |= ~in_field[shift]
    contour = patient & on_contour
    n = int(contour.sum())
    return float((contour & on_field_edge).sum()) / n if n else 0.0


def patient_mask(
    ct_numbers_hu: ArrayLike,
    *,
    pixel_spacing_mm: ArrayLike,
    method: ContourMethod = DEFAULT_CONTOUR,
) -> NDArray[np.bool_]:
    """The patient's cross-section on one axial image (the ROI of AAPM Report 220).

    Parameters
    ----------
    ct_numbers_hu : array_like, shape (rows, columns)
        CT numbers; NaN (or below ``method.outside_field_hu``) outside the reconstructed field.
    pixel_spacing_mm : array_like
        (row spacing, column spacing) in mm, as DICOM Pixel Spacing (0028,0030).
    method : ContourMethod
        The contour's parameters.
    """
    hu = np.asarray(ct_numbers_hu, dtype=np.float64)
    if hu.ndim != 2:
        raise ModelError(f"one axial image is a 2-D array, not {hu.ndim}-D")
    return _mask_and_truncation(hu, _spacing(pixel_spacing_mm), method)[0]


@dataclass(frozen=True, slots=True)
class AxialSizes:
    """Patient size on each of a stack of axial images (arrays of one value per image).

    NaN where an image shows no patient. ``ap_cm`` and ``lat_cm`` are the contour's extents
    along the image's columns and rows (anterior-posterior and lateral for the usual axial
    orientation); ``effective_diameter_cm`` is their geometric mean (AAPM Report 204).
    """

    water_equivalent_diameter_cm: NDArray[np.float64]
    water_equivalent_area_cm2: NDArray[np.float64]
    area_cm2: NDArray[np.float64]
    mean_ct_number_hu: NDArray[np.float64]
    ap_cm: NDArray[np.float64]
    lat_cm: NDArray[np.float64]
    effective_diameter_cm: NDArray[np.float64]
    truncated_fraction: NDArray[np.float64]
    method: ContourMethod


def axial_sizes(
    ct_numbers_hu: ArrayLike,
    *,
    pixel_spacing_mm: ArrayLike,
    method: ContourMethod = DEFAULT_CONTOUR,
) -> AxialSizes:
    """Water-equivalent diameter of each axial image of a stack (AAPM Report 220, eq. 2-3).

    .. math::

        A_w = A_{ROI} + \\frac{A_{pixel}}{1000} \\sum_{ROI} \\mathrm{CT}(x,y), \\qquad
        D_w = 2\\sqrt{A_w / \\pi}

    Parameters
    ----------
    ct_numbers_hu : array_like, shape (rows, columns) or (images, rows, columns)
        CT numbers (modality LUT applied); NaN outside the reconstructed field.
    pixel_spacing_mm : array_like
        (row spacing, column spacing) in mm, shared by the images of the stack.
    method : ContourMethod
        How the patient is told from the table and the air (module text).

    Examples
    --------
    A water cylinder of 20 cm on 1 mm pixels:

    >>> y, x = np.mgrid[-150:150, -150:150] + 0.5
    >>> phantom = np.where(x**2 + y**2 < 100.0**2, 0.0, -1000.0)
    >>> sizes = axial_sizes(phantom, pixel_spacing_mm=(1.0, 1.0))
    >>> round(float(sizes.water_equivalent_diameter_cm[0]), 1)
    20.0
    """
    hu = np.asarray(ct_numbers_hu, dtype=np.float64)
    if hu.ndim == 2:
        hu = hu[np.newaxis]
    if hu.ndim != 3 or hu.shape[1] < 2 or hu.shape[2] < 2:
        raise ModelError("axial images must be a 2-D image or a stack of them (images, rows, cols)")
    spacing = _spacing(pixel_spacing_mm)
    pixel_area_cm2 = spacing[0] * spacing[1] / _MM2_PER_CM2
    n = hu.shape[0]
    area = np.full(n, np.nan)
    mean_ct = np.full(n, np.nan)
    ap = np.full(n, np.nan)
    lat = np.full(n, np.nan)
    truncated = np.zeros(n)
    for i in range(n):
        mask, truncated[i] = _mask_and_truncation(hu[i], spacing, method)
        count = int(mask.sum())
        if count == 0:
            continue
        area[i] = count * pixel_area_cm2
        mean_ct[i] = float(hu[i][mask].mean())
        rows = np.flatnonzero(mask.any(axis=1))
        cols = np.flatnonzero(mask.any(axis=0))
        ap[i] = (rows[-1] - rows[0] + 1) * spacing[0] / 10.0
        lat[i] = (cols[-1] - cols[0] + 1) * spacing[1] / 10.0
    seen = np.isfinite(area) & (mean_ct > -1000.0)
    water_area = np.full(n, np.nan)
    water_area[seen] = (mean_ct[seen] / 1000.0 + 1.0) * area[seen]
    dw = np.full(n, np.nan)
    if seen.any():
        dw[seen] = water_equivalent_diameter_cm(
            roi_area_cm2=area[seen], mean_ct_number_hu=mean_ct[seen]
        )
    return AxialSizes(
        water_equivalent_diameter_cm=dw,
        water_equivalent_area_cm2=water_area,
        area_cm2=area,
        mean_ct_number_hu=mean_ct,
        ap_cm=ap,
        lat_cm=lat,
        effective_diameter_cm=np.sqrt(ap * lat),
        truncated_fraction=truncated,
        method=method,
    )


@dataclass(frozen=True, slots=True)
class ScanRangeSize:
    """An acquisition's water-equivalent diameter over its scan range.

    ``mean_dw_cm`` is the mean of :math:`D_w(z)` over the range (IEC 62985's size integrated
    across the scan range); ``centre_dw_cm`` its value at the centre of the range (AAPM
    Report 220's single-image choice). ``covered_fraction`` is the share of the range lying
    between the first and the last sample; beyond them :math:`D_w` is held constant (an
    assumption the trail records). ``truncated_samples`` counts samples whose patient touched
    the edge of the field of view.
    """

    mean_dw_cm: float
    centre_dw_cm: float
    z_start_mm: float
    z_end_mm: float
    n_samples: int
    covered_fraction: float
    max_gap_mm: float
    truncated_samples: int
    trail: WhyTrail


def scan_range_size(
    *,
    z_mm: ArrayLike,
    dw_cm: ArrayLike,
    z_start_mm: float,
    z_end_mm: float,
    truncated: ArrayLike | None = None,
    samples: str = "axial images",
) -> ScanRangeSize:
    """Water-equivalent diameter over a scan range, from samples :math:`D_w(z_i)`.

    :math:`D_w(z)` is interpolated linearly between the samples (held constant beyond the
    first and the last) and averaged over the range :math:`[z_1, z_2]`:

    .. math::

        \\bar D_w = \\frac{1}{z_2 - z_1} \\int_{z_1}^{z_2} D_w(z)\\,dz,
        \\qquad D_{w,c} = D_w\\!\\left(\\frac{z_1 + z_2}{2}\\right)

    so unevenly spaced samples are weighted by the length each stands for.

    Parameters
    ----------
    z_mm, dw_cm : array_like
        Table positions (mm, patient coordinates) and the water-equivalent diameters there;
        NaN diameters (no patient) are left out.
    z_start_mm, z_end_mm : float
        The acquisition's scan range (either order); equal for a single position.
    truncated : array_like of bool, optional
        Which samples were truncated.
    samples : str
        What the samples are, for the trail (``"axial images"``, ``"localizer rows"``).

    Raises
    ------
    ModelError
        When no finite sample lies within the range or within half its length (at least
        20 mm) of it.
    """
    z = np.asarray(z_mm, dtype=np.float64).ravel()
    dw = np.asarray(dw_cm, dtype=np.float64).ravel()
    if z.shape != dw.shape:
        raise ModelError("z positions and diameters must have the same length")
    flags = (
        np.zeros(z.shape, dtype=bool)
        if truncated is None
        else np.asarray(truncated, dtype=bool).ravel()
    )
    if flags.shape != z.shape:
        raise ModelError("truncation flags must have one value per sample")
    if not (math.isfinite(z_start_mm) and math.isfinite(z_end_mm)):
        raise ModelError("the scan range must be two finite positions in mm")
    lo, hi = sorted((float(z_start_mm), float(z_end_mm)))
    good = np.isfinite(z) & np.isfinite(dw) & (dw > 0)
    reach = max(0.5 * (hi - lo), _MIN_REACH_MM)
    near = good & (z >= lo - reach) & (z <= hi + reach)
    if not near.any():
        raise ModelError(
            f"no patient size sample lies in or near the scan range {lo:g} to {hi:g} mm"
        )
    zs, inverse = np.unique(z[near], return_inverse=True)
    ds = np.bincount(inverse, weights=dw[near]) / np.bincount(inverse)  # mean of equal z
    centre = 0.5 * (lo + hi)
    centre_dw = float(np.interp(centre, zs, ds))
    mean_dw, covered, max_gap = _range_mean(zs, ds, lo, hi, centre_dw=centre_dw)
    in_range = near & (z >= lo) & (z <= hi)
    n_truncated = int((flags & near).sum())
    trail = _size_trail(
        mean_dw=mean_dw,
        centre_dw=centre_dw,
        lo=lo,
        hi=hi,
        n_near=int(near.sum()),
        n_in_range=int(in_range.sum()),
        covered=covered,
        n_truncated=n_truncated,
        samples=samples,
    )
    return ScanRangeSize(
        mean_dw_cm=mean_dw,
        centre_dw_cm=centre_dw,
        z_start_mm=lo,
        z_end_mm=hi,
        n_samples=int(near.sum()),
        covered_fraction=covered,
        max_gap_mm=max_gap,
        truncated_samples=n_truncated,
        trail=trail,
    )


def _range_mean(
    zs: NDArray[np.float64], ds: NDArray[np.float64], lo: float, hi: float, *, centre_dw: float
) -> tuple[float, float, float]:
    """Mean :math:`D_w` over ``[lo, hi]`` of the samples ``ds`` at sorted, distinct ``zs``, by the
    trapezoidal rule on :math:`D_w(z)` linear between samples (constant beyond them), the fraction
    of the range the samples span, and the largest gap (mm) between samples within the range;
    for a single position (``lo == hi``), :math:`D_w` there (``centre_dw``)."""
    if not hi > lo:
        return centre_dw, (1.0 if zs[0] <= lo <= zs[-1] else 0.0), 0.0
    knots = np.concatenate(([lo], zs[(zs > lo) & (zs < hi)], [hi]))
    values = np.interp(knots, zs, ds)
    mean_dw = float(np.sum(0.5 * (values[1:] + values[:-1]) * np.diff(knots)) / (hi - lo))
    covered = (min(hi, zs[-1]) - max(lo, zs[0])) / (hi - lo)
    covered = float(min(max(covered, 0.0), 1.0))
    inside = np.concatenate(([max(lo, zs[0])], zs[(zs > lo) & (zs < hi)], [min(hi, zs[-1])]))
    max_gap = float(np.max(np.diff(inside))) if inside.size > 1 else 0.0
    return mean_dw, covered, max_gap


def _size_trail(
    *,
    mean_dw: float,
    centre_dw: float,
    lo: float,
    hi: float,
    n_near: int,
    n_in_range: int,
    covered: float,
    n_truncated: int,
    samples: str,
) -> WhyTrail:
    """The why trail of :func:`scan_range_size`: the mean and the centre :math:`D_w`, and the
    truncated samples if any."""
    trail = WhyTrail()
    inputs = {"z_start_mm": lo, "z_end_mm": hi, "samples": n_near}
    trail.add(
        "water_equivalent_diameter_mean_cm",
        mean_dw,
        "cm",
        equation="mean Dw = (1 / (z2 - z1)) ∫ Dw(z) dz, Dw(z) linear between samples",
        source=f"{AAPM220_SOURCE} per sample; IEC 62985:2019, Dw over the scan range; {samples}",
        inputs=inputs | {"samples_in_range": n_in_range},
        assumed=covered < 0.999,
        note=(
            f"samples cover {covered:.0%} of the scan range; Dw held constant beyond them"
            if covered < 0.999
            else None
        ),
    )
    trail.add(
        "water_equivalent_diameter_centre_cm",
        centre_dw,
        "cm",
        equation="Dw at z = (z1 + z2) / 2, linear between samples",
        source=f"AAPM Report 220 (2014), Dw at the centre of the scan range; {samples}",
        inputs={"z_centre_mm": 0.5 * (lo + hi)},
    )
    if n_truncated:
        trail.add(
            "truncated_samples",
            n_truncated,
            "1",
            equation="patient contour on the edge of the field of view",
            source="AAPM Report 220 (2014): a truncated patient gives too small a Dw",
            assumed=True,
            note=f"{n_truncated} of {n_near} samples truncated: Dw underestimated there",
        )
    return trail


#: Relative standard uncertainty of one Dw from the images, by method (from memory, low
#: confidence): contouring and CT-number calibration of axial images give Dw within a few per
#: cent of a phantom's known size (AAPM Report 220, 2014; IEC 62985:2019 phantom verification);
#: a localizer row, through its calibration to water and the beam hardening it ignores, within
#: about twice that. Each is taken here as a standard uncertainty.
DW_METHOD_RELATIVE_UNCERTAINTY = {"axial_images": 0.02, "localizer": 0.05}


def scan_range_dw_uncertainty(
    *, dw_cm: ArrayLike, mean_dw_cm: float, method: str = "axial_images"
) -> tuple[float, dict[str, float]]:
    r"""Standard uncertainty of a scan-range mean :math:`\bar D_w` (cm), and its components.

    Two independent components, added in quadrature (JCGM 100:2008, GUM, eq. 10):

    .. math::

        u(\bar D_w) = \sqrt{\left(\frac{s}{\sqrt{n}}\right)^2 + (r_m \bar D_w)^2}

    - *sampling* :math:`s/\sqrt{n}`: the standard deviation :math:`s` of the :math:`n` samples'
      :math:`D_w` over the square root of their number (GUM type A, eq. 5), which stands for
      the size variation the sampling may have missed between samples; zero for one sample;
    - *method* :math:`r_m \bar D_w`: the method's own relative uncertainty
      (:data:`DW_METHOD_RELATIVE_UNCERTAINTY`, from memory).

    A truncated patient (on the edge of the field of view) makes :math:`D_w` too small: that
    bias is not in :math:`u`; the trail names the truncated samples.
    """
    if method not in DW_METHOD_RELATIVE_UNCERTAINTY:
        known = ", ".join(DW_METHOD_RELATIVE_UNCERTAINTY)
        raise ModelError(f"Dw method must be one of {known}, not {method!r}")
    if not (math.isfinite(mean_dw_cm) and mean_dw_cm > 0):
        raise ModelError(f"mean Dw must be a positive finite number, not {mean_dw_cm!r}")
    dw = np.asarray(dw_cm, dtype=np.float64).ravel()
    dw = dw[np.isfinite(dw) & (dw > 0)]
    sampling = float(np.std(dw, ddof=1) / math.sqrt(dw.size)) if dw.size > 1 else 0.0
    method_u = DW_METHOD_RELATIVE_UNCERTAINTY[method] * float(mean_dw_cm)
    return math.hypot(sampling, method_u), {"sampling_cm": sampling, "method_cm": method_u}
