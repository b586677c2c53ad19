r"""Monte Carlo photon transport in a slab phantom: an independent check of the backscatter table.

This module is a verification tool, not part of any runtime path: nothing in beamaudit imports
it. It recomputes the backscatter factor

.. math::

    B = \frac{K_{a,e}}{K_{a,i}} = 1 + \frac{K_s}{K_p}

(ICRU Report 74, 2005; IAEA TRS 457, 2007) by following photons of an x-ray spectrum from a point
source into a homogeneous slab, so that the shipped table (``data/backscatter_water.csv``,
written from memory) can be judged against physics rather than against the same recollection.
:math:`K_p` is the air kerma of the primary (incident) photons at the point where the central
axis enters the phantom, :math:`K_s` the air kerma there of the photons scattered back out of
the phantom. Everything is an estimate for QA; it does not replace the published tables.

Geometry
--------
A point source on the central axis at focus-to-surface distance :math:`d` (default 100 cm)
irradiates a rectangular slab (default 30 x 30 x 15 cm of water, the reference phantom of
Petoussi-Henss et al., Phys Med Biol 43:2237, 1998) through a square field of side :math:`s` at
the entrance surface. Coordinates: the entrance surface is :math:`z = 0`, the phantom is
:math:`|x| \le W/2,\ |y| \le L/2,\ 0 \le z \le D`, the source at :math:`(0, 0, -d)`. The scoring
point is the centre of the entrance surface, :math:`(0, 0, 0)`. No air is modelled between
source and phantom (air attenuation and air scatter cancel to first order in the ratio B).

Source
------
An isotropic point source restricted to the field: the entry point is sampled uniformly on the
square field and accepted with probability :math:`(d/r)^3`, :math:`r` its distance from the
source, since the solid angle of a surface element is :math:`d\Omega = d\,dA/r^3`. The photon
then flies from the source through that point. The solid angle of the field (half-sides
:math:`a = b = s/2`) is

.. math::

    \Omega = 4 \arcsin\frac{a b}{\sqrt{(a^2 + d^2)(b^2 + d^2)}}

so the primary fluence at the scoring point per emitted photon is
:math:`\Phi_p = 1 / (\Omega d^2)` (inverse-square law). Photon energies are drawn from the
photon-fluence spectrum of :func:`beamaudit.model.compute_beam` (bin centres; see
:func:`spectrum_for_hvl` for how a spectrum is chosen to have a given first HVL).

Interactions
------------
Total and partial mass cross-sections per element come from xraylib (``CS_Photo``,
``CS_Compt``, ``CS_Rayl``), combined by the mass fractions of
:func:`beamaudit.model.attenuation.material` (water: xraylib's NIST compound data, density
1.000 g/cm³). For a mixture, per unit mass,

.. math::

    \frac{\mu}{\rho} = \sum_i w_i\,(\tau_i + \sigma_{incoh,i} + \sigma_{coh,i})

Free paths are sampled from :math:`s = -\ln\xi / \mu(E)`.

* **Photoelectric absorption** ends the photon; the fluorescence of oxygen (0.5 keV) is absorbed
  on the spot. It is handled by *implicit capture* (survival biasing): at every collision the
  weight is multiplied by :math:`1 - \tau/\mu` and the photon always scatters; weights below
  :data:`ROULETTE_WEIGHT` play Russian roulette (survive with probability
  :data:`ROULETTE_SURVIVAL`, weight divided by it), which keeps the estimate unbiased.
* **Incoherent (Compton) scattering**: the Klein-Nishina differential cross-section per electron
  (Klein & Nishina, Z Phys 52:853, 1929; e.g. Attix 1986, ch. 7, from memory)

  .. math::

      \frac{d\sigma_{KN}}{d\Omega} = \frac{r_e^2}{2}\left(\frac{E'}{E}\right)^2
      \left(\frac{E'}{E} + \frac{E}{E'} - \sin^2\theta\right),\qquad
      \frac{E'}{E} = \frac{1}{1 + k(1 - \cos\theta)},\quad k = \frac{E}{m_e c^2}

  multiplied, to account for electron binding, by the incoherent scattering function of the
  mixture :math:`S(x) = \sum_i w_i (N_A/A_i) S_i(x)` (xraylib ``SF_Compt``; Hubbell et al., J
  Phys Chem Ref Data 4:471, 1975), with momentum transfer :math:`x = \sin(\theta/2)\,E/(hc)` in
  1/Å (xraylib ``MomentTransf``). Doppler broadening of E' is neglected. ``binding=False`` uses
  free electrons, :math:`S(x) = \sum_i w_i N_A Z_i / A_i`.
* **Coherent (Rayleigh) scattering**: the Thomson cross-section times the squared atomic form
  factor, independent-atom approximation, :math:`F^2(x) = \sum_i w_i (N_A/A_i) F_i(x)^2`
  (xraylib ``FF_Rayl``):

  .. math::

      \frac{d\sigma_{coh}}{d\Omega} = \frac{r_e^2}{2}(1 + \cos^2\theta)\,F^2(x)

  ``coherent=False`` drops coherent scattering from :math:`\mu` as well (photons then pass as
  if unscattered); :func:`simulate_backscatter` with both settings bounds the bias of that
  choice.

Directions are sampled from these distributions by inverting their cumulative distributions in
:math:`t = 1 - \cos\theta`, tabulated on an energy grid (:data:`TABLE_ENERGY_STEP_KEV`) and a
geometric grid of :math:`t`; the energy row is picked by statistical interpolation (the row
below or above with probabilities given by the distance to each). The channel (coherent or
incoherent) is chosen with probabilities :math:`\sigma_{coh}/(\sigma_{coh}+\sigma_{incoh})`
and its complement, xraylib's partial cross-sections; the angular density of each channel is the
tabulated differential cross-section divided by its own integral over :math:`4\pi`, so sampling
and scoring use the same density.

Tally: air kerma from energy fluence
------------------------------------
Air kerma from the photon spectral fluence :math:`\Phi_E` (Attix 1986, ch. 2 and ch. 7, from
memory; ICRU Report 85):

.. math::

    K_{air} = \int \Phi_E\, E \left(\frac{\mu_{en}}{\rho}\right)_{air}\! dE

with :math:`(\mu_{en}/\rho)_{air}` from :func:`beamaudit.model.mass_energy_absorption_cm2_g`
(:math:`g \approx 0` at these energies, so collision kerma equals kerma). The primary part is
computed exactly: :math:`K_p = \Phi_p \sum_j p_j E_j (\mu_{en}/\rho)_{air}(E_j)`, with
:math:`p_j` the normalised photon spectrum.

The scattered part is scored with a **next-event (point-detector) estimator** (Kalos 1963; Lux &
Koblinger, *Monte Carlo Particle Transport Methods*, 1991, ch. 6, from memory): at every
collision at distance :math:`R` from the scoring point, each scattering channel *c* contributes
the expected fluence of a photon scattered straight at the point,

.. math::

    \delta K_s = w \sum_c \frac{\sigma_c}{\mu}\, p_c(\Omega_d)\,
    \frac{e^{-\mu(E'_c) R}}{R^2}\, E'_c \left(\frac{\mu_{en}}{\rho}\right)_{air}\!(E'_c)

with :math:`p_c(\Omega_d)` the channel's angular density per steradian toward the point and
:math:`E'_c` the energy it would have (the whole path lies in the phantom, which is convex and
has the point on its surface). The :math:`1/R^2` factor gives the estimator an unbounded
variance for collisions next to the point; inside a hemisphere of radius :math:`R_0`
(:data:`DEFAULT_EXCLUSION_RADIUS_CM`) it is replaced by its volume average :math:`3/R_0^2`,
exact for a uniform collision density (the usual fictitious-sphere treatment of point
detectors). Writing the collision-weighted score along each direction as
:math:`f(R) = f_0 + f_1 R`, the exact hemisphere integral is
:math:`\int d\Omega\,(f_0 R_0 + f_1 R_0^2/2)` and the averaged one
:math:`\int d\Omega\,(f_0 R_0 + 3 f_1 R_0^2/4)`: the bias is of order
:math:`R_0^2/(4\lambda^2)` of :math:`K_s` (:math:`\lambda` the photons' mean free path), so it
grows as :math:`R_0^2`. Each run also scores with :math:`2R_0` and reports
:math:`(B_{2R_0} - B_{R_0})/3` as an estimate of the bias (not applied); for the default
:math:`R_0` = 0.25 cm it is between -0.17 % and +0.10 % of B across the table (the stored
check, ``data/backscatter_water_mc_check.csv``, column ``exclusion_bias``). The variance grows
as :math:`1/R_0`, which sets the trade-off.

A second, independent **surface-crossing estimator** scores every photon that crosses a disc
of radius :math:`r_{disc}` (default 1.5 cm) centred on the scoring point, primary photons going
in and scattered photons going out, with weight :math:`w\,E(\mu_{en}/\rho)_{air}(E) /
(\pi r_{disc}^2 |\cos\theta|)` (fluence through a surface, e.g. Lux & Koblinger ch. 6);
:math:`|\cos\theta| < 0.1` is replaced by 0.05, the usual cap of its logarithmic variance
(exact when the radiance is constant over those grazing angles: the mean of :math:`1/|\cos|`
over crossings with :math:`|\cos| < 0.1` is then 20). It averages over the disc, so it means
something only for fields much larger than the disc (10 cm and more here); its statistical
uncertainty is similar to the point estimator's at low HVL and larger at high HVL. It serves as
a consistency check of the point estimator and of the primary normalisation.

Statistics
----------
Scores are summed per history; the standard uncertainty of a mean is the sample standard
deviation of the history scores over :math:`\sqrt{N}`, and that of the ratio B by first-order
propagation with the covariance of numerator and denominator (JCGM 100:2008, eq. 13). The random
generator is numpy's PCG64 seeded by the caller, so a run is reproducible.

Known simplifications (each biases B by well under the 5 % under test): no Doppler broadening,
independent-atom coherent scattering, no molecular or liquid-structure interference, no
bremsstrahlung or fluorescence transport, no air. CPU only, pure numpy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import numpy.typing as npt
import xraylib
import xraylib_np

from beamaudit.model.attenuation import mass_energy_absorption_cm2_g, material
from beamaudit.model.beam import BeamResult, BeamSpec, compute_beam
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec

__all__ = [
    "DEFAULT_DISC_RADIUS_CM",
    "DEFAULT_EXCLUSION_RADIUS_CM",
    "BackscatterSimulation",
    "InteractionData",
    "SlabPhantom",
    "field_solid_angle_sr",
    "interaction_data",
    "primary_fluence_through_disc",
    "sample_scatter_cosines",
    "simulate_backscatter",
    "spectrum_for_hvl",
    "transport",
]

FloatArray = npt.NDArray[np.float64]

#: Electron rest energy m_e c^2, keV (CODATA 2018).
ELECTRON_REST_ENERGY_KEV = 510.99895
#: Classical electron radius, cm (CODATA 2018).
CLASSICAL_ELECTRON_RADIUS_CM = 2.8179403262e-13
#: h c, keV Angstrom (CODATA 2018).
HC_KEV_ANGSTROM = 12.398419843320026
#: Avogadro constant, 1/mol (SI 2019, exact).
AVOGADRO_PER_MOL = 6.02214076e23

#: Energy grid of the interaction data, keV: cross-sections are interpolated linearly on it.
GRID_MIN_KEV = 1.0
GRID_MAX_KEV = 151.0
GRID_STEP_KEV = 0.25
#: Energy step of the tabulated angular distributions, keV (statistical interpolation between).
TABLE_ENERGY_STEP_KEV = 1.0
#: Nodes in t = 1 - cos(theta): 0, then geometric from T_MIN to 2.
T_MIN = 1e-7
T_NODES = 900
#: Photons below this energy are absorbed where they are (their free path in water is < 0.1 mm).
ENERGY_CUTOFF_KEV = 3.0
#: Russian roulette threshold and survival probability (implicit capture).
ROULETTE_WEIGHT = 0.02
ROULETTE_SURVIVAL = 0.2
#: Radius of the hemisphere around the scoring point inside which 1/R^2 is volume-averaged, cm.
DEFAULT_EXCLUSION_RADIUS_CM = 0.25
#: Radius of the scoring disc of the surface-crossing estimator, cm.
DEFAULT_DISC_RADIUS_CM = 1.5
#: Surface-crossing estimator: |cos| below COS_CAP is scored as COS_CAP_VALUE.
COS_CAP = 0.1
COS_CAP_VALUE = 0.05
#: Histories transported together (memory about 100 bytes each per array).
DEFAULT_BATCH = 200_000
#: Safety net on the number of collisions of one photon (never reached in practice).
MAX_COLLISIONS = 2000


@dataclass(frozen=True)
class SlabPhantom:
    """A homogeneous rectangular phantom whose entrance surface is the plane z = 0.

    Parameters
    ----------
    material : str
        Material name for :func:`beamaudit.model.attenuation.material` (default water).
    width_cm, length_cm : float
        Extent across the beam, cm (centred on the axis).
    depth_cm : float
        Thickness along the beam axis, cm.
    """

    material: str = "water"
    width_cm: float = 30.0
    length_cm: float = 30.0
    depth_cm: float = 15.0

    def __post_init__(self) -> None:
        for name in ("width_cm", "length_cm", "depth_cm"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0.0):
                raise ModelError(f"phantom {name} must be a finite number >= 0, got {value}")


@dataclass(frozen=True)
class InteractionData:
    """Interaction data of one material, tabulated for transport (see the module docstring).

    Attributes
    ----------
    material : str
        Canonical material name.
    density_g_cm3 : float
    coherent, binding : bool
        Whether coherent scattering is modelled, and whether incoherent scattering uses the
        incoherent scattering function (False: free electrons).
    grid_kev : ndarray
        Energy grid of the cross-sections and of the air energy-absorption coefficient.
    mu_per_cm : ndarray
        Linear attenuation coefficient on ``grid_kev`` (photo + incoherent + coherent if used).
    photo_fraction, coherent_fraction : ndarray
        :math:`\\tau/\\mu` and :math:`\\sigma_{coh}/(\\sigma_{coh}+\\sigma_{incoh})` on the grid.
    air_kerma_factor : ndarray
        :math:`E\\,(\\mu_{en}/\\rho)_{air}` on the grid, keV cm²/g.
    table_kev : ndarray
        Energy rows of the angular tables.
    t_nodes : ndarray
        Nodes in :math:`t = 1 - \\cos\\theta`.
    incoherent_cdf, coherent_cdf : ndarray, shape (rows, nodes)
        Cumulative angular distributions in t.
    incoherent_norm, coherent_norm : ndarray
        Integral over 4 pi of each tabulated differential cross-section (per gram), per row.
    x_grid, s_of_x, f2_of_x : ndarray
        Momentum transfer grid (1/Å) and the mixture's S(x) and F²(x) per gram.
    """

    material: str
    density_g_cm3: float
    coherent: bool
    binding: bool
    grid_kev: FloatArray
    mu_per_cm: FloatArray
    photo_fraction: FloatArray
    coherent_fraction: FloatArray
    air_kerma_factor: FloatArray
    table_kev: FloatArray
    t_nodes: FloatArray
    incoherent_cdf: FloatArray
    coherent_cdf: FloatArray
    incoherent_norm: FloatArray
    coherent_norm: FloatArray
    x_grid: FloatArray
    s_of_x: FloatArray
    f2_of_x: FloatArray

    def interp(self, values: FloatArray, energies_kev: FloatArray) -> FloatArray:
        """Linear interpolation of a quantity on ``grid_kev`` (uniform grid, no search)."""
        pos = (energies_kev - GRID_MIN_KEV) / GRID_STEP_KEV
        i = np.clip(pos.astype(np.int64), 0, self.grid_kev.size - 2)
        f = pos - i
        return np.asarray(values[i] * (1.0 - f) + values[i + 1] * f)


def klein_nishina_dcs_cm2_sr(energies_kev: FloatArray, t: FloatArray) -> FloatArray:
    """Klein-Nishina differential cross-section per electron, cm²/sr, at ``t = 1 - cos``."""
    k = energies_kev / ELECTRON_REST_ENERGY_KEV
    ratio = 1.0 / (1.0 + k * t)
    sin2 = t * (2.0 - t)
    return np.asarray(
        0.5 * CLASSICAL_ELECTRON_RADIUS_CM**2 * ratio**2 * (ratio + 1.0 / ratio - sin2)
    )


def thomson_dcs_cm2_sr(t: FloatArray) -> FloatArray:
    """Thomson differential cross-section per electron, cm²/sr, at ``t = 1 - cos``."""
    cos = 1.0 - t
    return np.asarray(0.5 * CLASSICAL_ELECTRON_RADIUS_CM**2 * (1.0 + cos * cos))


def _momentum_transfer(energies_kev: FloatArray, t: FloatArray) -> FloatArray:
    """x = sin(theta/2) E / hc in 1/Å (xraylib's MomentTransf); sin(theta/2) = sqrt(t/2)."""
    return np.asarray(energies_kev / HC_KEV_ANGSTROM * np.sqrt(np.clip(t, 0.0, 2.0) / 2.0))


@lru_cache(maxsize=8)
def interaction_data(
    material_name: str = "water", *, coherent: bool = True, binding: bool = True
) -> InteractionData:
    """Build (once, then cached) the interaction data of ``material_name``.

    Parameters
    ----------
    material_name : str
        A material known to :func:`beamaudit.model.attenuation.material`.
    coherent : bool
        Model coherent scattering (True) or leave it out of the attenuation too (False).
    binding : bool
        Incoherent scattering with xraylib's incoherent scattering function (True) or on free
        electrons, pure Klein-Nishina (False).

    Returns
    -------
    InteractionData
    """
    mat = material(material_name)
    zs = np.array(mat.atomic_numbers, dtype=np.int64)
    w = np.array(mat.mass_fractions)
    per_gram = w * AVOGADRO_PER_MOL / np.array([xraylib.AtomicWeight(int(z)) for z in zs])
    electrons_per_gram = float(np.sum(per_gram * zs))

    n_grid = round((GRID_MAX_KEV - GRID_MIN_KEV) / GRID_STEP_KEV) + 1
    grid = GRID_MIN_KEV + GRID_STEP_KEV * np.arange(n_grid, dtype=np.float64)
    photo = w @ xraylib_np.CS_Photo(zs, grid)
    if binding:
        incoh = w @ xraylib_np.CS_Compt(zs, grid)
    else:
        # xraylib's CS_KN is per electron in barn (1e-24 cm^2)
        incoh = electrons_per_gram * 1e-24 * np.array([xraylib.CS_KN(float(e)) for e in grid])
    coh = w @ xraylib_np.CS_Rayl(zs, grid) if coherent else np.zeros_like(grid)
    total = photo + incoh + coh
    air_kerma = grid * mass_energy_absorption_cm2_g("air", grid)

    x_grid = np.concatenate(([0.0], np.geomspace(1e-4, 20.0, 800)))
    if binding:
        s_of_x = per_gram @ xraylib_np.SF_Compt(zs, x_grid)
    else:
        s_of_x = np.full_like(x_grid, electrons_per_gram)
    f2_of_x = per_gram @ xraylib_np.FF_Rayl(zs, x_grid) ** 2

    n_rows = round((GRID_MAX_KEV - GRID_MIN_KEV) / TABLE_ENERGY_STEP_KEV) + 1
    table_kev = GRID_MIN_KEV + TABLE_ENERGY_STEP_KEV * np.arange(n_rows, dtype=np.float64)
    t_nodes = np.concatenate(([0.0], np.geomspace(T_MIN, 2.0, T_NODES)))
    e2 = table_kev[:, None]
    t2 = t_nodes[None, :]
    x2 = _momentum_transfer(e2, t2)
    incoh_dcs = klein_nishina_dcs_cm2_sr(e2, t2) * np.interp(x2, x_grid, s_of_x)
    coh_dcs = thomson_dcs_cm2_sr(t2) * np.interp(x2, x_grid, f2_of_x) * np.ones_like(e2)

    def cdf_and_norm(dcs: FloatArray) -> tuple[FloatArray, FloatArray]:
        # dOmega = 2 pi dcos = 2 pi dt; trapezoid rule in t
        steps = 0.5 * (dcs[:, 1:] + dcs[:, :-1]) * np.diff(t_nodes)[None, :]
        cum = np.concatenate((np.zeros((dcs.shape[0], 1)), np.cumsum(steps, axis=1)), axis=1)
        norm = 2.0 * np.pi * cum[:, -1]
        return cum / cum[:, -1:], norm

    incoh_cdf, incoh_norm = cdf_and_norm(incoh_dcs)
    coh_cdf, coh_norm = cdf_and_norm(coh_dcs)
    scatter = incoh + coh
    for array in (grid, photo, total, air_kerma, incoh_cdf, coh_cdf):
        array.setflags(write=False)
    return InteractionData(
        material=mat.key,
        density_g_cm3=mat.density_g_cm3,
        coherent=coherent,
        binding=binding,
        grid_kev=grid,
        mu_per_cm=total * mat.density_g_cm3,
        photo_fraction=photo / total,
        coherent_fraction=coh / scatter,
        air_kerma_factor=air_kerma,
        table_kev=table_kev,
        t_nodes=t_nodes,
        incoherent_cdf=incoh_cdf,
        coherent_cdf=coh_cdf,
        incoherent_norm=incoh_norm,
        coherent_norm=coh_norm,
        x_grid=x_grid,
        s_of_x=s_of_x,
        f2_of_x=f2_of_x,
    )


def _angular_density_per_sr(
    data: InteractionData, energies_kev: FloatArray, t: FloatArray, *, coherent: bool
) -> FloatArray:
    """Probability per steradian of scattering by ``t = 1 - cos`` in one channel."""
    x = _momentum_transfer(energies_kev, t)
    pos = (energies_kev - GRID_MIN_KEV) / TABLE_ENERGY_STEP_KEV
    i = np.clip(pos.astype(np.int64), 0, data.table_kev.size - 2)
    f = pos - i
    if coherent:
        norm = data.coherent_norm[i] * (1.0 - f) + data.coherent_norm[i + 1] * f
        dcs = thomson_dcs_cm2_sr(t) * np.interp(x, data.x_grid, data.f2_of_x)
    else:
        norm = data.incoherent_norm[i] * (1.0 - f) + data.incoherent_norm[i + 1] * f
        dcs = klein_nishina_dcs_cm2_sr(energies_kev, t) * np.interp(x, data.x_grid, data.s_of_x)
    return np.asarray(dcs / norm)


def _sample_t(
    data: InteractionData, energies_kev: FloatArray, rng: np.random.Generator, *, coherent: bool
) -> FloatArray:
    """Sample t = 1 - cos(theta) by inverting the tabulated cumulative distribution."""
    cdf = data.coherent_cdf if coherent else data.incoherent_cdf
    n_rows, n_cols = cdf.shape
    pos = (energies_kev - GRID_MIN_KEV) / TABLE_ENERGY_STEP_KEV
    low = np.clip(pos.astype(np.int64), 0, n_rows - 2)
    row = low + (rng.random(energies_kev.size) < (pos - low))
    u = rng.random(energies_kev.size)
    # every row rises from 0 to 1: offset row r by 2 r to search all rows at once
    flat = (cdf + 2.0 * np.arange(n_rows)[:, None]).ravel()
    idx = np.searchsorted(flat, u + 2.0 * row, side="right") - 1
    k = np.clip(idx - row * n_cols, 0, n_cols - 2)
    c0 = cdf[row, k]
    c1 = cdf[row, k + 1]
    frac = np.where(c1 > c0, (u - c0) / np.where(c1 > c0, c1 - c0, 1.0), 0.5)
    t = data.t_nodes[k] + frac * (data.t_nodes[k + 1] - data.t_nodes[k])
    return np.asarray(np.clip(t, 0.0, 2.0))


def sample_scatter_cosines(
    energy_kev: float,
    n: int,
    *,
    seed: int,
    coherent: bool = False,
    material_name: str = "water",
    binding: bool = True,
) -> FloatArray:
    """Draw ``n`` scattering-angle cosines at ``energy_kev`` from one channel's distribution.

    For tests and inspection of the sampler used by the transport.

    Parameters
    ----------
    energy_kev : float
        Photon energy, keV (1-150).
    n : int
        Number of samples.
    seed : int
        Seed of the PCG64 generator.
    coherent : bool
        Coherent channel (True) or incoherent (False).
    material_name, binding
        As for :func:`interaction_data` (``binding=False``: pure Klein-Nishina).

    Returns
    -------
    ndarray
        cos(theta) samples.
    """
    data = interaction_data(material_name, coherent=True, binding=binding)
    rng = np.random.default_rng(seed)
    t = _sample_t(data, np.full(n, float(energy_kev)), rng, coherent=coherent)
    return np.asarray(1.0 - t)


def field_solid_angle_sr(field_side_cm: float, fsd_cm: float) -> float:
    """Solid angle of a centred square field of side ``field_side_cm`` at distance ``fsd_cm``.

    :math:`\\Omega = 4\\arcsin\\big(ab/\\sqrt{(a^2+d^2)(b^2+d^2)}\\big)`, :math:`a = b = s/2`.
    """
    a = 0.5 * field_side_cm
    return 4.0 * math.asin(a * a / (a * a + fsd_cm * fsd_cm))


def _sample_entry_points(
    n: int, field_side_cm: float, fsd_cm: float, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    """Entry points on the field and unit directions from the source (uniform in solid angle)."""
    half = 0.5 * field_side_cm
    points: list[FloatArray] = []
    have = 0
    while have < n:
        m = int((n - have) * 1.15) + 16
        xy = rng.uniform(-half, half, size=(m, 2))
        r2 = fsd_cm * fsd_cm + np.sum(xy * xy, axis=1)
        keep = rng.random(m) < (fsd_cm * fsd_cm / r2) ** 1.5
        points.append(xy[keep])
        have += int(np.count_nonzero(keep))
    xy = np.concatenate(points)[:n]
    vec = np.column_stack((xy, np.full(n, fsd_cm)))
    directions = vec / np.linalg.norm(vec, axis=1)[:, None]
    return np.column_stack((xy, np.zeros(n))), directions


def primary_fluence_through_disc(
    *,
    field_side_cm: float,
    fsd_cm: float,
    plane_distance_cm: float,
    disc_radius_cm: float,
    n_photons: int,
    seed: int,
) -> tuple[float, float]:
    """Fluence per emitted photon through an on-axis disc, from the source sampler, in vacuum.

    Counts the sampled source photons that cross a disc of radius ``disc_radius_cm`` centred on
    the axis at ``plane_distance_cm`` from the source; the expected value is the disc's solid
    angle over the field's, divided by the disc area (tends to :math:`1/(\\Omega D^2)`).

    Returns
    -------
    (float, float)
        Fluence per photon (1/cm²) and its standard uncertainty (binomial).
    """
    rng = np.random.default_rng(seed)
    _, u = _sample_entry_points(n_photons, field_side_cm, fsd_cm, rng)
    scale = plane_distance_cm / u[:, 2]
    rho2 = (u[:, 0] * scale) ** 2 + (u[:, 1] * scale) ** 2
    hits = int(np.count_nonzero(rho2 < disc_radius_cm**2))
    p = hits / n_photons
    area = math.pi * disc_radius_cm**2
    return p / area, math.sqrt(p * (1.0 - p) / n_photons) / area


def _rotate(directions: FloatArray, cos_theta: FloatArray, phi: FloatArray) -> FloatArray:
    """New unit directions at polar angle theta (cos given) and azimuth phi about the old ones."""
    u, v, w = directions[:, 0], directions[:, 1], directions[:, 2]
    sin_theta = np.sqrt(np.clip(1.0 - cos_theta * cos_theta, 0.0, 1.0))
    cp, sp = np.cos(phi), np.sin(phi)
    sq = np.sqrt(np.clip(1.0 - w * w, 0.0, 1.0))
    polar = sq < 1e-8
    sq_safe = np.where(polar, 1.0, sq)
    nu = u * cos_theta + sin_theta * (u * w * cp - v * sp) / sq_safe
    nv = v * cos_theta + sin_theta * (v * w * cp + u * sp) / sq_safe
    nw = w * cos_theta - sin_theta * sq * cp
    sign = np.where(w >= 0.0, 1.0, -1.0)
    nu = np.where(polar, sin_theta * cp, nu)
    nv = np.where(polar, sin_theta * sp, nv)
    nw = np.where(polar, sign * cos_theta, nw)
    out = np.column_stack((nu, nv, nw))
    return np.asarray(out / np.linalg.norm(out, axis=1)[:, None])


@dataclass
class _Sums:
    """Running sums of per-history scores.

    Columns: primary through the disc, scatter through the disc, point estimator with the
    exclusion radius R0, point estimator with 2 R0 (for the estimate of the R0 bias).
    """

    n: int = 0
    sums: FloatArray = field(default_factory=lambda: np.zeros(4))
    products: FloatArray = field(default_factory=lambda: np.zeros((4, 4)))
    collisions: int = 0

    def add(self, scores: FloatArray) -> None:
        self.n += scores.shape[0]
        self.sums += scores.sum(axis=0)
        self.products += scores.T @ scores

    def mean_and_cov(self) -> tuple[FloatArray, FloatArray]:
        mean = self.sums / self.n
        cov = (self.products / self.n - np.outer(mean, mean)) * self.n / (self.n - 1)
        return mean, cov / self.n


@dataclass(frozen=True)
class BackscatterSimulation:
    """Result of :func:`simulate_backscatter` (kerma per emitted photon in keV/g).

    Attributes
    ----------
    backscatter_factor : float
        B from the point estimator, :math:`1 + K_s/K_p` with :math:`K_p` exact.
    standard_uncertainty : float
        Statistical standard uncertainty of ``backscatter_factor``.
    disc_backscatter_factor, disc_standard_uncertainty : float
        B from the surface-crossing estimator (primary and scatter both through the disc).
    primary_kerma, scatter_kerma, scatter_kerma_uncertainty : float
        :math:`K_p` (exact), :math:`K_s` and its standard uncertainty, keV/g per photon.
    disc_primary_kerma : float
        :math:`K_p` from the disc (checks the normalisation; expected equal to ``primary_kerma``
        within its statistics and the disc's spatial averaging).
    n_photons, seed : int
    field_side_cm, fsd_cm : float
    collisions_per_photon : float
        Mean number of collisions followed per history.
    exclusion_radius_cm : float
        R0 of the point estimator.
    exclusion_bias_estimate, exclusion_bias_uncertainty : float
        Estimated bias of B from the R0 treatment, :math:`(B_{2R_0} - B_{R_0})/3` (the bias
        scales as :math:`R_0^2`), and its statistical standard uncertainty. Not applied.
    """

    backscatter_factor: float
    standard_uncertainty: float
    disc_backscatter_factor: float
    disc_standard_uncertainty: float
    primary_kerma: float
    scatter_kerma: float
    scatter_kerma_uncertainty: float
    disc_primary_kerma: float
    disc_primary_kerma_uncertainty: float
    n_photons: int
    seed: int
    field_side_cm: float
    fsd_cm: float
    collisions_per_photon: float
    exclusion_radius_cm: float
    exclusion_bias_estimate: float
    exclusion_bias_uncertainty: float


def _transport_batch(
    n: int,
    *,
    data: InteractionData,
    phantom: SlabPhantom,
    energies_kev: FloatArray,
    cumulative: FloatArray,
    field_side_cm: float,
    fsd_cm: float,
    exclusion_radius_cm: float,
    disc_radius_cm: float,
    rng: np.random.Generator,
) -> tuple[FloatArray, int]:
    """Follow ``n`` histories; return per-history scores (n, 4) and the number of collisions."""
    disc_area = math.pi * disc_radius_cm**2
    pos, u = _sample_entry_points(n, field_side_cm, fsd_cm, rng)
    e = energies_kev[np.searchsorted(cumulative, rng.random(n), side="right")]
    scores, collisions = transport(
        pos,
        u,
        e,
        data=data,
        phantom=phantom,
        exclusion_radius_cm=exclusion_radius_cm,
        disc_radius_cm=disc_radius_cm,
        rng=rng,
    )
    # primary photons entering through the disc (surface-crossing estimator, denominator)
    in_disc = pos[:, 0] ** 2 + pos[:, 1] ** 2 < disc_radius_cm**2
    cos_in = np.maximum(u[:, 2], COS_CAP)
    scores[:, 0] = np.where(
        in_disc, data.interp(data.air_kerma_factor, e) / (disc_area * cos_in), 0
    )
    return scores, collisions


def transport(
    pos: FloatArray,
    u: FloatArray,
    e: FloatArray,
    *,
    data: InteractionData,
    phantom: SlabPhantom,
    exclusion_radius_cm: float,
    disc_radius_cm: float | None,
    rng: np.random.Generator,
) -> tuple[FloatArray, int]:
    """Follow photons entering the phantom at ``pos`` (z = 0) in directions ``u``, energies ``e``.

    Returns per-history scores, shape (n, 4): column 0 zero (the caller's primary through the
    disc), 1 scatter out through the disc (zero when ``disc_radius_cm`` is None), 2 and 3 the
    next-event point estimator of the scatter air kerma at the origin with exclusion radius
    :math:`R_0` and :math:`2R_0` (keV/g per photon, before the caller's normalisation); and the
    number of collisions followed. See the module docstring for the estimators.
    """
    n = e.shape[0]
    scores = np.zeros((n, 4))
    disc_r = 0.0 if disc_radius_cm is None else disc_radius_cm
    pos = pos.copy()
    e = e.copy()
    ids = np.arange(n)
    wt = np.ones(n)
    hx, hy, depth = 0.5 * phantom.width_cm, 0.5 * phantom.length_cm, phantom.depth_cm
    collisions = 0
    for _ in range(MAX_COLLISIONS):
        if ids.size == 0:
            break
        mu = data.interp(data.mu_per_cm, e)
        step = -np.log1p(-rng.random(ids.size)) / mu
        new = pos + step[:, None] * u
        inside = (
            (new[:, 2] > 0.0)
            & (new[:, 2] < depth)
            & (np.abs(new[:, 0]) < hx)
            & (np.abs(new[:, 1]) < hy)
        )
        if disc_r > 0.0:
            _score_disc_exits(scores, ids, pos, u, e, wt, step, inside, data, disc_r)
        keep = np.flatnonzero(inside)
        ids, pos, u, e, wt = ids[keep], new[keep], u[keep], e[keep], wt[keep]
        if ids.size == 0:
            break
        collisions += ids.size
        scatter_prob = _score_next_event(scores, ids, pos, u, e, wt, mu[keep], data,
                                         exclusion_radius_cm)  # fmt: skip
        # implicit capture, then Russian roulette on light photons
        wt = wt * scatter_prob
        light = wt < ROULETTE_WEIGHT
        if np.any(light):
            survive = rng.random(ids.size) < ROULETTE_SURVIVAL
            wt = np.where(light & survive, wt / ROULETTE_SURVIVAL, wt)
            alive = ~light | survive
            ids, pos, u, e, wt = ids[alive], pos[alive], u[alive], e[alive], wt[alive]
        if ids.size == 0:
            break
        u, e = _scatter(u, e, data, rng)
        hot = e >= ENERGY_CUTOFF_KEV
        if not np.all(hot):
            ids, pos, u, e, wt = ids[hot], pos[hot], u[hot], e[hot], wt[hot]
    else:
        raise ModelError(f"photons still alive after {MAX_COLLISIONS} collisions")
    return scores, collisions


def _score_disc_exits(
    scores: FloatArray,
    ids: npt.NDArray[np.intp],
    pos: FloatArray,
    u: FloatArray,
    e: FloatArray,
    wt: FloatArray,
    step: FloatArray,
    inside: npt.NDArray[np.bool_],
    data: InteractionData,
    disc_r: float,
) -> None:
    """Photons leaving through the entrance surface cross the disc plane on their way out:
    the surface-crossing estimator's scatter (column 1)."""
    leaving_top = ~inside & (u[:, 2] < 0.0)
    if not np.any(leaving_top):
        return
    lt = np.flatnonzero(leaving_top)
    s_top = -pos[lt, 2] / u[lt, 2]
    cx = pos[lt, 0] + s_top * u[lt, 0]
    cy = pos[lt, 1] + s_top * u[lt, 1]
    hit = (cx * cx + cy * cy < disc_r**2) & (s_top < step[lt])
    hit_cos = np.abs(u[lt, 2])
    hit_cos = np.where(hit_cos < COS_CAP, COS_CAP_VALUE, hit_cos)
    disc_area = math.pi * disc_r**2
    gain = wt[lt] * data.interp(data.air_kerma_factor, e[lt]) / (disc_area * hit_cos)
    scores[ids[lt], 1] += np.where(hit, gain, 0.0)


def _score_next_event(
    scores: FloatArray,
    ids: npt.NDArray[np.intp],
    pos: FloatArray,
    u: FloatArray,
    e: FloatArray,
    wt: FloatArray,
    mu: FloatArray,
    data: InteractionData,
    r0: float,
) -> FloatArray:
    """The next-event estimator toward the scoring point (0, 0, 0) at this collision (columns
    2 and 3, exclusion radius R0 and 2 R0); returns the scattering probability 1 - tau/mu."""
    r = np.linalg.norm(pos, axis=1)
    to_point = -pos / np.maximum(r, 1e-300)[:, None]
    t_d = np.clip(1.0 - np.sum(u * to_point, axis=1), 0.0, 2.0)
    inverse_r2 = 1.0 / np.maximum(r, 1e-300) ** 2
    geometry = np.where(r > r0, inverse_r2, 3.0 / r0**2)
    geometry_2r0 = np.where(r > 2.0 * r0, inverse_r2, 0.75 / r0**2)
    f_coh = data.interp(data.coherent_fraction, e)
    scatter_prob = 1.0 - data.interp(data.photo_fraction, e)
    k = e / ELECTRON_REST_ENERGY_KEV
    e_incoh = e / (1.0 + k * t_d)
    p_incoh = _angular_density_per_sr(data, e, t_d, coherent=False)
    gain = (
        (1.0 - f_coh)
        * p_incoh
        * np.exp(-data.interp(data.mu_per_cm, e_incoh) * r)
        * data.interp(data.air_kerma_factor, e_incoh)
    )
    if data.coherent:
        p_coh = _angular_density_per_sr(data, e, t_d, coherent=True)
        gain += f_coh * p_coh * np.exp(-mu * r) * data.interp(data.air_kerma_factor, e)
    scores[ids, 2] += wt * scatter_prob * geometry * gain
    scores[ids, 3] += wt * scatter_prob * geometry_2r0 * gain
    return np.asarray(scatter_prob)


def _scatter(
    u: FloatArray, e: FloatArray, data: InteractionData, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    """One scattering of every photon: channel, angle, energy (in place), direction."""
    coh = rng.random(e.size) < data.interp(data.coherent_fraction, e)
    t = np.empty(e.size)
    if np.any(coh):
        t[coh] = _sample_t(data, e[coh], rng, coherent=True)
    inc = ~coh
    if np.any(inc):
        t[inc] = _sample_t(data, e[inc], rng, coherent=False)
        e[inc] = e[inc] / (1.0 + e[inc] / ELECTRON_REST_ENERGY_KEV * t[inc])
    return _rotate(u, 1.0 - t, rng.uniform(0.0, 2.0 * np.pi, e.size)), e


def simulate_backscatter(
    energies_kev: npt.ArrayLike,
    photon_fluence: npt.ArrayLike,
    *,
    field_side_cm: float,
    n_photons: int,
    seed: int,
    fsd_cm: float = 100.0,
    phantom: SlabPhantom | None = None,
    coherent: bool = True,
    binding: bool = True,
    exclusion_radius_cm: float = DEFAULT_EXCLUSION_RADIUS_CM,
    disc_radius_cm: float = DEFAULT_DISC_RADIUS_CM,
    batch: int = DEFAULT_BATCH,
) -> BackscatterSimulation:
    """Backscatter factor of a beam and square field on a slab phantom, by Monte Carlo.

    Parameters
    ----------
    energies_kev, photon_fluence : array_like
        The beam's photon spectrum: bin energies (keV, 1-150) and photons per bin (any scale).
    field_side_cm : float
        Side of the square field at the entrance surface, cm.
    n_photons : int
        Histories to follow.
    seed : int
        Seed of numpy's PCG64 generator (reproducible runs).
    fsd_cm : float
        Focus-to-surface distance, cm.
    phantom : SlabPhantom, optional
        Default: 30 x 30 x 15 cm water.
    coherent, binding : bool
        Physics options, see :func:`interaction_data`.
    exclusion_radius_cm, disc_radius_cm : float
        Estimator parameters, see the module docstring.
    batch : int
        Histories transported together.

    Returns
    -------
    BackscatterSimulation

    Raises
    ------
    ModelError
        Bad spectrum, geometry or counts.
    """
    phantom = phantom or SlabPhantom()
    energies = np.asarray(energies_kev, dtype=np.float64)
    fluence = np.asarray(photon_fluence, dtype=np.float64)
    _check_spectrum(energies, fluence)
    _check_run(
        phantom,
        field_side_cm=field_side_cm,
        fsd_cm=fsd_cm,
        n_photons=n_photons,
        batch=batch,
        exclusion_radius_cm=exclusion_radius_cm,
        disc_radius_cm=disc_radius_cm,
    )
    data = interaction_data(phantom.material, coherent=coherent, binding=binding)
    p = fluence / fluence.sum()
    cumulative = np.cumsum(p)
    cumulative[-1] = 1.0
    solid_angle = field_solid_angle_sr(field_side_cm, fsd_cm)
    primary = float(np.sum(p * data.interp(data.air_kerma_factor, energies))) / (
        solid_angle * fsd_cm**2
    )
    rng = np.random.default_rng(seed)
    sums = _Sums()
    done = 0
    while done < n_photons:
        m = min(batch, n_photons - done)
        scores, collisions = _transport_batch(
            m,
            data=data,
            phantom=phantom,
            energies_kev=energies,
            cumulative=cumulative,
            field_side_cm=field_side_cm,
            fsd_cm=fsd_cm,
            exclusion_radius_cm=exclusion_radius_cm,
            disc_radius_cm=disc_radius_cm,
            rng=rng,
        )
        sums.add(scores)
        sums.collisions += collisions
        done += m
    mean, cov = sums.mean_and_cov()
    p_disc, s_disc, s_point, s_point_2r0 = mean
    b = 1.0 + s_point / primary
    u_b = math.sqrt(cov[2, 2]) / primary
    # the R0 bias grows as R0^2 (module docstring): B(R0) - B(0) ~ (B(2 R0) - B(R0)) / 3
    exclusion_bias = (s_point_2r0 - s_point) / primary / 3.0
    exclusion_bias_u = math.sqrt(max(cov[3, 3] + cov[2, 2] - 2 * cov[2, 3], 0.0)) / primary / 3
    b_disc, u_disc = _disc_backscatter_factor(p_disc, s_disc, cov)
    return BackscatterSimulation(
        backscatter_factor=b,
        standard_uncertainty=u_b,
        disc_backscatter_factor=b_disc,
        disc_standard_uncertainty=u_disc,
        primary_kerma=primary,
        scatter_kerma=float(s_point),
        scatter_kerma_uncertainty=math.sqrt(cov[2, 2]),
        disc_primary_kerma=float(p_disc),
        disc_primary_kerma_uncertainty=math.sqrt(cov[0, 0]),
        n_photons=n_photons,
        seed=seed,
        field_side_cm=float(field_side_cm),
        fsd_cm=float(fsd_cm),
        collisions_per_photon=sums.collisions / n_photons,
        exclusion_radius_cm=float(exclusion_radius_cm),
        exclusion_bias_estimate=float(exclusion_bias),
        exclusion_bias_uncertainty=float(exclusion_bias_u),
    )


def _check_spectrum(energies: FloatArray, fluence: FloatArray) -> None:
    """A spectrum :func:`simulate_backscatter` can sample: 1-d bins of the same length, finite
    non-negative photon numbers not all zero, energies with photons inside the grid."""
    if energies.shape != fluence.shape or energies.ndim != 1 or energies.size == 0:
        raise ModelError("energies and photon fluence must be 1-d arrays of the same length")
    if np.any(fluence < 0) or not np.any(fluence > 0) or not np.all(np.isfinite(fluence)):
        raise ModelError("photon fluence must be finite, non-negative and not all zero")
    if np.any(energies[fluence > 0] < GRID_MIN_KEV) or np.any(energies > GRID_MAX_KEV - 1):
        raise ModelError(f"photon energies must lie in {GRID_MIN_KEV:g}-{GRID_MAX_KEV - 1:g} keV")


def _check_run(
    phantom: SlabPhantom,
    *,
    field_side_cm: float,
    fsd_cm: float,
    n_photons: int,
    batch: int,
    exclusion_radius_cm: float,
    disc_radius_cm: float,
) -> None:
    """A geometry and counts :func:`simulate_backscatter` can run: a positive field no larger than
    the phantom's entrance surface, a positive distance, at least 2 photons, positive radii."""
    if not (math.isfinite(field_side_cm) and field_side_cm > 0):
        raise ModelError(f"field side must be a positive number of cm, got {field_side_cm}")
    if field_side_cm > min(phantom.width_cm, phantom.length_cm):
        raise ModelError("the field must not be larger than the phantom's entrance surface")
    if not (math.isfinite(fsd_cm) and fsd_cm > 0):
        raise ModelError(f"focus-to-surface distance must be positive, got {fsd_cm}")
    if n_photons < 2 or batch < 1:
        raise ModelError("need at least 2 photons and a positive batch size")
    if not (exclusion_radius_cm > 0 and disc_radius_cm > 0):
        raise ModelError("estimator radii must be positive")


def _disc_backscatter_factor(p_disc: float, s_disc: float, cov: FloatArray) -> tuple[float, float]:
    r"""The disc estimator's backscatter factor :math:`B = 1 + q/p` (scatter ``s_disc`` over
    primary ``p_disc`` kerma through the disc) and its standard uncertainty, by first-order
    propagation of :math:`q/p` with covariance (JCGM 100:2008 eq. 13):

    .. math:: u^2(q/p) = u^2(q)/p^2 + q^2 u^2(p)/p^4 - 2 q\,u(p,q)/p^3

    NaN for both without primary kerma through the disc."""
    if not p_disc > 0:
        return math.nan, math.nan
    var_ratio = (
        cov[1, 1] / p_disc**2
        + s_disc**2 * cov[0, 0] / p_disc**4
        - 2.0 * s_disc * cov[0, 1] / p_disc**3
    )
    return 1.0 + s_disc / p_disc, math.sqrt(max(var_ratio, 0.0))


def spectrum_for_hvl(
    hvl_mm_al: float, kv: float, *, tolerance_mm_al: float = 1e-3
) -> tuple[BeamResult, float]:
    """The beam at ``kv`` whose aluminium filtration gives first HVL ``hvl_mm_al``.

    Solves :math:`\\mathrm{HVL}_1(kV, t_{Al}) = h` for the total Al filtration :math:`t_{Al}` by
    bisection on :func:`beamaudit.model.compute_beam` (tungsten anode, 12 degrees, constant
    potential, 1 m of air); the HVL rises monotonically with filtration.

    Returns
    -------
    (BeamResult, float)
        The beam and the total filtration in mm Al.

    Raises
    ------
    ModelError
        If no Al filtration between 0.05 and 60 mm reaches that HVL at that kV.
    """

    def hvl(al: float) -> float:
        return compute_beam(BeamSpec(kv=kv, filters=(FilterSpec("Al", al),))).hvl1_mm_al

    lo, hi = 0.05, 60.0
    if not hvl(lo) <= hvl_mm_al <= hvl(hi):
        raise ModelError(f"no Al filtration gives HVL {hvl_mm_al:g} mm Al at {kv:g} kV")
    while hi - lo > 1e-4:
        mid = 0.5 * (lo + hi)
        if hvl(mid) < hvl_mm_al:
            lo = mid
        else:
            hi = mid
    al = 0.5 * (lo + hi)
    beam = compute_beam(BeamSpec(kv=kv, filters=(FilterSpec("Al", al),)))
    if abs(beam.hvl1_mm_al - hvl_mm_al) > tolerance_mm_al:
        raise ModelError(f"HVL {hvl_mm_al:g} mm Al not reached at {kv:g} kV")
    return beam, al
