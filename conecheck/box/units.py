"""Physical constants of the box stage, in the h-scaled units the pipeline shares.

Masses are in Msun/h, lengths in comoving Mpc/h, velocities in km/s.  With these
units h cancels from G·M/R, and the mean matter density today is
ρ̄_m = Ω_m ρ_crit,0 with ρ_crit,0 = 3 (100 km/s/Mpc)² / (8πG) in (Msun/h)/(Mpc/h)³.
Values come from :mod:`astropy.constants` (CODATA/IAU).
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u
import numpy as np

#: Newton's constant in Mpc (km/s)² / Msun (equally (Mpc/h) (km/s)² / (Msun/h)).
G_NEWTON = float(const.G.to(u.Mpc * u.km**2 / u.s**2 / u.Msun).value)
#: Critical density today, (Msun/h) / (Mpc/h)³.
RHO_CRIT0 = 3.0 * 100.0**2 / (8.0 * np.pi * G_NEWTON)
#: Overdensity of the halo mass definition used throughout the box stage:
#: 200 × the *mean* matter density ("200m"), as in Tinker et al. 2008 (ApJ 688, 709).
DELTA_HALO = 200.0


def mean_matter_density(omega_m: float) -> float:
    """Comoving mean matter density ρ̄_m = Ω_m ρ_crit,0 in (Msun/h)/(Mpc/h)³."""
    return float(omega_m) * RHO_CRIT0
