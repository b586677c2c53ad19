r"""Propagation of standard uncertainties by linearisation (GUM, JCGM 100:2008, section 5.1).

For outputs :math:`q_k = f_k(x_1, \ldots, x_n)` of independent inputs with standard
uncertainties :math:`u(x_i)`:

.. math::

    u(q_k) = \sqrt{\sum_i \left(c_{ki}\, u(x_i)\right)^2}, \qquad
    c_{ki} \approx \frac{f_k(x_i + u_i) - f_k(x_i - u_i)}{2 u_i}

The sensitivity coefficients are central differences over plus and minus one standard
uncertainty (so mild curvature over that interval is averaged rather than ignored). Where a
step would leave an input's valid range, a one-sided difference over :math:`u_i` is used.
Correlations between inputs are not modelled: the inputs here (tube-voltage accuracy, filtration,
output calibration) come from separate measurements.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

from beamaudit.model.errors import ModelError

__all__ = ["UncertaintyBudget", "propagate_linearised"]


@dataclass(frozen=True)
class UncertaintyBudget:
    """Result of :func:`propagate_linearised`.

    Attributes
    ----------
    standard_uncertainties : dict of str to float
        Combined standard uncertainty per output quantity.
    contributions : dict of str to dict of str to float
        ``contributions[quantity][input]`` = :math:`|c_{ki}|\\, u(x_i)`, in the quantity's unit.
    """

    standard_uncertainties: dict[str, float]
    contributions: dict[str, dict[str, float]]


def propagate_linearised(
    evaluate: Callable[[Mapping[str, float]], Mapping[str, float]],
    nominal_inputs: Mapping[str, float],
    input_uncertainties: Mapping[str, float],
    *,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    nominal_outputs: Mapping[str, float] | None = None,
) -> UncertaintyBudget:
    """Propagate independent input uncertainties through ``evaluate`` by linearisation.

    Parameters
    ----------
    evaluate : callable
        Maps a full set of inputs to the output quantities.
    nominal_inputs : mapping
        Nominal value of every input.
    input_uncertainties : mapping
        Standard uncertainty of the inputs that are uncertain (others taken as exact).
    bounds : mapping, optional
        Valid closed range per input; steps outside it become one-sided.
    nominal_outputs : mapping, optional
        ``evaluate(nominal_inputs)`` if already known.

    Returns
    -------
    UncertaintyBudget

    Raises
    ------
    ModelError
        A negative or non-finite uncertainty, or an input without a nominal value.
    """
    base = dict(nominal_outputs) if nominal_outputs is not None else dict(evaluate(nominal_inputs))
    limits = dict(bounds or {})
    contributions: dict[str, dict[str, float]] = {q: {} for q in base}
    for name, u in input_uncertainties.items():
        if name not in nominal_inputs:
            raise ModelError(f"uncertainty given for unknown input {name!r}")
        if not math.isfinite(u) or u < 0.0:
            raise ModelError(f"standard uncertainty of {name} must be non-negative, got {u}")
        if u == 0.0:
            continue
        x0 = nominal_inputs[name]
        lo, hi = limits.get(name, (-math.inf, math.inf))
        up_ok, down_ok = x0 + u <= hi, x0 - u >= lo
        if not (up_ok or down_ok):
            raise ModelError(f"uncertainty of {name} ({u}) is wider than its valid range")
        up = dict(evaluate({**nominal_inputs, name: x0 + u})) if up_ok else base
        down = dict(evaluate({**nominal_inputs, name: x0 - u})) if down_ok else base
        span = (2.0 if (up_ok and down_ok) else 1.0) * u
        for q in base:
            coefficient = (up[q] - down[q]) / span
            contributions[q][name] = abs(coefficient) * u
    combined = {
        q: math.sqrt(sum(c**2 for c in parts.values())) for q, parts in contributions.items()
    }
    return UncertaintyBudget(standard_uncertainties=combined, contributions=contributions)
