"""Small inputs shared by the light-cone tests (boxes, footprints, survey models)."""

from __future__ import annotations

import healpy as hp
import numpy as np

from conecheck.catalog import GalaxyBox
from conecheck.cone import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    ObserverSettings,
    RedshiftErrorSettings,
    SurveyModel,
    SurveyShell,
)
from conecheck.cosmology import Cosmology
from conecheck.footprint.maps import Footprint

COSMO = Cosmology(omega_m=0.31)


def poisson_box(n: int, box_size: float, seed: int = 0, sigma_v: float = 0.0,
                mags: tuple[float, float] | None = None) -> GalaxyBox:
    """Uniform random positions; Gaussian velocities [km/s]; uniform magnitudes."""
    rng = np.random.default_rng(seed)
    pos = rng.uniform(0.0, box_size, (n, 3))
    vel = rng.normal(0.0, sigma_v, (n, 3)) if sigma_v > 0 else np.zeros((n, 3))
    abs_mag = rng.uniform(*mags, n) if mags else None
    return GalaxyBox(pos, vel, box_size, 0.1, abs_mag=abs_mag)


def thomas_box(n_parents: int, mean_children: float, sigma: float, box_size: float,
               seed: int = 0) -> GalaxyBox:
    """Thomas (Neyman–Scott) process: Poisson parents, Poisson-many Gaussian children."""
    rng = np.random.default_rng(seed)
    parents = rng.uniform(0.0, box_size, (n_parents, 3))
    n_child = rng.poisson(mean_children, n_parents)
    pos = np.repeat(parents, n_child, axis=0) + rng.normal(0.0, sigma, (n_child.sum(), 3))
    pos = np.mod(pos, box_size)
    return GalaxyBox(pos, np.zeros_like(pos), box_size, 0.1)


def cap_footprint(nside: int, ra0: float, dec0: float, radius_deg: float,
                  value: float = 1.0) -> Footprint:
    """A circular cap of completeness ``value`` (RING ordering)."""
    vals = np.zeros(hp.nside2npix(nside))
    vec = hp.ang2vec(ra0, dec0, lonlat=True)
    vals[hp.query_disc(nside, vec, np.radians(radius_deg))] = value
    return Footprint.from_map(vals)


def survey(footprint=None, *, rsd=True, errors=True, fibres=True, flux=True,
           use_footprint=True, shell=None, fibre_settings=None, correction="none",
           redshift_errors=None, observers=None, physical_fluxes=True) -> SurveyModel:
    """A SurveyModel with every piece switchable from keyword arguments."""
    return SurveyModel(
        cosmology=COSMO,
        shell=shell or SurveyShell(z_min=0.02, z_max=0.08),
        footprint=footprint,
        effects=EffectSwitches(rsd=rsd, redshift_errors=errors, footprint=use_footprint,
                               flux_limit=flux, fibres=fibres,
                               physical_fluxes=physical_fluxes),
        fibres=fibre_settings or FibreSettings(),
        correction=CorrectionSettings(correction),
        redshift_errors=redshift_errors or RedshiftErrorSettings(),
        observers=observers or ObserverSettings(),
    )


def separations_arcsec(ra1, dec1, ra2=None, dec2=None) -> np.ndarray:
    """Matrix of angular separations [arcsec] from astropy SkyCoord (reference library)."""
    from astropy import units as u
    from astropy.coordinates import SkyCoord

    a = SkyCoord(np.asarray(ra1) * u.deg, np.asarray(dec1) * u.deg)
    b = a if ra2 is None else SkyCoord(np.asarray(ra2) * u.deg, np.asarray(dec2) * u.deg)
    return a[:, None].separation(b[None, :]).to_value(u.arcsec)
