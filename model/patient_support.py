r"""The patient support (table top and mattress) in the beam of a tube below the table.

With the x-ray tube under the table (fluoroscopy, interventional C-arms in their usual
posteroanterior projection, under-couch RF rooms) the beam crosses the table top and the mattress
before it reaches the patient's skin, so the incident air kerma at the skin is the free-in-air
kerma times the support's transmission of that beam's air kerma:

.. math::

    T = \frac{\sum_E \Phi(E)\,E\,(\mu_{en}/\rho)_{air}(E)\,e^{-\sum_l \mu_l(E) t_l}}
             {\sum_E \Phi(E)\,E\,(\mu_{en}/\rho)_{air}(E)}

(narrow-beam attenuation of each layer :math:`l` of thickness :math:`t_l`, the beam's own
spectrum :math:`\Phi`; scatter from the table into the skin is not modelled, which makes
:math:`T` a lower estimate by a few percent). The beam behind the support is harder: its spectrum
serves for the backscatter factor and the tissue/air ratio at the skin. The DAP and the
reference-point air kerma are free-in-air quantities on the tube side and do not change.

A room states its support as layers (material and thickness, e.g. an aluminium equivalent) or as
a measured transmission (then applied as measured at every tube voltage, and the spectrum behind
it is not known: noted). Without either, :func:`default_patient_support` is used and marked
assumed: table top and mattress together as ``patient_support_default_mm_al`` of
``data/dose_defaults.csv`` (1.5 mm Al, standard uncertainty 0.5 mm Al; between the 1.2 and
1.7 mm Al that US rules allow a fixed or a moving table top, 21 CFR 1020.30(n) Table III, from
memory, plus a thin mattress). With a typical fluoroscopy beam that transmits 0.75-0.85 of the
kerma, within the 0.6-0.85 usually quoted (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.attenuation import mass_energy_absorption_on
from beamaudit.model.defaults import dose_default
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec, describe_filters, transmission

__all__ = [
    "PatientSupport",
    "SupportTransmission",
    "default_patient_support",
    "support_transmission",
]

Floats = NDArray[np.float64]


@dataclass(frozen=True)
class PatientSupport:
    """What a room says about the table top and mattress in the beam of an under-couch tube.

    Parameters
    ----------
    layers : tuple of FilterSpec
        Table top and mattress as layers (material and thickness); empty with a measured
        transmission.
    thickness_standard_uncertainty_mm_al : float
        Standard uncertainty of the layers, as aluminium added or removed, mm.
    measured_transmission : float, optional
        Air-kerma transmission measured in the room (0-1); used instead of the layers.
    measured_transmission_standard_uncertainty : float, optional
        Its standard uncertainty (None: the ``measured_support_transmission_relative_uncertainty``
        default, for its use at other tube voltages than measured).
    assumed : bool
        True for the documented default (no room setting).
    source : str
        Where the setting comes from (room configuration, default).
    """

    layers: tuple[FilterSpec, ...] = ()
    thickness_standard_uncertainty_mm_al: float = 0.0
    measured_transmission: float | None = None
    measured_transmission_standard_uncertainty: float | None = None
    assumed: bool = False
    source: str = "room configuration"

    def __post_init__(self) -> None:
        t = self.measured_transmission
        if t is not None and not (math.isfinite(t) and 0.0 < t <= 1.0):
            raise ModelError(f"measured table transmission must be in (0, 1], not {t!r}")
        if t is None and not self.layers:
            raise ModelError("a patient support needs layers or a measured transmission")
        u = self.thickness_standard_uncertainty_mm_al
        if not (math.isfinite(u) and u >= 0.0):
            raise ModelError(f"support thickness uncertainty must be >= 0 mm, not {u!r}")


def default_patient_support() -> PatientSupport:
    """The documented default table top and mattress (assumed; module docstring)."""
    row = dose_default("patient_support_default_mm_al")
    return PatientSupport(
        layers=(FilterSpec("Al", row.value),),
        thickness_standard_uncertainty_mm_al=row.standard_uncertainty or 0.0,
        assumed=True,
        source="beamaudit data/dose_defaults.csv, patient_support_default_mm_al",
    )


@dataclass(frozen=True)
class SupportTransmission:
    """The support's transmission of one beam, and how it was made (for the why trail).

    Attributes
    ----------
    value, standard_uncertainty : float
        Air-kerma transmission T and its standard uncertainty.
    description : str
        The support (layers, or "measured transmission").
    equation, source : str
    note : str or None
        What was assumed, when anything was.
    """

    value: float
    standard_uncertainty: float
    description: str
    equation: str
    source: str
    note: str | None = None

    @property
    def assumed(self) -> bool:
        """True when the transmission rests on an assumption (its note says which)."""
        return self.note is not None


def _kerma_transmission(
    kerma: Floats, layers: tuple[FilterSpec, ...], delta_al_mm: float = 0.0
) -> float:
    extra = (FilterSpec("Al", delta_al_mm),) if delta_al_mm > 0 else ()
    t = transmission((*layers, *extra))
    if delta_al_mm < 0:
        t = t / transmission((FilterSpec("Al", -delta_al_mm),))
    return float(np.sum(kerma * t) / np.sum(kerma))


def support_transmission(
    energies_kev: ArrayLike, photon_fluence: ArrayLike, support: PatientSupport
) -> tuple[SupportTransmission, Floats]:
    """The support's transmission of a beam, and the beam's photon fluence behind it.

    Parameters
    ----------
    energies_kev, photon_fluence : array_like
        The beam's spectrum on the model's energy grid (:func:`beamaudit.model.compute_beam`).
    support : PatientSupport

    Returns
    -------
    (SupportTransmission, ndarray)
        T with its trail wording, and the fluence behind the support (the same fluence for a
        measured transmission, whose spectrum is not known).
    """
    e = np.asarray(energies_kev, dtype=np.float64)
    phi = np.asarray(photon_fluence, dtype=np.float64)
    if support.measured_transmission is not None:
        rel = support.measured_transmission_standard_uncertainty
        t = support.measured_transmission
        u = t * dose_default("measured_support_transmission_relative_uncertainty").value
        u = u if rel is None else rel
        return SupportTransmission(
            value=t,
            standard_uncertainty=u,
            description="measured transmission",
            equation="T as measured in the room",
            source=support.source,
            note="table transmission measured at one beam quality, used at every tube voltage; "
            "the backscatter factor and tissue/air ratio use the beam in front of the table",
        ), phi
    kerma = phi * e * mass_energy_absorption_on("air", e)
    t = _kerma_transmission(kerma, support.layers)
    du = support.thickness_standard_uncertainty_mm_al
    u = 0.5 * abs(_kerma_transmission(kerma, support.layers, -du) - _kerma_transmission(
        kerma, support.layers, du
    )) if du > 0 else 0.0  # fmt: skip
    what = describe_filters(support.layers)
    note = None
    if support.assumed:
        note = (
            f"tube below the table: table top and mattress taken as {what} (no room setting; "
            "beamaudit default, standard uncertainty "
            f"{support.thickness_standard_uncertainty_mm_al:g} mm Al)"
        )
    return SupportTransmission(
        value=t,
        standard_uncertainty=u,
        description=what,
        equation="T = Σ K(E) exp(-Σ μ_l(E) t_l) / Σ K(E), the beam's air-kerma spectrum K(E)",
        source=f"{support.source}; narrow-beam attenuation (table scatter not modelled)",
        note=note,
    ), phi * transmission(support.layers)
