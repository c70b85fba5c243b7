"""A synthetic halo box and galaxy box without an N-body run.

Recipe (all draws from the passed-in generator):

1. Linear power spectrum P(k, z) (EH98 no-wiggle, σ₈-normalised, grown with D(z)) and one
   Gaussian field δ_G on an N³ grid of side L (:mod:`.lognormal`).
2. Halo masses: the total count is Poisson with mean L³ ∫ dn/dlnM dlnM over
   [m_min, m_max] (Tinker et al. 2008, Δ = 200m), masses by inverse-CDF sampling of dn/dlnM.
   m_max is where fewer than 10⁻³ halos are expected above it in the box.
3. Positions: halos are split into log-mass bins (``mass_bin_dex``).  A bin with Tinker et al.
   2010 bias b (mean over its halos) is Poisson-sampled from a lognormal density
   ρ_h ∝ exp(g_b), where g_b is a Gaussian field drawn from the *same* white noise as δ_G
   with the spectrum that makes ρ_h's own power spectrum exactly b² P_s(k) on the grid
   (:func:`.lognormal.lognormal_filter`; Coles & Jones 1991, MNRAS 248, 1; the construction
   of lognormal mocks, e.g. Agrawal et al. 2017, JCAP 10, 003).  P_s is the linear spectrum
   smoothed with a Gaussian of radius R_L/√5 (R_L the bin's Lagrangian radius; R/√5 gives
   the Gaussian the top-hat's second moment).  Why: (i) exp(·) keeps the density positive,
   unlike b δ; (ii) the halo power is b² P on large scales, so b is the linear bias of the
   bin exactly, while a naive exp(b δ_G) would add a lognormal excess that raises the
   apparent bias by ~15 % at k ≈ 0.1 h/Mpc; (iii) halos are defined by collapse of their
   Lagrangian patch, and bias refers to the field smoothed on that scale (Bardeen et al.
   1986, ApJ 304, 15; Mo & White 1996, MNRAS 282, 347); smoothing there also keeps rare
   massive halos from piling up in single cells.  The cost is power suppressed by
   exp(−k² R²) at k ≳ 1/R for the most massive bins.  Sharing the white noise makes all bins
   (and the velocities) trace the same large-scale structure.  Within a cell positions are
   uniform.
4. Velocities: linear theory from the unsmoothed linear field δ_G, v = i a H f δ̃ k/k²,
   interpolated to the halo positions with cloud-in-cell.  No extra small-scale dispersion
   is added; virial motions of satellites come from the HOD step.
5. Concentrations: Duffy et al. 2008 c(M) with a lognormal scatter of ``conc_scatter_dex``
   (0.1 dex, close to the scatter quoted for relaxed halos there; from memory).  A toy
   assembly-bias ingredient: the scatter is correlated (coefficient ``secondary_corr``)
   with the halo's local smoothed density, so that at fixed mass more concentrated halos sit
   in denser regions, as found in N-body work (Wechsler et al. 2006, ApJ 652, 71; Gao,
   Springel & White 2005, MNRAS 363, L66).  The concentration is also stored as the halo
   property "secondary", so a decorated HOD changes the clustering of this box.

6. Matter (only when asked for, from its own generator): particles of mass ρ̄/n in NFW
   profiles around the halos and, for the rest of the mass, Poisson-sampled from the
   unbiased lognormal field of the same white noise (:func:`synthetic_matter`).

Units: Mpc/h, km/s, Msun/h.
"""

from __future__ import annotations

import logging
from functools import partial
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..catalog import GalaxyBox, MatterParticles
from ..cosmology import Cosmology
from ..errors import InputError
from ..periodic import wrap_into_box
from .halos import HaloCatalog
from .hod import HODModel
from .lognormal import (
    check_grid,
    cic_interpolate,
    default_grid,
    k_magnitude,
    linear_velocity,
    lognormal_filter,
    power_amplitude,
    sample_in_cells,
    to_real,
    white_noise_k,
)
from .massfunction import LOG_M_RANGE, HaloMassFunction
from .nfw import (
    concentration_power_law,
    isotropic_directions,
    sample_nfw_radii,
    virial_radius,
)
from .populate import populate
from .power import LinearPower
from .units import mean_matter_density

log = logging.getLogger(__name__)

#: Largest halo mass ever drawn [Msun/h].
M_CEILING = 10.0 ** (LOG_M_RANGE[1] - 0.1)
#: Smallest m_min accepted [Msun/h] (σ(M) is tabulated down to 1e8).
M_FLOOR = 1e9


def _mass_upper_limit(hmf: HaloMassFunction, m_min: float, volume: float) -> float:
    lnm, cum = hmf.cumulative_table(m_min, M_CEILING)
    above = (cum[-1] - cum) * volume
    i = np.flatnonzero(above < 1e-3)
    return float(np.exp(lnm[i[0]])) if i.size else M_CEILING


def hod_number_density(model: HODModel, mass_function: HaloMassFunction, m_min: float,
                       m_max: float) -> NDArray[np.float64]:
    """HOD-integrated galaxy density per threshold, ∫ dn/dlnM (<N_cen> + <N_sat>) dlnM.

    Parameters
    ----------
    m_min, m_max : float
        Halo mass range [Msun/h] of the integral.

    Returns
    -------
    array (K,)
        Number density (h/Mpc)³ of each threshold sample, faintest first.  Assembly bias
        conserves the mean at fixed mass, so it does not enter.
    """
    lnm = np.linspace(np.log(m_min), np.log(m_max), 4000)
    mass = np.exp(lnm)
    cen, sat = model.mean_occupations(mass)
    return np.trapezoid(mass_function.dn_dlnm(mass) * (cen + sat), lnm, axis=1)


def synthetic_threshold_densities(redshift: float, cosmology: Cosmology, sigma8: float,
                                  n_s: float, omega_b: float,
                                  hod_model: HODModel) -> NDArray[np.float64]:
    """Expected galaxy density of each threshold in a synthetic box [(h/Mpc)³].

    The mass function the box draws its halos from, integrated against the HOD from the
    mass floor :func:`synthetic_halos_for` uses; nothing is drawn.
    """
    hmf = HaloMassFunction(LinearPower(cosmology, sigma8=sigma8, n_s=n_s, omega_b=omega_b),
                           redshift)
    m_min = max(hod_model.minimum_mass(1e-3), M_FLOOR)
    return hod_number_density(hod_model, hmf, m_min, M_CEILING)


def make_synthetic_halos(box_size: float, redshift: float, cosmology: Cosmology,
                         sigma8: float, n_s: float, omega_b: float, rng: np.random.Generator,
                         grid: int | None = None, m_min: float = 1e11, *,
                         mass_bin_dex: float = 0.25, secondary_corr: float = 0.5,
                         conc_scatter_dex: float = 0.1, matter_density: float = 0.0,
                         matter_rng: np.random.Generator | None = None,
                         workers: int | None = None) -> HaloCatalog:
    """Lognormal halo box with Tinker 2008 abundances and Tinker 2010 bias (module docstring).

    Parameters
    ----------
    box_size : float
        Periodic box side, Mpc/h.
    redshift : float
        Snapshot redshift.
    cosmology : Cosmology
        Background (Ω_m; growth).
    sigma8, n_s, omega_b : float
        Linear power spectrum normalisation, tilt and baryon density.
    rng : numpy.random.Generator
        Source of every random draw.
    grid : int, optional
        Cells per side (even); default cells of ≈ 2 Mpc/h, at most 256.
    m_min : float
        Smallest halo mass drawn, Msun/h.
    mass_bin_dex : float
        Width of the log-mass bins that share one biased density field.
    secondary_corr : float
        Correlation of the concentration scatter with local density, in [−1, 1].
    conc_scatter_dex : float
        Scatter of log10 c at fixed mass.
    matter_density : float
        Matter particles per (Mpc/h)³ to draw as well (0: none; see :func:`synthetic_matter`).
    matter_rng : numpy.random.Generator, optional
        Source of the matter particles' draws (separate, so the halos do not depend on
        whether matter is drawn); needed when ``matter_density`` > 0.
    workers : int, optional
        FFT threads.

    Returns
    -------
    HaloCatalog
        With concentration, rvir [Mpc/h], the property "secondary" (= concentration) and,
        with ``matter_density`` > 0, ``matter``.
    """
    grid = default_grid(box_size) if grid is None else grid
    check_grid(box_size, grid)
    problems = []
    if not (np.isfinite(m_min) and M_FLOOR <= m_min < 1e15):
        problems.append(f"m_min = {m_min!r}: expected {M_FLOOR:.0e} <= m_min < 1e15 Msun/h")
    if not 0.01 <= mass_bin_dex <= 1.0:
        problems.append(f"mass_bin_dex = {mass_bin_dex!r}: expected 0.01 .. 1 dex")
    if not -1.0 <= secondary_corr <= 1.0:
        problems.append(f"secondary_corr = {secondary_corr!r}: expected -1 .. 1")
    if not 0.0 <= conc_scatter_dex <= 0.5:
        problems.append(f"conc_scatter_dex = {conc_scatter_dex!r}: expected 0 .. 0.5 dex")
    if not (np.isfinite(matter_density) and matter_density >= 0):
        problems.append(f"matter_density = {matter_density!r}: expected particles per "
                        "(Mpc/h)³ ≥ 0")
    elif matter_density > 0 and matter_rng is None:
        problems.append("matter_density > 0 needs matter_rng")
    if problems:
        raise InputError("; ".join(problems), problems)

    power = LinearPower(cosmology, sigma8=sigma8, n_s=n_s, omega_b=omega_b)
    hmf = HaloMassFunction(power, redshift)
    volume = box_size**3
    m_max = _mass_upper_limit(hmf, m_min, volume)
    lnm_tab, cum = hmf.cumulative_table(m_min, m_max)
    n_halo = int(rng.poisson(cum[-1] * volume))
    if n_halo == 0:
        raise InputError(f"no halos above m_min = {m_min:.3g} Msun/h expected in a "
                         f"{box_size:g} Mpc/h box")
    mass = np.exp(np.interp(rng.random(n_halo) * cum[-1], cum, lnm_tab))
    log.info("synthetic box: L = %g Mpc/h, grid %d^3, %d halos in [%.3g, %.3g] Msun/h",
             box_size, grid, n_halo, m_min, m_max)

    noise_k = white_noise_k(grid, rng, workers)
    amp = power_amplitude(grid, box_size, partial(power.power, z=redshift))
    k2 = k_magnitude(grid, box_size) ** 2

    position = np.empty((n_halo, 3))
    env = np.empty(n_halo)          # standardised local log-density, per mass bin
    log_bins = np.floor((np.log10(mass) - np.log10(m_min)) / mass_bin_dex).astype(np.int64)
    order = np.argsort(log_bins, kind="stable")
    bounds = np.flatnonzero(np.r_[True, np.diff(log_bins[order]) != 0, True])
    for start, stop in zip(bounds[:-1], bounds[1:], strict=True):
        idx = order[start:stop]
        bias = float(np.mean(hmf.bias(mass[idx])))
        radius = float(power.lagrangian_radius(np.median(mass[idx]))) / np.sqrt(5.0)
        amp2 = amp**2 * np.exp(-k2 * np.float32(radius**2))
        filt, _ = lognormal_filter(amp2, bias, grid, workers)
        del amp2
        g = to_real(noise_k * filt, grid, workers=workers)
        del filt
        # exp(g − max) keeps the weights finite; the mean is fixed by normalisation
        g -= g.max()
        weights = np.exp(g)        # float32 is enough: the CDF is summed in float64
        pos, cells = sample_in_cells(weights, idx.size, box_size, rng)
        del weights
        position[idx] = pos
        local = g.ravel()[cells].astype(np.float64)   # shifted by a constant: harmless
        del g
        spread = local.std()
        env[idx] = (local - local.mean()) / spread if idx.size > 1 and spread > 0 else 0.0

    matter_weights = None
    if matter_density > 0:
        # the unbiased lognormal matter field of the same white noise (bias 1, no smoothing
        # beyond the grid): its power spectrum is the linear one on the grid
        filt, _ = lognormal_filter(amp**2, 1.0, grid, workers)
        g = to_real(noise_k * filt, grid, workers=workers)
        del filt
        g -= g.max()
        matter_weights = np.exp(g)
        del g

    cosmo_a = 1.0 / (1.0 + redshift)
    factor = float(cosmo_a * cosmology.hubble(redshift) * cosmology.growth_rate(redshift))
    noise_k *= amp
    vel_grid = linear_velocity(noise_k, box_size, factor, workers)
    del noise_k
    velocity = cic_interpolate(vel_grid, position, box_size)
    del vel_grid

    scatter = (secondary_corr * env
               + np.sqrt(1.0 - secondary_corr**2) * rng.standard_normal(n_halo))
    conc = concentration_power_law(mass, redshift) * 10.0 ** (conc_scatter_dex * scatter)
    conc = np.maximum(conc, 1.5)
    meta: dict[str, Any] = {
        "BOXMADE": "synthetic lognormal halos (conecheck)", "SIGMA8": float(sigma8),
        "NS": float(n_s), "OMEGAB": float(omega_b), "OMEGAM": float(cosmology.omega_m),
        "GRID": int(grid), "MMIN": float(m_min), "MMAX": float(m_max)}
    halos = HaloCatalog(position, velocity, mass, float(box_size), float(redshift),
                        concentration=conc, rvir=virial_radius(mass, cosmology.omega_m),
                        halo_id=np.arange(n_halo, dtype=np.int64),
                        properties={"secondary": conc.copy()}, meta=meta)
    if matter_weights is not None:
        halos.matter = synthetic_matter(halos, matter_weights, matter_density, cosmology,
                                        matter_rng)
    return halos


def synthetic_matter(halos: HaloCatalog, field_weights: NDArray[np.floating],
                     density: float, cosmology: Cosmology, rng: np.random.Generator
                     ) -> MatterParticles:
    """Matter particles of a synthetic box: halos as NFW profiles, the rest as a field.

    The mean comoving matter density ρ̄ = Ω_m ρ_crit fixes the particle mass
    m_p = ρ̄ / ``density``. Each halo of mass M gets Poisson(M/m_p) particles drawn from its
    truncated NFW profile (Navarro, Frenk & White 1997; its concentration and r_vir); the
    mass outside halos, ρ̄L³ − ΣM, is Poisson-sampled from the lognormal matter field
    ``field_weights`` (cell weights of the grid). The lensing signal around the galaxies
    thus has a one-halo term from their own halos and a two-halo term from the field.

    Parameters
    ----------
    halos : HaloCatalog
        With concentration and rvir [Mpc/h].
    field_weights : ndarray, shape (N, N, N)
        Relative matter density per grid cell.
    density : float
        Particles per (Mpc/h)³.
    cosmology : Cosmology
        For Ω_m.
    rng : numpy.random.Generator
        Source of the draws.
    """
    L = float(halos.box_size)
    m_p = mean_matter_density(cosmology.omega_m) / density
    per_halo = rng.poisson(halos.mass / m_p)
    host = np.repeat(np.arange(len(halos)), per_halo)
    conc = np.asarray(halos.concentration)[host]
    r = sample_nfw_radii(conc, rng) * np.asarray(halos.rvir)[host]
    in_halos = halos.position[host] + r[:, None] * isotropic_directions(host.size, rng)
    outside = max(density * L**3 - float(halos.mass.sum()) / m_p, 0.0)
    field, _ = sample_in_cells(field_weights, int(rng.poisson(outside)), L, rng)
    pos = wrap_into_box(np.vstack([in_halos, field]), L)
    log.info("synthetic matter: %d particles of %.3g Msun/h (%d in halos)", len(pos), m_p,
             host.size)
    return MatterParticles(pos, float(m_p), L, {"MATTER": "synthetic: NFW halos + field",
                                                "NPART": int(len(pos))})


def synthetic_halos_for(box_size: float, redshift: float, cosmology: Cosmology,
                        sigma8: float, n_s: float, omega_b: float, hod_model: HODModel,
                        rng: np.random.Generator, grid: int | None = None,
                        m_min: float | None = None, **halo_options: Any) -> HaloCatalog:
    """The synthetic halos :func:`make_synthetic_box` populates, down to the HOD's mass floor.

    ``m_min`` [Msun/h] defaults to :meth:`HODModel.minimum_mass` (where the faintest
    threshold's mean occupation falls below 10⁻³). Further keyword arguments go to
    :func:`make_synthetic_halos`; box_size [Mpc/h].
    """
    if m_min is None:
        m_min = max(hod_model.minimum_mass(1e-3), M_FLOOR)
    return make_synthetic_halos(box_size, redshift, cosmology, sigma8, n_s, omega_b, rng,
                                grid, m_min, **halo_options)


def make_synthetic_box(box_size: float, redshift: float, cosmology: Cosmology, sigma8: float,
                       n_s: float, omega_b: float, hod_model: HODModel,
                       rng: np.random.Generator, grid: int | None = None,
                       m_min: float | None = None, **halo_options: Any) -> GalaxyBox:
    """Synthetic halos (:func:`synthetic_halos_for`) populated with ``hod_model``.

    box_size [Mpc/h]. The returned box's ``meta`` records the recipe; the caller adds the
    seed.
    """
    halos = synthetic_halos_for(box_size, redshift, cosmology, sigma8, n_s, omega_b,
                                hod_model, rng, grid, m_min, **halo_options)
    return populate_synthetic(halos, hod_model, rng, cosmology)


def populate_synthetic(halos: HaloCatalog, hod_model: HODModel, rng: np.random.Generator,
                       cosmology: Cosmology) -> GalaxyBox:
    """:func:`~.populate.populate` for synthetic halos, with the recipe in the box's ``meta``."""
    box = populate(halos, hod_model, rng, cosmology)
    box.matter = halos.matter
    box.meta.update(halos.meta)
    box.meta["BOXMADE"] = "synthetic lognormal halos + HOD (conecheck)"
    box.meta["NHALO"] = len(halos)
    return box
