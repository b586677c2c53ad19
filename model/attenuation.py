r"""Photon interaction data: materials, :math:`\mu/\rho` and :math:`\mu_{en}/\rho`.

Cross-sections come from xraylib (elemental data, combined by mass fraction for compounds and
mixtures). The mass attenuation coefficient is xraylib's total cross-section (photoelectric,
coherent and incoherent scattering; pair production is absent below 1.022 MeV):

.. math::

    \frac{\mu}{\rho} = \sum_i w_i \, \sigma_{tot}(Z_i, E)

with :math:`w_i` the mass fractions. The mass energy-absorption coefficient is *not* taken from
xraylib's ``CS_Energy``: in xraylib 4.3 it is a third below NIST for dry air at 20 keV. It is built
here from xraylib's partial cross-sections (Attix, *Introduction to Radiological Physics and
Radiation Dosimetry*, 1986, ch. 7; Hubbell & Seltzer, NISTIR 5632, section 3):

.. math::

    \frac{\mu_{en}}{\rho} = \sum_i w_i \left[ \tau_i(E) - \frac{1}{E}\sum_s \sigma_{F,s}(Z_i,E)\,
    \bar{\varepsilon}_s(Z_i) + \sigma_{tr,incoh}(Z_i, E) \right] (1 - g)

- :math:`\tau` is the photoelectric cross-section; the fluorescence photons that carry energy
  away are subtracted shell by shell: :math:`\sigma_{F,s}` is xraylib's fluorescence
  production cross-section of shell *s* including the Coster-Kronig/Auger cascade
  (``CS_FluorShell_Kissel_Cascade``), :math:`\bar{\varepsilon}_s = \sum_l R_l E_l` the mean
  energy of one fluorescence photon of that shell (radiative rates :math:`R_l` and line energies
  :math:`E_l` from xraylib).
- :math:`\sigma_{tr,incoh}` is the incoherent energy-transfer cross-section, the Klein-Nishina
  differential cross-section weighted by the incoherent scattering function :math:`S(x, Z)`
  (the same function xraylib's incoherent cross-section uses) and by the fraction of the photon
  energy given to the electron:

  .. math::

      \sigma_{tr,incoh} = \frac{N_A}{A}\int \frac{d\sigma_{KN}}{d\Omega}\, S(x, Z)
      \left(1 - \frac{E'}{E}\right) d\Omega, \qquad
      \frac{E'}{E} = \frac{1}{1 + k(1-\cos\theta)},\; k = \frac{E}{m_e c^2}

- :math:`g`, the fraction of the secondary electrons' energy lost to bremsstrahlung, is below
  0.1 % for the materials here at diagnostic energies and is neglected (:data:`RADIATIVE_YIELD_G`).

The tests check both coefficients against NISTIR 5632 at every tabulated energy from 10 to 150
keV; dry air and water agree within 0.2 %.

Energies are in keV, coefficients in cm²/g, linear coefficients in 1/mm.
"""

from __future__ import annotations

import json
import re
import threading
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np
import numpy.typing as npt
import xraylib
import xraylib_np

from beamaudit.model.errors import ModelError

__all__ = [
    "ENERGY_BIN_WIDTH_KEV",
    "ENERGY_GRID_MAX_KEV",
    "ENERGY_GRID_MIN_KEV",
    "RADIATIVE_YIELD_G",
    "Material",
    "energy_bin_centres_kev",
    "energy_bin_edges_kev",
    "grid_linear_attenuation_per_mm",
    "grid_mass_energy_absorption_cm2_g",
    "linear_attenuation_per_mm",
    "mass_attenuation_cm2_g",
    "mass_energy_absorption_cm2_g",
    "material",
    "material_names",
    "mu_en_ratio",
]

FloatArray = npt.NDArray[np.float64]

#: Width of the energy bins of every spectrum in beamaudit.model, keV. The issue asks for 0.5 keV
#: or finer; 0.25 keV resolves the tungsten K-lines from the K-edge.
ENERGY_BIN_WIDTH_KEV = 0.25
#: Lower edge of the energy grid, keV. Photons below 1 keV never leave an x-ray tube housing (any
#: window stops them), so they are not modelled.
ENERGY_GRID_MIN_KEV = 1.0
#: Upper edge of the energy grid, keV: the highest tube voltage beamaudit accepts (150 kV).
ENERGY_GRID_MAX_KEV = 150.0
#: Radiative yield g of the secondary electrons, neglected (set to 0). Below 150 keV it is under
#: 1e-3 for Z <= 29 (Attix 1986, fig. 2.3 and ch. 7; common practice for diagnostic dosimetry).
RADIATIVE_YIELD_G = 0.0

#: Electron rest energy m_e c^2 in keV (CODATA 2018).
_ELECTRON_REST_ENERGY_KEV = 510.99895
#: Classical electron radius in cm (CODATA 2018).
_CLASSICAL_ELECTRON_RADIUS_CM = 2.8179403262e-13
#: h c in keV Angstrom (CODATA 2018), converting photon energy to wavelength.
_HC_KEV_ANGSTROM = 12.398419843320026
#: Avogadro constant in 1/mol (SI 2019, exact).
_AVOGADRO_PER_MOL = 6.02214076e23
#: Gauss-Legendre nodes over cos(theta) for the incoherent energy-transfer integral; 96 nodes
#: converge the integral to better than 1e-5 relative.
_ANGLE_NODES = 96
#: Shells whose fluorescence is subtracted from the photoelectric absorption. Fluorescence from
#: N and outer shells is below 0.6 keV and is absorbed locally.
_FLUORESCENCE_SHELLS = ("K", "L1", "L2", "L3", "M1", "M2", "M3", "M4", "M5")


@dataclass(frozen=True)
class Material:
    """A homogeneous material: elemental composition by mass and density.

    Attributes
    ----------
    key : str
        Canonical name (``"Al"``, ``"water"``, ``"soft_tissue"``...).
    label : str
        Human-readable name.
    atomic_numbers : tuple of int
        Elements present.
    mass_fractions : tuple of float
        Mass fraction of each element, summing to 1.
    density_g_cm3 : float
        Density in g/cm³.
    source : str
        Where composition and density come from.
    """

    key: str
    label: str
    atomic_numbers: tuple[int, ...]
    mass_fractions: tuple[float, ...]
    density_g_cm3: float
    source: str


@lru_cache(maxsize=1)
def _material_table() -> dict[str, Any]:
    text = resources.files("beamaudit.model.data").joinpath("materials.json").read_text("utf-8")
    table: dict[str, Any] = json.loads(text)["materials"]
    return table


@lru_cache(maxsize=1)
def _alias_index() -> dict[str, str]:
    index: dict[str, str] = {}
    for key, entry in _material_table().items():
        index[key.lower()] = key
        for alias in entry.get("aliases", []):
            index[alias.lower()] = key
    return index


def material_names() -> tuple[str, ...]:
    """Return the canonical names of all known materials.

    Returns
    -------
    tuple of str
        Canonical material keys, in the order of the data file.
    """
    return tuple(_material_table())


@lru_cache(maxsize=64)
def _material_by_key(key: str) -> Material:
    entry = _material_table()[key]
    if "nist_compound" in entry:
        compound = xraylib.GetCompoundDataNISTByName(entry["nist_compound"])
        numbers = tuple(int(z) for z in compound["Elements"])
        fractions = tuple(float(f) for f in compound["massFractions"])
    else:
        numbers = tuple(xraylib.SymbolToAtomicNumber(sym) for sym in entry["elements"])
        fractions = tuple(float(f) for f in entry["elements"].values())
    total = sum(fractions)
    fractions = tuple(f / total for f in fractions)
    return Material(
        key=key,
        label=str(entry["label"]),
        atomic_numbers=numbers,
        mass_fractions=fractions,
        density_g_cm3=float(entry["density_g_cm3"]),
        source=str(entry["source"]),
    )


def material(name: str | Material) -> Material:
    """Resolve a material name or alias (case-insensitive).

    Parameters
    ----------
    name : str or Material
        ``"Al"``, ``"aluminium"``, ``"aluminum"``, ``"Cu"``, ``"copper"``, ``"Be"``, ``"Mo"``,
        ``"Rh"``, ``"Ag"``, ``"W"``, ``"glass"``, ``"oil"``, ``"air"``, ``"water"``,
        ``"soft_tissue"`` (ICRU-44), ``"soft_tissue_icru4"``, ``"pmma"``...

    Returns
    -------
    Material

    Raises
    ------
    ModelError
        If the name is not known.
    """
    if isinstance(name, Material):
        return name
    key = _alias_index().get(str(name).strip().lower())
    if key is None:
        known = ", ".join(material_names())
        raise ModelError(f"unknown material {name!r}; known materials: {known}")
    return _material_by_key(key)


def _as_energies(energies_kev: npt.ArrayLike) -> FloatArray:
    energies = np.asarray(energies_kev, dtype=np.float64)
    if not np.all(np.isfinite(energies)) or np.any(energies <= 0.0):
        raise ModelError("photon energies must be finite and positive (keV)")
    if np.any(energies > 1000.0):
        raise ModelError("photon energies above 1000 keV are outside the data's validity")
    return energies


@lru_cache(maxsize=128)
def _shell_mean_fluorescence_energy_kev(z: int) -> tuple[tuple[int, float], ...]:
    """Mean fluorescence photon energy per radiative vacancy, per shell: sum of R_l * E_l."""
    result = []
    for shell in _FLUORESCENCE_SHELLS:
        pattern = re.compile(rf"^{shell}[KLMNOPQ]\d*_LINE$")
        lines = np.array(
            [getattr(xraylib, n) for n in dir(xraylib) if pattern.match(n)], dtype=np.int64
        )
        zs = np.array([z], dtype=np.int64)
        rates = xraylib_np.RadRate(zs, lines)[0]
        energies = xraylib_np.LineEnergy(zs, lines)[0]
        mean = float(np.sum(rates * energies))
        if mean > 0.0:
            result.append((int(getattr(xraylib, f"{shell}_SHELL")), mean))
    return tuple(result)


@lru_cache(maxsize=1)
def _angle_nodes() -> tuple[FloatArray, FloatArray]:
    nodes, weights = np.polynomial.legendre.leggauss(_ANGLE_NODES)
    return nodes, weights


def _incoherent_energy_transfer_cm2_g(z: int, energies: FloatArray) -> FloatArray:
    cos_theta, weights = _angle_nodes()
    theta = np.arccos(cos_theta)
    k = energies[:, None] / _ELECTRON_REST_ENERGY_KEV
    ratio = 1.0 / (1.0 + k * (1.0 - cos_theta[None, :]))  # E'/E
    d_sigma = (
        0.5
        * _CLASSICAL_ELECTRON_RADIUS_CM**2
        * ratio**2
        * (ratio + 1.0 / ratio - (1.0 - cos_theta[None, :] ** 2))
    )
    # Momentum transfer x = sin(theta/2) / lambda in 1/Angstrom, as xraylib's MomentTransf.
    q = energies[:, None] / _HC_KEV_ANGSTROM * np.sin(0.5 * theta)[None, :]
    s = np.array([xraylib.SF_Compt(z, float(x)) for x in q.ravel()]).reshape(q.shape)
    per_atom = 2.0 * np.pi * ((d_sigma * s * (1.0 - ratio)) @ weights)
    result: FloatArray = per_atom * _AVOGADRO_PER_MOL / xraylib.AtomicWeight(z)
    return result


def _element_mu_en_cm2_g(z: int, energies: FloatArray) -> FloatArray:
    """One element's mass energy-absorption coefficient on ``energies``, kept per process for
    each element and energy grid: the Compton term calls xraylib once per energy and angle node,
    and every beam on the same grid (every beam of one kV) needs the same values."""
    grid = np.ascontiguousarray(energies, dtype=np.float64)
    return _element_mu_en_on_grid(z, grid.tobytes())


@lru_cache(maxsize=512)
def _element_mu_en_on_grid(z: int, grid: bytes) -> FloatArray:
    energies = np.frombuffer(grid, dtype=np.float64)
    zs = np.array([z], dtype=np.int64)
    photo = xraylib_np.CS_Photo(zs, energies)[0]
    escape = np.zeros_like(energies)
    shells = _shell_mean_fluorescence_energy_kev(z)
    if shells:
        shell_ids = np.array([s for s, _ in shells], dtype=np.int64)
        means = np.array([m for _, m in shells])
        production = xraylib_np.CS_FluorShell_Kissel_Cascade(zs, shell_ids, energies)[0]
        escape = (means[:, None] * production).sum(axis=0) / energies
    absorbed: FloatArray = (photo - escape + _incoherent_energy_transfer_cm2_g(z, energies)) * (
        1.0 - RADIATIVE_YIELD_G
    )
    absorbed.setflags(write=False)  # shared by every caller on this grid
    return absorbed


def _combine(mat: Material, energies: FloatArray, per_element: Any) -> FloatArray:
    flat = energies.ravel()
    total = np.zeros_like(flat)
    for z, w in zip(mat.atomic_numbers, mat.mass_fractions, strict=True):
        total += w * per_element(z, flat)
    return total.reshape(energies.shape)


def _element_mu_cm2_g(z: int, energies: FloatArray) -> FloatArray:
    result: FloatArray = xraylib_np.CS_Total(np.array([z], dtype=np.int64), energies)[0]
    return result


def mass_attenuation_cm2_g(name: str | Material, energies_kev: npt.ArrayLike) -> FloatArray:
    r"""Mass attenuation coefficient :math:`\mu/\rho` (narrow beam, coherent scattering included).

    Parameters
    ----------
    name : str or Material
        Material name or alias, see :func:`material`.
    energies_kev : array_like
        Photon energies in keV (0 < E <= 1000).

    Returns
    -------
    numpy.ndarray
        :math:`\mu/\rho` in cm²/g, the shape of ``energies_kev``.

    Raises
    ------
    ModelError
        Unknown material or non-positive energy.
    """
    mat = material(name)
    return _combine(mat, _as_energies(energies_kev), _element_mu_cm2_g)


def mass_energy_absorption_cm2_g(name: str | Material, energies_kev: npt.ArrayLike) -> FloatArray:
    r"""Mass energy-absorption coefficient :math:`\mu_{en}/\rho`, built as in the module docstring.

    Parameters
    ----------
    name : str or Material
        Material name or alias, see :func:`material`.
    energies_kev : array_like
        Photon energies in keV (0 < E <= 1000).

    Returns
    -------
    numpy.ndarray
        :math:`\mu_{en}/\rho` in cm²/g, the shape of ``energies_kev``.

    Raises
    ------
    ModelError
        Unknown material or non-positive energy.
    """
    mat = material(name)
    return _combine(mat, _as_energies(energies_kev), _element_mu_en_cm2_g)


def linear_attenuation_per_mm(name: str | Material, energies_kev: npt.ArrayLike) -> FloatArray:
    r"""Linear attenuation coefficient :math:`\mu = (\mu/\rho)\,\rho` in 1/mm.

    Parameters
    ----------
    name : str or Material
        Material name or alias.
    energies_kev : array_like
        Photon energies in keV.

    Returns
    -------
    numpy.ndarray
        :math:`\mu` in 1/mm (cm²/g × g/cm³ / 10).
    """
    mat = material(name)
    return mass_attenuation_cm2_g(mat, energies_kev) * mat.density_g_cm3 / 10.0


@lru_cache(maxsize=1)
def energy_bin_edges_kev() -> FloatArray:
    """Edges of the fixed energy grid shared by every spectrum, keV (read-only array).

    Returns
    -------
    numpy.ndarray
        ``ENERGY_GRID_MIN_KEV`` to ``ENERGY_GRID_MAX_KEV`` in steps of ``ENERGY_BIN_WIDTH_KEV``.
    """
    n = round((ENERGY_GRID_MAX_KEV - ENERGY_GRID_MIN_KEV) / ENERGY_BIN_WIDTH_KEV)
    edges = ENERGY_GRID_MIN_KEV + ENERGY_BIN_WIDTH_KEV * np.arange(n + 1, dtype=np.float64)
    edges.setflags(write=False)
    return edges


def mass_energy_absorption_on(name: str | Material, energies_kev: FloatArray) -> FloatArray:
    """μen/ρ (cm²/g) at ``energies_kev``: the grid's cached values when they are the grid's bin
    centres (every spectrum the model makes), else :func:`mass_energy_absorption_cm2_g`."""
    grid = energy_bin_centres_kev()
    if energies_kev.shape == grid.shape and np.array_equal(energies_kev, grid):
        return grid_mass_energy_absorption_cm2_g(name)
    return mass_energy_absorption_cm2_g(name, energies_kev)


@lru_cache(maxsize=1)
def energy_bin_centres_kev() -> FloatArray:
    """Centres of the fixed energy grid's bins, keV (read-only array).

    Returns
    -------
    numpy.ndarray
        Bin centres.
    """
    edges = energy_bin_edges_kev()
    centres = 0.5 * (edges[1:] + edges[:-1])
    centres.setflags(write=False)
    return centres


#: Held while a grid table is looked up or made: threads asking at once for a table not made yet
#: (a burst of requests on a fresh server) wait for one thread to make it, not each make it.
_GRID_LOCK = threading.RLock()


@lru_cache(maxsize=64)
def _grid_mu_per_mm(key: str) -> FloatArray:
    out = linear_attenuation_per_mm(key, energy_bin_centres_kev())
    out.setflags(write=False)
    return out


@lru_cache(maxsize=64)
def _grid_mu_en(key: str) -> FloatArray:
    out = mass_energy_absorption_cm2_g(key, energy_bin_centres_kev())
    out.setflags(write=False)
    return out


def grid_linear_attenuation_per_mm(name: str | Material) -> FloatArray:
    """Linear attenuation coefficient on the bin centres of the energy grid (cached, read-only).

    Parameters
    ----------
    name : str or Material
        Material name or alias.

    Returns
    -------
    numpy.ndarray
        μ in 1/mm at :func:`energy_bin_centres_kev`.
    """
    key = material(name).key
    with _GRID_LOCK:
        return _grid_mu_per_mm(key)


def grid_mass_energy_absorption_cm2_g(name: str | Material) -> FloatArray:
    """Mass energy-absorption coefficient on the grid's bin centres (cached, read-only).

    Parameters
    ----------
    name : str or Material
        Material name or alias.

    Returns
    -------
    numpy.ndarray
        μen/ρ in cm²/g at :func:`energy_bin_centres_kev`.
    """
    key = material(name).key
    with _GRID_LOCK:
        return _grid_mu_en(key)


def mu_en_ratio(
    energies_kev: npt.ArrayLike,
    weights: npt.ArrayLike,
    numerator: str | Material,
    denominator: str | Material,
) -> float:
    r"""Spectrum-weighted ratio of mass energy-absorption coefficients.

    .. math::

        \overline{\left(\frac{\mu_{en}}{\rho}\right)}^{\,num}_{\,den}
        = \frac{\sum_i \Psi_i\, (\mu_{en}/\rho)_{num}(E_i)}
               {\sum_i \Psi_i\,(\mu_{en}/\rho)_{den}(E_i)}

    With :math:`\Psi_i` the energy fluence in bin *i* this is the ratio of the kermas (and, under
    charged-particle equilibrium, doses) in the two media for the same photon beam; it equals the
    average of the single-energy ratio weighted by the denominator's kerma spectrum (IAEA TRS 457,
    2007, section 7; ICRU Report 74).

    Parameters
    ----------
    energies_kev : array_like
        Photon energies (bin centres) in keV.
    weights : array_like
        Energy fluence per bin (any unit; only relative values matter), same shape.
    numerator, denominator : str or Material
        Materials, e.g. ``"soft_tissue"`` and ``"air"``.

    Returns
    -------
    float
        The ratio (dimensionless).

    Raises
    ------
    ModelError
        Shapes differ, weights are negative, or all weights are zero.
    """
    energies = _as_energies(energies_kev)
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != energies.shape:
        raise ModelError("energies_kev and weights must have the same shape")
    if not np.all(np.isfinite(w)) or np.any(w < 0.0) or not np.any(w > 0.0):
        raise ModelError("weights must be finite, non-negative and not all zero")
    grid = energy_bin_centres_kev()
    if energies.shape == grid.shape and np.array_equal(energies, grid):
        # the beam model's own grid: use the cached coefficients
        num = grid_mass_energy_absorption_cm2_g(numerator)
        den = grid_mass_energy_absorption_cm2_g(denominator)
    else:
        num = mass_energy_absorption_cm2_g(numerator, energies)
        den = mass_energy_absorption_cm2_g(denominator, energies)
    return float(np.sum(w * num) / np.sum(w * den))
