"""The Monte Carlo kernels' own physics: the stratified rings against the whole-field estimator.

``simulate_kernel`` (square rings, all fields from one run) must give the B of
``simulate_backscatter`` (one square field, the estimator checked in
test_backscatter_crosscheck.py against xraylib, NIST XCOM and the inverse-square law) for the
same monoenergetic beam, phantom and exclusion radius; a phantom that cannot scatter gives B = 1
exactly (definition, ICRU Report 74).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.model.errors import ModelError
from beamaudit.model.montecarlo_backscatter import SlabPhantom, simulate_backscatter
from beamaudit.model.montecarlo_kernels import simulate_kernel


def test_rings_give_the_b_of_the_whole_field() -> None:
    rings = simulate_kernel(
        60.0, histories_per_ring=20_000, seed=4, field_sides_cm=(5.0, 10.0),
        phantom_cm=(30.0, 30.0, 15.0), exclusion_radius_cm=0.25,
    )  # fmt: skip
    whole = simulate_backscatter(
        np.array([60.0]), np.array([1.0]), field_side_cm=10.0, n_photons=40_000, seed=5,
        phantom=SlabPhantom(depth_cm=15.0),
    )  # fmt: skip
    gap = rings.backscatter_factor[1] - whole.backscatter_factor
    assert abs(gap) < 4 * math.hypot(rings.standard_uncertainty[1], whole.standard_uncertainty)
    assert rings.backscatter_factor[1] > rings.backscatter_factor[0] > 1.0


def test_a_phantom_that_cannot_scatter_gives_b_of_one() -> None:
    k = simulate_kernel(
        50.0, histories_per_ring=500, seed=1, field_sides_cm=(5.0, 10.0),
        phantom_cm=(30.0, 30.0, 0.0),
    )  # fmt: skip
    assert np.all(k.backscatter_factor == 1.0) and np.all(k.standard_uncertainty == 0.0)


def test_same_seed_same_kernel_and_a_short_mean_free_path_shrinks_r0() -> None:
    a, b = (simulate_kernel(15.0, histories_per_ring=300, seed=9) for _ in range(2))
    assert np.array_equal(a.backscatter_factor, b.backscatter_factor)
    # at 15 keV the mean free path in water is 0.6 cm (NIST XCOM mu/rho 1.67 cm2/g): R0 = 0.15
    assert a.exclusion_radius_cm == pytest.approx(0.25 / 1.67, rel=0.03)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"energy_kev": 200.0}, "outside the transport's range"),
        ({"field_sides_cm": (10.0, 5.0)}, "increasing"),
        ({"field_sides_cm": (10.0, 50.0)}, "larger than the phantom"),
        ({"histories_per_ring": 1}, "at least 2"),
    ],
)
def test_bad_input_is_refused(kwargs: dict[str, object], message: str) -> None:
    args: dict[str, object] = {"energy_kev": 60.0, "histories_per_ring": 10, "seed": 1}
    args.update(kwargs)
    with pytest.raises(ModelError, match=message):
        simulate_kernel(**args)  # type: ignore[arg-type]
