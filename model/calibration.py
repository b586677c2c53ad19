r"""Room calibration: scale the model's output (and fit inherent filtration) to QA measurements.

The semi-empirical spectrum model predicts the *shape* of a beam far better than its absolute
yield. Each room therefore carries an output scale :math:`s`, and, when its QA measurements
include half-value layers, an effective inherent filtration :math:`t_{inh}` in mm Al:

.. math::

    Y_{pred,m} = s\, Y_{model}(U_m, t_{inh} + \text{added}_m)\left(\frac{1000}{d_m}\right)^2,
    \qquad HVL_{pred,m} = HVL_{model}(U_m, t_{inh} + \text{added}_m)

The parameters minimise the weighted sum of squares

.. math::

    \chi^2 = \sum_m \left(\frac{\ln(Y_m / Y_{pred,m})}{u_{Y,m}}\right)^2
           + \sum_{m:\,HVL} \left(\frac{HVL_m - HVL_{pred,m}}{u_{HVL,m}\,HVL_m}\right)^2

(relative standard uncertainties :math:`u`), with :math:`\ln s` and :math:`t_{inh} \ge 0`
found by :func:`scipy.optimize.least_squares`. Parameter standard uncertainties come from the
Jacobian, :math:`(J^TJ)^{-1}`, scaled by the Birge ratio :math:`\chi^2/\nu` when that exceeds 1
(:math:`\nu` degrees of freedom), so scattered measurements widen them. The air path of each
measurement equals its distance from the focus.

When inherent filtration is fitted, the filters of a measurement (and later of a beam computed
with this calibration) are the *added* filters; otherwise they are the total filtration.

Without QA data, :func:`default_calibration` scales the model to a published typical output
(``model/data/typical_output.json``: a fleet mean of about 40 radiographic units, not peer
reviewed) at the default filtration; every figure made with it is marked uncalibrated and
carries a 40 % relative standard uncertainty on output (our judgement; see the data file).
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any, TypedDict

import numpy as np
from scipy.optimize import least_squares

from beamaudit.model._engine import REFERENCE_DISTANCE_MM, evaluate_unscaled
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec, default_filters
from beamaudit.model.spectrum import get_anode

__all__ = [
    "DEFAULT_HVL_UNCERTAINTY_REL",
    "DEFAULT_OUTPUT_UNCERTAINTY_REL",
    "CalibrationResidual",
    "QAMeasurement",
    "RoomCalibration",
    "calibrate_room",
    "default_calibration",
]

#: Default relative standard uncertainty of a measured output (dosimeter calibration and
#: reproducibility; common practice, from memory: about 5 %).
DEFAULT_OUTPUT_UNCERTAINTY_REL = 0.05
#: Default relative standard uncertainty of a measured HVL (common practice, from memory).
DEFAULT_HVL_UNCERTAINTY_REL = 0.04
#: Upper bound of the fitted inherent filtration, mm Al: beyond any tube housing.
_MAX_INHERENT_MM_AL = 20.0


@dataclass(frozen=True)
class QAMeasurement:
    """One QA measurement of a room's tube output (and optionally its first HVL).

    Parameters
    ----------
    kv : float
        Tube voltage, kV.
    filters : tuple of FilterSpec or None
        Added filters when inherent filtration is fitted (None: no added filter); otherwise the
        total filtration (None: the default 2.5 mm Al, assumed).
    distance_mm : float
        Focus-to-detector distance of the output measurement, mm.
    measured_output_ugy_per_mas : float
        Measured air kerma per mAs at ``distance_mm``, µGy/mAs.
    measured_hvl_mm_al : float or None
        Measured first HVL, mm Al.
    output_uncertainty_rel, hvl_uncertainty_rel : float
        Relative standard uncertainties of the two measurements.
    """

    kv: float
    filters: tuple[FilterSpec, ...] | None
    distance_mm: float
    measured_output_ugy_per_mas: float
    measured_hvl_mm_al: float | None = None
    output_uncertainty_rel: float = DEFAULT_OUTPUT_UNCERTAINTY_REL
    hvl_uncertainty_rel: float = DEFAULT_HVL_UNCERTAINTY_REL

    def __post_init__(self) -> None:
        for name in ("kv", "distance_mm", "measured_output_ugy_per_mas"):
            value = float(getattr(self, name))
            if not math.isfinite(value) or value <= 0.0:
                raise ModelError(f"QA measurement {name} must be positive, got {value}")
        hvl = self.measured_hvl_mm_al
        if hvl is not None and (not math.isfinite(hvl) or hvl <= 0.0):
            raise ModelError(f"QA measurement measured_hvl_mm_al must be positive, got {hvl}")
        for name in ("output_uncertainty_rel", "hvl_uncertainty_rel"):
            value = float(getattr(self, name))
            if not math.isfinite(value) or value <= 0.0:
                raise ModelError(f"QA measurement {name} must be positive, got {value}")
        if self.filters is not None:
            object.__setattr__(self, "filters", tuple(self.filters))


@dataclass(frozen=True)
class CalibrationResidual:
    """Residual of one measured quantity after the fit.

    Attributes
    ----------
    measurement_index : int
        Position of the measurement in the input.
    kv : float
    quantity : str
        ``"output_ugy_per_mas"`` (at the measurement distance) or ``"hvl1_mm_al"``.
    measured, predicted : float
    relative_residual : float
        measured / predicted - 1.
    normalised_residual : float
        Residual in units of the measurement's standard uncertainty.
    """

    measurement_index: int
    kv: float
    quantity: str
    measured: float
    predicted: float
    relative_residual: float
    normalised_residual: float

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-ready mapping."""
        return dict(self.__dict__)


@dataclass(frozen=True)
class RoomCalibration:
    """A room's output scale and (optionally) effective inherent filtration.

    Attributes
    ----------
    output_scale : float
        Factor on the physics model's air kerma.
    inherent_filtration_mm_al : float or None
        Fitted inherent filtration, mm Al; None when not fitted.
    residuals : tuple of CalibrationResidual
    calibrated : bool
        True when made from the room's own measurements; False for the default.
    output_scale_uncertainty_rel : float
        Relative standard uncertainty of ``output_scale``.
    inherent_filtration_uncertainty_mm_al : float or None
    anode, anode_angle_deg, ripple_percent
        Tube the calibration belongs to.
    source : str
        How it was made.
    """

    output_scale: float
    inherent_filtration_mm_al: float | None
    residuals: tuple[CalibrationResidual, ...] = ()
    calibrated: bool = True
    output_scale_uncertainty_rel: float = DEFAULT_OUTPUT_UNCERTAINTY_REL
    inherent_filtration_uncertainty_mm_al: float | None = None
    anode: str = "W"
    anode_angle_deg: float = 12.0
    ripple_percent: float = 0.0
    source: str = field(default="room QA measurements")

    def __post_init__(self) -> None:
        if not math.isfinite(self.output_scale) or self.output_scale <= 0.0:
            raise ModelError(f"output scale must be positive, got {self.output_scale}")
        t = self.inherent_filtration_mm_al
        if t is not None and (not math.isfinite(t) or t < 0.0):
            raise ModelError(f"inherent filtration must be non-negative mm Al, got {t}")
        object.__setattr__(self, "anode", get_anode(self.anode).key)

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-ready mapping."""
        out = {k: v for k, v in self.__dict__.items() if k != "residuals"}
        out["residuals"] = [r.as_dict() for r in self.residuals]
        return out


class _TubeKwargs(TypedDict):
    """The tube a calibration belongs to, passed on as keyword arguments."""

    anode: str
    anode_angle_deg: float
    ripple_percent: float


def _predict(
    m: QAMeasurement,
    inherent_mm_al: float | None,
    *,
    anode: str,
    anode_angle_deg: float,
    ripple_percent: float,
    with_hvl: bool,
) -> tuple[float, float]:
    if inherent_mm_al is None:
        filters = m.filters if m.filters is not None else default_filters()
    else:
        filters = (FilterSpec("Al", inherent_mm_al), *(m.filters or ()))
    beam = evaluate_unscaled(
        kv=m.kv,
        filters=filters,
        anode=anode,
        anode_angle_deg=anode_angle_deg,
        ripple_percent=ripple_percent,
        air_path_mm=m.distance_mm,
        with_hvl=with_hvl,
    )
    output = beam.output_ugy_per_mas_1m * (REFERENCE_DISTANCE_MM / m.distance_mm) ** 2
    return output, beam.hvl1_mm_al


def calibrate_room(
    measurements: list[QAMeasurement] | tuple[QAMeasurement, ...],
    *,
    anode: str = "W",
    anode_angle_deg: float = 12.0,
    ripple_percent: float = 0.0,
) -> RoomCalibration:
    """Fit a room's output scale, and its inherent filtration when HVLs are measured.

    Parameters
    ----------
    measurements : sequence of QAMeasurement
        At least one. Inherent filtration is fitted when at least one has a measured HVL.
    anode, anode_angle_deg, ripple_percent
        The room's tube.

    Returns
    -------
    RoomCalibration
        ``calibrated=True``, with residuals per measured quantity.

    Raises
    ------
    ModelError
        No measurements, or a measurement outside the model's range.
    """
    items = tuple(measurements)
    if not items:
        raise ModelError("a room calibration needs at least one QA measurement")
    tube: _TubeKwargs = {
        "anode": get_anode(anode).key,
        "anode_angle_deg": anode_angle_deg,
        "ripple_percent": ripple_percent,
    }
    fit_filtration = any(m.measured_hvl_mm_al is not None for m in items)

    def predictions(inherent: float | None) -> list[tuple[float, float]]:
        return [_predict(m, inherent, with_hvl=fit_filtration, **tube) for m in items]

    def residual_vector(params: np.ndarray) -> np.ndarray:
        log_scale = params[0]
        inherent = float(params[1]) if fit_filtration else None
        out = []
        for m, (output, hvl) in zip(items, predictions(inherent), strict=True):
            out.append(
                (math.log(m.measured_output_ugy_per_mas / output) - log_scale)
                / m.output_uncertainty_rel
            )
            if m.measured_hvl_mm_al is not None:
                out.append(
                    (m.measured_hvl_mm_al - hvl) / (m.hvl_uncertainty_rel * m.measured_hvl_mm_al)
                )
        return np.array(out)

    start_inherent = 1.0 if fit_filtration else None
    log_ratios = [
        math.log(m.measured_output_ugy_per_mas / p[0])
        for m, p in zip(items, predictions(start_inherent), strict=True)
    ]
    if fit_filtration:
        params, jac = _fit_scale_and_filtration(residual_vector, log_ratios)
    else:
        params, jac = _fit_scale(items, log_ratios)
    final = residual_vector(params if fit_filtration else np.array([params[0], 0.0]))
    covariance = _fit_covariance(final, params, jac)
    inherent = float(params[1]) if fit_filtration else None
    residuals = _residual_records(items, predictions(inherent), math.exp(params[0]))
    return RoomCalibration(
        output_scale=math.exp(float(params[0])),
        inherent_filtration_mm_al=inherent,
        residuals=residuals,
        calibrated=True,
        output_scale_uncertainty_rel=math.sqrt(float(covariance[0, 0])),
        inherent_filtration_uncertainty_mm_al=(
            math.sqrt(float(covariance[1, 1])) if fit_filtration else None
        ),
        source=f"least-squares fit to {len(items)} QA measurement(s)",
        **tube,
    )


def _fit_scale_and_filtration(
    residual_vector: Callable[[np.ndarray], np.ndarray], log_ratios: list[float]
) -> tuple[np.ndarray, np.ndarray]:
    """Log output scale and inherent filtration (mm Al) by bounded least squares on the
    normalised residuals, from the mean log ratio of measured to predicted output and 1 mm Al;
    the parameters and the Jacobian at them."""
    fit = least_squares(
        residual_vector,
        x0=np.array([float(np.mean(log_ratios)), 1.0]),
        bounds=([-np.inf, 0.0], [np.inf, _MAX_INHERENT_MM_AL]),
        x_scale=np.array([0.05, 0.5]),
        diff_step=1e-4,
    )
    return fit.x, fit.jac


def _fit_scale(
    items: tuple[QAMeasurement, ...], log_ratios: list[float]
) -> tuple[np.ndarray, np.ndarray]:
    """Only the log output scale: the weighted mean of the log ratios of measured to predicted
    output (weights :math:`1/u_{rel}^2`) is the exact least-squares solution; the parameter and
    the Jacobian of the normalised residuals."""
    weights = np.array([1.0 / m.output_uncertainty_rel**2 for m in items])
    logs = np.array(log_ratios)
    params = np.array([float(np.sum(weights * logs) / np.sum(weights))])
    jac = -np.array([[1.0 / m.output_uncertainty_rel] for m in items])
    return params, jac


def _fit_covariance(final: np.ndarray, params: np.ndarray, jac: np.ndarray) -> np.ndarray:
    """Covariance of the fitted parameters, :math:`(J^T J)^{-1}` scaled by the Birge ratio
    :math:`\\chi^2/\\nu` when above 1 (:math:`\\nu` the degrees of freedom)."""
    dof = final.size - params.size
    birge = max(1.0, float(np.sum(final**2)) / dof) if dof > 0 else 1.0
    try:
        return np.linalg.inv(jac.T @ jac) * birge
    except np.linalg.LinAlgError:
        raise ModelError(
            "QA measurements do not determine the calibration (singular fit)"
        ) from None


def _residual_records(
    items: tuple[QAMeasurement, ...], predictions: list[tuple[float, float]], scale: float
) -> tuple[CalibrationResidual, ...]:
    records = []
    for i, (m, (output, hvl)) in enumerate(zip(items, predictions, strict=True)):
        predicted = scale * output
        rel = m.measured_output_ugy_per_mas / predicted - 1.0
        records.append(
            CalibrationResidual(
                measurement_index=i,
                kv=m.kv,
                quantity="output_ugy_per_mas",
                measured=m.measured_output_ugy_per_mas,
                predicted=predicted,
                relative_residual=rel,
                normalised_residual=math.log(m.measured_output_ugy_per_mas / predicted)
                / m.output_uncertainty_rel,
            )
        )
        if m.measured_hvl_mm_al is not None:
            records.append(
                CalibrationResidual(
                    measurement_index=i,
                    kv=m.kv,
                    quantity="hvl1_mm_al",
                    measured=m.measured_hvl_mm_al,
                    predicted=hvl,
                    relative_residual=m.measured_hvl_mm_al / hvl - 1.0,
                    normalised_residual=(m.measured_hvl_mm_al - hvl)
                    / (m.hvl_uncertainty_rel * m.measured_hvl_mm_al),
                )
            )
    return tuple(records)


@lru_cache(maxsize=1)
def _typical_output() -> dict[str, Any]:
    text = (
        resources.files("beamaudit.model.data").joinpath("typical_output.json").read_text("utf-8")
    )
    data: dict[str, Any] = json.loads(text)
    return data


@lru_cache(maxsize=16)
def default_calibration(
    *, anode: str = "W", anode_angle_deg: float = 12.0, ripple_percent: float = 0.0
) -> RoomCalibration:
    """The uncalibrated default: the model scaled to a published typical output.

    The scale is the geometric-mean ratio of the published fit (converted from its 40 in
    reference distance to 1 m by the inverse-square law) to the model at the fit's voltages,
    with the default 2.5 mm Al total filtration assumed for the surveyed units. An anode whose
    voltage range misses the fit's voltages (Mo, Rh, Ag: 20-50 kV) takes the scale of a
    tungsten tube of the same angle and ripple: the scale corrects the model's bremsstrahlung
    yield constant, which does not depend on the anode.

    Parameters
    ----------
    anode, anode_angle_deg, ripple_percent
        The tube.

    Returns
    -------
    RoomCalibration
        ``calibrated=False``, relative output uncertainty from the data file (0.4).
    """
    data = _typical_output()
    a = get_anode(anode)
    key = a.key
    filters = (FilterSpec("Al", float(data["assumed_total_filtration_mm_al"])),)
    to_1m = (float(data["reference_distance_mm"]) / REFERENCE_DISTANCE_MM) ** 2
    kvs = [float(k) for k in data["fit_kv"]]
    if not all(a.kv_min <= k <= a.kv_max for k in kvs):
        # The survey's tubes are tungsten radiography tubes. The scale corrects the model's
        # bremsstrahlung yield constant, which is the same for every anode, so an anode whose
        # range misses the survey's voltages (the mammography anodes) takes the tungsten scale.
        tungsten = default_calibration(
            anode="W", anode_angle_deg=anode_angle_deg, ripple_percent=ripple_percent
        )
        return RoomCalibration(
            output_scale=tungsten.output_scale,
            inherent_filtration_mm_al=None,
            calibrated=False,
            output_scale_uncertainty_rel=tungsten.output_scale_uncertainty_rel,
            anode=key,
            anode_angle_deg=anode_angle_deg,
            ripple_percent=ripple_percent,
            source=(
                f"default: the scale of a tungsten tube of the same angle and ripple "
                f"({tungsten.source.removeprefix('default: ')}); no typical output of a "
                f"{a.label} tube is at hand"
            ),
        )
    published = [
        to_1m * float(data["coefficient_ugy_per_mas"]) * k ** float(data["exponent"]) for k in kvs
    ]
    model = [
        evaluate_unscaled(
            kv=k,
            filters=filters,
            anode=key,
            anode_angle_deg=anode_angle_deg,
            ripple_percent=ripple_percent,
            air_path_mm=REFERENCE_DISTANCE_MM,
            with_hvl=False,
        ).output_ugy_per_mas_1m
        for k in kvs
    ]
    scale = math.exp(
        float(np.mean([math.log(p / m) for p, m in zip(published, model, strict=True)]))
    )
    u_rel = float(data["relative_standard_uncertainty"])
    residuals = tuple(
        CalibrationResidual(
            measurement_index=i,
            kv=k,
            quantity="output_ugy_per_mas",
            measured=p,
            predicted=scale * m,
            relative_residual=p / (scale * m) - 1.0,
            normalised_residual=math.log(p / (scale * m)) / u_rel,
        )
        for i, (k, p, m) in enumerate(zip(kvs, published, model, strict=True))
    )
    return RoomCalibration(
        output_scale=scale,
        inherent_filtration_mm_al=None,
        residuals=residuals,
        calibrated=False,
        output_scale_uncertainty_rel=u_rel,
        anode=key,
        anode_angle_deg=anode_angle_deg,
        ripple_percent=ripple_percent,
        source="default: published typical output (" + str(data["source"]).split(";")[0] + ")",
    )
