"""Precomputed kV tables agree with the direct spectral calculation."""

from __future__ import annotations

import numpy as np
import pytest

from beamaudit.model import BeamConfig, BeamSpec, BeamTable, FilterSpec, ModelError, compute_beam

CONFIG = BeamConfig(filters=(FilterSpec("Al", 3.0), FilterSpec("Cu", 0.1)))


@pytest.fixture(scope="module")
def table() -> BeamTable:
    return BeamTable.build(CONFIG, kv_grid=np.arange(40.0, 150.01, 0.5))


def test_table_agrees_with_direct_calculation_within_half_a_percent(table: BeamTable) -> None:
    # issue #3: interpolated output and HVL within 0.5 % of the direct spectral calculation
    kvs = np.random.default_rng(3).uniform(40.0, 150.0, 12)
    kvs = np.append(kvs, [69.6, 70.1, 149.9])  # just above the W K-edge and at the top
    output, hvl = table.evaluate(kvs)
    for kv, o, h in zip(kvs, output, hvl, strict=True):
        direct = compute_beam(CONFIG.at_kv(float(kv)))
        assert o == pytest.approx(direct.output_ugy_per_mas_1m, rel=0.005)
        assert h == pytest.approx(direct.hvl1_mm_al, rel=0.005)


def test_outside_the_grid_is_nan_elementwise(table: BeamTable) -> None:
    output, hvl = table.evaluate(np.array([[30.0, 80.0], [np.nan, 151.0]]))
    assert output.shape == (2, 2)
    assert np.isnan(output[0, 0]) and np.isnan(output[1, 0]) and np.isnan(hvl[1, 1])
    assert np.isfinite(output[0, 1])


def test_table_carries_flags_and_other_columns(table: BeamTable) -> None:
    assert not table.calibrated
    assert not table.filtration_assumed
    assert table.evaluate_column("hvl1_mm_cu", 80.0) > 0.0
    with pytest.raises(ModelError, match="unknown column"):
        table.evaluate_column("dap", 80.0)


def test_build_from_a_spec_ignores_its_kv() -> None:
    t = BeamTable.build(BeamSpec(80.0), kv_grid=[60.0, 70.0])
    assert t.filtration_assumed
    assert t.kv_grid.tolist() == [60.0, 70.0]


def test_bad_grid_rejected() -> None:
    with pytest.raises(ModelError, match="strictly increasing"):
        BeamTable.build(CONFIG, kv_grid=[80.0, 70.0])
