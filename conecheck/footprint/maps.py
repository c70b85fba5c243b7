"""The survey footprint: a HEALPix completeness map.

A :class:`Footprint` holds one value per HEALPix pixel, the *completeness*: the
probability that a galaxy at that position is in the survey (0 outside, 1 fully
observed).  Veto maps multiply it.  Areas are effective areas,
Ω_eff = Σ_pixels completeness × Ω_pix with Ω_pix = 4π / (12 N_side²)
(Górski et al. 2005, ApJ 622, 759), the quantity docs/design.md §6 divides by.

Ordering is RING or NESTED as the FITS header (or the caller) says; the map is
kept in its own ordering and healpy is told which on every call.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from functools import cached_property
from pathlib import Path

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..cosmology import DEG2_PER_SR
from ..errors import InputError
from ..healpix_pixels import ang2pix_lonlat, ring2nest
from ..sphere import check_radec
from .discs import disc_fraction
from .fitsio import read_healpix, write_healpix

log = logging.getLogger(__name__)

#: Values within this distance outside [0, 1] are float rounding and are clipped silently.
RANGE_TOLERANCE = 1e-6
#: N_side of the sub-pixel grid on which `Footprint.sample` places points (healpy's maximum;
#: its pixels are ~0.4 milliarcsec across, far below any scale conecheck measures).
SAMPLE_NSIDE = 2**29


def _clean_values(values: ArrayLike, source: str) -> NDArray[np.float64]:
    """Validate a map's values; NaN/UNSEEN become 0 with a logged note."""
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise InputError(f"{source}: a HEALPix map must be one-dimensional; got shape {arr.shape}")
    if arr.dtype.kind not in "fiub":
        raise InputError(f"{source}: map values have dtype {arr.dtype}; expected numbers")
    try:
        hp.npix2nside(arr.size)
    except ValueError:
        raise InputError(f"{source}: {arr.size} values is not 12·N_side² for any N_side; "
                         "not a full-sky HEALPix map") from None
    out = arr.astype(np.float64, copy=True)
    bad = ~np.isfinite(out) | np.isclose(out, hp.UNSEEN, rtol=1e-6, atol=0.0)
    if bad.any():
        log.warning("%s: %d pixels are NaN or UNSEEN; treating them as completeness 0",
                    source, int(bad.sum()))
        out[bad] = 0.0
    outside = (out < -RANGE_TOLERANCE) | (out > 1.0 + RANGE_TOLERANCE)
    if outside.any():
        i = int(np.argmax(outside))
        raise InputError(f"{source}: {int(outside.sum())} pixels have completeness outside "
                         f"[0, 1] (range {out.min():.6g} to {out.max():.6g}; first: pixel {i} "
                         f"= {out[i]:.6g}); a mask holds completeness values in [0, 1]")
    np.clip(out, 0.0, 1.0, out=out)
    if not out.any():
        raise InputError(f"{source}: empty footprint (every pixel has completeness 0)")
    return out


def _resample(values: NDArray[np.float64], nest: bool, nside: int, source: str
              ) -> NDArray[np.float64]:
    """Resample to ``nside`` (degrading averages, upgrading repeats), keeping the ordering."""
    order = "NESTED" if nest else "RING"
    old = hp.npix2nside(values.size)
    log.warning("%s: N_side %d differs from %d; resampling with healpy.ud_grade", source, old,
                nside)
    return np.asarray(hp.ud_grade(values, nside, order_in=order, order_out=order),
                      dtype=np.float64)


class Footprint:
    """A HEALPix completeness map (values in [0, 1]).

    Build one with :meth:`from_fits`, :meth:`from_map`,
    :func:`~conecheck.footprint.regions.build_mask` or
    :func:`~conecheck.footprint.from_randoms.mask_from_randoms`.  The value array is
    read-only; operations return new footprints.
    """

    def __init__(self, values: ArrayLike, nest: bool = False, *, source: str = "map",
                 file_dtype: np.dtype | str = "float64"):
        vals = _clean_values(values, source)
        nside = hp.npix2nside(vals.size)
        if nest and not hp.isnsideok(nside, nest=True):
            raise InputError(f"{source}: NESTED ordering needs N_side a power of 2; got {nside}")
        vals.setflags(write=False)
        self._values = vals
        self._nest = bool(nest)
        self._nside = int(nside)
        self.source = source
        self.file_dtype = np.dtype(file_dtype)
        self._boundary_tree_cache: tuple | None = None  # filled by discs.disc_fraction
        self._nested_values_cache: NDArray[np.float64] | None = None  # likewise
        #: free-form description (e.g. the [mask] table of a region file)
        self.meta: dict[str, object] = {}

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_map(cls, values: ArrayLike, nest: bool = False, source: str = "map") -> Footprint:
        """Footprint from an in-memory HEALPix array (RING unless ``nest``)."""
        arr = np.asarray(values)
        dtype = np.float32 if arr.dtype == np.float32 else np.float64
        return cls(arr, nest=nest, source=source, file_dtype=dtype)

    @classmethod
    def full_sky(cls, nside: int = 32) -> Footprint:
        """The whole sky at completeness 1 (RING ordering, N_side ``nside``)."""
        return cls.from_map(np.ones(hp.nside2npix(nside)), source="full sky")

    @classmethod
    def from_fits(cls, path: str | os.PathLike[str],
                  vetoes: Sequence[str | os.PathLike[str]] = ()) -> Footprint:
        """Read a HEALPix completeness map and multiply in veto maps.

        Vetoes with a different N_side are resampled to the mask's N_side
        (``healpy.ud_grade``) with a logged note; ordering is converted as needed.
        """
        path = Path(path)
        f = read_healpix(path)
        fp = cls(f.values, nest=f.nest, source=str(path), file_dtype=f.dtype)
        for veto in vetoes:
            fp = fp.multiply(cls.from_fits(veto))
        return fp

    def cache_token(self) -> dict[str, object]:
        """What identifies the footprint in a cache key: its map and pixel ordering."""
        return {"values": self._values, "nest": self._nest}

    # ------------------------------------------------------------------ basic properties
    @property
    def values(self) -> NDArray[np.float64]:
        """Completeness per pixel in this map's ordering (read-only)."""
        return self._values

    @property
    def nside(self) -> int:
        return self._nside

    @property
    def npix(self) -> int:
        return self._values.size

    @property
    def nest(self) -> bool:
        """True for NESTED ordering, False for RING."""
        return self._nest

    @property
    def ordering(self) -> str:
        return "NESTED" if self._nest else "RING"

    @property
    def pixel_area_sr(self) -> float:
        """Ω_pix = 4π / (12 N_side²) in steradians."""
        return 4.0 * np.pi / self.npix

    @cached_property
    def area_sr(self) -> float:
        """Effective area Σ completeness × Ω_pix in steradians."""
        return float(self._values.sum() * self.pixel_area_sr)

    @property
    def area_deg2(self) -> float:
        """Effective area in square degrees."""
        return self.area_sr * DEG2_PER_SR

    @property
    def sky_fraction(self) -> float:
        """Effective area over the full sky."""
        return float(self._values.sum() / self.npix)

    @cached_property
    def occupied(self) -> NDArray[np.int64]:
        """Indices of pixels with completeness > 0 (this map's ordering)."""
        idx = np.flatnonzero(self._values > 0)
        idx.setflags(write=False)
        return idx

    def occupied_vectors(self) -> NDArray[np.float64]:
        """Unit vectors (m, 3) of the centres of the occupied pixels."""
        return np.column_stack(hp.pix2vec(self._nside, self.occupied, nest=self._nest))

    def __repr__(self) -> str:
        return (f"Footprint(nside={self.nside}, ordering={self.ordering}, "
                f"area={self.area_deg2:.1f} deg2, source={self.source!r})")

    # ------------------------------------------------------------------ lookups
    def pixel_of(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.int64]:
        """HEALPix pixel index (this map's ordering) of positions in degrees."""
        ra, dec = check_radec(ra_deg, dec_deg)
        return ang2pix_lonlat(self._nside, ra, dec, nest=self._nest)

    def completeness(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
        """Completeness at positions RA, Dec (degrees); 0 outside the footprint."""
        return self._values[self.pixel_of(ra_deg, dec_deg)]

    def contains(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.bool_]:
        """True where the completeness is > 0."""
        return self.completeness(ra_deg, dec_deg) > 0

    # ------------------------------------------------------------------ transformations
    def ud_grade(self, nside: int) -> Footprint:
        """This footprint at another N_side (degrading averages completeness)."""
        if nside == self._nside:
            return self
        if not hp.isnsideok(nside, nest=True):
            raise InputError(f"N_side {nside} is not a power of 2")
        order = self.ordering
        vals = hp.ud_grade(self._values, nside, order_in=order, order_out=order)
        return Footprint(vals, nest=self._nest, source=f"{self.source} at N_side {nside}",
                         file_dtype=self.file_dtype)

    def reordered(self, nest: bool) -> Footprint:
        """This footprint in RING (``nest=False``) or NESTED ordering."""
        if nest == self._nest:
            return self
        vals = hp.reorder(self._values, r2n=True) if nest else hp.reorder(self._values, n2r=True)
        return Footprint(vals, nest=nest, source=self.source, file_dtype=self.file_dtype)

    def multiply(self, other: Footprint) -> Footprint:
        """Product with a veto map (resampled to this N_side with a note if needed)."""
        vals = other.reordered(self._nest).values
        if other.nside != self._nside:
            vals = _resample(vals, self._nest, self._nside, other.source)
        return Footprint(self._values * vals, nest=self._nest,
                         source=f"{self.source} x {other.source}", file_dtype=self.file_dtype)

    # ------------------------------------------------------------------ output
    def write_fits(self, path: str | os.PathLike[str], *, dtype: str | np.dtype | None = None,
                   partial: bool | None = None) -> None:
        """Write the map atomically as a HEALPix FITS table in its own ordering.

        Parameters
        ----------
        dtype : {"float32", "float64"}, optional
            Value type on disk; default: the type the map was read/created with.
        partial : bool, optional
            EXPLICIT indexing of the occupied pixels only; default when fewer than half
            the pixels are occupied (smaller file).
        """
        if partial is None:
            partial = self.occupied.size < self.npix // 2
        write_healpix(path, self._values, self._nest,
                      dtype=self.file_dtype if dtype is None else dtype, partial=partial,
                      extra_header={"EXTNAME": "FOOTPRINT",
                                    "AREA": (round(self.area_deg2, 6),
                                             "effective area [deg2]")})

    # ------------------------------------------------------------------ random positions
    def sample(self, n: int, rng: np.random.Generator
               ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Exactly ``n`` positions uniform per unit solid angle, thinned by completeness.

        Pixels are drawn with probability ∝ completeness × Ω_pix (all pixels have the
        same area), then a position uniform inside the pixel: for power-of-2 N_side, a
        uniformly chosen NESTED descendant at N_side 2²⁹ (equal-area, ~0.4 mas across);
        otherwise rejection from the pixel's bounding cap.

        Returns
        -------
        ra_deg, dec_deg : arrays (n,)
        """
        n = int(n)
        if n < 0:
            raise InputError(f"sample: number of points must be >= 0; got {n}")
        cdf = np.cumsum(self._values[self.occupied])
        cdf /= cdf[-1]
        pick = self.occupied[np.minimum(np.searchsorted(cdf, rng.random(n), side="right"),
                                        self.occupied.size - 1)]
        if hp.isnsideok(self._nside, nest=True):
            parent = pick if self._nest else ring2nest(self._nside, pick)
            level = int(np.log2(SAMPLE_NSIDE // self._nside))
            child = parent.astype(np.int64) << (2 * level)
            child += rng.integers(0, 1 << (2 * level), size=n, dtype=np.int64)
            ra, dec = hp.pix2ang(SAMPLE_NSIDE, child, nest=True, lonlat=True)
            return np.asarray(ra), np.asarray(dec)
        return _sample_in_pixels_rejection(self._nside, self._nest, pick, rng)

    # ------------------------------------------------------------------ discs
    def disc_fraction(self, ra_deg: ArrayLike, dec_deg: ArrayLike, radius_deg: ArrayLike,
                      samples_per_radius: float = 10.0) -> NDArray[np.float64]:
        """Completeness-weighted fraction of discs inside the footprint.

        See :func:`conecheck.footprint.discs.disc_fraction`.
        """
        return disc_fraction(self, ra_deg, dec_deg, radius_deg,
                             samples_per_radius=samples_per_radius)


def _sample_in_pixels_rejection(nside: int, nest: bool, pix: NDArray[np.int64],
                                rng: np.random.Generator
                                ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Uniform points inside given pixels by rejection from each pixel's bounding cap."""
    centre = np.column_stack(hp.pix2vec(nside, pix, nest=nest))
    # A local basis around each centre; the pole fallback avoids a zero cross product.
    axis = np.where(np.abs(centre[:, 2:3]) < 0.9, [[0.0, 0.0, 1.0]], [[1.0, 0.0, 0.0]])
    e1 = np.cross(axis, centre)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(centre, e1)
    cos_rho = np.cos(hp.max_pixrad(nside))
    out = np.empty_like(centre)
    todo = np.arange(pix.size)
    for _ in range(200):
        if todo.size == 0:
            break
        cos_a = rng.uniform(cos_rho, 1.0, todo.size)
        sin_a = np.sqrt(1.0 - cos_a**2)
        beta = rng.uniform(0.0, 2.0 * np.pi, todo.size)
        v = (cos_a[:, None] * centre[todo] + (sin_a * np.cos(beta))[:, None] * e1[todo]
             + (sin_a * np.sin(beta))[:, None] * e2[todo])
        ok = hp.vec2pix(nside, v[:, 0], v[:, 1], v[:, 2], nest=nest) == pix[todo]
        out[todo[ok]] = v[ok]
        todo = todo[~ok]
    if todo.size:  # pragma: no cover - acceptance is ~50 %, 200 rounds never fail
        raise RuntimeError("rejection sampling inside pixels did not converge")
    ra, dec = hp.vec2ang(out, lonlat=True)
    return np.asarray(ra), np.asarray(dec)
