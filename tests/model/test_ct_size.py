"""Water-equivalent diameter from axial images (AAPM Report 220) on phantoms of known size.

Every expected value is exact by construction (ct_phantoms.py): the water-equivalent area of a
drawn phantom is the sum over its pixels of (CT/1000 + 1) times the pixel area (AAPM Report
220, eq. 2-3), and Dw = 2 sqrt(Aw / pi). A water cylinder's Dw is its diameter; a cylinder of
CT number h has Dw = D sqrt(1 + h/1000); an ellipse of water of half-axes a, b has
Dw = 2 sqrt(ab) (AAPM 220's definitions, worked by hand in the first tests). This is the
phantom verification IEC 62985:2019 describes (known phantoms, computed against true Dw);
its acceptance limits are not restated here (not read).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from ct_phantoms import (
    blank,
    dw_cm,
    ellipse_fraction,
    paint,
    rectangle_fraction,
    water_area_cm2,
)

from beamaudit.model.ct_size import (
    ContourMethod,
    axial_sizes,
    patient_mask,
    scan_range_size,
)
from beamaudit.model.errors import ModelError

N = 512
PIXEL_MM = 0.8  # a 41 cm field of view


def dw_of(image: np.ndarray, pixel_mm: float = PIXEL_MM, **kwargs: object) -> float:
    return float(
        axial_sizes(image, pixel_spacing_mm=pixel_mm, **kwargs).water_equivalent_diameter_cm[0]
    )  # type: ignore[arg-type]


# ---- AAPM Report 220's definitions, by hand ------------------------------------------------
def test_square_of_water_by_hand() -> None:
    # 100 mm x 100 mm of water on 1 mm pixels: Aw = 100 cm², Dw = 2 sqrt(100 / pi) = 11.2838 cm
    image = blank(300)
    image[100:200, 100:200] = 0.0
    assert dw_of(image, 1.0) == pytest.approx(2 * math.sqrt(100 / math.pi), rel=1e-12)
    assert 2 * math.sqrt(100 / math.pi) == pytest.approx(11.2838, abs=1e-4)  # by hand


def test_half_water_half_bone_by_hand() -> None:
    # 100 mm x 100 mm, half water (0 HU), half +1000 HU: mean CT 500 HU over A = 100 cm²,
    # Aw = (500/1000 + 1) * 100 = 150 cm² (AAPM 220 eq. 2-3), Dw = 2 sqrt(150 / pi) = 13.8198 cm
    image = blank(300)
    image[100:200, 100:150] = 0.0
    image[100:200, 150:200] = 1000.0
    sizes = axial_sizes(image, pixel_spacing_mm=1.0)
    assert sizes.water_equivalent_area_cm2[0] == pytest.approx(150.0, rel=1e-12)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(13.8198, abs=1e-4)


def test_air_around_the_patient_adds_nothing() -> None:
    # AAPM 220: a pixel of -1000 HU adds nothing to Aw, so the ROI may include air; the ROI
    # here is the patient plus a rim, yet its Aw is the water's
    image = blank(300)
    image[100:200, 100:200] = 0.0
    sizes = axial_sizes(image, pixel_spacing_mm=1.0)
    assert sizes.area_cm2[0] > 100.0  # the rim of air is in the ROI ...
    assert sizes.water_equivalent_area_cm2[0] == pytest.approx(100.0, rel=1e-12)  # ... for 0


# ---- water cylinders and ellipses: IEC 62985-style phantom verification ---------------------
@pytest.mark.parametrize("diameter_mm", [100.0, 160.0, 200.0, 320.0, 400.0])
def test_water_cylinder_dw_is_its_diameter(diameter_mm: float) -> None:
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=diameter_mm / 2, b_mm=diameter_mm / 2), 0.0)
    assert dw_of(image) == pytest.approx(diameter_mm / 10.0, rel=2e-4)


@pytest.mark.parametrize(("a_mm", "b_mm"), [(170.0, 110.0), (150.0, 90.0), (60.0, 45.0)])
def test_water_ellipse(a_mm: float, b_mm: float) -> None:
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=a_mm, b_mm=b_mm), 0.0)
    sizes = axial_sizes(image, pixel_spacing_mm=PIXEL_MM)
    # Aw = pi a b for water, so Dw = 2 sqrt(ab); AP = 2b, LAT = 2a (AAPM 204's dimensions)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(
        2 * math.sqrt(a_mm * b_mm) / 10, rel=2e-4
    )
    assert sizes.lat_cm[0] == pytest.approx(2 * a_mm / 10, abs=0.5)  # rim: +- 2 mm + 1 pixel
    assert sizes.ap_cm[0] == pytest.approx(2 * b_mm / 10, abs=0.5)


# CT numbers of fat and muscle (about -100 and +40 HU: common practice) and of bone-like
# material; the expected Dw = D sqrt(1 + CT/1000) is exact for any CT number
@pytest.mark.parametrize("ct_hu", [-100.0, 40.0, 300.0])
def test_cylinder_of_a_tissue_of_known_ct_number(ct_hu: float) -> None:
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=125.0, b_mm=125.0), ct_hu)
    assert dw_of(image) == pytest.approx(25.0 * math.sqrt(1.0 + ct_hu / 1000.0), rel=2e-4)


def _chest() -> np.ndarray:
    """A body ellipse of soft tissue with two lungs of -850 HU inside."""
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=160.0, b_mm=110.0), 40.0)
    for x in (-75.0, 75.0):
        paint(
            image, ellipse_fraction(N, PIXEL_MM, a_mm=50.0, b_mm=70.0, centre_mm=(x, -5.0)), -850.0
        )
    return image


def test_lungs_count_with_their_own_ct_numbers() -> None:
    # the lungs are holes of the thresholded body: filled, they count at (1 - 0.85) of water
    image = _chest()
    assert dw_of(image) == pytest.approx(dw_cm(water_area_cm2(image, PIXEL_MM)), rel=2e-4)


def _legs() -> np.ndarray:
    image = blank(N)
    for x in (-80.0, 80.0):
        paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=65.0, b_mm=70.0, centre_mm=(x, 0.0)), 30.0)
    return image


def test_both_legs_are_the_patient() -> None:
    # two separate components of equal size: neither is left out
    image = _legs()
    assert dw_of(image) == pytest.approx(dw_cm(water_area_cm2(image, PIXEL_MM)), rel=2e-4)


def test_arms_beside_the_body_are_the_patient() -> None:
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=140.0, b_mm=100.0), 40.0)
    for x in (-180.0, 180.0):
        paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=30.0, b_mm=35.0, centre_mm=(x, 10.0)), 40.0)
    assert dw_of(image) == pytest.approx(dw_cm(water_area_cm2(image, PIXEL_MM)), rel=2e-4)


def test_ears_cut_off_by_the_opening_are_given_back() -> None:
    # a head with thin ears (5 mm thick, 25 mm long) attached by their base
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=75.0, b_mm=95.0), 40.0)
    for x0 in (-97.0, 72.0):
        paint(image, rectangle_fraction(N, PIXEL_MM, x_mm=(x0, x0 + 25.0), y_mm=(-2.5, 2.5)), 40.0)
    assert dw_of(image) == pytest.approx(dw_cm(water_area_cm2(image, PIXEL_MM)), rel=3e-4)


# ---- the table --------------------------------------------------------------------------
def _on_a_table(gap_mm: float) -> tuple[np.ndarray, float]:
    """A 30 cm x 22 cm soft-tissue body above a table: a carbon-fibre-like plate (400 mm wide,
    two 2 mm skins of +300 HU round a foam core of -900 HU, 30 mm thick in all) ``gap_mm``
    below the body, with foam of -900 HU filling the gap. Returns the image and the
    body's own water-equivalent area."""
    image = blank(N)
    body = ellipse_fraction(N, PIXEL_MM, a_mm=150.0, b_mm=110.0, centre_mm=(0.0, -20.0))
    paint(image, body, 40.0)
    body_only = water_area_cm2(image, PIXEL_MM)
    top = -20.0 + 110.0 + gap_mm
    if gap_mm > 0:
        pad = rectangle_fraction(N, PIXEL_MM, x_mm=(-200.0, 200.0), y_mm=(top - gap_mm, top))
        paint(image, pad * (1.0 - body), -900.0)
    paint(
        image, rectangle_fraction(N, PIXEL_MM, x_mm=(-200.0, 200.0), y_mm=(top, top + 30.0)), -900.0
    )
    for y0 in (top, top + 28.0):
        paint(
            image, rectangle_fraction(N, PIXEL_MM, x_mm=(-200.0, 200.0), y_mm=(y0, y0 + 2.0)), 300.0
        )
    return image, body_only


@pytest.mark.parametrize("gap_mm", [40.0, 0.0])
def test_table_present_and_removed(gap_mm: float) -> None:
    # with a mattress (40 mm) and lying on the plate itself (0 mm)
    image, body_only = _on_a_table(gap_mm)
    table_area = water_area_cm2(image, PIXEL_MM) - body_only
    assert table_area > 10.0  # the table is there: over 10 cm² of water-equivalent area
    assert dw_of(image) == pytest.approx(dw_cm(body_only), rel=2e-3)


def test_a_plain_threshold_would_count_the_table() -> None:
    image, body_only = _on_a_table(0.0)
    everything_above = image > -500.0  # a contour without table removal
    naive = float(np.sum(image[everything_above] / 1000.0 + 1.0)) * PIXEL_MM**2 / 100.0
    assert dw_cm(naive) > 1.015 * dw_cm(body_only)
    mask = patient_mask(image, pixel_spacing_mm=PIXEL_MM)
    rows = np.flatnonzero(mask.any(axis=1))
    table_top_row = int((-20.0 + 110.0 + N * PIXEL_MM / 2) / PIXEL_MM)
    # at most a sliver of the top skin where the body rests on it; none of the bottom skin
    assert rows[-1] < table_top_row + 10.0 / PIXEL_MM


# ---- field of view --------------------------------------------------------------------------
def test_truncated_patient_is_flagged_and_too_small() -> None:
    # a 40 cm wide patient in a 30 cm field of view, the corners outside the reconstruction
    # circle as NaN (padding)
    n, pixel = 384, 300.0 / 384
    image = blank(n)
    paint(image, ellipse_fraction(n, pixel, a_mm=200.0, b_mm=120.0), 40.0)
    yy, xx = np.mgrid[:n, :n] - (n - 1) / 2
    image[xx**2 + yy**2 > (n / 2) ** 2] = np.nan
    sizes = axial_sizes(image, pixel_spacing_mm=pixel)
    assert sizes.truncated_fraction[0] > 0.1
    assert sizes.water_equivalent_diameter_cm[0] < 0.95 * 2 * math.sqrt(200 * 120 * 1.04) / 10
    whole = blank(N)
    paint(whole, ellipse_fraction(N, PIXEL_MM, a_mm=150.0, b_mm=100.0), 40.0)
    assert axial_sizes(whole, pixel_spacing_mm=PIXEL_MM).truncated_fraction[0] == 0.0


def test_padding_below_outside_field_level_is_not_patient() -> None:
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=100.0, b_mm=100.0), 0.0)
    image[:, :20] = -3024.0  # a scanner's padding value
    assert dw_of(image) == pytest.approx(20.0, rel=2e-4)


def test_noise_averages_out() -> None:
    # quantum noise of 20 HU (common practice for a body scan) leaves Dw within 0.2 %
    rng = np.random.default_rng(220)
    image = blank(N)
    paint(image, ellipse_fraction(N, PIXEL_MM, a_mm=150.0, b_mm=150.0), 0.0)
    noisy = image + rng.normal(0.0, 20.0, image.shape)
    assert dw_of(noisy) == pytest.approx(30.0, rel=2e-3)


def test_image_without_patient_gives_nan() -> None:
    sizes = axial_sizes(blank(64), pixel_spacing_mm=1.0)
    assert np.isnan(sizes.water_equivalent_diameter_cm[0])


def test_stack_equals_image_by_image() -> None:
    stack = np.stack([_chest(), _legs(), blank(N)])
    together = axial_sizes(stack, pixel_spacing_mm=(PIXEL_MM, PIXEL_MM))
    for i, image in enumerate(stack):
        alone = axial_sizes(image, pixel_spacing_mm=PIXEL_MM)
        np.testing.assert_array_equal(
            together.water_equivalent_diameter_cm[i], alone.water_equivalent_diameter_cm[0]
        )


def test_rectangular_pixels() -> None:
    n_rows, n_cols = 400, 512
    rows_mm, cols_mm = 1.0, 0.7
    y = (np.arange(n_rows) + 0.5) * rows_mm - n_rows * rows_mm / 2
    x = (np.arange(n_cols) + 0.5) * cols_mm - n_cols * cols_mm / 2
    image = np.where((x[None, :] / 120.0) ** 2 + (y[:, None] / 120.0) ** 2 < 1, 0.0, -1000.0)
    exact = dw_cm(float(np.sum(image / 1000 + 1)) * rows_mm * cols_mm / 100)
    sizes = axial_sizes(image, pixel_spacing_mm=(rows_mm, cols_mm))
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(exact, rel=1e-12)
    assert exact == pytest.approx(24.0, rel=5e-3)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"threshold_hu": -1200.0}, "between air"),
        ({"outside_field_hu": -900.0}, "below air"),
        ({"table_cut_mm": -1.0}, "table_cut_mm"),
        ({"rim_mm": float("nan")}, "rim_mm"),
    ],
)
def test_contour_method_is_checked(kwargs: dict[str, float], message: str) -> None:
    with pytest.raises(ModelError, match=message):
        ContourMethod(**kwargs)  # type: ignore[arg-type]


def test_bad_spacing_and_shape_are_refused() -> None:
    with pytest.raises(ModelError, match="pixel spacing"):
        axial_sizes(blank(8), pixel_spacing_mm=(0.0, 1.0))
    with pytest.raises(ModelError, match="2-D image or a stack"):
        axial_sizes(np.zeros(5), pixel_spacing_mm=1.0)


# ---- the scan range ---------------------------------------------------------------------
def test_scan_range_mean_of_a_linear_dw_is_its_centre_value() -> None:
    z = np.array([0.0, 100.0, 150.0, 400.0])  # unevenly spaced samples of Dw = 20 + z/100
    result = scan_range_size(z_mm=z, dw_cm=20.0 + z / 100.0, z_start_mm=400.0, z_end_mm=0.0)
    assert result.mean_dw_cm == pytest.approx(22.0, rel=1e-12)
    assert result.centre_dw_cm == pytest.approx(22.0, rel=1e-12)
    assert result.covered_fraction == 1.0 and result.max_gap_mm == 250.0
    assert (result.z_start_mm, result.z_end_mm) == (0.0, 400.0)
    assert result.trail.assumptions == []


def test_scan_range_weights_samples_by_the_length_they_stand_for() -> None:
    # Dw 30 over the first half, 20 over the second: three samples crowd the first half
    z = [0.0, 10.0, 20.0, 249.0, 251.0, 500.0]
    dw = [30.0, 30.0, 30.0, 30.0, 20.0, 20.0]
    result = scan_range_size(z_mm=z, dw_cm=dw, z_start_mm=0.0, z_end_mm=500.0)
    assert result.mean_dw_cm == pytest.approx(25.0, rel=1e-12)  # not the sample mean 26.7


def test_scan_range_beyond_the_samples_is_an_assumption() -> None:
    result = scan_range_size(
        z_mm=[100.0, 200.0], dw_cm=[24.0, 26.0], z_start_mm=50.0, z_end_mm=250.0
    )
    assert result.covered_fraction == pytest.approx(0.5)
    assert result.mean_dw_cm == pytest.approx(25.0)
    assert any("cover 50%" in note for note in result.trail.assumptions)


def test_scan_range_ignores_rows_without_patient_and_counts_truncation() -> None:
    result = scan_range_size(
        z_mm=[0.0, 10.0, 20.0], dw_cm=[np.nan, 25.0, 25.0], z_start_mm=0.0, z_end_mm=20.0,
        truncated=[False, True, False], samples="localizer rows",
    )  # fmt: skip
    assert result.n_samples == 2 and result.truncated_samples == 1
    assert any("truncated" in note for note in result.trail.assumptions)


def test_single_position_acquisition() -> None:
    result = scan_range_size(z_mm=[5.0, 15.0], dw_cm=[20.0, 22.0], z_start_mm=10.0, z_end_mm=10.0)
    assert result.mean_dw_cm == result.centre_dw_cm == pytest.approx(21.0)


def test_scan_range_without_nearby_samples_is_refused() -> None:
    with pytest.raises(ModelError, match="no patient size sample"):
        scan_range_size(z_mm=[900.0], dw_cm=[20.0], z_start_mm=0.0, z_end_mm=100.0)


def test_scan_range_dw_uncertainty_adds_sampling_and_method_in_quadrature() -> None:
    # JCGM 100:2008 (GUM): type A standard uncertainty of a mean s / sqrt(n) (eq. 5) and the
    # method's relative share (from memory: 2 % axial, 5 % localizer) combined by eq. 10
    from beamaudit.model.ct_size import scan_range_dw_uncertainty

    samples = [24.0, 26.0, 28.0, 30.0]
    s = np.std(samples, ddof=1)
    u, parts = scan_range_dw_uncertainty(dw_cm=samples, mean_dw_cm=27.0)
    assert parts == pytest.approx({"sampling_cm": s / 2, "method_cm": 0.54})
    assert u == pytest.approx(math.hypot(s / 2, 0.54))
    u_one, parts_one = scan_range_dw_uncertainty(dw_cm=[27.0], mean_dw_cm=27.0, method="localizer")
    assert parts_one["sampling_cm"] == 0.0 and u_one == pytest.approx(0.05 * 27.0)
    with pytest.raises(ModelError, match="Dw method"):
        scan_range_dw_uncertainty(dw_cm=samples, mean_dw_cm=27.0, method="guess")


@pytest.mark.parametrize("seed", range(3))
def test_distances_on_the_mask_box_equal_the_whole_image_transform(seed: int) -> None:
    """The depth and the dilation computed on the mask's bounding box (widened) are the whole
    image's Euclidean distance transform's, exactly: masks touching the border, several parts,
    scattered pixels, anisotropic pixels, empty masks."""
    from scipy import ndimage

    from beamaudit.model import ct_size

    rng = np.random.default_rng(seed)
    for case in range(100):
        shape = (int(rng.integers(5, 90)), int(rng.integers(5, 90)))
        mask = np.zeros(shape, dtype=bool)
        for _ in range(int(rng.integers(0, 4))):
            r, c = int(rng.integers(0, shape[0])), int(rng.integers(0, shape[1]))
            rows = slice(max(0, r - int(rng.integers(0, 15))), r + int(rng.integers(1, 15)))
            cols = slice(max(0, c - int(rng.integers(0, 15))), c + int(rng.integers(1, 15)))
            mask[rows, cols] = True
        mask |= rng.random(shape) < 0.01 * (case % 3)
        spacing = (float(rng.uniform(0.3, 2.0)), float(rng.uniform(0.3, 2.0)))
        distance = float(rng.uniform(0.0, 30.0))
        whole = ndimage.distance_transform_edt(np.pad(mask, 1), sampling=spacing)[1:-1, 1:-1]
        assert np.array_equal(ct_size._distance_to(mask, spacing), whole)
        near = ndimage.distance_transform_edt(~mask, sampling=spacing) <= distance + 1e-9
        expected = near if mask.any() else mask
        assert np.array_equal(ct_size._within(mask, distance, spacing), expected)
