"""Reading and writing HEALPix maps as FITS binary tables.

The layout follows the HEALPix FITS convention (Górski et al. 2005, ApJ 622, 759, and
the HEALPix FITS keyword list): a binary-table extension with ``PIXTYPE = 'HEALPIX'``,
``ORDERING`` (``RING`` or ``NESTED``), ``NSIDE`` and ``INDXSCHM``:

* ``IMPLICIT`` — one value per pixel in pixel order (the column may hold several
  values per row, as healpy writes them);
* ``EXPLICIT`` — a ``PIXEL`` column with the pixel index and a value column; pixels
  not listed are outside the map (value 0 here).

We read and write with :mod:`astropy.io.fits` rather than ``healpy.read_map`` so that
every way a file can be wrong becomes one clear :class:`~conecheck.errors.InputError`;
files written here are read by ``healpy.read_map`` and vice versa (tested).
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass
from pathlib import Path

import healpy as hp
import numpy as np
from astropy.io import fits
from numpy.typing import NDArray

from ..atomic import atomic_path
from ..errors import InputError

log = logging.getLogger(__name__)

VALUE_COLUMN = "COMPLETENESS"


@dataclass
class HealpixFile:
    """A HEALPix map as read from disk: values in the file's own ordering."""

    values: NDArray[np.float64]
    nest: bool
    dtype: np.dtype
    #: True for EXPLICIT indexing: pixels absent from the file are plain zeros
    explicit: bool
    column: str


def _find_healpix_hdu(hdul: fits.HDUList, path: Path) -> fits.BinTableHDU:
    for hdu in hdul[1:]:
        if not isinstance(hdu, fits.BinTableHDU):
            continue
        head = hdu.header
        if str(head.get("PIXTYPE", "")).strip().upper() == "HEALPIX" or (
                "NSIDE" in head and "ORDERING" in head):
            return hdu
    raise InputError(f"{path}: not a HEALPix map (no binary-table extension with "
                     "PIXTYPE = 'HEALPIX' or NSIDE/ORDERING keywords)")


#: Largest number of covered pixels whose neighbours are examined by the ordering check.
ORDERING_SAMPLE = 200_000
#: A map is called mislabelled when, under its stated ordering, more than this fraction of
#: its covered pixels' neighbours are uncovered ...
ORDERING_SCATTER = 0.15
#: ... and the other ordering gives less than this fraction of that scatter.  A real
#: footprint is compact in its true ordering (a 10° cap at N_side 8 already has only 20 %
#: uncovered neighbours, 50 % when read in the wrong ordering, and the demo mask 2.5 % against
#: 22 %); a speckled map is equally scattered in both and is never flagged.
ORDERING_RATIO = 0.5


def edge_fraction(values: NDArray[np.floating], nest: bool) -> float:
    """Fraction of the covered pixels' neighbours that are uncovered.

    Parameters
    ----------
    values : array
        Full-sky HEALPix map; a pixel is covered where its value is > 0.
    nest : bool
        Ordering in which ``values`` is read.

    Returns
    -------
    float
        Mean over (up to :data:`ORDERING_SAMPLE`, drawn with a fixed seed) covered pixels of
        the fraction of their 8 neighbours with value ≤ 0.
    """
    covered = np.flatnonzero(values > 0)
    if covered.size > ORDERING_SAMPLE:
        covered = np.random.default_rng(0).choice(covered, ORDERING_SAMPLE, replace=False)
    neighbours = hp.get_all_neighbours(hp.npix2nside(values.size), covered, nest=nest)
    real = neighbours >= 0  # -1 marks the 8-neighbourhood's missing corner at some pixels
    return float(np.mean(values[neighbours[real]] <= 0))


def _check_ordering(path: Path, values: NDArray[np.float64], nest: bool, ordering: str) -> None:
    """Refuse a map whose ORDERING keyword names the wrong scheme.

    A RING map labelled NESTED (or the reverse) reads as a speckle of pixels scattered over
    the sky; everything downstream (randoms, spheres, regions) would then be wrong and fail
    far from the cause.
    """
    nside = hp.npix2nside(values.size)
    n_cov = int(np.count_nonzero(values > 0))
    if nside < 4 or n_cov < 16 or n_cov > 0.95 * values.size or not hp.isnsideok(nside, True):
        return
    stated = edge_fraction(values, nest)
    if stated <= ORDERING_SCATTER:
        return
    other = edge_fraction(values, not nest)
    if other < ORDERING_RATIO * stated:
        name, alt = ("NESTED", "RING") if nest else ("RING", "NESTED")
        raise InputError(
            f"{path}: the header says ORDERING = '{ordering}', but read as {name} the map is "
            f"scattered ({stated:.0%} of its covered pixels' neighbours are uncovered) and "
            f"read as {alt} it is compact ({other:.0%}); the map looks {alt}-ordered: fix "
            f"the ORDERING keyword (for example healpy.write_map(..., nest={not nest}))")


def read_healpix(path: str | os.PathLike[str]) -> HealpixFile:
    """Read the first HEALPix map in a FITS file, keeping its ordering.

    Raises
    ------
    InputError
        Missing/unreadable file, not a HEALPix map, inconsistent NSIDE or length,
        unknown ordering.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: mask file not found")
    try:
        hdul = fits.open(path, memmap=False)
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read as FITS ({exc})") from None
    with hdul:
        hdu = _find_healpix_hdu(hdul, path)
        head = hdu.header
        ordering = str(head.get("ORDERING", "")).strip().upper()
        if ordering not in ("RING", "NESTED", "NEST"):
            raise InputError(f"{path}: HEALPix ORDERING = {ordering!r}; expected RING or NESTED")
        nest = ordering != "RING"
        scheme = str(head.get("INDXSCHM", "IMPLICIT")).strip().upper()
        names = [c.name for c in hdu.columns]
        if not names:
            raise InputError(f"{path}: HEALPix table has no columns")
        try:
            data = hdu.data
            if scheme == "EXPLICIT":
                upper = [n.upper() for n in names]
                if "PIXEL" not in upper or len(names) < 2:
                    raise InputError(f"{path}: EXPLICIT HEALPix map needs a PIXEL column and "
                                     f"a value column; found {names}")
                pix_name = names[upper.index("PIXEL")]
                col = next(n for n in names if n != pix_name)
                pix = np.asarray(data[pix_name]).astype(np.int64).ravel()
                vals = np.asarray(data[col]).ravel()
            else:
                col = names[0]
                vals = np.asarray(data[col]).ravel()
                pix = None
        except InputError:
            raise
        except Exception as exc:  # noqa: BLE001 - any FITS decoding issue is a file problem
            raise InputError(f"{path}: cannot decode HEALPix table ({type(exc).__name__}: "
                             f"{exc})") from None
        if len(names) > (2 if scheme == "EXPLICIT" else 1):
            log.info("%s: HEALPix table has columns %s; using '%s'", path, names, col)
    if vals.dtype.kind not in "fiu":
        raise InputError(f"{path}: column '{col}' has dtype {vals.dtype}; expected numbers")
    nside_head = head.get("NSIDE")
    if scheme == "EXPLICIT":
        if nside_head is None:
            raise InputError(f"{path}: EXPLICIT HEALPix map without an NSIDE keyword")
        nside = int(nside_head)
        if not hp.isnsideok(nside, nest=nest):
            raise InputError(f"{path}: NSIDE = {nside} is not a valid HEALPix N_side"
                             + (" for NESTED ordering (power of 2)" if nest else ""))
        npix = hp.nside2npix(nside)
        if pix.size and (pix.min() < 0 or pix.max() >= npix):
            raise InputError(f"{path}: PIXEL values outside [0, {npix}) for NSIDE = {nside}")
        full = np.zeros(npix, dtype=np.float64)
        full[pix] = vals
        values = full
    else:
        try:
            nside = hp.npix2nside(vals.size)
        except ValueError:
            raise InputError(f"{path}: column '{col}' has {vals.size} values, which is not "
                             "12·N_side² for any N_side; not a full-sky HEALPix map") from None
        if nside_head is not None and int(nside_head) != nside:
            raise InputError(f"{path}: NSIDE keyword {int(nside_head)} disagrees with the map "
                             f"length {vals.size} (N_side {nside})")
        if nest and not hp.isnsideok(nside, nest=True):
            raise InputError(f"{path}: NESTED ordering needs N_side a power of 2; got {nside}")
        values = vals.astype(np.float64)
    _check_ordering(path, values, nest, ordering)
    dtype = np.dtype(np.float32) if vals.dtype == np.float32 else np.dtype(np.float64)
    return HealpixFile(values=values, nest=nest, dtype=dtype, explicit=scheme == "EXPLICIT",
                       column=col)


def write_healpix(path: str | os.PathLike[str], values: NDArray[np.floating], nest: bool, *,
                  dtype: np.dtype | str = "float64", partial: bool = False,
                  extra_header: dict[str, object] | None = None) -> None:
    """Write a full-sky HEALPix map atomically.

    Parameters
    ----------
    values : array (12 N_side²,)
        Map values in the ordering named by ``nest``.
    dtype : numpy dtype
        On-disk value type (``float32`` halves the file).
    partial : bool
        Write EXPLICIT indexing listing only non-zero pixels (small files for small
        footprints); otherwise IMPLICIT, one value per pixel.
    extra_header : dict
        Extra header cards (keys ≤ 8 characters).
    """
    values = np.asarray(values)
    nside = hp.npix2nside(values.size)
    npix = values.size
    dtype = np.dtype(dtype)
    fmt = {np.dtype(np.float32): "E", np.dtype(np.float64): "D"}[dtype]
    if partial:
        pix = np.flatnonzero(values)
        pix_fmt, pix_dtype = ("J", np.int32) if npix < 2**31 else ("K", np.int64)
        cols = [fits.Column(name="PIXEL", format=pix_fmt, array=pix.astype(pix_dtype)),
                fits.Column(name=VALUE_COLUMN, format=fmt, array=values[pix].astype(dtype))]
    else:
        cols = [fits.Column(name=VALUE_COLUMN, format=fmt, array=values.astype(dtype))]
    hdu = fits.BinTableHDU.from_columns(cols)
    head = hdu.header
    head["PIXTYPE"] = ("HEALPIX", "HEALPIX pixelisation")
    head["ORDERING"] = ("NESTED" if nest else "RING", "pixel ordering scheme")
    head["COORDSYS"] = ("C", "celestial (equatorial) coordinates")
    head["EQUINOX"] = (2000.0, "equinox of the coordinates")
    head["NSIDE"] = (nside, "HEALPix N_side")
    head["FIRSTPIX"] = (0, "first pixel index (0 based)")
    head["LASTPIX"] = (npix - 1, "last pixel index (0 based)")
    head["INDXSCHM"] = ("EXPLICIT" if partial else "IMPLICIT", "indexing scheme")
    head["OBJECT"] = ("PARTIAL" if partial else "FULLSKY", "sky coverage")
    for key, val in (extra_header or {}).items():
        head[key] = val
    with atomic_path(path) as tmp:
        fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp, overwrite=True)
        # The temporary file is private (0600); a mask is meant to be shared.
        os.chmod(tmp, 0o644)
