r"""The three beam factors of the skin dose: table transmission, backscatter, tissue to air.

The skin-dose map (:mod:`beamaudit.model.skin_dose`) turns the incident air kerma at a skin
cell into absorbed dose to the skin with, for each event,

.. math::

    D = K_{a,i}\; T_{table}\; B\; \overline{(\mu_{en}/\rho)}_{tissue,air}

(IAEA TRS 457, 2007, §7; ICRU Report 74, 2005; the table factor only where the ray crosses the
table). It asks a :class:`BeamFactors` for the three; anything with these three methods will
do, so better physics plugs in without touching the map:

- :class:`SpectrumBeamFactors` (the default) computes all three from each event's own
  spectrum with what :mod:`beamaudit.model` has today: the tube spectrum and filtration of
  :mod:`~beamaudit.model.spectrum` / :mod:`~beamaudit.model.filtration` (tungsten anode, the
  event's kVp and added filters over an inherent filtration of 2.5 mm Al, IEC 60601-1-3's
  minimum, unless the room gives its own); the table and pad as an aluminium equivalent
  (narrow-beam transmission of the spectrum's air kerma, along the ray's oblique path); B
  interpolated in the shipped water table (:mod:`~beamaudit.model.backscatter`) at the
  spectrum's first HVL and the field at the skin; the ratio of mass energy-absorption
  coefficients of ICRU-44 soft tissue to air weighted by the spectrum's air kerma
  (:func:`~beamaudit.model.attenuation.mu_en_ratio`).
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
    grid_linear_attenuation_per_mm,
    grid_mass_energy_absorption_cm2_g,
    material,
    mu_en_ratio,
)
from beamaudit.model.backscatter import backscatter_estimates
from beamaudit.model.defaults import dose_default
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import DEFAULT_TOTAL_FILTRATION_MM_AL, FilterSpec
from beamaudit.model.patient_model import skin_default
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
    energy_fluence: FloatArray  # per bin, at 1 m (relative)
    air_kerma_spectrum: FloatArray  # energy fluence x mu_en/rho of air, per bin
    hvl1_mm_al: float
    tissue_to_air: float


#: Path-length factors (1/cos) at which a beam's table transmission is tabulated, then
#: interpolated linearly (within 1e-4 of the direct sum, tested); longer paths (rays within 6
#: degrees of the table plane) are computed directly.
_PATH_GRID = np.geomspace(1.0, 10.0, 121)


@functools.lru_cache(maxsize=512)
def _beam(kvp_kv: float, filters: tuple[tuple[str, float], ...], inherent_mm_al: float) -> _Beam:
    """The event's filtered spectrum at 1 m (tungsten anode, 12° anode angle, no ripple)."""
    layers = (FilterSpec("Al", inherent_mm_al), *(FilterSpec(m, t) for m, t in filters))
    raw = evaluate_unscaled(
        kv=kvp_kv,
        filters=layers,
        anode="W",
        anode_angle_deg=12.0,
        ripple_percent=0.0,
        air_path_mm=1000.0,
    )
    psi = raw.energies_kev * raw.fluence_per_mas_1m
    kerma = psi * grid_mass_energy_absorption_cm2_g("air")
    for array in (psi, kerma):
        array.setflags(write=False)
    ratio = mu_en_ratio(energy_bin_centres_kev(), psi, "soft_tissue", "air")
    return _Beam(psi, kerma, float(raw.hvl1_mm_al), ratio)


def _al_transmission(beam: _Beam, thickness_mm: float, paths: FloatArray) -> FloatArray:
    """Narrow-beam air-kerma transmission of ``thickness_mm`` Al times each path factor."""
    mu = grid_linear_attenuation_per_mm("Al")
    attenuated = np.exp(-np.outer(paths * thickness_mm, mu)) @ beam.air_kerma_spectrum
    result: FloatArray = attenuated / beam.air_kerma_spectrum.sum()
    return result


@functools.lru_cache(maxsize=512)
def _al_transmission_table(
    kvp_kv: float, filters: tuple[tuple[str, float], ...], inherent_mm_al: float, thickness: float
) -> FloatArray:
    table = _al_transmission(_beam(kvp_kv, filters, inherent_mm_al), thickness, _PATH_GRID)
    table.setflags(write=False)
    return table


@functools.lru_cache(maxsize=4096)
def _backscatter(hvl_mm_al: float, field_side_cm: float) -> tuple[float, float, bool]:
    est = backscatter_estimates(
        hvl_mm_al=hvl_mm_al, field_side_cm=field_side_cm, out_of_range="nearest"
    )
    return float(est.value), float(est.standard_uncertainty), bool(est.extrapolated)


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
    """The default factors, from each event's spectrum with today's model (module docstring).

    Parameters
    ----------
    inherent_filtration_mm_al : float, optional
        The tube's inherent filtration, mm Al; ``None``: 2.5 mm Al (IEC 60601-1-3's minimum,
        assumed).
    table_al_equivalent_mm : float, optional
        Table and pad as mm Al; ``None``: 1.2 mm Al (21 CFR 1020.30(n), from memory; assumed).
    table_transmission_measured : float, optional
        The room's measured transmission of table and pad at perpendicular incidence; when
        given it is used (as :math:`T_\\perp^{1/\\cos\\varphi}`) instead of the aluminium
        equivalent.
    """

    inherent_filtration_mm_al: float | None = None
    table_al_equivalent_mm: float | None = None
    table_transmission_measured: float | None = None

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

    def table_transmission(
        self, index: int, event: SkinEvent, path_length_factor: FloatArray
    ) -> TransmissionValues:
        u_rel = skin_default("table_transmission_relative_uncertainty").value
        paths = np.asarray(path_length_factor, dtype=np.float64)
        if self.table_transmission_measured is not None:
            t = float(self.table_transmission_measured)
            if not 0 < t <= 1:
                raise ModelError("a measured table transmission must lie in (0, 1]")
            return TransmissionValues(
                np.power(t, paths), u_rel, "room's measured table transmission"
            )
        thickness = self.table_al_equivalent_mm
        source = f"table and pad as {thickness} mm Al (room)"
        if thickness is None:
            thickness = skin_default("table_al_equivalent_mm").value
            source = f"table and pad as {thickness:g} mm Al (assumed, 21 CFR 1020.30(n) limit)"
        key = self._key(event)
        self._beam(event)  # a clear error for a beam that does not compute
        values = np.interp(paths, _PATH_GRID, _al_transmission_table(*key, float(thickness)))
        far = paths > _PATH_GRID[-1]
        if np.any(far):
            values[far] = _al_transmission(_beam(*key), float(thickness), paths[far])
        return TransmissionValues(values, u_rel, f"{source}, {self._describe(event)}")

    def backscatter(self, index: int, event: SkinEvent, field_side_cm: float) -> FactorValue:
        beam = self._beam(event)
        value, u, extrapolated = _backscatter(round(beam.hvl1_mm_al, 2), round(field_side_cm, 1))
        if not math.isfinite(value):
            raise ModelError(f"no backscatter factor for HVL {beam.hvl1_mm_al:.3g} mm Al")
        note = " (beyond the table: its nearest edge)" if extrapolated else ""
        return FactorValue(
            value,
            u / value,
            f"water backscatter table at the beam's HVL and field{note}, {self._describe(event)}",
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
