r"""Monoenergetic backscatter kernels B(E, field) of a slab phantom, by Monte Carlo.

A verification and data-making tool, not part of any runtime path: ``benchmarks/
backscatter_kernels.py`` runs it once and writes ``data/backscatter_kernels.csv``, which
:mod:`beamaudit.model.backscatter_kernels` reads at run time. It uses the photon transport of
:mod:`beamaudit.model.montecarlo_backscatter` (cross-sections, sampling, estimators and their
sources are described there).

For one photon energy :math:`E` it gives the backscatter factor

.. math::

    B(E, s) = \frac{K_{a,e}}{K_{a,i}} = 1 + \frac{K_s(E, s)}{K_p(E)}

(ICRU Report 74, 2005) at the centre of the entrance surface of the phantom, for every square
field of side :math:`s` of a nested list :math:`s_1 < s_2 < \dots < s_m` at the same time. The
field of side :math:`s_m` is cut into the square :math:`s_1` and the square rings between
:math:`s_{k-1}` and :math:`s_k`; each ring :math:`k` is irradiated by its own histories
(stratified sampling, equal numbers per ring, so that small fields get as many histories as large
ones), photons emitted uniformly in the ring's solid angle :math:`\Omega_k = \Omega(s_k) -
\Omega(s_{k-1})` (see :func:`beamaudit.model.montecarlo_backscatter.field_solid_angle_sr`).
With :math:`\bar q_k` the mean next-event score of ring :math:`k`'s histories (scatter air kerma
at the point per photon), the primary air kerma per steradian of emission
:math:`E (\mu_{en}/\rho)_{air}(E) / d^2` and the scatter of the rings adding up,

.. math::

    B(E, s_K) = 1 + \sum_{k \le K} c_k, \qquad
    c_k = \bar q_k\,\frac{\Omega_k d^2}{E\,(\mu_{en}/\rho)_{air}(E)},
    \qquad u^2(B(E, s_K)) = \sum_{k \le K} u^2(c_k)

with :math:`u(c_k)` the standard deviation of ring :math:`k`'s history scores over
:math:`\sqrt{n}` times the same factor (JCGM 100:2008; rings are independent).

By linearity, the B of a beam of any spectrum is the kernel weighted by the beam's spectrum of
incident air kerma (:func:`beamaudit.model.backscatter_kernels.backscatter_curve`).
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from beamaudit.model.errors import ModelError
from beamaudit.model.montecarlo_backscatter import (
    DEFAULT_EXCLUSION_RADIUS_CM,
    ENERGY_CUTOFF_KEV,
    GRID_MAX_KEV,
    InteractionData,
    SlabPhantom,
    field_solid_angle_sr,
    interaction_data,
    transport,
)

__all__ = [
    "KERNEL_ENERGIES_KEV",
    "KERNEL_FIELD_SIDES_CM",
    "KERNEL_FSD_CM",
    "KERNEL_PHANTOM_CM",
    "KernelSimulation",
    "simulate_kernel",
]

FloatArray = npt.NDArray[np.float64]

#: Photon energies of the shipped kernels, keV: 10-150 keV, closer where B(E) bends.
KERNEL_ENERGIES_KEV = (10.0, 12.5, 15.0, 17.5, 20.0, 25.0, 30.0, 35.0, 40.0, 45.0, 50.0, 55.0,
                       60.0, 70.0, 80.0, 90.0, 100.0, 110.0, 120.0, 135.0, 150.0)  # fmt: skip
#: Square field sides at the entrance surface of the shipped kernels, cm.
KERNEL_FIELD_SIDES_CM = (2.5, 5.0, 7.5, 10.0, 12.5, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0)
#: Focus-to-surface distance of the shipped kernels, cm.
KERNEL_FSD_CM = 100.0
#: The kernels' slab: width, length and depth, cm (as large as the largest field, 20 cm deep).
KERNEL_PHANTOM_CM = (40.0, 40.0, 20.0)
#: The point estimator's exclusion radius is at most this fraction of the photons' mean free path
#: at the kernel energy (its bias grows as (R0 / mean free path)^2, see
#: :mod:`beamaudit.model.montecarlo_backscatter`), and at most the module default there.
EXCLUSION_MEAN_FREE_PATH_FRACTION = 0.25
#: Histories transported together (all rings of one energy mixed).
DEFAULT_BATCH = 220_000


@dataclass(frozen=True)
class KernelSimulation:
    """The kernel of one photon energy: B and its statistics for every field of the list.

    Attributes
    ----------
    material : str
        Phantom material.
    energy_kev : float
    field_side_cm : tuple of float
        Square field sides, cm, increasing.
    backscatter_factor, standard_uncertainty : ndarray
        B for each field and its statistical standard uncertainty (k = 1).
    exclusion_bias : ndarray
        :math:`(B_{2R_0} - B_{R_0})/3`, the estimated bias of the point estimator's exclusion
        radius (not applied; see :mod:`beamaudit.model.montecarlo_backscatter`).
    histories_per_ring, seed : int
    collisions_per_history : float
    exclusion_radius_cm : float
        R0 used.
    seconds : float
        CPU time of the run.
    """

    material: str
    energy_kev: float
    field_side_cm: tuple[float, ...]
    backscatter_factor: FloatArray
    standard_uncertainty: FloatArray
    exclusion_bias: FloatArray
    histories_per_ring: int
    seed: int
    collisions_per_history: float
    exclusion_radius_cm: float
    seconds: float


def _sample_ring(
    n: int, inner_side_cm: float, outer_side_cm: float, fsd_cm: float, rng: np.random.Generator
) -> tuple[FloatArray, FloatArray]:
    """Entry points in the square ring between two centred squares, uniform in solid angle.

    Uniform on the outer square, those inside the inner square rejected, then accepted with
    probability :math:`(d/r)^3` (the solid angle of a surface element is :math:`d\\,dA/r^3`).
    Returns entry points (z = 0) and unit directions from the source at (0, 0, -d).
    """
    half_out, half_in = 0.5 * outer_side_cm, 0.5 * inner_side_cm
    ring_share = 1.0 - (inner_side_cm / outer_side_cm) ** 2
    points: list[FloatArray] = []
    have = 0
    while have < n:
        m = int((n - have) / ring_share * 1.2) + 16
        xy = rng.uniform(-half_out, half_out, size=(m, 2))
        outside_inner = np.max(np.abs(xy), axis=1) >= half_in
        r2 = fsd_cm * fsd_cm + np.sum(xy * xy, axis=1)
        keep = outside_inner & (rng.random(m) < (fsd_cm * fsd_cm / r2) ** 1.5)
        points.append(xy[keep])
        have += int(np.count_nonzero(keep))
    xy = np.concatenate(points)[:n]
    vec = np.column_stack((xy, np.full(n, fsd_cm)))
    directions = vec / np.linalg.norm(vec, axis=1)[:, None]
    return np.column_stack((xy, np.zeros(n))), directions


def _check(energy_kev: float, sides: Sequence[float], phantom: SlabPhantom, n: int) -> None:
    if not (ENERGY_CUTOFF_KEV < energy_kev <= GRID_MAX_KEV - 1.0):
        raise ModelError(f"kernel energy {energy_kev} keV outside the transport's range")
    if not sides or any(b <= a for a, b in itertools.pairwise(sides)) or sides[0] <= 0:
        raise ModelError("field sides must be positive and increasing")
    if sides[-1] > min(phantom.width_cm, phantom.length_cm):
        raise ModelError("the largest field must not be larger than the phantom's surface")
    if n < 2:
        raise ModelError("need at least 2 histories per ring")


def simulate_kernel(
    energy_kev: float,
    *,
    histories_per_ring: int,
    seed: int,
    material: str = "water",
    field_sides_cm: Sequence[float] = KERNEL_FIELD_SIDES_CM,
    phantom_cm: tuple[float, float, float] = KERNEL_PHANTOM_CM,
    fsd_cm: float = KERNEL_FSD_CM,
    exclusion_radius_cm: float | None = None,
    batch: int = DEFAULT_BATCH,
) -> KernelSimulation:
    """The backscatter kernel B(E, s) of one energy for every field of ``field_sides_cm``.

    Parameters
    ----------
    energy_kev : float
        Photon energy, keV (3-150).
    histories_per_ring : int
        Histories for each ring (the first field counts as a ring).
    seed : int
        Seed of numpy's PCG64 generator (a run is reproducible).
    material : str
        Phantom material (:func:`beamaudit.model.attenuation.material`).
    field_sides_cm : sequence of float
        Increasing square field sides at the entrance surface, cm.
    phantom_cm : (float, float, float)
        Width, length and depth of the slab, cm.
    fsd_cm : float
        Focus-to-surface distance, cm.
    exclusion_radius_cm : float, optional
        R0 of the point estimator; None: the smaller of
        :data:`~beamaudit.model.montecarlo_backscatter.DEFAULT_EXCLUSION_RADIUS_CM` and
        :data:`EXCLUSION_MEAN_FREE_PATH_FRACTION` of the mean free path at ``energy_kev``.
    batch : int
        Histories transported together.

    Returns
    -------
    KernelSimulation
    """
    started = time.process_time()
    sides = [float(s) for s in field_sides_cm]
    phantom = SlabPhantom(material, *phantom_cm)
    _check(energy_kev, sides, phantom, histories_per_ring)
    data = interaction_data(material)
    if exclusion_radius_cm is None:
        mu = float(data.interp(data.mu_per_cm, np.array([float(energy_kev)]))[0])
        exclusion_radius_cm = min(
            DEFAULT_EXCLUSION_RADIUS_CM, EXCLUSION_MEAN_FREE_PATH_FRACTION / mu
        )
    rng = np.random.default_rng(seed)
    m = len(sides)
    sums = np.zeros((2, m))
    squares = np.zeros((2, m))
    collisions = 0
    per_batch = max(1, batch // m)
    done = 0
    while done < histories_per_ring:
        k = min(per_batch, histories_per_ring - done)
        scores, hits = _batch(k, energy_kev, sides, fsd_cm, data, phantom, exclusion_radius_cm, rng)
        sums += scores.sum(axis=2)
        squares += (scores * scores).sum(axis=2)
        collisions += hits
        done += k
    return _kernel(
        sums, squares, histories_per_ring, energy_kev=energy_kev, sides=sides, fsd_cm=fsd_cm,
        data=data, material=phantom.material, seed=seed, collisions=collisions,
        exclusion_radius_cm=exclusion_radius_cm, seconds=time.process_time() - started,
    )  # fmt: skip


def _batch(
    k: int,
    energy_kev: float,
    sides: list[float],
    fsd_cm: float,
    data: InteractionData,
    phantom: SlabPhantom,
    exclusion_radius_cm: float,
    rng: np.random.Generator,
) -> tuple[FloatArray, int]:
    """``k`` histories in every ring; point scores (R0, 2R0) as an array (2, rings, k)."""
    m = len(sides)
    entries = [_sample_ring(k, ([0.0, *sides])[j], sides[j], fsd_cm, rng) for j in range(m)]
    pos = np.concatenate([p for p, _ in entries])
    u = np.concatenate([d for _, d in entries])
    e = np.full(k * m, float(energy_kev))
    scores, collisions = transport(
        pos, u, e, data=data, phantom=phantom, exclusion_radius_cm=exclusion_radius_cm,
        disc_radius_cm=None, rng=rng,
    )  # fmt: skip
    return scores[:, 2:4].T.reshape(2, m, k), collisions


def _kernel(
    sums: FloatArray,
    squares: FloatArray,
    n: int,
    *,
    energy_kev: float,
    sides: list[float],
    fsd_cm: float,
    data: InteractionData,
    material: str,
    seed: int,
    collisions: int,
    exclusion_radius_cm: float,
    seconds: float,
) -> KernelSimulation:
    """B for each field from the rings' score sums (module docstring)."""
    omega = np.array([field_solid_angle_sr(s, fsd_cm) for s in sides])
    ring_omega = np.diff(np.concatenate(([0.0], omega)))
    primary_per_sr = float(data.interp(data.air_kerma_factor, np.array([energy_kev]))[0])
    factor = ring_omega * fsd_cm**2 / primary_per_sr
    mean = sums / n
    variance_of_mean = np.maximum(squares / n - mean * mean, 0.0) * n / (n - 1) / n
    c = mean * factor
    b = 1.0 + np.cumsum(c, axis=1)
    u = np.sqrt(np.cumsum(variance_of_mean * factor**2, axis=1))
    return KernelSimulation(
        material=material,
        energy_kev=float(energy_kev),
        field_side_cm=tuple(sides),
        backscatter_factor=b[0],
        standard_uncertainty=u[0],
        exclusion_bias=(b[1] - b[0]) / 3.0,
        histories_per_ring=n,
        seed=seed,
        collisions_per_history=collisions / (n * len(sides)),
        exclusion_radius_cm=exclusion_radius_cm,
        seconds=seconds,
    )
