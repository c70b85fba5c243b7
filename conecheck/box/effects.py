"""Box-side observational effects: plane-parallel redshift-space distortions and z errors.

In a periodic box the line of sight is one Cartesian axis (docs/design.md §6).  A galaxy with
peculiar velocity v_los [km/s] along that axis appears displaced by

    Δs = v_los (1 + z) / H(z)          [Mpc/h, comoving]

with H(z) in km/s/(Mpc/h) (:meth:`conecheck.cosmology.Cosmology.hubble`).  The (1+z) turns
the peculiar velocity into the comoving displacement: dχ = c dz / H and δz = (1+z) v/c.
A redshift error of σ_v [km/s] likewise displaces by (1+z) σ_v / H(z) · N(0, 1).
Positions are wrapped back into [0, L).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError


def _check_axis(los_axis: int) -> None:
    if isinstance(los_axis, bool) or los_axis not in (0, 1, 2):
        raise InputError(f"line-of-sight axis = {los_axis!r}: expected 0, 1 or 2 (x, y, z)")


def _wrap(values: NDArray[np.float64], box_size: float) -> NDArray[np.float64]:
    out = np.mod(values, box_size)
    out[out >= box_size] = 0.0
    return out


def rsd_displacement(velocity_los: NDArray[np.float64], redshift: float,
                     cosmology: Cosmology) -> NDArray[np.float64]:
    """Comoving displacement [Mpc/h] for line-of-sight velocities [km/s] at redshift z."""
    return np.asarray(velocity_los, dtype=float) * (1.0 + redshift) / float(
        cosmology.hubble(redshift))


def apply_box_rsd(box: GalaxyBox, los_axis: int, cosmology: Cosmology) -> NDArray[np.float64]:
    """Redshift-space positions, shape (N, 3) [Mpc/h]: s = x + v_los (1+z)/H(z) along ``los_axis``.

    The box is not modified; the snapshot redshift is ``box.redshift``.
    """
    _check_axis(los_axis)
    pos = np.array(box.position, dtype=np.float64, copy=True)
    shifted = pos[:, los_axis] + rsd_displacement(box.velocity[:, los_axis], box.redshift,
                                                  cosmology)
    pos[:, los_axis] = _wrap(shifted, box.box_size)
    return pos


def apply_box_redshift_scatter(positions: NDArray[np.float64], los_axis: int,
                               sigma_v_kms: float, z: float, cosmology: Cosmology,
                               rng: np.random.Generator,
                               box_size: float) -> NDArray[np.float64]:
    """Add a Gaussian redshift error along ``los_axis``: (1+z) σ_v / H(z) · N(0, 1) [Mpc/h].

    Parameters
    ----------
    positions : array (N, 3)
        Positions in [0, box_size), Mpc/h (usually already in redshift space).
    los_axis : int
        0, 1 or 2.
    sigma_v_kms : float
        Redshift error expressed as a velocity, km/s (σ_z = (1+z) σ_v / c).
    z : float
        Snapshot redshift.
    cosmology : Cosmology
        For H(z).
    rng : numpy.random.Generator
        Source of the draws.
    box_size : float
        Box side, Mpc/h (for the periodic wrap).

    Returns
    -------
    array (N, 3)
        A new array; the input is not modified.
    """
    _check_axis(los_axis)
    if not (np.isfinite(sigma_v_kms) and sigma_v_kms >= 0):
        raise InputError(f"redshift error sigma_v = {sigma_v_kms!r} km/s: must be >= 0")
    pos = np.array(positions, dtype=np.float64, copy=True)
    if sigma_v_kms == 0:
        return pos
    scale = rsd_displacement(np.float64(sigma_v_kms), z, cosmology)
    pos[:, los_axis] = _wrap(pos[:, los_axis] + scale * rng.standard_normal(len(pos)), box_size)
    return pos
