r"""Photon interaction data for Monte Carlo transport: cross-sections and scattering angles.

Generic pieces for following photons of 1-150 keV through matter, for any
:class:`~beamaudit.model.attenuation.Material` (an element, a compound or a mixture such as a
breast tissue of given glandularity). Used by :mod:`beamaudit.model.breast_montecarlo`; nothing
at run time imports it.

Cross-sections
--------------
Per element from xraylib (``CS_Photo``, ``CS_Compt``, ``CS_Rayl``), combined by mass fraction:

.. math::

    \frac{\mu}{\rho} = \sum_i w_i\,(\tau_i + \sigma_{incoh,i} + \sigma_{coh,i})

on a uniform energy grid, interpolated linearly. The mass energy-absorption coefficient is that
of :func:`beamaudit.model.attenuation.mass_energy_absorption_cm2_g` (built from the same
partial cross-sections, checked against NIST).

Scattering angles
-----------------
* incoherent: the Klein-Nishina cross-section times the mixture's incoherent scattering function
  :math:`S(x) = \sum_i w_i (N_A/A_i) S_i(x)` (xraylib ``SF_Compt``; Hubbell et al., J Phys Chem
  Ref Data 4:471, 1975), scattered energy :math:`E' = E/(1 + k(1-\cos\theta))`,
  :math:`k = E/m_ec^2`; Doppler broadening neglected;
* coherent: the Thomson cross-section times the squared form factor,
  :math:`F^2(x) = \sum_i w_i (N_A/A_i) F_i(x)^2` (xraylib ``FF_Rayl``, independent atoms),

with :math:`x = \sin(\theta/2)\,E/hc` in 1/Å. For each energy row of a table (every
:data:`TABLE_STEP_KEV`) the cumulative distribution in :math:`t = 1 - \cos\theta` is integrated
(trapezoid rule on a geometric grid of :data:`FORWARD_NODES` nodes) and *inverted once* onto
:data:`INVERSE_NODES` equally spaced probabilities, so that a sample costs one look-up and one
linear interpolation: :math:`t = T_r(u)`, :math:`u` uniform. The energy row is chosen by
statistical interpolation (the row above with probability equal to the fractional distance to
it). Sampling is checked against xraylib's own differential cross-sections (``DCS_Compt``,
``DCS_Rayl``) in ``tests/model/test_photon_interactions.py``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import numpy.typing as npt
import xraylib
import xraylib_np

from beamaudit.model.attenuation import Material, mass_energy_absorption_cm2_g, material
from beamaudit.model.errors import ModelError

__all__ = [
    "FORWARD_NODES",
    "INVERSE_NODES",
    "TABLE_STEP_KEV",
    "PhotonInteractions",
    "photon_interactions",
    "scatter_directions",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

#: Energy grid of the cross-sections, keV (uniform; linear interpolation between nodes).
GRID_MIN_KEV = 1.0
GRID_STEP_KEV = 0.1
#: Energy step of the angular tables, keV.
TABLE_STEP_KEV = 0.5
#: Nodes of the forward cumulative distribution in t (0, then geometric from 1e-7 to 2).
FORWARD_NODES = 2000
#: Equally spaced probabilities of the inverted distribution.
INVERSE_NODES = 2049

_ELECTRON_REST_ENERGY_KEV = 510.99895  # CODATA 2018
_CLASSICAL_ELECTRON_RADIUS_CM = 2.8179403262e-13  # CODATA 2018
_HC_KEV_ANGSTROM = 12.398419843320026  # CODATA 2018
_AVOGADRO_PER_MOL = 6.02214076e23  # SI 2019, exact


@dataclass(frozen=True, eq=False)
class PhotonInteractions:
    """Interaction data of one material, tabulated for transport.

    Attributes
    ----------
    material : Material
    max_kev : float
        Highest photon energy tabulated.
    mu_per_mm : ndarray
        Linear attenuation coefficient on the grid (photoelectric + incoherent + coherent).
    photo_fraction : ndarray
        :math:`\\tau/\\mu` on the grid.
    coherent_fraction : ndarray
        :math:`\\sigma_{coh}/(\\sigma_{coh} + \\sigma_{incoh})` on the grid.
    mu_en_cm2_g : ndarray
        Mass energy-absorption coefficient on the grid.
    incoherent_t, coherent_t : ndarray, shape (rows, INVERSE_NODES)
        Inverse cumulative distributions: t at equally spaced probabilities, per table row.
    """

    material: Material
    max_kev: float
    mu_per_mm: FloatArray
    photo_fraction: FloatArray
    coherent_fraction: FloatArray
    mu_en_cm2_g: FloatArray
    incoherent_t: FloatArray
    coherent_t: FloatArray

    def at(self, values: FloatArray, energies_kev: FloatArray) -> FloatArray:
        """Linear interpolation of a grid quantity (one of the arrays above) at energies."""
        pos = (energies_kev - GRID_MIN_KEV) / GRID_STEP_KEV
        i = np.clip(pos.astype(np.int64), 0, values.size - 2)
        f = pos - i
        return np.asarray(values[i] + f * (values[i + 1] - values[i]))

    def sample_t(
        self, energies_kev: FloatArray, rng: np.random.Generator, *, coherent: bool
    ) -> FloatArray:
        """Sample :math:`t = 1 - \\cos\\theta` of a scattering in one channel.

        Parameters
        ----------
        energies_kev : ndarray
            Photon energies before the scattering (1 keV to ``max_kev``).
        rng : numpy.random.Generator
        coherent : bool
            Coherent (True) or incoherent (False) channel.

        Returns
        -------
        ndarray
            Samples of t in [0, 2].
        """
        table = self.coherent_t if coherent else self.incoherent_t
        rows = table.shape[0]
        pos = (energies_kev - GRID_MIN_KEV) / TABLE_STEP_KEV
        low = np.clip(pos.astype(np.int64), 0, rows - 2)
        row = low + (rng.random(energies_kev.size) < (pos - low))
        u = rng.random(energies_kev.size) * (INVERSE_NODES - 1)
        k = np.minimum(u.astype(np.int64), INVERSE_NODES - 2)
        frac = u - k
        t0 = table[row, k]
        return np.asarray(t0 + frac * (table[row, k + 1] - t0))


def _klein_nishina_per_electron(energies: FloatArray, t: FloatArray) -> FloatArray:
    ratio = 1.0 / (1.0 + energies / _ELECTRON_REST_ENERGY_KEV * t)
    return np.asarray(
        0.5 * _CLASSICAL_ELECTRON_RADIUS_CM**2 * ratio**2 * (ratio + 1.0 / ratio - t * (2.0 - t))
    )


def _inverse_cdf(dcs: FloatArray, t_nodes: FloatArray) -> FloatArray:
    """Rows of t at equally spaced probabilities from rows of a density in t."""
    steps = 0.5 * (dcs[:, 1:] + dcs[:, :-1]) * np.diff(t_nodes)[None, :]
    cdf = np.concatenate((np.zeros((dcs.shape[0], 1)), np.cumsum(steps, axis=1)), axis=1)
    cdf /= cdf[:, -1:]
    u = np.linspace(0.0, 1.0, INVERSE_NODES)
    out = np.empty((dcs.shape[0], INVERSE_NODES))
    for r in range(dcs.shape[0]):
        # strictly increasing copy (flat stretches where the density vanishes)
        c, keep = np.unique(cdf[r], return_index=True)
        out[r] = np.interp(u, c, t_nodes[keep])
    out[:, 0], out[:, -1] = 0.0, 2.0
    return out


@lru_cache(maxsize=32)
def photon_interactions(name: str | Material, *, max_kev: float = 60.0) -> PhotonInteractions:
    """Build (once, then cached) the interaction data of a material.

    Parameters
    ----------
    name : str or Material
        A material name known to :func:`beamaudit.model.attenuation.material`, or a
        :class:`~beamaudit.model.attenuation.Material` (e.g. a tissue mixture).
    max_kev : float
        Highest photon energy to tabulate, keV (2-150).

    Returns
    -------
    PhotonInteractions

    Raises
    ------
    ModelError
        Unknown material or energy range.
    """
    mat = material(name)
    if not (math.isfinite(max_kev) and 2.0 <= max_kev <= 150.0):
        raise ModelError(f"interaction tables cover 2-150 keV, got max_kev {max_kev}")
    zs = np.array(mat.atomic_numbers, dtype=np.int64)
    w = np.array(mat.mass_fractions)
    per_gram = w * _AVOGADRO_PER_MOL / np.array([xraylib.AtomicWeight(int(z)) for z in zs])

    n_grid = round((max_kev + 1.0 - GRID_MIN_KEV) / GRID_STEP_KEV) + 1
    grid = GRID_MIN_KEV + GRID_STEP_KEV * np.arange(n_grid, dtype=np.float64)
    photo = w @ xraylib_np.CS_Photo(zs, grid)
    incoh = w @ xraylib_np.CS_Compt(zs, grid)
    coh = w @ xraylib_np.CS_Rayl(zs, grid)
    total = photo + incoh + coh

    x_grid = np.concatenate(([0.0], np.geomspace(1e-5, 30.0, 1500)))
    s_of_x = per_gram @ xraylib_np.SF_Compt(zs, x_grid)
    f2_of_x = per_gram @ xraylib_np.FF_Rayl(zs, x_grid) ** 2

    n_rows = round((max_kev + 1.0 - GRID_MIN_KEV) / TABLE_STEP_KEV) + 1
    rows = GRID_MIN_KEV + TABLE_STEP_KEV * np.arange(n_rows, dtype=np.float64)
    t_nodes = np.concatenate(([0.0], np.geomspace(1e-7, 2.0, FORWARD_NODES - 1)))
    e2, t2 = rows[:, None], t_nodes[None, :]
    x2 = e2 / _HC_KEV_ANGSTROM * np.sqrt(t2 / 2.0)
    incoh_dcs = _klein_nishina_per_electron(e2, t2) * np.interp(x2, x_grid, s_of_x)
    thomson = 0.5 * _CLASSICAL_ELECTRON_RADIUS_CM**2 * (1.0 + (1.0 - t2) ** 2)
    coh_dcs = thomson * np.interp(x2, x_grid, f2_of_x)

    arrays = {
        "mu_per_mm": total * mat.density_g_cm3 / 10.0,
        "photo_fraction": photo / total,
        "coherent_fraction": coh / (coh + incoh),
        "mu_en_cm2_g": mass_energy_absorption_cm2_g(mat, grid),
        "incoherent_t": _inverse_cdf(incoh_dcs, t_nodes),
        "coherent_t": _inverse_cdf(coh_dcs, t_nodes),
    }
    for array in arrays.values():
        array.setflags(write=False)
    return PhotonInteractions(material=mat, max_kev=float(max_kev), **arrays)


def scatter_directions(
    directions: FloatArray, cos_theta: FloatArray, phi: FloatArray
) -> FloatArray:
    """Unit directions turned by polar angle theta and azimuth phi about the old ones.

    Builds an orthonormal frame (a, b, d) around each old direction d, with a perpendicular to
    d and to the coordinate axis d is least aligned with, and returns
    :math:`\\cos\\theta\\,d + \\sin\\theta(\\cos\\phi\\,a + \\sin\\phi\\,b)`.

    Parameters
    ----------
    directions : ndarray, shape (n, 3)
        Unit vectors.
    cos_theta, phi : ndarray, shape (n,)

    Returns
    -------
    ndarray, shape (n, 3)
    """
    d = directions
    helper = np.zeros_like(d)
    axis = np.argmin(np.abs(d), axis=1)
    helper[np.arange(d.shape[0]), axis] = 1.0
    a = np.cross(d, helper)
    a /= np.linalg.norm(a, axis=1)[:, None]
    b = np.cross(d, a)
    sin_theta = np.sqrt(np.clip(1.0 - cos_theta * cos_theta, 0.0, 1.0))
    out = (
        cos_theta[:, None] * d
        + (sin_theta * np.cos(phi))[:, None] * a
        + (sin_theta * np.sin(phi))[:, None] * b
    )
    return np.asarray(out / np.linalg.norm(out, axis=1)[:, None])
