"""Small spherical-geometry helpers shared by the footprint and cone modules.

Angles are degrees at the interface and radians inside, as everywhere in conecheck
(docs/design.md §3).  Unit vectors follow HEALPix: θ = 90° − Dec, φ = RA.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError


def radec_to_vec(ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
    """Unit vectors (..., 3) of equatorial positions given in degrees."""
    ra = np.radians(np.asarray(ra_deg, dtype=np.float64))
    dec = np.radians(np.asarray(dec_deg, dtype=np.float64))
    cd = np.cos(dec)
    return np.stack([cd * np.cos(ra), cd * np.sin(ra), np.sin(dec)], axis=-1)


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
