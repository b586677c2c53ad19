"""Linearised propagation (GUM, JCGM 100:2008 eq. 10) on functions with known answers."""

from __future__ import annotations

import math
from collections.abc import Mapping

import pytest

from beamaudit.model.errors import ModelError
from beamaudit.model.uncertainty import propagate_linearised


def _linear(x: Mapping[str, float]) -> dict[str, float]:
    return {"q": 3.0 * x["a"] - 2.0 * x["b"], "r": x["a"]}


def test_linear_function_is_exact() -> None:
    # GUM eq. 10 with c_a = 3, c_b = -2: u = sqrt(9 u_a^2 + 4 u_b^2)
    budget = propagate_linearised(_linear, {"a": 1.0, "b": 2.0}, {"a": 0.1, "b": 0.2})
    assert budget.standard_uncertainties["q"] == pytest.approx(math.sqrt(0.09 + 0.16))
    assert budget.standard_uncertainties["r"] == pytest.approx(0.1)
    assert budget.contributions["q"]["b"] == pytest.approx(0.4)


def test_one_sided_difference_at_a_bound() -> None:
    budget = propagate_linearised(
        lambda x: {"q": x["a"] ** 2}, {"a": 0.0}, {"a": 0.1}, bounds={"a": (0.0, 10.0)}
    )
    assert budget.standard_uncertainties["q"] == pytest.approx(0.01)


def test_inputs_without_uncertainty_are_exact() -> None:
    budget = propagate_linearised(_linear, {"a": 1.0, "b": 2.0}, {})
    assert budget.standard_uncertainties == {"q": 0.0, "r": 0.0}


def test_negative_uncertainty_rejected() -> None:
    with pytest.raises(ModelError, match="non-negative"):
        propagate_linearised(_linear, {"a": 1.0, "b": 2.0}, {"a": -0.1})
