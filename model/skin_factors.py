r"""The three beam factors of the skin dose: table transmission, backscatter, tissue to air.

The skin-dose map (:mod:`beamaudit.model.skin_dose`) turns the incident air kerma at a skin
cell into absorbed dose to the skin with, for each event,

.. math::

    D = K_{a,i}\; T_{table}\; B\; \overline{(\mu_{en}/\rho)}_{tissue,air}

(IAEA TRS 457, 2007, §7; ICRU Report 74, 2005; the table factor only where the ray crosses the
table). It asks a :class:`BeamFactors` for the three; anything with these three methods will
do, so better physics plugs in without touching the map:

- :class:`SpectrumBeamFactors` (the default) computes all three from each event's own
  spectrum with the dose chain's physics (issue #20): the tube spectrum and filtration of
  :mod:`~beamaudit.model.spectrum` / :mod:`~beamaudit.model.filtration` (tungsten anode, the
  event's kVp and added filters over an inherent filtration of 2.5 mm Al, IEC 60601-1-3's
  minimum, unless the room gives its own); the table and pad as the dose chain's patient
  support (:func:`~beamaudit.model.patient_support.support_transmission`: the room's aluminium
  equivalent or measured transmission, else
  :func:`~beamaudit.model.patient_support.default_patient_support`, assumed), the layers
  scaled by the ray's oblique path; B from beamaudit's Monte Carlo kernels weighted by the
  spectrum's incident air kerma (:func:`~beamaudit.model.backscatter_kernels.backscatter_curve`,
  :func:`~beamaudit.model.backscatter_kernels.backscatter_from_curves`) at the field at the
  skin (the spectrum in front of the table: the map asks for B once per event, whether or not
  its rays cross the table; the table hardens the beam and raises B by a percent or two); the
  ratio of mass energy-absorption coefficients of ICRU-44 soft tissue to air weighted by the
  spectrum's air kerma (:func:`~beamaudit.model.attenuation.mu_en_ratio`).
- :class:`FixedBeamFactors` takes the three as per-event numbers (a measured table
  transmission, factors computed elsewhere, or the hand-worked cases of the tests); the table
  transmission at perpendicular incidence :math:`T_\perp` becomes :math:`T_\perp^{1/\cos\varphi}`
  along an oblique path (Beer-Lambert for the beam's effective attenuation; beam hardening in
  the table makes this slightly low).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model._engine import evaluate_unscaled
from beamaudit.model.attenuation import (
    energy_bin_centres_kev,
    grid_mass_energy_absorption_cm2_g,
    material,
    mu_en_ratio,
)
from beamaudit.model.backscatter_kernels import backscatter_curve, backscatter_from_curves
from beamaudit.model.defaults import dose_default
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import DEFAULT_TOTAL_FILTRATION_MM_AL, FilterSpec, transmission
from beamaudit.model.patient_model import skin_default
from beamaudit.model.patient_support import (
    PatientSupport,
    SupportTransmission,
    default_patient_support,
    support_transmission,
)
from beamaudit.model.skin_events import SkinEvent

__all__ = [
    "BeamFactors",
    "FactorValue",
    "FixedBeamFactors",
    "SpectrumBeamFactors",
    "TransmissionValues",
]

FloatArray = NDArray[np.float64]


class FactorValue(NamedTuple):
    """One factor of one event: value, relative standard uncertainty, where it came from."""

    value: float
    relative_standard_uncertainty: float
    source: str


class TransmissionValues(NamedTuple):
    """Table transmissions along many rays of one event, with their relative uncertainty."""

    values: FloatArray
    relative_standard_uncertainty: float
    source: str


class BeamFactors(Protocol):
    """What the skin-dose map asks of each event's beam.

    ``index`` is the event's position in the list given to the map (a rotational or stepping
    acquisition's parts share it); ``event`` its numbers.
    """

    def table_transmission(
        self, index: int, event: SkinEvent, path_length_factor: FloatArray
    ) -> TransmissionValues:
        """Air-kerma transmission of table and pad along rays of path ``1/cos(phi)`` times the
        perpendicular thickness (``path_length_factor`` >= 1, any shape)."""
        ...

    def backscatter(self, index: int, event: SkinEvent, field_side_cm: float) -> FactorValue:
        """Backscatter factor B for the (equivalent square) field ``field_side_cm`` at the skin."""
        ...

    def tissue_to_air(self, index: int, event: SkinEvent) -> FactorValue:
        """Spectrum-averaged ratio of mass energy-absorption coefficients, tissue to air."""
        ...


def _per_event(name: str, values: ArrayLike, n: int | None) -> FloatArray:
    array = np.atleast_1d(np.asarray(values, dtype=np.float64))
    if not np.all(np.isfinite(array)) or np.any(array <= 0):
        raise ModelError(f"{name} must be positive finite numbers")
    if n is not None and array.size not in (1, n):
        raise ModelError(f"{name} holds {array.size} values for {n} events")
    return array


@dataclass(frozen=True)
class FixedBeamFactors:
    r"""Factors given as numbers: one for all events, or one per event (in the events' order).

    Parameters
    ----------
    transmission, backscatter_factor, tissue_to_air_ratio : array_like
        :math:`T_\perp` of table and pad (at perpendicular incidence), B and the tissue-to-air
        ratio.
    relative_standard_uncertainty : dict, optional
        ``{"table_transmission": u, "backscatter": u, "tissue_to_air": u}`` (0 when absent).
    source : str
        Said beside every factor.
    """

    transmission: ArrayLike = 1.0
    backscatter_factor: ArrayLike = 1.0
    tissue_to_air_ratio: ArrayLike = 1.0
    relative_standard_uncertainty: dict[str, float] | None = None
    source: str = "given"

    def __post_init__(self) -> None:
        for name in ("transmission", "backscatter_factor", "tissue_to_air_ratio"):
            values = _per_event(name, getattr(self, name), None)
            if name == "transmission" and np.any(values > 1):
                raise ModelError("a table transmission must not exceed 1")
            object.__setattr__(self, name, values)

    def _value(self, name: str, index: int) -> float:
        values: FloatArray = getattr(self, name)
        if values.size > 1 and index >= values.size:
            raise ModelError(f"{name} holds {values.size} values, event {index} has none")
        return float(values[0] if values.size == 1 else values[index])

    def _u(self, name: str) -> float:
        return (self.relative_standard_uncertainty or {}).get(name, 0.0)

    def table_transmission(
        self, index: int, event: SkinEvent, path_length_factor: FloatArray
    ) -> TransmissionValues:
        return TransmissionValues(
            np.power(self._value("transmission", index), path_length_factor),
            self._u("table_transmission"),
            self.source,
        )

    def backscatter(self, index: int, event: SkinEvent, field_side_cm: float) -> FactorValue:
        return FactorValue(
            self._value("backscatter_factor", index), self._u("backscatter"), self.source
        )

    def tissue_to_air(self, index: int, event: SkinEvent) -> FactorValue:
        return FactorValue(
            self._value("tissue_to_air_ratio", index), self._u("tissue_to_air"), self.source
        )


class _Beam(NamedTuple):
    energies_kev: FloatArray  # bin centres of the model's grid
    photon_fluence: FloatArray  # photons per bin at 1 m (relative)
    hvl1_mm_al: float
    tissue_to_air: float
    backscatter_sides_cm: FloatArray  # the kernels' field sides
    backscatter_curve: FloatArray  # B of this spectrum at those sides
    backscatter_statistical: FloatArray


#: Path-length factors (1/cos) at which a beam's table transmission is tabulated, then
#: interpolated linearly (within 1e-4 of the direct sum, tested); longer paths (rays within 6
#: degrees of the table plane) are computed directly.
_PATH_GRID = np.geomspace(1.0, 10.0, 121)


@functools.lru_cache(maxsize=512)
def _beam(kvp_kv: float, filters: tuple[tuple[str, float], ...], inherent_mm_al: float) -> _Beam:
    """The event's filtered spectrum at 1 m (tungsten anode, 12° anode angle, no ripple), with
    its backscatter curve from the Monte Carlo kernels."""
    layers = (FilterSpec("Al", inherent_mm_al), *(FilterSpec(m, t) for m, t in filters))
    raw = evaluate_unscaled(
        kv=kvp_kv,
        filters=layers,
        anode="W",
        anode_angle_deg=12.0,
        ripple_percent=0.0,
        air_path_mm=1000.0,
    )
    energies = np.asarray(raw.energies_kev, dtype=np.float64)
    phi = np.asarray(raw.fluence_per_mas_1m, dtype=np.float64)
    ratio = mu_en_ratio(energy_bin_centres_kev(), energies * phi, "soft_tissue", "air")
    curve = backscatter_curve(energies, phi)
    arrays = (
        energies.copy(),
        phi.copy(),
        np.asarray(curve.field_side_cm),
        np.asarray(curve.value),
        np.asarray(curve.statistical_uncertainty),
    )
    for array in arrays:
        array.setflags(write=False)
    return _Beam(arrays[0], arrays[1], float(raw.hvl1_mm_al), ratio, *arrays[2:])


def _support_transmission(beam: _Beam, support: PatientSupport, paths: FloatArray) -> FloatArray:
    """The support's air-kerma transmission of the beam along each path factor: narrow-beam
    attenuation of its layers over ``path`` times their thickness, as
    :func:`~beamaudit.model.patient_support.support_transmission` computes at ``path`` 1
    (tested)."""
    per_bin = transmission(support.layers)
    kerma = beam.energies_kev * beam.photon_fluence * grid_mass_energy_absorption_cm2_g("air")
    with np.errstate(divide="ignore"):
        log_t = np.where(per_bin > 0, np.log(np.where(per_bin > 0, per_bin, 1.0)), -np.inf)
    flat = np.ravel(paths)
    result: FloatArray = (np.exp(np.outer(flat, log_t)) @ kerma) / kerma.sum()
    return result.reshape(np.shape(paths))


@functools.lru_cache(maxsize=512)
def _support_table(
    key: tuple[float, tuple[tuple[str, float], ...], float], support: PatientSupport
) -> FloatArray:
    table = _support_transmission(_beam(*key), support, _PATH_GRID)
    table.setflags(write=False)
    return table


@functools.lru_cache(maxsize=512)
def _perpendicular(
    key: tuple[float, tuple[tuple[str, float], ...], float], support: PatientSupport
) -> SupportTransmission:
    beam = _beam(*key)
    return support_transmission(beam.energies_kev, beam.photon_fluence, support)[0]


@functools.lru_cache(maxsize=256)
def _known_layers(
    filters: tuple[tuple[str, float], ...],
) -> tuple[tuple[tuple[str, float], ...], tuple[str, ...]]:
    """The filter layers whose material the model knows, and the names of the others."""
    known, unknown = [], []
    for name, thickness in filters:
        try:
            material(name)
        except ModelError:
            unknown.append(name)
        else:
            known.append((name, thickness))
    return tuple(known), tuple(unknown)


@dataclass(frozen=True)
class SpectrumBeamFactors:
    """The default factors, from each event's spectrum with the model's physics (module
    docstring).

    Parameters
    ----------
    inherent_filtration_mm_al : float, optional
        The tube's inherent filtration, mm Al; ``None``: 2.5 mm Al (IEC 60601-1-3's minimum,
        assumed).
    table_al_equivalent_mm : float, optional
        Table and pad as mm Al; ``None``: the dose chain's default patient support
        (:func:`~beamaudit.model.patient_support.default_patient_support`, assumed).
    table_transmission_measured : float, optional
        The room's measured transmission of table and pad at perpendicular incidence; when
        given it is used (as :math:`T_\\perp^{1/\\cos\\varphi}`) instead of the aluminium
        equivalent.
    patient_support : PatientSupport, optional
        The room's table and mattress as the dose chain states them (layers or a measured
        transmission); when given it wins over the two above.
    """

    inherent_filtration_mm_al: float | None = None
    table_al_equivalent_mm: float | None = None
    table_transmission_measured: float | None = None
    patient_support: PatientSupport | None = None

    def _key(self, event: SkinEvent) -> tuple[float, tuple[tuple[str, float], ...], float]:
        inherent = self.inherent_filtration_mm_al
        if inherent is None:
            inherent = DEFAULT_TOTAL_FILTRATION_MM_AL
        kvp = event.kvp_kv
        if kvp is None:
            kvp = skin_default("default_kvp_kv").value
        return round(float(kvp), 1), _known_layers(event.filters)[0], float(inherent)

    def _beam(self, event: SkinEvent) -> _Beam:
        try:
            return _beam(*self._key(event))
        except ModelError as exc:
            raise ModelError(f"the beam of an event does not compute: {exc}") from exc

    def _describe(self, event: SkinEvent) -> str:
        notes = []
        if self.inherent_filtration_mm_al is None:
            notes.append("inherent 2.5 mm Al assumed")
        if event.kvp_kv is None:
            notes.append(f"kVp not recorded: {skin_default('default_kvp_kv').value:g} kV assumed")
        unknown = _known_layers(event.filters)[1]
        if unknown:
            notes.append(f"filter of {', '.join(unknown)} not in the model's materials: left out")
        return "event's spectrum" + (f" ({'; '.join(notes)})" if notes else "")

    def support(self) -> PatientSupport:
        """The table and pad as the dose chain's :class:`PatientSupport`."""
        if self.patient_support is not None:
            return self.patient_support
        if self.table_transmission_measured is not None:
            t = float(self.table_transmission_measured)
            if not 0 < t <= 1:
                raise ModelError("a measured table transmission must lie in (0, 1]")
            return PatientSupport(
                measured_transmission=float(self.table_transmission_measured),
                source="room's measured table transmission",
            )
        if self.table_al_equivalent_mm is not None:
            return PatientSupport(
                layers=(FilterSpec("Al", float(self.table_al_equivalent_mm)),),
                thickness_standard_uncertainty_mm_al=skin_default(
                    "table_al_equivalent_mm"
                ).standard_uncertainty
                or 0.0,
                source=f"table and pad as {self.table_al_equivalent_mm:g} mm Al (room)",
            )
        return default_patient_support()

    def table_transmission(
        self, index: int, event: SkinEvent, path_length_factor: FloatArray
    ) -> TransmissionValues:
        paths = np.asarray(path_length_factor, dtype=np.float64)
        support = self.support()
        beam = self._beam(event)
        perpendicular = _perpendicular(self._key(event), support)
        # the skin model's own allowance (table scatter, pad and make unknown) unless the
        # support's thickness uncertainty says more
        u_rel = max(
            perpendicular.standard_uncertainty / perpendicular.value,
            skin_default("table_transmission_relative_uncertainty").value,
        )
        if support.measured_transmission is not None:
            values = np.power(support.measured_transmission, paths)
            return TransmissionValues(values, u_rel, "room's measured table transmission")
        values = np.interp(paths, _PATH_GRID, _support_table(self._key(event), support))
        far = paths > _PATH_GRID[-1]
        if np.any(far):
            values[far] = _support_transmission(beam, support, paths[far])
        what = perpendicular.description
        origin = "assumed, the dose chain's default" if support.assumed else "room"
        return TransmissionValues(
            values,
            u_rel,
            f"table and pad as {what} ({origin}; narrow-beam, table scatter not modelled), "
            f"{self._describe(event)}",
        )

    def backscatter(self, index: int, event: SkinEvent, field_side_cm: float) -> FactorValue:
        beam = self._beam(event)
        values = backscatter_from_curves(
            curves=beam.backscatter_curve[np.newaxis, :],
            curves_statistical=beam.backscatter_statistical[np.newaxis, :],
            rows=np.zeros(1, dtype=np.intp),
            hvl_mm_al=np.array([beam.hvl1_mm_al]),
            hvl_standard_uncertainty_mm_al=np.zeros(1),
            field_side_cm=np.array([float(field_side_cm)]),
            field_side_standard_uncertainty_cm=np.zeros(1),
        )
        value = float(values.value[0])
        if not math.isfinite(value):
            raise ModelError(f"no backscatter factor for a field of {field_side_cm:.3g} cm")
        note = ""
        if values.above_fields[0]:
            note = " (field beyond the kernels: their largest field)"
        elif values.below_fields[0]:
            note = " (field below the kernels: toward the pencil-beam limit)"
        return FactorValue(
            value,
            float(values.standard_uncertainty[0]) / value,
            f"Monte Carlo backscatter kernels (ICRU-44 soft tissue) weighted by the "
            f"{self._describe(event)}{note}",
        )

    def tissue_to_air(self, index: int, event: SkinEvent) -> FactorValue:
        return FactorValue(
            self._beam(event).tissue_to_air,
            dose_default("tissue_to_air_ratio_relative_uncertainty").value,
            f"ICRU-44 soft tissue to air, {self._describe(event)}",
        )


def factor_sources(values: Sequence[FactorValue]) -> list[str]:
    """The distinct sources of some factors, in order of first use."""
    return list(dict.fromkeys(v.source for v in values))
