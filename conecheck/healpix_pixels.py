"""HEALPix pixel indices on numba's threads: RING → NESTED, and positions → pixels.

The arithmetic is the HEALPix library's (Górski et al. 2005, ApJ 622, 759), step for
step as healpy runs it, so every index equals healpy's; the tests compare them.

RING → NESTED.  The disc fractions of the counts in cylinders and the VPF gather 10⁸ sub-pixels in a
heavy run, queried in RING order and converted to NESTED, where a parent pixel is a bit
shift away. ``healpy.ring2nest`` converts them on one core at about 10 ns a pixel, a third
of the disc-fraction time; this is the same integer arithmetic (the ring → (face, x, y) →
nested steps) in a parallel loop.

Positions → pixels.  Every cone looks up the completeness, sky region and fibre pattern
of its 10⁶ targets and randoms, and the sphere searches size their strips from the
pixels their points occupy: ``healpy.ang2pix`` and ``vec2pix`` do it on one core, 1.6 s
of a heavy run's profile.  :func:`ang2pix_lonlat` and :func:`vec2pix` take the same
floating-point steps (z = cos θ and φ folded into [0, 4) quarter turns, then the equatorial
belt's edge lines or the polar caps' square-root rings) in a parallel loop.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from numba import prange
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

#: Longitude index (in units of π/4) of the left corner of each of the 12 base faces.
_FACE_PHI = np.array([1, 3, 5, 7, 0, 2, 4, 6, 1, 3, 5, 7], dtype=np.int64)


@numba.njit(cache=True)
def _isqrt(x):
    r = np.int64(np.sqrt(np.float64(x)))
    # the float root can be one off for x near 2⁶⁰
    while r * r > x:
        r -= 1
    while (r + 1) * (r + 1) <= x:
        r += 1
    return r


@numba.njit(cache=True)
def _spread_bits(v):
    """Bit k of ``v`` (< 2³²) moved to bit 2k."""
    v = v & 0xFFFFFFFF
    v = (v | (v << 16)) & 0x0000FFFF0000FFFF
    v = (v | (v << 8)) & 0x00FF00FF00FF00FF
    v = (v | (v << 4)) & 0x0F0F0F0F0F0F0F0F
    v = (v | (v << 2)) & 0x3333333333333333
    return (v | (v << 1)) & 0x5555555555555555


@numba.njit(cache=True)
def _belt_face(ifp, ifm):
    """Base face (0 … 11) of an equatorial-belt pixel from the indices ``ifp`` and ``ifm``
    of the ascending and descending edge lines it lies between, in units of N_side: equal
    indices put it on one of the four equatorial faces (4 … 7), otherwise on the north
    (0 … 3) or south (8 … 11) face that the lower index names."""
    if ifp == ifm:
        return ifp | 4
    if ifp < ifm:
        return ifp
    return ifm + 8


@numba.njit(cache=True)
def nest_of_ring_position(order, iring, iphi):
    """NESTED index of the pixel ``iphi`` (1-based, counted from φ = 0) of ring ``iring``
    (1 … 4 N_side − 1, counted from the north pole) at N_side = 2^order."""
    nside = np.int64(1) << order
    nl2 = 2 * nside
    if iring < nside:  # north polar cap
        nr = iring
        kshift = 0
        face = (iphi - 1) // nr
    elif iring <= 3 * nside:  # equatorial belt
        nr = nside
        kshift = (iring + nside) & 1
        ire = iring - nside + 1
        irm = nl2 + 2 - ire
        ifm = (iphi - (ire >> 1) + nside - 1) >> order
        ifp = (iphi - (irm >> 1) + nside - 1) >> order
        face = _belt_face(ifp, ifm)
    else:  # south polar cap
        nr = 4 * nside - iring
        kshift = 0
        face = (iphi - 1) // nr + 8
    irt = iring - ((2 + (face >> 2)) * nside) + 1
    ipt = 2 * iphi - _FACE_PHI[face] * nr - kshift - 1
    if ipt >= nl2:
        ipt -= 8 * nside
    ix = (ipt - irt) >> 1
    iy = (-ipt - irt) >> 1
    return (face << (2 * order)) + _spread_bits(ix) + (_spread_bits(iy) << 1)


@numba.njit(parallel=True, cache=True)
def _ring2nest(order, pix):
    nside = np.int64(1) << order
    npix = 12 * nside * nside
    ncap = 2 * nside * (nside - 1)
    out = np.empty(pix.size, dtype=np.int64)
    for p in prange(pix.size):
        q = pix[p]
        if q < ncap:  # north polar cap: ring counted from the pole
            iring = (1 + _isqrt(1 + 2 * q)) >> 1
            iphi = (q + 1) - 2 * iring * (iring - 1)
        elif q < npix - ncap:  # equatorial belt: 4 N_side pixels a ring
            tmp = (q - ncap) >> (order + 2)
            iring = tmp + nside
            iphi = q - ncap - tmp * 4 * nside + 1
        else:  # south polar cap, counted from the south pole and turned round
            ip = npix - q
            iring_south = (1 + _isqrt(2 * ip - 1)) >> 1
            iphi = 4 * iring_south + 1 - (ip - 2 * iring_south * (iring_south - 1))
            iring = 4 * nside - iring_south
        out[p] = nest_of_ring_position(order, iring, iphi)
    return out


def ring2nest(nside: int, pix: ArrayLike) -> NDArray[np.int64]:
    """NESTED index of each RING-ordered pixel ``pix`` at ``nside`` (a power of 2 up to
    2²⁹), as ``healpy.ring2nest``."""
    order = _order(nside)
    p = np.ascontiguousarray(pix, dtype=np.int64).reshape(-1)
    return _ring2nest(order, p).reshape(np.shape(pix))


_INV_HALF_PI = 2.0 / math.pi
_TWO_THIRDS = 2.0 / 3.0


@numba.njit(cache=True)
def _quarter_turns(phi):
    """φ [rad] as quarter turns folded into [0, 4), as the library's ``fmodulo``."""
    t = phi * _INV_HALF_PI
    if t >= 0:
        return t if t < 4.0 else np.fmod(t, 4.0)
    t = np.fmod(t, 4.0) + 4.0
    return 0.0 if t == 4.0 else t


@numba.njit(cache=True)
def _pixel_of_location(nside, order, nest, z, phi, sin_theta, have_sin):
    """Pixel holding the direction (z = cos θ, φ); ``sin_theta`` is used near the poles
    when ``have_sin`` (the library's guard against cancellation in 1 − |z|).  ``order``
    is log₂ N_side, or −1 for an N_side that is no power of 2 (RING only)."""
    az = abs(z)
    tt = _quarter_turns(phi)
    if az <= _TWO_THIRDS:  # equatorial belt: the two families of edge lines
        temp1 = nside * (0.5 + tt)
        temp2 = nside * (z * 0.75) if nest else nside * z * 0.75
        jp = np.int64(temp1 - temp2)  # ascending edge line
        jm = np.int64(temp1 + temp2)  # descending edge line
        if nest:
            face = _belt_face(jp >> order, jm >> order)
            ix = jm & (nside - 1)
            iy = nside - (jp & (nside - 1)) - 1
            return (face << (2 * order)) + _spread_bits(ix) + (_spread_bits(iy) << 1)
        nl4 = 4 * nside
        ir = nside + 1 + jp - jm  # ring counted from z = 2/3, 1 … 2 N_side + 1
        kshift = 1 - (ir & 1)
        t1 = jp + jm - nside + kshift + 1 + nl4 + nl4
        ip = (t1 >> 1) & (nl4 - 1) if order >= 0 else (t1 >> 1) % nl4
        return 2 * nside * (nside - 1) + (ir - 1) * nl4 + ip
    # polar caps
    if nest:
        ntt = min(3, np.int64(tt))
        tp = tt - ntt
    else:
        tp = tt - np.int64(tt)
    if az < 0.99 or not have_sin:
        tmp = nside * math.sqrt(3 * (1 - az))
    else:
        tmp = nside * sin_theta / math.sqrt((1.0 + az) / 3.0)
    jp = np.int64(tp * tmp)  # increasing edge line
    jm = np.int64((1.0 - tp) * tmp)  # decreasing edge line
    if nest:
        jp = min(jp, nside - 1)  # points on the face boundary
        jm = min(jm, nside - 1)
        if z >= 0:
            face, ix, iy = ntt, nside - jm - 1, nside - jp - 1
        else:
            face, ix, iy = ntt + 8, jp, jm
        return (face << (2 * order)) + _spread_bits(ix) + (_spread_bits(iy) << 1)
    ir = jp + jm + 1  # ring counted from the nearer pole
    ip = np.int64(tt * ir)
    if z > 0:
        return 2 * ir * (ir - 1) + ip
    return 12 * nside * nside - 2 * ir * (ir + 1) + ip


@numba.njit(parallel=True, cache=True)
def _ang2pix_lonlat(nside, order, nest, ra_deg, dec_deg):
    out = np.empty(ra_deg.size, dtype=np.int64)
    for i in prange(ra_deg.size):
        # healpy's lonlat → (θ, φ): π/2 − radians(Dec), radians(RA)
        theta = math.pi / 2.0 - dec_deg[i] * (math.pi / 180.0)
        phi = ra_deg[i] * (math.pi / 180.0)
        if theta < 0.01 or theta > 3.14159 - 0.01:
            out[i] = _pixel_of_location(nside, order, nest, math.cos(theta), phi,
                                        math.sin(theta), True)
        else:
            out[i] = _pixel_of_location(nside, order, nest, math.cos(theta), phi, 0.0, False)
    return out


@numba.njit(parallel=True, cache=True)
def _vec2pix(nside, order, nest, x, y, z):
    out = np.empty(x.size, dtype=np.int64)
    for i in prange(x.size):
        inv_len = 1.0 / math.sqrt(x[i] * x[i] + y[i] * y[i] + z[i] * z[i])
        phi = 0.0 if (x[i] == 0.0 and y[i] == 0.0) else math.atan2(y[i], x[i])
        nz = z[i] * inv_len
        if abs(nz) > 0.99:
            sin_theta = math.sqrt(x[i] * x[i] + y[i] * y[i]) * inv_len
            out[i] = _pixel_of_location(nside, order, nest, nz, phi, sin_theta, True)
        else:
            out[i] = _pixel_of_location(nside, order, nest, nz, phi, 0.0, False)
    return out


def _order(nside: int) -> int:
    order = int(nside).bit_length() - 1
    if nside < 1 or (1 << order) != nside or order > 29:
        raise InputError(f"nside = {nside}: expected a power of 2 from 1 to 2**29")
    return order


def _ring_or_nest_order(nside: int, nest: bool) -> int:
    """log₂ N_side, or −1 for a RING N_side that is no power of 2."""
    if nest or (int(nside) & (int(nside) - 1)) == 0:
        return _order(nside)
    if not 1 <= nside < 2**29:
        raise InputError(f"nside = {nside}: expected 1 to 2**29")
    return -1


def ang2pix_lonlat(nside: int, ra_deg: ArrayLike, dec_deg: ArrayLike,
                   nest: bool = False) -> NDArray[np.int64]:
    """Pixel index of each position, as ``healpy.ang2pix(nside, ra, dec, nest,
    lonlat=True)``.

    Parameters
    ----------
    nside : int
        N_side up to 2²⁹; a power of 2 for NESTED indices.
    ra_deg, dec_deg : array_like
        Positions [deg], finite, |Dec| ≤ 90 (checked by the caller: see
        :func:`conecheck.sphere.check_radec`); broadcast together.
    nest : bool
        NESTED indices if true, RING otherwise.
    """
    order = _ring_or_nest_order(nside, nest)
    ra, dec = np.broadcast_arrays(np.asarray(ra_deg, dtype=np.float64),
                                  np.asarray(dec_deg, dtype=np.float64))
    out = _ang2pix_lonlat(np.int64(nside), order, bool(nest), np.ascontiguousarray(ra).reshape(-1),
                          np.ascontiguousarray(dec).reshape(-1))
    return out.reshape(ra.shape)


def vec2pix(nside: int, x: ArrayLike, y: ArrayLike, z: ArrayLike,
            nest: bool = False) -> NDArray[np.int64]:
    """Pixel index of each direction (x, y, z) (need not be unit vectors; not all zero),
    as ``healpy.vec2pix(nside, x, y, z, nest)``; N_side as for :func:`ang2pix_lonlat`."""
    order = _ring_or_nest_order(nside, nest)
    xs, ys, zs = np.broadcast_arrays(*(np.asarray(c, dtype=np.float64) for c in (x, y, z)))
    # strided views (the columns of an (n, 3) array) are read in place, not copied
    out = _vec2pix(np.int64(nside), order, bool(nest), *(c.reshape(-1) for c in (xs, ys, zs)))
    return out.reshape(xs.shape)
