r"""Monte Carlo of the Dance method's breast model: glandular dose per incident air kerma.

This module computes, from physics, the monoenergetic normalised glandular dose that the Dance
method's conversion factors are made of (Dance, Phys Med Biol 35:1211, 1990; Dance et al.,
Phys Med Biol 45:3225, 2000; 54:4361, 2009; 56:453, 2011). It is the generator of the shipped
table ``data/breast_dgn_mc.csv`` (run by ``benchmarks/breast_dgn_mc.py``) and of the
tomosynthesis table; nothing at run time imports it.

Breast model (as the papers describe it; every choice recorded here)
--------------------------------------------------------------------
* The compressed breast is a half cylinder: semicircular cross-section of radius
  :data:`BREAST_RADIUS_MM` (80 mm; Dance 1990, from memory, medium confidence), height the
  compressed thickness :math:`T` (20-110 mm), its flat face on the chest-wall plane
  :math:`y = 0`, lying on the breast support (:math:`z = 0` is the support's upper surface).
* A central region, a uniform mixture of glandular and adipose tissue, is surrounded above,
  below and around its curved side by an adipose shell :data:`SHELL_MM` (5 mm) thick, standing
  for skin and subcutaneous fat (Dance 1990 and 2000; PUBLISHED-VALUES m gives 4-5 mm; later
  work argues for about 1.5 mm of skin, not used here so as to follow the method). The central
  region reaches the chest-wall plane (no shell there); the chest wall itself is not modelled.
* Tissues: Hammerstein et al. (Radiology 130:485, 1979) adipose and glandular tissue
  (``data/materials.json``: ``breast_adipose`` 0.93 g/cm³, ``breast_glandular`` 1.04 g/cm³).
  The glandularity :math:`g_w` is the glandular *mass* fraction of the central region (Dance
  1990); the mixture's mass fractions are :math:`g_w w_{gland} + (1 - g_w) w_{adip}` and its
  density follows from additive volumes, :math:`1/\rho = g_w/\rho_g + (1 - g_w)/\rho_a`.
* Below the breast, the support: a carbon-fibre plate (:data:`SUPPORT_MM`, 2 mm, as pure carbon
  at 1.6 g/cm³; our choice), 300 x 260 mm, reaching 10 mm behind the chest-wall plane. Photons
  that leave it downward enter the image receptor and are not followed (the receptor absorbs
  nearly all of them at these energies). The compression paddle, air, tube housing and patient
  body are not modelled: their scatter into the breast is neglected. The backscatter of the
  support into the breast is part of the result (``benchmarks/breast_dgn_mc.py`` records the
  change without it).
* Source: a point focus :data:`FOCUS_TO_SUPPORT_MM` (630 mm) above the support, vertically above
  the middle of the chest-wall edge, emitting uniformly into the solid angle of the breast
  (for the standard projection, exactly the cone onto the upper semicircle). For a
  tomosynthesis projection the focus turns by the tube angle :math:`\theta` about a pivot on
  the support's surface under the chest-wall edge, in the plane of the chest wall (our choice of
  pivot), and photons are emitted into a cone containing the whole breast.

Quantity
--------
The monoenergetic normalised glandular dose

.. math::

    DgN(E) = \frac{D_G}{K}, \qquad
    D_G = \frac{1}{V_c}\int_{V_c} \Phi_E(\mathbf r)\, E
          \left(\frac{\mu_{en}}{\rho}\right)_{g}\! dV

is the mean glandular dose, the glandular tissue's collision kerma averaged over the central
region (kerma approximation: the electrons' ranges are microns), divided by the incident air
kerma :math:`K = \Phi_{ref} E (\mu_{en}/\rho)_{air}` in the plane of the upper surface, 60 mm
from the chest wall on the midline, free in air, no backscatter (:mod:`beamaudit.model.
mammography`; the primary fluence there from a source of :math:`N` photons into solid angle
:math:`\Omega` is :math:`N/(\Omega r_{ref}^2)`). For a tomosynthesis projection :math:`K` is
that of the standard projection with the same tube output, so :math:`t(\theta) =
DgN_\theta / DgN_0` is the Dance et al. (2011) t-factor.

Estimators: the track-length estimator of the fluence in the central region (each flight
segment of length :math:`\ell` there adds :math:`w\,\ell\,E\,(\mu_{en}/\rho)_g`; it gives the
shipped numbers) and, as an independent check, the collision estimator of the energy imparted,
each interaction in the central region depositing the electron energy (photoabsorption:
:math:`E`; incoherent scattering: :math:`E - E'`) shared with the glandular tissue in the ratio
:math:`(\mu_{en}/\rho)_g / (\mu_{en}/\rho)_{mix}` (Dance 1990), divided by the central region's
mass. Both estimate the same expectation (to the 0.1 % by which xraylib's integrated
incoherent cross-section differs from the angular distribution's).

Transport
---------
Cross-sections and angular distributions from :mod:`beamaudit.model.photon_interactions`
(xraylib: photoabsorption, incoherent scattering with the incoherent scattering function,
coherent scattering with atomic form factors). Exact tracking across the region boundaries
(half cylinders and boxes are convex, so each boundary distance is a ray-interval computation).
Photoabsorption by implicit capture (the weight is multiplied by :math:`1 - \tau/\mu` at each
collision and the photon always scatters) with Russian roulette below weight
:data:`ROULETTE_WEIGHT`; ``analog=True`` plays absorption and scattering as they come, so each
history conserves energy exactly (the energy-conservation test). Fluorescence of the tissues'
elements (below 4 keV) is absorbed on the spot; photons below :data:`ENERGY_CUTOFF_KEV` deposit
their energy where they are. Statistics: per-history scores, standard uncertainty of the mean
from their spread (k = 1). numpy's PCG64 generator, seeded by the caller.

Every figure is an estimate for quality assurance and optimisation.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from beamaudit.model.attenuation import Material, mass_energy_absorption_cm2_g, material
from beamaudit.model.errors import ModelError
from beamaudit.model.mammography import (
    DEFAULT_FOCUS_TO_SUPPORT_MM,
    REFERENCE_POINT_FROM_CHEST_WALL_MM,
)
from beamaudit.model.photon_interactions import (
    PhotonInteractions,
    photon_interactions,
    scatter_directions,
)

__all__ = [
    "BREAST_RADIUS_MM",
    "ENERGY_CUTOFF_KEV",
    "FOCUS_TO_SUPPORT_MM",
    "ROULETTE_WEIGHT",
    "SHELL_MM",
    "SUPPORT_MM",
    "BreastModel",
    "GlandularDoseRun",
    "breast_tissue",
    "simulate_glandular_dose",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

BREAST_RADIUS_MM = 80.0
SHELL_MM = 5.0
SUPPORT_MM = 2.0
SUPPORT_MATERIAL = "carbon_fibre"
#: Support plate extent: x in [-150, 150] mm, y in [-10, 250] mm.
SUPPORT_HALF_WIDTH_MM = 150.0
SUPPORT_Y_MM = (-10.0, 250.0)
FOCUS_TO_SUPPORT_MM = DEFAULT_FOCUS_TO_SUPPORT_MM
ENERGY_CUTOFF_KEV = 2.0
ROULETTE_WEIGHT = 0.05
ROULETTE_SURVIVAL = 0.25
#: Photon energies the transport accepts, keV.
ENERGY_MIN_KEV = 5.0
ENERGY_MAX_KEV = 60.0
#: Step past a boundary, mm, so that the photon is classified on its far side.
_NUDGE_MM = 1e-6
_MAX_EVENTS = 100_000
# per-history score columns
_S_TRACK, _S_COLLISION, _S_BREAST, _S_SUPPORT, _S_UP, _S_DOWN = range(6)
_N_SCORES = 6


def breast_tissue(glandularity: float) -> Material:
    """The central region's tissue: glandular and adipose tissue mixed by mass.

    Parameters
    ----------
    glandularity : float
        Glandular mass fraction, 0-1.

    Returns
    -------
    Material
        Mass fractions mixed linearly; density from additive volumes.

    Raises
    ------
    ModelError
        Glandularity outside 0-1.
    """
    g = float(glandularity)
    if not (math.isfinite(g) and 0.0 <= g <= 1.0):
        raise ModelError(f"glandularity {glandularity} is outside 0-1 (a mass fraction)")
    gland, adip = material("breast_glandular"), material("breast_adipose")
    fractions: dict[int, float] = {}
    for m, share in ((gland, g), (adip, 1.0 - g)):
        for z, w in zip(m.atomic_numbers, m.mass_fractions, strict=True):
            fractions[z] = fractions.get(z, 0.0) + share * w
    density = 1.0 / (g / gland.density_g_cm3 + (1.0 - g) / adip.density_g_cm3)
    zs = tuple(sorted(fractions))
    return Material(
        key=f"breast_{100.0 * g:g}pc_glandular",
        label=f"breast tissue, {100.0 * g:g} % glandular by mass",
        atomic_numbers=zs,
        mass_fractions=tuple(fractions[z] for z in zs),
        density_g_cm3=density,
        source="Hammerstein et al. (1979) glandular and adipose tissue mixed by mass",
    )


@dataclass(frozen=True)
class BreastModel:
    """The compressed breast of the Dance method (module docstring).

    Parameters
    ----------
    thickness_mm : float
        Compressed thickness T, mm (larger than twice the shell).
    glandularity : float
        Glandular mass fraction of the central region, 0-1.
    radius_mm, shell_mm, support_mm, focus_to_support_mm : float
        Geometry (defaults: the module constants); ``support_mm`` 0 removes the support.
    """

    thickness_mm: float
    glandularity: float
    radius_mm: float = BREAST_RADIUS_MM
    shell_mm: float = SHELL_MM
    support_mm: float = SUPPORT_MM
    focus_to_support_mm: float = FOCUS_TO_SUPPORT_MM

    def __post_init__(self) -> None:
        for name in ("thickness_mm", "radius_mm", "focus_to_support_mm"):
            value = float(getattr(self, name))
            if not (math.isfinite(value) and value > 0.0):
                raise ModelError(f"breast model {name} must be positive, got {value}")
        for name in ("shell_mm", "support_mm"):
            value = float(getattr(self, name))
            if not (math.isfinite(value) and value >= 0.0):
                raise ModelError(f"breast model {name} must be >= 0, got {value}")
        if self.thickness_mm <= 2.0 * self.shell_mm or self.radius_mm <= self.shell_mm:
            raise ModelError("the breast must be thicker and wider than twice its shell")
        if self.focus_to_support_mm <= self.thickness_mm + 50.0:
            raise ModelError("the focus must be at least 50 mm above the breast")
        breast_tissue(self.glandularity)

    @property
    def central_volume_mm3(self) -> float:
        """Volume of the central region, mm³."""
        r = self.radius_mm - self.shell_mm
        return 0.5 * math.pi * r * r * (self.thickness_mm - 2.0 * self.shell_mm)

    def reference_distance_mm(self) -> float:
        """Focus (standard projection) to the air-kerma reference point, mm."""
        return math.hypot(
            self.focus_to_support_mm - self.thickness_mm, REFERENCE_POINT_FROM_CHEST_WALL_MM
        )


@dataclass(frozen=True)
class GlandularDoseRun:
    """Result of :func:`simulate_glandular_dose`, one value per energy.

    Attributes
    ----------
    energies_kev : ndarray
    dgn, dgn_uncertainty : ndarray
        :math:`D_G/K` from the track-length estimator and its standard uncertainty.
    dgn_collision, dgn_collision_uncertainty : ndarray
        The same from the collision estimator (a check).
    incident_kev, deposited_breast_kev, deposited_support_kev, escaped_up_kev,
    escaped_down_kev : ndarray
        Energy balance per emitted photon of each energy, keV (photons that miss the breast
        count as escaped downward).
    photons_per_energy, seed : int
    tube_angle_deg : float
    analog, scatter : bool
    collisions_per_photon : float
    seconds : float
    """

    energies_kev: FloatArray
    dgn: FloatArray
    dgn_uncertainty: FloatArray
    dgn_collision: FloatArray
    dgn_collision_uncertainty: FloatArray
    incident_kev: FloatArray
    deposited_breast_kev: FloatArray
    deposited_support_kev: FloatArray
    escaped_up_kev: FloatArray
    escaped_down_kev: FloatArray
    photons_per_energy: int
    seed: int
    tube_angle_deg: float
    analog: bool
    scatter: bool
    collisions_per_photon: float
    seconds: float


# ---- geometry ---------------------------------------------------------------------------------
def _slab(
    lo: FloatArray, hi: FloatArray, p: FloatArray, d: FloatArray, a: float, b: float
) -> tuple[FloatArray, FloatArray]:
    """Intersect the parameter interval [lo, hi] with a <= p + t d <= b."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ta = (a - p) / d
        tb = (b - p) / d
    flat = d == 0.0
    inside = (p >= a) & (p <= b)
    lo = np.where(flat, np.where(inside, lo, np.inf), np.maximum(lo, np.minimum(ta, tb)))
    hi = np.where(flat, np.where(inside, hi, -np.inf), np.minimum(hi, np.maximum(ta, tb)))
    return lo, hi


def _half_cylinder_span(
    p: FloatArray, d: FloatArray, radius: float, z0: float, z1: float
) -> tuple[FloatArray, FloatArray]:
    """Ray parameters [t_in, t_out] inside {x²+y² <= r², y >= 0, z0 <= z <= z1} (empty if
    t_in >= t_out)."""
    n = p.shape[0]
    lo, hi = _slab(np.full(n, -np.inf), np.full(n, np.inf), p[:, 2], d[:, 2], z0, z1)
    lo, hi = _slab(lo, hi, p[:, 1], d[:, 1], 0.0, np.inf)
    a = d[:, 0] ** 2 + d[:, 1] ** 2
    half_b = p[:, 0] * d[:, 0] + p[:, 1] * d[:, 1]
    c = p[:, 0] ** 2 + p[:, 1] ** 2 - radius * radius
    disc = half_b * half_b - a * c
    vertical = a < 1e-24
    root = np.sqrt(np.maximum(disc, 0.0))
    safe_a = np.where(vertical, 1.0, a)
    t1 = np.where(vertical, -np.inf, (-half_b - root) / safe_a)
    t2 = np.where(vertical, np.inf, (-half_b + root) / safe_a)
    missed = np.where(vertical, c > 0.0, disc < 0.0)
    lo = np.maximum(lo, t1)
    hi = np.where(missed, -np.inf, np.minimum(hi, t2))
    return lo, hi


class _Geometry:
    """The breast, its central region and the support, with region look-up by position."""

    CENTRAL, SHELL, SUPPORT, OUTSIDE = 0, 1, 2, 3

    def __init__(self, model: BreastModel) -> None:
        self.t = model.thickness_mm
        self.r = model.radius_mm
        self.s = model.shell_mm
        self.rc = model.radius_mm - model.shell_mm
        self.support = model.support_mm

    def region(self, p: FloatArray) -> IntArray:
        x, y, z = p[:, 0], p[:, 1], p[:, 2]
        rho2 = x * x + y * y
        front = y >= 0.0
        breast = front & (z >= 0.0) & (z <= self.t) & (rho2 <= self.r * self.r)
        central = front & (z >= self.s) & (z <= self.t - self.s) & (rho2 <= self.rc * self.rc)
        support = (
            (self.support > 0.0)
            & (np.abs(x) <= SUPPORT_HALF_WIDTH_MM)
            & (y >= SUPPORT_Y_MM[0])
            & (y <= SUPPORT_Y_MM[1])
            & (z >= -self.support)
            & (z <= 0.0)
        )
        return np.where(
            central, self.CENTRAL, np.where(breast, self.SHELL, np.where(support, self.SUPPORT, 3))
        ).astype(np.int64)

    def breast_span(self, p: FloatArray, d: FloatArray) -> tuple[FloatArray, FloatArray]:
        return _half_cylinder_span(p, d, self.r, 0.0, self.t)

    def central_span(self, p: FloatArray, d: FloatArray) -> tuple[FloatArray, FloatArray]:
        return _half_cylinder_span(p, d, self.rc, self.s, self.t - self.s)

    def support_span(self, p: FloatArray, d: FloatArray) -> tuple[FloatArray, FloatArray]:
        n = p.shape[0]
        if self.support <= 0.0:
            return np.full(n, np.inf), np.full(n, -np.inf)
        lo, hi = np.full(n, -np.inf), np.full(n, np.inf)
        lo, hi = _slab(lo, hi, p[:, 0], d[:, 0], -SUPPORT_HALF_WIDTH_MM, SUPPORT_HALF_WIDTH_MM)
        lo, hi = _slab(lo, hi, p[:, 1], d[:, 1], *SUPPORT_Y_MM)
        return _slab(lo, hi, p[:, 2], d[:, 2], -self.support, 0.0)

    def distance_to_boundary(
        self, p: FloatArray, d: FloatArray, region: IntArray
    ) -> tuple[FloatArray, FloatArray]:
        """Distance to the next boundary along d (inf: none ahead) and that of the exit."""

        def ahead(lo: FloatArray, hi: FloatArray) -> FloatArray:
            return np.where((lo < hi) & (lo > 0.0), lo, np.inf)

        c_lo, c_hi = self.central_span(p, d)
        b_lo, b_hi = self.breast_span(p, d)
        s_lo, s_hi = self.support_span(p, d)
        out = np.full(p.shape[0], np.inf)
        out = np.where(region == self.CENTRAL, c_hi, out)
        out = np.where(region == self.SHELL, np.minimum(b_hi, ahead(c_lo, c_hi)), out)
        out = np.where(region == self.SUPPORT, np.minimum(s_hi, ahead(b_lo, b_hi)), out)
        out = np.where(
            region == self.OUTSIDE, np.minimum(ahead(b_lo, b_hi), ahead(s_lo, s_hi)), out
        )
        return np.maximum(out, 0.0), b_lo


# ---- source -----------------------------------------------------------------------------------
def _focus(model: BreastModel, tube_angle_deg: float) -> FloatArray:
    angle = math.radians(tube_angle_deg)
    f = model.focus_to_support_mm
    return np.array([f * math.sin(angle), 0.0, f * math.cos(angle)])


def _source_cone(model: BreastModel, focus: FloatArray) -> tuple[FloatArray, float]:
    """Axis and cosine of the half angle of a cone from ``focus`` holding the whole breast."""
    phi = np.linspace(0.0, math.pi, 181)
    rim = np.concatenate(
        [
            np.column_stack(
                (model.radius_mm * np.cos(phi), model.radius_mm * np.sin(phi), np.full_like(phi, z))
            )
            for z in (0.0, model.thickness_mm)
        ]
    )
    centre = np.array([0.0, 0.45 * model.radius_mm, 0.5 * model.thickness_mm])
    axis = centre - focus
    axis /= np.linalg.norm(axis)
    to_rim = rim - focus
    cosines = to_rim @ axis / np.linalg.norm(to_rim, axis=1)
    # margin: the rim is sampled every degree; 0.999 of the smallest cosine covers the chords
    return axis, float(cosines.min()) * 0.999


def _emit(
    n: int,
    model: BreastModel,
    tube_angle_deg: float,
    rng: np.random.Generator,
) -> tuple[FloatArray, FloatArray, float]:
    """Start points (on the focus) and directions of n photons, and the solid angle emitted into.

    Standard projection: uniform in solid angle on the cone onto the upper semicircle
    (cos theta uniform in [cos theta_max, 1], azimuth in [0, pi]); the solid angle is
    pi (1 - h / sqrt(h² + R²)), h the focus height above the upper surface. Otherwise uniform
    in a cone holding the whole breast.
    """
    focus = _focus(model, tube_angle_deg)
    if tube_angle_deg == 0.0:
        h = model.focus_to_support_mm - model.thickness_mm
        cos_max = h / math.hypot(h, model.radius_mm)
        cos_t = rng.uniform(cos_max, 1.0, n)
        azimuth = rng.uniform(0.0, math.pi, n)
        sin_t = np.sqrt(1.0 - cos_t * cos_t)
        d = np.column_stack((sin_t * np.cos(azimuth), sin_t * np.sin(azimuth), -cos_t))
        solid_angle = math.pi * (1.0 - cos_max)
    else:
        axis, cos_beta = _source_cone(model, focus)
        cos_t = rng.uniform(cos_beta, 1.0, n)
        azimuth = rng.uniform(0.0, 2.0 * math.pi, n)
        d = scatter_directions(np.tile(axis, (n, 1)), cos_t, azimuth)
        solid_angle = 2.0 * math.pi * (1.0 - cos_beta)
    return np.tile(focus, (n, 1)), d, solid_angle


# ---- transport --------------------------------------------------------------------------------
@dataclass
class _Media:
    """Interaction data of the three media, stacked for look-up by region."""

    data: tuple[PhotonInteractions, PhotonInteractions, PhotonInteractions]
    gland_ratio: FloatArray  # (mu_en/rho)_glandular / (mu_en/rho)_mixture on the grid
    gland_mu_en: FloatArray  # (mu_en/rho)_glandular on the grid

    def mu(self, region: IntArray, e: FloatArray) -> FloatArray:
        out = np.zeros(e.size)
        for r, item in enumerate(self.data):
            sel = region == r
            if np.any(sel):
                out[sel] = item.at(item.mu_per_mm, e[sel])
        return out


def _media(model: BreastModel) -> _Media:
    mix = breast_tissue(model.glandularity)
    data = (
        photon_interactions(mix, max_kev=ENERGY_MAX_KEV),
        photon_interactions("breast_adipose", max_kev=ENERGY_MAX_KEV),
        photon_interactions(SUPPORT_MATERIAL, max_kev=ENERGY_MAX_KEV),
    )
    gland = photon_interactions("breast_glandular", max_kev=ENERGY_MAX_KEV)
    return _Media(
        data=data,
        gland_ratio=gland.mu_en_cm2_g / data[0].mu_en_cm2_g,
        gland_mu_en=gland.mu_en_cm2_g,
    )


def _transport(
    e: FloatArray,
    model: BreastModel,
    media: _Media,
    *,
    tube_angle_deg: float,
    analog: bool,
    scatter: bool,
    rng: np.random.Generator,
) -> tuple[FloatArray, float, int]:
    """Follow one batch of photons of energies ``e``; per-history scores, solid angle, events."""
    n = e.size
    geometry = _Geometry(model)
    scores = np.zeros((n, _N_SCORES))
    pos, d, solid_angle = _emit(n, model, tube_angle_deg, rng)
    e = e.copy()
    # the first flight: from the focus to the breast (the source emits only toward it)
    b_lo, b_hi = geometry.breast_span(pos, d)
    hits = (b_lo < b_hi) & (b_hi > 0.0)
    scores[~hits, _S_DOWN] = e[~hits]  # missed the breast: to the receptor (oblique cones)
    ids = np.flatnonzero(hits)
    pos = pos[ids] + (b_lo[ids] + _NUDGE_MM)[:, None] * d[ids]
    d, e = d[ids], e[ids]
    w = np.ones(ids.size)
    region = geometry.region(pos)
    tau = -np.log(rng.random(ids.size))
    data = media.data
    events = 0
    for _ in range(_MAX_EVENTS):
        if ids.size == 0:
            break
        events += ids.size
        mu = media.mu(region, e)
        boundary, _ = geometry.distance_to_boundary(pos, d, region)
        with np.errstate(divide="ignore"):
            flight = np.where(mu > 0.0, tau / mu, np.inf)
        collide = flight < boundary
        step = np.minimum(flight, boundary)
        escape = ~collide & ~np.isfinite(boundary)
        # track-length estimator in the central region
        central = region == _Geometry.CENTRAL
        if np.any(central):
            c = np.flatnonzero(central)
            mu_en_g = data[0].at(media.gland_mu_en, e[c])
            scores[ids[c], _S_TRACK] += w[c] * step[c] * e[c] * mu_en_g
        if np.any(escape):
            up = escape & (d[:, 2] > 0.0)
            scores[ids[up], _S_UP] += w[up] * e[up]
            down = escape & ~up
            scores[ids[down], _S_DOWN] += w[down] * e[down]
        cross = ~collide & ~escape
        if np.any(cross):
            k = np.flatnonzero(cross)
            pos[k] += (boundary[k] + _NUDGE_MM)[:, None] * d[k]
            tau[k] -= mu[k] * boundary[k]
            region[k] = geometry.region(pos[k])
        keep = ~escape
        if np.any(collide):
            k = np.flatnonzero(collide)
            pos[k] += flight[k][:, None] * d[k]
            alive = _collide(k, ids, pos, d, e, w, region, scores, media, analog, scatter, rng)
            keep[k] = alive
            tau[k] = -np.log(rng.random(k.size))
        sel = np.flatnonzero(keep)
        ids, pos, d, e, w, region, tau = (
            ids[sel],
            pos[sel],
            d[sel],
            e[sel],
            w[sel],
            region[sel],
            tau[sel],
        )
    else:
        raise ModelError(f"photons still alive after {_MAX_EVENTS} events")
    return scores, solid_angle, events


def _deposit(
    k: IntArray,
    ids: IntArray,
    region: IntArray,
    amount: FloatArray,
    e_before: FloatArray,
    scores: FloatArray,
    media: _Media,
) -> None:
    """Book energy imparted at collisions ``k`` (before-collision energies ``e_before``)."""
    reg = region[k]
    in_breast = reg <= _Geometry.SHELL
    scores[ids[k[in_breast]], _S_BREAST] += amount[in_breast]
    in_support = reg == _Geometry.SUPPORT
    scores[ids[k[in_support]], _S_SUPPORT] += amount[in_support]
    central = reg == _Geometry.CENTRAL
    if np.any(central):
        ratio = media.data[0].at(media.gland_ratio, e_before[central])
        scores[ids[k[central]], _S_COLLISION] += amount[central] * ratio


def _collide(
    k: IntArray,
    ids: IntArray,
    pos: FloatArray,
    d: FloatArray,
    e: FloatArray,
    w: FloatArray,
    region: IntArray,
    scores: FloatArray,
    media: _Media,
    analog: bool,
    scatter: bool,
    rng: np.random.Generator,
) -> npt.NDArray[np.bool_]:
    """Interact at positions ``k`` (in place); return which of them go on."""
    e_in = e[k].copy()
    reg = region[k]
    photo = np.empty(k.size)
    coherent_fraction = np.empty(k.size)
    for r, item in enumerate(media.data):
        sel = reg == r
        if np.any(sel):
            photo[sel] = item.at(item.photo_fraction, e_in[sel])
            coherent_fraction[sel] = item.at(item.coherent_fraction, e_in[sel])
    alive = np.ones(k.size, dtype=bool)
    if not scatter:
        _deposit(k, ids, region, w[k] * e_in, e_in, scores, media)
        return ~alive
    if analog:
        absorbed = rng.random(k.size) < photo
        _deposit(
            k[absorbed], ids, region, w[k][absorbed] * e_in[absorbed], e_in[absorbed], scores, media
        )
        alive &= ~absorbed
    else:
        _deposit(k, ids, region, w[k] * photo * e_in, e_in, scores, media)
        w[k] *= 1.0 - photo
    coherent = rng.random(k.size) < coherent_fraction
    t = np.zeros(k.size)
    for r, item in enumerate(media.data):
        for is_coh in (True, False):
            sel = alive & (reg == r) & (coherent == is_coh)
            if np.any(sel):
                t[sel] = item.sample_t(e_in[sel], rng, coherent=is_coh)
    e_out = np.where(coherent, e_in, e_in / (1.0 + e_in / 510.99895 * t))
    inc = alive & ~coherent
    _deposit(k[inc], ids, region, w[k][inc] * (e_in - e_out)[inc], e_in[inc], scores, media)
    e[k] = e_out
    d[k] = scatter_directions(d[k], 1.0 - t, rng.uniform(0.0, 2.0 * math.pi, k.size))
    cold = alive & (e_out < ENERGY_CUTOFF_KEV)
    if np.any(cold):
        _deposit(k[cold], ids, region, w[k][cold] * e_out[cold], e_out[cold], scores, media)
        alive &= ~cold
    if not analog:
        light = alive & (w[k] < ROULETTE_WEIGHT)
        if np.any(light):
            survive = rng.random(k.size) < ROULETTE_SURVIVAL
            w[k] = np.where(light & survive, w[k] / ROULETTE_SURVIVAL, w[k])
            alive &= ~light | survive
    return alive


def simulate_glandular_dose(
    energies_kev: npt.ArrayLike,
    model: BreastModel,
    *,
    photons_per_energy: int,
    seed: int,
    tube_angle_deg: float = 0.0,
    analog: bool = False,
    scatter: bool = True,
    batch: int = 400_000,
) -> GlandularDoseRun:
    """Normalised glandular dose of monoenergetic beams on one breast, by Monte Carlo.

    All energies are followed together (one vectorised batch holds photons of every energy),
    each scored on its own.

    Parameters
    ----------
    energies_kev : array_like
        Photon energies, keV (5-60).
    model : BreastModel
    photons_per_energy : int
        Histories per energy.
    seed : int
        Seed of numpy's PCG64 generator.
    tube_angle_deg : float
        Tube angle of a tomosynthesis projection, degrees (-45 to 45; 0 the standard one).
    analog : bool
        Analog absorption (exact energy balance per history) instead of implicit capture.
    scatter : bool
        False: every interaction absorbs (the pure-absorber limit, primary photons only).
    batch : int
        Histories transported together.

    Returns
    -------
    GlandularDoseRun

    Raises
    ------
    ModelError
        Energies, counts or angle out of range.
    """
    energies = np.atleast_1d(np.asarray(energies_kev, dtype=np.float64))
    if energies.ndim != 1 or energies.size == 0:
        raise ModelError("energies must be a non-empty 1-d array")
    if not np.all((energies >= ENERGY_MIN_KEV) & (energies <= ENERGY_MAX_KEV)):
        raise ModelError(f"photon energies must lie in {ENERGY_MIN_KEV:g}-{ENERGY_MAX_KEV:g} keV")
    if photons_per_energy < 2 or batch < 1:
        raise ModelError("need at least 2 photons per energy and a positive batch")
    if not (math.isfinite(tube_angle_deg) and abs(tube_angle_deg) <= 45.0):
        raise ModelError(f"tube angle {tube_angle_deg} degrees is outside -45 to 45")
    started = time.perf_counter()
    media = _media(model)
    rng = np.random.default_rng(seed)
    n_e = energies.size
    sums = np.zeros((n_e, _N_SCORES))
    squares = np.zeros((n_e, _N_SCORES))
    per_batch = max(1, batch // n_e)
    solid_angle = math.nan
    events = 0
    done = 0
    while done < photons_per_energy:
        m = min(per_batch, photons_per_energy - done)
        index = np.repeat(np.arange(n_e), m)
        scores, solid_angle, batch_events = _transport(
            energies[index],
            model,
            media,
            tube_angle_deg=tube_angle_deg,
            analog=analog,
            scatter=scatter,
            rng=rng,
        )
        events += batch_events
        for col in range(_N_SCORES):
            sums[:, col] += np.bincount(index, scores[:, col], minlength=n_e)
            squares[:, col] += np.bincount(index, scores[:, col] ** 2, minlength=n_e)
        done += m
    n = photons_per_energy
    mean = sums / n
    sem = np.sqrt(np.maximum(squares / n - mean**2, 0.0) / (n - 1))
    # D_G / K with K = E (mu_en/rho)_air / (Omega r_ref²) per photon (module docstring); the
    # track-length score is in keV mm cm²/g, the collision score in keV
    r_ref = model.reference_distance_mm()
    kerma = energies * mass_energy_absorption_cm2_g("air", energies) / (solid_angle * r_ref**2)
    volume = model.central_volume_mm3
    density = breast_tissue(model.glandularity).density_g_cm3
    track = 1.0 / (volume * kerma)  # 100 / V [keV/g] over 100 K [keV/g]
    collision = 10.0 / (density * volume * kerma)  # 1000 / (rho V) over 100 K
    return GlandularDoseRun(
        energies_kev=energies,
        dgn=mean[:, _S_TRACK] * track,
        dgn_uncertainty=sem[:, _S_TRACK] * track,
        dgn_collision=mean[:, _S_COLLISION] * collision,
        dgn_collision_uncertainty=sem[:, _S_COLLISION] * collision,
        incident_kev=energies.copy(),
        deposited_breast_kev=mean[:, _S_BREAST],
        deposited_support_kev=mean[:, _S_SUPPORT],
        escaped_up_kev=mean[:, _S_UP],
        escaped_down_kev=mean[:, _S_DOWN],
        photons_per_energy=n,
        seed=seed,
        tube_angle_deg=float(tube_angle_deg),
        analog=analog,
        scatter=scatter,
        collisions_per_photon=events / (n * n_e),
        seconds=time.perf_counter() - started,
    )
