r"""Thick-target x-ray spectrum of a tube anode (semi-empirical, Birch & Marshall type).

Bremsstrahlung
--------------
Kramers' thin-target law gives the bremsstrahlung *energy* radiated per unit photon energy by an
electron of kinetic energy :math:`T` crossing a thin layer as independent of the photon energy
:math:`E < T` and proportional to :math:`Z^2/T` (Kramers, Phil Mag 46:836, 1923). Birch & Marshall
(Phys Med Biol 24:505, 1979) let the electron slow down along its path by the Thomson-Whiddington
law,

.. math::

    T_0^2 - T^2 = C\,\rho x,

so that :math:`dx/dT \propto T` and the two factors of :math:`T` cancel: every element
:math:`dT` of the slowing-down contributes equally. With the photons produced at depth
:math:`x(T)` attenuated along their way out of the target at the anode angle :math:`\theta`
(path :math:`x/\sin\theta` for the central ray), the number of photons per electron, per unit
energy and per steradian is

.. math::

    \frac{d^2N}{dE\,d\Omega} = \frac{k_K Z}{4\pi E}\int_E^{T_0}
    \exp\!\left[-\frac{(\mu/\rho)_{t}(E)\,(T_0^2-T^2)}{C \sin\theta}\right] dT
    = \frac{k_K Z}{4\pi E}\,\frac{1}{s}\left[D(sT_0) - e^{-s^2(T_0^2-E^2)}D(sE)\right],

with :math:`s^2 = (\mu/\rho)_t(E)/(C\sin\theta)` and :math:`D` Dawson's integral. Without
self-absorption this is Kramers' thick-target law :math:`k_K Z (T_0 - E)/E`. Photons are taken
as emitted isotropically (common practice; the :math:`1/4\pi`).

- :math:`k_K` follows from the bremsstrahlung efficiency :math:`\eta = k_\eta Z V`: the energy
  radiated per electron :math:`\int E\,dN = k_K Z T_0^2/2` equals :math:`\eta T_0`, so
  :math:`k_K = 2000\,k_\eta` per keV (:data:`BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT`). The absolute
  yield of this model is uncertain by tens of percent; beamaudit scales it to measured (or
  typical) output, see :mod:`beamaudit.model.calibration`.
- The Thomson-Whiddington constant is :math:`C(T_0) = T_0^2 / (f_d\,R(T_0))`, with
  :math:`R` the continuous-slowing-down range from Bethe's collision stopping power (ICRU Report
  37, 1984, eq. 2.2 with the electron term :math:`F^-`; density effect neglected) and
  :math:`f_d` the electron depth factor (:data:`ELECTRON_DEPTH_FACTOR`). With :math:`f_d = 1`
  the electrons would go straight in; in a high-Z target they diffuse and about half of them
  backscatter, so photons are born at a fraction of the straight-ahead depth. :math:`f_d` is the
  one constant of this model fitted by us: it is the (rounded) least-squares value that lets a
  single total filtration reproduce the voltage dependence of the IEC 61267:2005 RQR 2-10 first
  HVLs. With it the RQR homogeneity coefficients, not used in the fit, come out within 0.03.

Characteristic K-lines
----------------------
K-shell vacancies per electron grow with the overvoltage :math:`U_0 = T_0/E_K` above the K-edge
as the Green & Cosslett power law (Green & Cosslett, J Phys D 1:425, 1968):

.. math::

    n_K = A_K\,(U_0 - 1)^{n}, \quad n = 1.63 .

:math:`A_K` is derived for each anode by fitting this law (in logarithms, over
:math:`1.1 \le U_0 \le U_{0,max}`) to the direct electron-impact vacancy yield
:math:`\frac{N_A}{A}\int_{E_K}^{T_0}\sigma_K(T)/S(T)\,dT`, with Bethe's stopping power :math:`S`
and the Worthington & Tomlin (Proc Phys Soc A 69:401, 1956) form of Bethe's K-shell ionisation
cross-section,

.. math::

    \sigma_K = \frac{\pi e^4\, n_K b_K}{U E_K^2}\ln\frac{4U}{1.65 + 2.35\,e^{1-U}},

:math:`\pi e^4 = 6.51\times10^{-14}` cm² eV², :math:`n_K = 2`, :math:`b_K = 0.35`. Each line
*l* then carries :math:`n_K\,\omega_K R_l/4\pi` photons per electron per steradian, with the
fluorescence yield :math:`\omega_K`, line energies and radiative rates :math:`R_l` from xraylib,
attenuated on the way out like bremsstrahlung from the depths where the vacancies are made.
Photon-induced fluorescence in the target, relativistic enhancement of :math:`\sigma_K` and
electron backscatter are not modelled; the line intensity is uncertain by perhaps a factor 1.5,
which moves the air kerma at 80-150 kV by a few percent at most.

Tube voltage ripple
-------------------
With ripple :math:`r = (U_{max} - U_{min})/U_{max}` (IEC 60788 definition) the voltage is taken
as a rectified sine between :math:`U_{min}` and :math:`U_{max}`,
:math:`U(\varphi) = U_{max}[1 - r(1 - \sin\varphi)]`, at constant tube current, and the
spectrum is the average over the phase (Gauss-Legendre, :data:`RIPPLE_PHASE_NODES` nodes). At
:math:`r = 1` this is single-phase full-wave rectification.

All spectra are on the fixed energy grid of :mod:`beamaudit.model.attenuation`.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np
import numpy.typing as npt
import xraylib
from scipy import special

from beamaudit.model.attenuation import (
    ENERGY_BIN_WIDTH_KEV,
    energy_bin_centres_kev,
    energy_bin_edges_kev,
    grid_linear_attenuation_per_mm,
    mass_attenuation_cm2_g,
)
from beamaudit.model.errors import ModelError

__all__ = [
    "BETHE_COEFFICIENT_MEV_CM2_PER_MOL",
    "BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT",
    "ELECTRONS_PER_MAS",
    "ELECTRON_DEPTH_FACTOR",
    "GREEN_COSSLETT_EXPONENT",
    "RIPPLE_PHASE_NODES",
    "WORTHINGTON_TOMLIN_B_K",
    "Anode",
    "TubeSpectrum",
    "characteristic_lines",
    "collision_stopping_power_kev_cm2_g",
    "csda_range_g_cm2",
    "get_anode",
    "k_shell_vacancies_per_electron",
    "thomson_whiddington_constant_kev2_cm2_g",
    "tube_spectrum",
]

FloatArray = npt.NDArray[np.float64]

#: Elementary charge in C (SI 2019, exact).
ELEMENTARY_CHARGE_C = 1.602176634e-19
#: Electrons hitting the anode per mAs of tube current-time product: 1e-3 C / e.
ELECTRONS_PER_MAS = 1.0e-3 / ELEMENTARY_CHARGE_C
#: Bremsstrahlung efficiency constant k_eta in eta = k_eta Z V (V in volts): about 1e-9, giving
#: about 0.7-0.8 % for tungsten at 100 kV (standard texts; from memory, medium confidence, see
#: PUBLISHED-VALUES section i).
BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT = 1.0e-9
#: Kramers' thick-target constant k_K in photons per electron per keV per unit Z, derived from
#: the efficiency (module docstring): k_K = 2000 k_eta.
KRAMERS_CONSTANT_PER_KEV = 2.0e3 * BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT
#: Electron depth factor f_d: mean depth of the electrons of energy T as a fraction of the
#: straight-ahead (CSDA) depth. Fitted by us (module docstring): least squares over the relative
#: residuals of the IEC 61267:2005 RQR 2-10 first HVLs at one fixed filtration gives 0.346;
#: rounded to 0.35. A fraction of the range is in line with electron-probe microanalysis
#: experience that x-rays in heavy targets are generated well inside the first third of the
#: electron range (from memory).
ELECTRON_DEPTH_FACTOR = 0.35
#: Exponent n of the Green & Cosslett (1968) K-yield law (U0 - 1)^n (from memory, medium).
GREEN_COSSLETT_EXPONENT = 1.63
#: Worthington & Tomlin (1956) constant b_K of the K-shell ionisation cross-section (from memory).
WORTHINGTON_TOMLIN_B_K = 0.35
#: pi e^4 in cm^2 eV^2, the prefactor of Bethe's ionisation cross-section.
_PI_E4_CM2_EV2 = 6.51e-14
#: Lowest overvoltage of the fit of A_K; below it the power law and the integral both vanish.
_GREEN_COSSLETT_FIT_U0_MIN = 1.1
#: 2 pi r_e^2 m_e c^2 N_A in MeV cm^2 / mol, the Bethe stopping-power coefficient (ICRU 37).
BETHE_COEFFICIENT_MEV_CM2_PER_MOL = 0.153537
#: Electron rest energy in keV (CODATA 2018).
_ELECTRON_REST_ENERGY_KEV = 510.99895
#: Avogadro constant, 1/mol.
_AVOGADRO_PER_MOL = 6.02214076e23
#: Lower limit of the range integral, keV. The range below 1 keV is under 0.1 % of R(40 keV).
_RANGE_INTEGRAL_T_MIN_KEV = 1.0
#: Gauss-Legendre nodes over the voltage waveform's phase when ripple > 0.
RIPPLE_PHASE_NODES = 24
#: Gauss-Legendre nodes over electron energy for the depth distribution of K-vacancies.
_K_DEPTH_NODES = 48


@dataclass(frozen=True)
class Anode:
    """An x-ray tube target material.

    Attributes
    ----------
    key : str
        Element symbol, e.g. ``"W"``.
    label : str
        Name.
    atomic_number : int
    atomic_weight : float
        g/mol (xraylib).
    density_g_cm3 : float
    mean_excitation_energy_kev : float
        I-value of Bethe's stopping power (ICRU 37).
    k_edge_kev : float
        K-shell binding energy (xraylib).
    k_fluorescence_yield : float
        omega_K (xraylib).
    kv_min, kv_max : float
        Tube-voltage range accepted, kV.
    validated_kv_min : float or None
        Lowest tube voltage checked against published beam qualities (None: none checked).
    supported : bool
        Whether beams may be computed with this anode yet.
    """

    key: str
    label: str
    atomic_number: int
    atomic_weight: float
    density_g_cm3: float
    mean_excitation_energy_kev: float
    k_edge_kev: float
    k_fluorescence_yield: float
    kv_min: float
    kv_max: float
    validated_kv_min: float | None
    supported: bool


@lru_cache(maxsize=1)
def _anode_table() -> dict[str, Any]:
    text = resources.files("beamaudit.model.data").joinpath("anodes.json").read_text("utf-8")
    table: dict[str, Any] = json.loads(text)["anodes"]
    return table


@lru_cache(maxsize=8)
def _anode_by_key(key: str) -> Anode:
    entry = _anode_table()[key]
    z = xraylib.SymbolToAtomicNumber(entry["element"])
    return Anode(
        key=key,
        label=str(entry["label"]),
        atomic_number=z,
        atomic_weight=float(xraylib.AtomicWeight(z)),
        density_g_cm3=float(entry["density_g_cm3"]),
        mean_excitation_energy_kev=float(entry["mean_excitation_energy_ev"]) / 1000.0,
        k_edge_kev=float(xraylib.EdgeEnergy(z, xraylib.K_SHELL)),
        k_fluorescence_yield=float(xraylib.FluorYield(z, xraylib.K_SHELL)),
        kv_min=float(entry["kv_min"]),
        kv_max=float(entry["kv_max"]),
        validated_kv_min=(
            None if entry["validated_kv_min"] is None else float(entry["validated_kv_min"])
        ),
        supported=bool(entry["supported"]),
    )


def get_anode(name: str | Anode, *, require_supported: bool = True) -> Anode:
    """Resolve an anode material by element symbol or name (case-insensitive).

    Parameters
    ----------
    name : str or Anode
        ``"W"`` or ``"tungsten"``, ``"Mo"``, ``"Rh"``, ``"Ag"`` (see ``data/anodes.json``).
    require_supported : bool
        Raise for anodes the model is not yet validated for.

    Returns
    -------
    Anode

    Raises
    ------
    ModelError
        Unknown or (with ``require_supported``) unsupported anode.
    """
    if isinstance(name, Anode):
        found = name
    else:
        wanted = str(name).strip().lower()
        key = next(
            (k for k, e in _anode_table().items() if wanted in (k.lower(), e["label"].lower())),
            None,
        )
        if key is None:
            raise ModelError(f"unknown anode {name!r}; known anodes: {', '.join(_anode_table())}")
        found = _anode_by_key(key)
    if require_supported and not found.supported:
        supported = ", ".join(k for k, e in _anode_table().items() if e["supported"])
        raise ModelError(
            f"anode {found.key!r} ({found.label}) is not supported yet; supported: {supported}"
        )
    return found


def collision_stopping_power_kev_cm2_g(t_kev: npt.ArrayLike, *, anode: Anode) -> FloatArray:
    r"""Bethe's mass collision stopping power for electrons (ICRU Report 37, eq. 2.2).

    .. math::

        \frac{S}{\rho} = \frac{2\pi r_e^2 m c^2 N_A Z}{A\,\beta^2}\left[
        \ln\frac{\tau^2(\tau+2)}{2(I/mc^2)^2} + 1 - \beta^2
        + \frac{\tau^2/8 - (2\tau+1)\ln 2}{(\tau+1)^2}\right]

    with :math:`\tau = T/mc^2`; the density-effect correction is neglected (under 1 % below
    150 keV).

    Parameters
    ----------
    t_kev : array_like
        Electron kinetic energy, keV (valid from a few keV).
    anode : Anode
        Target material.

    Returns
    -------
    numpy.ndarray
        Stopping power in keV cm²/g.
    """
    t = np.asarray(t_kev, dtype=np.float64)
    tau = t / _ELECTRON_REST_ENERGY_KEV
    beta2 = 1.0 - 1.0 / (1.0 + tau) ** 2
    i_rel = anode.mean_excitation_energy_kev / _ELECTRON_REST_ENERGY_KEV
    f_minus = 1.0 - beta2 + (tau**2 / 8.0 - (2.0 * tau + 1.0) * math.log(2.0)) / (tau + 1.0) ** 2
    bracket = np.log(tau**2 * (tau + 2.0) / (2.0 * i_rel**2)) + f_minus
    coefficient = 1.0e3 * BETHE_COEFFICIENT_MEV_CM2_PER_MOL * anode.atomic_number
    result: FloatArray = coefficient / anode.atomic_weight / beta2 * bracket
    return result


@lru_cache(maxsize=8)
def _range_table(key: str) -> tuple[FloatArray, FloatArray]:
    a = _anode_by_key(key)
    t = np.geomspace(_RANGE_INTEGRAL_T_MIN_KEV, 200.0, 4001)
    inv = 1.0 / collision_stopping_power_kev_cm2_g(t, anode=a)
    cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(t))])
    return t, cumulative


def csda_range_g_cm2(t0_kev: npt.ArrayLike, *, anode: Anode) -> FloatArray:
    """Continuous-slowing-down range from Bethe's stopping power, g/cm².

    Parameters
    ----------
    t0_kev : array_like
        Initial electron kinetic energy, keV (1-200).
    anode : Anode
        Target material.

    Returns
    -------
    numpy.ndarray
        :math:`R = \\int_{1\\,keV}^{T_0} dT / S(T)`, g/cm².
    """
    t, cumulative = _range_table(anode.key)
    return np.interp(np.asarray(t0_kev, dtype=np.float64), t, cumulative)


def thomson_whiddington_constant_kev2_cm2_g(t0_kev: npt.ArrayLike, *, anode: Anode) -> FloatArray:
    """Thomson-Whiddington constant :math:`C = T_0^2/(f_d R(T_0))` of the target.

    Parameters
    ----------
    t0_kev : array_like
        Initial electron kinetic energy, keV.
    anode : Anode
        Target material.

    Returns
    -------
    numpy.ndarray
        C in keV² cm²/g.
    """
    t0 = np.asarray(t0_kev, dtype=np.float64)
    result: FloatArray = t0**2 / (ELECTRON_DEPTH_FACTOR * csda_range_g_cm2(t0, anode=anode))
    return result


def _k_ionisation_cm2(t_kev: FloatArray, edge_kev: float) -> FloatArray:
    u = t_kev / edge_kev
    arg = 4.0 * u / (1.65 + 2.35 * np.exp(1.0 - u))
    sigma = (
        _PI_E4_CM2_EV2 * 2.0 * WORTHINGTON_TOMLIN_B_K / (u * (edge_kev * 1.0e3) ** 2) * np.log(arg)
    )
    return np.where(u > 1.0, sigma, 0.0)


@lru_cache(maxsize=8)
def _gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [-1, 1], computed once per order (read-only)."""
    nodes, weights = np.polynomial.legendre.leggauss(n)
    nodes.flags.writeable = False
    weights.flags.writeable = False
    return nodes, weights


def _direct_k_vacancies(t0_kev: float, a: Anode) -> float:
    if t0_kev <= a.k_edge_kev:
        return 0.0
    nodes, weights = _gauss_legendre(64)
    half = 0.5 * (t0_kev - a.k_edge_kev)
    t = a.k_edge_kev + half * (nodes + 1.0)
    integrand = _k_ionisation_cm2(t, a.k_edge_kev) / collision_stopping_power_kev_cm2_g(t, anode=a)
    return float(_AVOGADRO_PER_MOL / a.atomic_weight * half * np.sum(weights * integrand))


@lru_cache(maxsize=8)
def _green_cosslett_amplitude(key: str) -> float:
    a = _anode_by_key(key)
    u0_max = a.kv_max / a.k_edge_kev
    if u0_max <= _GREEN_COSSLETT_FIT_U0_MIN:
        return 0.0
    u0 = np.linspace(_GREEN_COSSLETT_FIT_U0_MIN, u0_max, 40)
    direct = np.array([_direct_k_vacancies(u * a.k_edge_kev, a) for u in u0])
    log_amplitude = np.mean(np.log(direct) - GREEN_COSSLETT_EXPONENT * np.log(u0 - 1.0))
    return float(np.exp(log_amplitude))


def k_shell_vacancies_per_electron(kv: npt.ArrayLike, *, anode: Anode) -> FloatArray:
    """K-shell vacancies made per electron, Green & Cosslett law (module docstring).

    Parameters
    ----------
    kv : array_like
        Tube voltage in kV (the electrons' kinetic energy in keV).
    anode : Anode
        Target material.

    Returns
    -------
    numpy.ndarray
        :math:`A_K (U_0 - 1)^{1.63}` for :math:`U_0 > 1`, else 0.
    """
    u0 = np.asarray(kv, dtype=np.float64) / anode.k_edge_kev
    amplitude = _green_cosslett_amplitude(anode.key)
    excess = np.clip(u0 - 1.0, 0.0, None)
    result: FloatArray = amplitude * excess**GREEN_COSSLETT_EXPONENT
    return result


@lru_cache(maxsize=8)
def _k_lines(key: str) -> tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]:
    a = _anode_by_key(key)
    energies, rates = [], []
    # Only the IUPAC-named lines (K-L3, K-M2, ...): Siegbahn aliases (KA1_LINE) and composite
    # macros (KA_LINE) would count lines twice.
    iupac = re.compile(r"^K[LMNOPQ]\d*_LINE$")
    for name in sorted(dir(xraylib)):
        if not iupac.match(name):
            continue
        line = getattr(xraylib, name)
        try:
            rate = xraylib.RadRate(a.atomic_number, line)
            energy = xraylib.LineEnergy(a.atomic_number, line)
        except ValueError:
            continue
        if rate > 0.0 and energy > 0.0:
            energies.append(float(energy))
            rates.append(float(rate))
    mu_rho = mass_attenuation_cm2_g(a.key, np.array(energies))
    return tuple(energies), tuple(rates), tuple(float(m) for m in mu_rho)


def characteristic_lines(anode: Anode) -> tuple[FloatArray, FloatArray]:
    """K-line energies and relative emission rates of the anode element (xraylib).

    Parameters
    ----------
    anode : Anode
        Target material.

    Returns
    -------
    energies_kev, radiative_rates : numpy.ndarray
        Line energies (keV) and radiative rates (fractions of radiative K transitions, sum 1).
    """
    energies, rates, _ = _k_lines(anode.key)
    return np.array(energies), np.array(rates)


@dataclass(frozen=True)
class TubeSpectrum:
    """Photons leaving the anode along the central ray, per electron and per steradian.

    Attributes
    ----------
    energies_kev : numpy.ndarray
        Bin centres (the fixed grid).
    bremsstrahlung : numpy.ndarray
        Bremsstrahlung photons per electron per sr in each bin.
    characteristic : numpy.ndarray
        K-line photons per electron per sr in each bin.
    """

    energies_kev: FloatArray
    bremsstrahlung: FloatArray
    characteristic: FloatArray

    @property
    def total(self) -> FloatArray:
        """Bremsstrahlung plus characteristic photons per electron per sr per bin."""
        result: FloatArray = self.bremsstrahlung + self.characteristic
        return result


def _anode_mu_rho_on_grid(a: Anode) -> FloatArray:
    mu_per_mm = grid_linear_attenuation_per_mm(a.key)
    result: FloatArray = mu_per_mm * 10.0 / a.density_g_cm3
    return result


def _bremsstrahlung(t0: float, a: Anode, sin_theta: float, self_absorption: bool) -> FloatArray:
    edges = energy_bin_edges_kev()
    lo = edges[:-1]
    width = np.clip(np.minimum(edges[1:], t0) - lo, 0.0, None)
    out = np.zeros_like(lo)
    active = width > 0.0
    if not np.any(active):
        return out
    e = lo[active] + 0.5 * width[active]
    if self_absorption:
        c = float(thomson_whiddington_constant_kev2_cm2_g(t0, anode=a))
        s = np.sqrt(_anode_mu_rho_on_grid(a)[active] / (c * sin_theta))
        integral = (
            special.dawsn(s * t0) - np.exp(-(s**2) * (t0**2 - e**2)) * special.dawsn(s * e)
        ) / s
    else:
        integral = t0 - e
    density = KRAMERS_CONSTANT_PER_KEV * a.atomic_number * integral / (4.0 * math.pi * e)
    out[active] = density * width[active]
    return out


def _characteristic(t0: float, a: Anode, sin_theta: float, self_absorption: bool) -> FloatArray:
    out = np.zeros(energy_bin_centres_kev().shape)
    vacancies = float(k_shell_vacancies_per_electron(t0, anode=a))
    if vacancies <= 0.0:
        return out
    energies, rates, mu_rho = (np.array(v) for v in _k_lines(a.key))
    if self_absorption:
        c = float(thomson_whiddington_constant_kev2_cm2_g(t0, anode=a))
        nodes, weights = _gauss_legendre(_K_DEPTH_NODES)
        half = 0.5 * (t0 - a.k_edge_kev)
        t = a.k_edge_kev + half * (nodes + 1.0)
        production = weights * _k_ionisation_cm2(t, a.k_edge_kev) * t  # per dT, dx/dT ~ T
        depth_g_cm2 = (t0**2 - t**2) / c
        escape = np.exp(-np.outer(mu_rho, depth_g_cm2) / sin_theta) @ production
        escape = escape / np.sum(production)
    else:
        escape = np.ones_like(energies)
    photons = vacancies * a.k_fluorescence_yield * rates * escape / (4.0 * math.pi)
    index = np.floor((energies - energy_bin_edges_kev()[0]) / ENERGY_BIN_WIDTH_KEV).astype(int)
    np.add.at(out, index, photons)
    return out


def tube_spectrum(
    *,
    kv: float,
    anode: str | Anode = "W",
    anode_angle_deg: float = 12.0,
    ripple_percent: float = 0.0,
    self_absorption: bool = True,
) -> TubeSpectrum:
    """Spectrum leaving the anode on the central ray, per electron per steradian.

    Parameters
    ----------
    kv : float
        Peak tube voltage, kV (the model's range for the anode, e.g. 20-150 kV for W).
    anode : str or Anode
        Target material.
    anode_angle_deg : float
        Anode (target) angle between the target face and the central ray, degrees (0-90).
    ripple_percent : float
        Voltage ripple (U_max - U_min)/U_max in percent, 0-100 (0: constant potential).
    self_absorption : bool
        Attenuate photons on their way out of the target (switch off only for checks against
        Kramers' law).

    Returns
    -------
    TubeSpectrum

    Raises
    ------
    ModelError
        Voltage, angle or ripple out of range, or an unknown/unsupported anode.
    """
    a = get_anode(anode)
    if not (math.isfinite(kv) and a.kv_min <= kv <= a.kv_max):
        raise ModelError(
            f"tube voltage {kv} kV is outside {a.kv_min:g}-{a.kv_max:g} kV for a {a.label} anode"
        )
    if not (math.isfinite(anode_angle_deg) and 0.0 < anode_angle_deg <= 90.0):
        raise ModelError(f"anode angle {anode_angle_deg} degrees is outside 0-90 degrees")
    if not (math.isfinite(ripple_percent) and 0.0 <= ripple_percent <= 100.0):
        raise ModelError(f"voltage ripple {ripple_percent} % is outside 0-100 %")
    sin_theta = math.sin(math.radians(anode_angle_deg))
    if ripple_percent == 0.0:
        voltages, phase_weights = np.array([kv]), np.array([1.0])
    else:
        nodes, weights = _gauss_legendre(RIPPLE_PHASE_NODES)
        phase = 0.25 * math.pi * (nodes + 1.0)
        voltages = kv * (1.0 - ripple_percent / 100.0 * (1.0 - np.sin(phase)))
        phase_weights = weights / np.sum(weights)
    brems = np.zeros(energy_bin_centres_kev().shape)
    char = np.zeros_like(brems)
    for voltage, weight in zip(voltages, phase_weights, strict=True):
        if voltage <= energy_bin_edges_kev()[0]:
            continue
        brems += weight * _bremsstrahlung(float(voltage), a, sin_theta, self_absorption)
        char += weight * _characteristic(float(voltage), a, sin_theta, self_absorption)
    return TubeSpectrum(
        energies_kev=np.array(energy_bin_centres_kev()),
        bremsstrahlung=brems,
        characteristic=char,
    )
