"""Small spherical-geometry helpers shared by the footprint and cone modules.

Angles are degrees at the interface and radians inside, as everywhere in conecheck
(docs/design.md §3).  Unit vectors follow HEALPix: θ = 90° − Dec, φ = RA.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange
from numpy.typing import ArrayLike, NDArray

from .errors import InputError


@numba.njit(parallel=True, cache=True)
def _radec_to_vec(ra, dec, out):
    for i in prange(ra.size):
        r = np.radians(ra[i])
        d = np.radians(dec[i])
        cd = np.cos(d)
        out[i, 0] = cd * np.cos(r)
        out[i, 1] = cd * np.sin(r)
        out[i, 2] = np.sin(d)


def radec_to_vec(ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
    """Unit vectors (..., 3) of equatorial positions given in degrees.

    One pass on numba's threads (a cone's 10⁶ targets are converted several times per
    build); the same products of the same sines and cosines as the numpy expression
    (cos δ cos α, cos δ sin α, sin δ).
    """
    ra, dec = np.broadcast_arrays(np.asarray(ra_deg, dtype=np.float64),
                                  np.asarray(dec_deg, dtype=np.float64))
    out = np.empty(ra.shape + (3,))
    _radec_to_vec(np.ascontiguousarray(ra).reshape(-1), np.ascontiguousarray(dec).reshape(-1),
                  out.reshape(-1, 3))
    return out


@numba.njit(parallel=True, cache=True)
def _radec_chi_to_xyz(ra, dec, chi, out):
    for i in prange(ra.size):
        r = np.radians(ra[i])
        d = np.radians(dec[i])
        scale = chi[i] * np.cos(d)
        out[i, 0] = scale * np.cos(r)
        out[i, 1] = scale * np.sin(r)
        out[i, 2] = chi[i] * np.sin(d)


def radec_chi_to_xyz(ra_deg: ArrayLike, dec_deg: ArrayLike,
                     distance: ArrayLike) -> NDArray[np.float64]:
    """Cartesian positions (..., 3) of points at RA, Dec [deg] and comoving distance,
    observer at the origin, in the distance's unit (Mpc/h in conecheck).

    (χ cos δ cos α, χ cos δ sin α, χ sin δ), multiplied in that order, in one pass on
    numba's threads: a cone's wp converts each sample and random catalogue once per cut.
    """
    ra, dec, chi = np.broadcast_arrays(*(np.asarray(a, dtype=np.float64)
                                         for a in (ra_deg, dec_deg, distance)))
    out = np.empty(ra.shape + (3,))
    _radec_chi_to_xyz(*(np.ascontiguousarray(a).reshape(-1) for a in (ra, dec, chi)),
                      out.reshape(-1, 3))
    return out


def vec_to_radec(vec: ArrayLike) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """RA in [0, 360) and Dec in [−90, 90], both in degrees, of (..., 3) vectors."""
    v = np.asarray(vec, dtype=np.float64)
    ra = np.degrees(np.arctan2(v[..., 1], v[..., 0])) % 360.0
    dec = np.degrees(np.arctan2(v[..., 2], np.hypot(v[..., 0], v[..., 1])))
    return ra, dec


def chord_to_angle(chord: ArrayLike) -> NDArray[np.float64]:
    """Angle (radians) subtended by a chord of the unit sphere."""
    return 2.0 * np.arcsin(np.clip(np.asarray(chord, dtype=np.float64) / 2.0, 0.0, 1.0))


def angle_to_chord(angle_rad: ArrayLike) -> NDArray[np.float64]:
    """Chord length on the unit sphere for an angle in radians."""
    return 2.0 * np.sin(np.minimum(np.asarray(angle_rad, dtype=np.float64), np.pi) / 2.0)


def check_radec(ra_deg: ArrayLike, dec_deg: ArrayLike, what: str = "positions"
                ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Validate and broadcast RA/Dec arrays (degrees).

    Raises
    ------
    InputError
        On non-finite values or |Dec| > 90°.
    """
    try:
        ra, dec = np.broadcast_arrays(np.asarray(ra_deg, dtype=np.float64),
                                      np.asarray(dec_deg, dtype=np.float64))
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what}: RA and Dec must be numeric arrays of matching shape "
                         f"({exc})") from None
    bad = ~(np.isfinite(ra) & np.isfinite(dec))
    if bad.any():
        raise InputError(f"{what}: {int(bad.sum())} non-finite RA/Dec values "
                         f"(first at index {int(np.argmax(bad.ravel()))})")
    out = np.abs(dec) > 90.0
    if out.any():
        i = int(np.argmax(out.ravel()))
        raise InputError(f"{what}: {int(out.sum())} Dec values outside [-90, 90] degrees "
                         f"(first: {dec.ravel()[i]!r} at index {i})")
    return ra, dec
