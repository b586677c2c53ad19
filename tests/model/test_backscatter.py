"""Backscatter factors: the shipped table, its interpolation, and sanity against the literature.

The shipped cells were written from memory of the IPEM Report 88 water table (after
Petoussi-Henss et al., Phys Med Biol 43:2237, 1998); they are checked here cell by cell against
the values written out below (the same recollection, so a changed file is caught), and the
table as a whole against what the literature says with high confidence about B.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from beamaudit.model.backscatter import (
    backscatter_estimate,
    backscatter_factor,
    equivalent_square_side_cm,
    load_backscatter_table,
)
from beamaudit.model.errors import ModelError

SIDES_CM = (10.0, 15.0, 20.0, 25.0, 30.0)
# from memory: IPEM Report 88 (2004) water table after Petoussi-Henss et al. 1998, as shipped
EXPECTED = {
    1.0: (1.20, 1.21, 1.22, 1.22, 1.22),
    1.5: (1.23, 1.25, 1.26, 1.26, 1.26),
    2.0: (1.27, 1.29, 1.30, 1.31, 1.31),
    2.5: (1.30, 1.33, 1.34, 1.35, 1.35),
    3.0: (1.32, 1.36, 1.37, 1.38, 1.39),
    4.0: (1.36, 1.40, 1.42, 1.43, 1.44),
    5.0: (1.38, 1.43, 1.45, 1.47, 1.48),
    6.0: (1.40, 1.45, 1.48, 1.50, 1.51),
    8.0: (1.42, 1.48, 1.52, 1.54, 1.55),
}
CELLS = [(hvl, side, row[j]) for hvl, row in EXPECTED.items() for j, side in enumerate(SIDES_CM)]


@pytest.mark.parametrize(("hvl", "side", "expected"), CELLS)
def test_every_cell_is_reproduced(hvl: float, side: float, expected: float) -> None:
    # the shipped table, read back through the interpolator at its own grid points
    assert float(backscatter_factor(hvl_mm_al=hvl, field_side_cm=side)) == pytest.approx(
        expected, abs=1e-12
    )


def test_table_axes_and_shape() -> None:
    table = load_backscatter_table()
    assert tuple(table.hvl_mm_al) == tuple(EXPECTED)
    assert tuple(table.field_side_cm) == SIDES_CM
    assert table.factors.shape == (len(EXPECTED), len(SIDES_CM))
    assert not table.factors.flags.writeable


def test_header_is_honest_about_its_source() -> None:
    table = load_backscatter_table()
    assert "Petoussi-Henss" in table.source and "IPEM Report 88" in table.source
    assert "from memory" in table.metadata["where_found"]
    assert "from memory" in table.confidence and "5 percent" in table.confidence
    assert table.metadata["phantom"].startswith("water")
    assert table.cell_relative_standard_uncertainty == pytest.approx(0.03)


# Harrison, Phys Med Biol 27 (1982): B about 1.2-1.45 measured for 1-4 mm Al (low confidence),
# so checked loosely here (1.15-1.50), as the team's brief allows.
def test_range_for_radiographic_hvl() -> None:
    for hvl in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0):
        for b in EXPECTED[hvl]:
            assert 1.15 <= b <= 1.50


# Every published B table (ICRU 74, IAEA TRS 457, Petoussi-Henss 1998) rises with HVL and with
# field size; B > 1 by definition (K_a,e includes K_a,i).
def test_rises_with_hvl_and_field() -> None:
    f = load_backscatter_table().factors
    assert np.all(f > 1.0)
    assert np.all(np.diff(f, axis=0) >= 0)
    assert np.all(np.diff(f, axis=1) >= 0)


def test_interpolation_is_monotone_between_cells() -> None:
    hvl = np.linspace(1.0, 8.0, 141)
    side = np.linspace(10.0, 30.0, 81)
    grid = backscatter_factor(hvl_mm_al=hvl[:, None], field_side_cm=side[None, :])
    assert grid.shape == (141, 81)
    assert np.all(np.diff(grid, axis=0) >= -1e-12)
    assert np.all(np.diff(grid, axis=1) >= -1e-12)


def test_interpolation_stays_within_neighbouring_cells() -> None:
    table = load_backscatter_table()
    hs, ss, f = table.hvl_mm_al, table.field_side_cm, table.factors
    for i, j in itertools.product(range(hs.size - 1), range(ss.size - 1)):
        h, s = (hs[i] + hs[i + 1]) / 2, (ss[j] + ss[j + 1]) / 2
        b = float(backscatter_factor(hvl_mm_al=h, field_side_cm=s))
        corners = f[i : i + 2, j : j + 2]
        assert corners.min() <= b <= corners.max()
        # bilinear at the centre is the mean of the four corners (worked by hand)
        assert b == pytest.approx(corners.mean(), abs=1e-12)


def test_worked_interpolation_example() -> None:
    # by hand: HVL 2.75 mm Al is halfway between 2.5 and 3.0; side 17.5 cm halfway 15-20:
    # (1.33 + 1.34 + 1.36 + 1.37) / 4 = 1.35
    assert float(backscatter_factor(hvl_mm_al=2.75, field_side_cm=17.5)) == pytest.approx(1.35)
    # on an edge: HVL 3.5 between 3.0 (1.37) and 4.0 (1.42) at 20 cm -> 1.395
    assert float(backscatter_factor(hvl_mm_al=3.5, field_side_cm=20.0)) == pytest.approx(1.395)


# Sterling, Perry & Katz, Br J Radiol 37:544 (1964): equivalent square side 4A/P = 2ab/(a+b);
# worked by hand: 20 x 40 cm -> 1600/60 = 26.667 cm; a square is itself.
def test_equivalent_square() -> None:
    assert float(equivalent_square_side_cm(width_cm=20.0, height_cm=40.0)) == pytest.approx(
        80.0 / 3.0
    )
    assert float(equivalent_square_side_cm(width_cm=25.0, height_cm=25.0)) == pytest.approx(25.0)
    with pytest.raises(ModelError, match="positive"):
        equivalent_square_side_cm(width_cm=0.0, height_cm=10.0)


def test_out_of_range_raises_by_default() -> None:
    with pytest.raises(ModelError, match="outside the backscatter table"):
        backscatter_factor(hvl_mm_al=3.0, field_side_cm=5.0)
    with pytest.raises(ModelError, match="above the backscatter table"):
        backscatter_factor(hvl_mm_al=9.0, field_side_cm=20.0)


def test_low_hvl_is_never_extrapolated() -> None:
    # mammography beams (HVL ~0.3-0.6 mm Al) need their own table
    with pytest.raises(ModelError, match="never extrapolated"):
        backscatter_factor(hvl_mm_al=0.4, field_side_cm=20.0, out_of_range="nearest")


def test_nearest_takes_the_edge() -> None:
    assert float(
        backscatter_factor(hvl_mm_al=3.0, field_side_cm=5.0, out_of_range="nearest")
    ) == pytest.approx(1.32)
    assert float(
        backscatter_factor(hvl_mm_al=10.0, field_side_cm=40.0, out_of_range="nearest")
    ) == pytest.approx(1.55)


def test_bad_inputs() -> None:
    with pytest.raises(ModelError, match="HVL must be"):
        backscatter_factor(hvl_mm_al=math.nan, field_side_cm=20.0)
    with pytest.raises(ModelError, match="field side must be"):
        backscatter_factor(hvl_mm_al=3.0, field_side_cm=-1.0)
    with pytest.raises(ModelError, match="out_of_range"):
        backscatter_factor(hvl_mm_al=3.0, field_side_cm=20.0, out_of_range="clip")
    with pytest.raises(ModelError, match="no backscatter table"):
        load_backscatter_table("bone")


def test_estimate_cell_uncertainty_only() -> None:
    est = backscatter_estimate(hvl_mm_al=3.0, field_side_cm=20.0)
    assert est.value == pytest.approx(1.37)
    assert est.standard_uncertainty == pytest.approx(0.03 * 1.37)
    assert not est.extrapolated
    assert "from memory" in est.notes[0]


def test_estimate_carries_hvl_uncertainty_through_the_slope() -> None:
    # slope at HVL 3.5, 20 cm: (1.42 - 1.37) / 1.0 mm Al = 0.05 per mm Al (by hand);
    # u(HVL) = 0.2 mm Al -> 0.01; combined with the cell term 0.03 * 1.395
    est = backscatter_estimate(
        hvl_mm_al=3.5, field_side_cm=20.0, hvl_standard_uncertainty_mm_al=0.2
    )
    assert est.standard_uncertainty == pytest.approx(math.hypot(0.03 * 1.395, 0.05 * 0.2))


def test_estimate_outside_the_table_adds_the_extrapolation_term() -> None:
    # 5 cm at HVL 3 mm Al: edge 1.32; linear extension of 10->15 cm slope (1.36-1.32)/5 gives
    # 1.32 - 0.04 = 1.28; extra term (0.04)^2 / 3 (rectangular half-width)
    est = backscatter_estimate(hvl_mm_al=3.0, field_side_cm=5.0, out_of_range="nearest")
    assert est.extrapolated
    assert est.value == pytest.approx(1.32)
    assert est.standard_uncertainty == pytest.approx(
        math.sqrt((0.03 * 1.32) ** 2 + 0.04**2 / 3), rel=1e-9
    )
    assert any("nearest edge" in n for n in est.notes)


def test_estimate_rejects_negative_uncertainty() -> None:
    with pytest.raises(ModelError, match="must not be negative"):
        backscatter_estimate(hvl_mm_al=3.0, field_side_cm=20.0, hvl_standard_uncertainty_mm_al=-1)


def test_header_states_the_phantom_dependence() -> None:
    # Ma & Seuntjens, Phys Med Biol 44:131 (1999): B for soft tissue vs water differ by < 1 %,
    # bone by up to 20 % (PUBLISHED-VALUES d, high) -- the reason one water table serves tissue
    phantom = load_backscatter_table().metadata["phantom"]
    assert "less than 1 percent" in phantom and "Ma & Seuntjens" in phantom
    assert "bone" in phantom
