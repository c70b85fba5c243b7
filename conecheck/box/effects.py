"""Box-side observational effects: plane-parallel redshift-space distortions and z errors.

In a periodic box the line of sight is one Cartesian axis (docs/design.md §6).  A galaxy with
peculiar velocity v_los [km/s] along that axis appears displaced by

    Δs = v_los (1 + z) / H(z)          [Mpc/h, comoving]

with H(z) in km/s/(Mpc/h) (:meth:`conecheck.cosmology.Cosmology.hubble`).  The (1+z) turns
the peculiar velocity into the comoving displacement: dχ = c dz / H and δz = (1+z) v/c.
A redshift error of σ_v [km/s] likewise displaces by (1+z) σ_v / H(z) · N(0, 1).
Positions are wrapped back into [0, L).

Per-galaxy draws made on a box (:func:`galaxy_uniforms`, :func:`galaxy_normals`) come from
a named stream in the box's order, or, for a box whose galaxies carry identities
(``GalaxyBox.draw_key``), from those identities: two such boxes then give a galaxy they
share the same redshift error and the same dilution draw.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError
from ..periodic import wrap_into_box
from ..streams import keyed_uniforms, seeded_rng, stream_key
from .populate import KeyedDraws


def galaxy_uniforms(box: GalaxyBox, run_seed: int, *names: int | str) -> NDArray[np.float64]:
    """One uniform in [0, 1) per galaxy of ``box``, from the stream ``(run_seed, *names)``
    (:func:`~conecheck.streams.seeded_rng`), keyed by ``box.draw_key`` when it has one."""
    if box.draw_key is None:
        return seeded_rng(run_seed, *names).random(len(box))
    return keyed_uniforms(stream_key(run_seed, *names), box.draw_key, 0)


def galaxy_normals(box: GalaxyBox, run_seed: int, *names: int | str) -> NDArray[np.float64]:
    """One standard normal per galaxy of ``box``, as :func:`galaxy_uniforms` draws."""
    if box.draw_key is None:
        return seeded_rng(run_seed, *names).standard_normal(len(box))
    return KeyedDraws(stream_key(run_seed, *names)).normal(0, box.draw_key, 1)[:, 0]


def _check_axis(los_axis: int) -> None:
    if isinstance(los_axis, bool) or los_axis not in (0, 1, 2):
        raise InputError(f"line-of-sight axis = {los_axis!r}: expected 0, 1 or 2 (x, y, z)")


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
    pos[:, los_axis] = wrap_into_box(shifted, box.box_size)
    return pos


def apply_box_redshift_scatter(positions: NDArray[np.float64], los_axis: int,
                               sigma_v_kms: float, z: float, cosmology: Cosmology,
                               rng: np.random.Generator | NDArray[np.float64],
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
    rng : numpy.random.Generator or ndarray (N,)
        Source of the draws, or the N standard normals themselves
        (:func:`galaxy_normals`).
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
    normal = (rng.standard_normal(len(pos)) if isinstance(rng, np.random.Generator)
              else np.asarray(rng, dtype=np.float64))
    if normal.shape != (len(pos),):
        raise ValueError(f"{normal.shape} normals for {len(pos)} positions")
    pos[:, los_axis] = wrap_into_box(pos[:, los_axis] + scale * normal, box_size)
    return pos
