"""Footprint masks built from a TOML description of sky regions.

Schema (all angles in degrees, equatorial J2000 RA/Dec)::

    [mask]                      # optional metadata
    name = "My survey"          # free text
    description = "..."         # free text
    nside = 128                 # default N_side when none is passed to build_mask / the CLI

    [[region]]                  # one table per region, applied in file order
    shape = "polygon"           # "cap" | "box" | "stripe" | "polygon"
    mode = "include"            # "include" (default) or "exclude"
    completeness = 0.9          # include only, in (0, 1]; default 1
    label = "main area"         # optional, used in messages
    vertices = [[150.0, 5.0], [210.0, 2.0], [200.0, 50.0]]

Shape keys:

``cap``
    ``ra``, ``dec`` (centre) and ``radius`` in (0, 180]: points within ``radius`` of
    the centre.
``box``
    ``ra_min``, ``ra_max``, ``dec_min``, ``dec_max``: edges of constant RA (meridians)
    and constant Dec (parallels).  RA runs eastwards from ``ra_min`` to ``ra_max``;
    ``ra_min > ra_max`` wraps through RA = 0 (e.g. 350 → 10 is 20° wide);
    ``ra_min = 0, ra_max = 360`` is a full ring.  −90 ≤ dec_min < dec_max ≤ 90.
``stripe``
    A band of full ``width`` centred on a great circle.  Either ``pole = [ra, dec]``
    (the whole great circle whose pole that is), or ``start = [ra, dec]`` and
    ``end = [ra, dec]``: only the shorter great-circle arc from start to end, its ends
    cut square (perpendicular to the arc).  0 < width < 180.
``polygon``
    ``vertices = [[ra, dec], ...]`` (≥ 3), joined by great-circle arcs; repeating the
    first vertex at the end is allowed.  The polygon must fit inside a hemisphere (all
    vertices within 90° of their mean direction) and must not cross itself; the inside
    is the part of that hemisphere the edges enclose (non-zero winding rule).

Painting rule: every pixel starts at 0; regions are applied in file order and each
overwrites the value where it covers the sky — ``include`` sets its completeness,
``exclude`` sets 0.  So a large include region comes first, holes and vetoes after.

Pixels crossed by any region boundary are evaluated at one point placed
pseudo-randomly (a hash of the sub-pixel index) inside each of their 4^k NESTED
children (N_side · 2^k, ``oversample = k``, default 3 → 64 sub-pixels) and get the
mean (stratified sampling), so partially covered pixels carry fractional
completeness; all other pixels are wholly inside or outside every region and take
the value at their centre.
Boundary pixels are found by sampling each region's edge every quarter pixel and
adding the 8 neighbours of every pixel hit.

Region numbers in error messages count from 1 in file order.
"""

from __future__ import annotations

import logging
import os
from abc import ABC, abstractmethod
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import healpy as hp
import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..loader import read_toml
from ..sphere import radec_to_vec
from .maps import SAMPLE_NSIDE, Footprint

log = logging.getLogger(__name__)

DEFAULT_OVERSAMPLE = 3
#: Sub-pixel points evaluated per batch (memory bound).
BATCH_POINTS = 1 << 21

COMMON_KEYS = {"shape", "mode", "completeness", "label"}
SHAPE_KEYS: dict[str, set[str]] = {
    "cap": {"ra", "dec", "radius"},
    "box": {"ra_min", "ra_max", "dec_min", "dec_max"},
    "stripe": {"width", "pole", "start", "end"},
    "polygon": {"vertices"},
}
MASK_KEYS = {"name", "description", "nside"}


class _Points:
    """Unit vectors with RA/Dec (radians) computed on demand."""

    def __init__(self, vec: NDArray[np.float64]):
        self.vec = vec
        self._radec: tuple[NDArray[np.float64], NDArray[np.float64]] | None = None

    @property
    def radec(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        if self._radec is None:
            v = self.vec
            self._radec = (np.arctan2(v[:, 1], v[:, 0]) % (2 * np.pi),
                           np.arctan2(v[:, 2], np.hypot(v[:, 0], v[:, 1])))
        return self._radec


def _n_steps(length_rad: float, step_rad: float) -> int:
    return max(16, int(np.ceil(length_rad / step_rad)) + 1)


def _orthonormal(n: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Two unit vectors completing ``n`` to a right-handed basis (e1, e2, n)."""
    axis = np.array([0.0, 0.0, 1.0]) if abs(n[2]) < 0.9 else np.array([1.0, 0.0, 0.0])
    e1 = np.cross(axis, n)
    e1 /= np.linalg.norm(e1)
    return e1, np.cross(n, e1)


@dataclass
class Region(ABC):
    """One sky region of a mask description."""

    label: str
    include: bool
    completeness: float

    @abstractmethod
    def contains(self, pts: _Points) -> NDArray[np.bool_]:
        """Which points lie inside."""

    @abstractmethod
    def boundary(self, step_rad: float) -> NDArray[np.float64]:
        """Unit vectors along the boundary, at most ``step_rad`` apart."""


@dataclass
class Cap(Region):
    centre: NDArray[np.float64]
    radius_rad: float

    def contains(self, pts: _Points) -> NDArray[np.bool_]:
        return pts.vec @ self.centre >= np.cos(self.radius_rad)

    def boundary(self, step_rad: float) -> NDArray[np.float64]:
        e1, e2 = _orthonormal(self.centre)
        r = self.radius_rad
        t = np.linspace(0.0, 2 * np.pi, _n_steps(2 * np.pi * np.sin(r), step_rad))
        return (np.cos(r) * self.centre[None, :]
                + np.sin(r) * (np.cos(t)[:, None] * e1 + np.sin(t)[:, None] * e2))


@dataclass
class Box(Region):
    ra_min: float  # radians
    width: float  # radians of RA, eastwards from ra_min
    dec_min: float
    dec_max: float

    @property
    def full_ring(self) -> bool:
        return self.width >= 2 * np.pi

    def contains(self, pts: _Points) -> NDArray[np.bool_]:
        ra, dec = pts.radec
        ok = (dec >= self.dec_min) & (dec <= self.dec_max)
        if not self.full_ring:
            ok &= (ra - self.ra_min) % (2 * np.pi) <= self.width
        return ok

    def boundary(self, step_rad: float) -> NDArray[np.float64]:
        parts = []
        for dec in (self.dec_min, self.dec_max):
            if abs(dec) < np.pi / 2:
                ra = self.ra_min + np.linspace(0.0, self.width,
                                               _n_steps(self.width * np.cos(dec), step_rad))
                parts.append(radec_to_vec(np.degrees(ra), np.full(ra.size, np.degrees(dec))))
        if not self.full_ring:
            dec = np.linspace(self.dec_min, self.dec_max,
                              _n_steps(self.dec_max - self.dec_min, step_rad))
            for ra in (self.ra_min, self.ra_min + self.width):
                parts.append(radec_to_vec(np.full(dec.size, np.degrees(ra)), np.degrees(dec)))
        return np.concatenate(parts)


@dataclass
class Stripe(Region):
    pole: NDArray[np.float64]
    e1: NDArray[np.float64]  # direction of the start point (or any, for a full circle)
    e2: NDArray[np.float64]  # direction of travel from start towards end
    half_width: float  # radians
    length: float | None  # radians along the circle from e1; None: full circle

    def _frame(self, pts: _Points) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        v = pts.vec
        return np.arctan2(v @ self.e2, v @ self.e1), v @ self.pole

    def contains(self, pts: _Points) -> NDArray[np.bool_]:
        phi, s = self._frame(pts)
        ok = np.abs(s) <= np.sin(self.half_width)
        if self.length is not None:
            ok &= (phi >= 0.0) & (phi <= self.length)
        return ok

    def _at(self, phi: NDArray[np.float64], eta: NDArray[np.float64]) -> NDArray[np.float64]:
        return (np.cos(eta)[:, None] * (np.cos(phi)[:, None] * self.e1
                                        + np.sin(phi)[:, None] * self.e2)
                + np.sin(eta)[:, None] * self.pole)

    def boundary(self, step_rad: float) -> NDArray[np.float64]:
        span = 2 * np.pi if self.length is None else self.length
        phi = np.linspace(0.0, span, _n_steps(span, step_rad))
        parts = [self._at(phi, np.full(phi.size, eta))
                 for eta in (-self.half_width, self.half_width)]
        if self.length is not None:
            eta = np.linspace(-self.half_width, self.half_width,
                              _n_steps(2 * self.half_width, step_rad))
            for end in (0.0, self.length):
                parts.append(self._at(np.full(eta.size, end), eta))
        return np.concatenate(parts)


@dataclass
class Polygon(Region):
    vertices: NDArray[np.float64]  # (E, 3)
    centre: NDArray[np.float64]
    cos_rho: float  # bounding cap: every vertex (hence every edge) within it

    def contains(self, pts: _Points) -> NDArray[np.bool_]:
        v = pts.vec
        near = np.flatnonzero(v @ self.centre >= self.cos_rho - 1e-12)
        x = v[near]
        total = np.zeros(near.size)
        verts = self.vertices
        for a, b in zip(verts, np.roll(verts, -1, axis=0), strict=True):
            # Signed angle at x between the directions to a and b: the winding increment
            # of the great-circle arc a→b as seen from x.
            total += np.arctan2(x @ np.cross(a, b), a @ b - (x @ a) * (x @ b))
        out = np.zeros(v.shape[0], dtype=bool)
        out[near] = np.abs(total) > np.pi
        return out

    def boundary(self, step_rad: float) -> NDArray[np.float64]:
        parts = []
        verts = self.vertices
        for a, b in zip(verts, np.roll(verts, -1, axis=0), strict=True):
            omega = np.arccos(np.clip(a @ b, -1.0, 1.0))
            t = np.linspace(0.0, 1.0, _n_steps(omega, step_rad))[:, None]
            parts.append((np.sin((1 - t) * omega) * a + np.sin(t * omega) * b) / np.sin(omega))
        return np.concatenate(parts)


# ---------------------------------------------------------------------- parsing
class _Checker:
    """Collects problems of one region with its name."""

    def __init__(self, where: str, spec: Mapping[str, Any], problems: list[str]):
        self.where, self.spec, self.problems = where, spec, problems

    def fail(self, msg: str) -> None:
        self.problems.append(f"{self.where}: {msg}")

    def number(self, key: str, lo: float, hi: float, *, lo_open: bool = False,
               hi_open: bool = False, default: float | None = None) -> float | None:
        if key not in self.spec:
            if default is None:
                self.fail(f"missing key '{key}'")
            return default
        val = self.spec[key]
        if isinstance(val, bool) or not isinstance(val, (int, float)) or not np.isfinite(val):
            self.fail(f"{key} = {val!r} is not a finite number")
            return None
        lo_bad = val <= lo if lo_open else val < lo
        hi_bad = val >= hi if hi_open else val > hi
        if lo_bad or hi_bad:
            lb, rb = ("(" if lo_open else "["), (")" if hi_open else "]")
            self.fail(f"{key} = {val!r} outside {lb}{lo:g}, {hi:g}{rb} degrees"
                      if key != "completeness" else
                      f"{key} = {val!r} outside {lb}{lo:g}, {hi:g}{rb}")
            return None
        return float(val)

    def point(self, key: str, value: Any = None) -> NDArray[np.float64] | None:
        val = self.spec.get(key) if value is None else value
        if (not isinstance(val, (list, tuple)) or len(val) != 2
                or not all(isinstance(x, (int, float)) and not isinstance(x, bool)
                           and np.isfinite(x) for x in val)):
            self.fail(f"{key} = {val!r} must be a pair [ra, dec] of numbers in degrees")
            return None
        if abs(val[1]) > 90:
            self.fail(f"{key} = {val!r}: dec outside [-90, 90] degrees")
            return None
        return radec_to_vec(val[0], val[1])


def _parse_region(i: int, spec: Any, problems: list[str]) -> Region | None:
    if not isinstance(spec, Mapping):
        problems.append(f"region {i}: expected a table, got {type(spec).__name__}")
        return None
    label = str(spec.get("label", ""))
    where = f"region {i}" + (f" ('{label}')" if label else "")
    chk = _Checker(where, spec, problems)
    shape = spec.get("shape")
    if shape not in SHAPE_KEYS:
        chk.fail(f"shape = {shape!r}; expected one of {sorted(SHAPE_KEYS)}")
        return None
    unknown = set(spec) - COMMON_KEYS - SHAPE_KEYS[shape]
    if unknown:
        chk.fail(f"unknown keys {sorted(unknown)} for shape '{shape}'; allowed: "
                 f"{sorted(COMMON_KEYS | SHAPE_KEYS[shape])}")
    mode = spec.get("mode", "include")
    if mode not in ("include", "exclude"):
        chk.fail(f"mode = {mode!r}; expected 'include' or 'exclude'")
    include = mode != "exclude"
    if not include and "completeness" in spec:
        chk.fail("completeness applies to include regions only (exclude sets 0)")
    comp = chk.number("completeness", 0.0, 1.0, lo_open=True, default=1.0) if include else 0.0
    n_before = len(problems)
    common = {"label": label or where, "include": include, "completeness": comp or 0.0}

    if shape == "cap":
        ra = chk.number("ra", -360.0, 720.0)
        dec = chk.number("dec", -90.0, 90.0)
        radius = chk.number("radius", 0.0, 180.0, lo_open=True)
        if len(problems) > n_before:
            return None
        return Cap(**common, centre=radec_to_vec(ra, dec), radius_rad=np.radians(radius))

    if shape == "box":
        ra_min = chk.number("ra_min", -360.0, 720.0)
        ra_max = chk.number("ra_max", -360.0, 720.0)
        dec_min = chk.number("dec_min", -90.0, 90.0)
        dec_max = chk.number("dec_max", -90.0, 90.0)
        if len(problems) > n_before:
            return None
        if dec_min >= dec_max:
            chk.fail(f"dec_min = {dec_min} must be below dec_max = {dec_max}")
            return None
        if ra_max - ra_min >= 360.0:
            width = 360.0
        else:
            width = (ra_max - ra_min) % 360.0
            if width == 0.0:
                chk.fail(f"ra_min = ra_max = {ra_min}: empty RA range (use 0 and 360 for a "
                         "full ring)")
                return None
        return Box(**common, ra_min=np.radians(ra_min % 360.0), width=np.radians(width),
                   dec_min=np.radians(dec_min), dec_max=np.radians(dec_max))

    if shape == "stripe":
        width = chk.number("width", 0.0, 180.0, lo_open=True, hi_open=True)
        has_pole, has_ends = "pole" in spec, ("start" in spec or "end" in spec)
        if has_pole == has_ends:
            chk.fail("give either pole = [ra, dec] or start = [ra, dec] and end = [ra, dec]")
            return None
        if has_pole:
            pole = chk.point("pole")
            if pole is None or width is None:
                return None
            e1, e2 = _orthonormal(pole)
            return Stripe(**common, pole=pole, e1=e1, e2=e2, half_width=np.radians(width / 2),
                          length=None)
        start, end = chk.point("start"), chk.point("end")
        if start is None or end is None or width is None:
            return None
        cross = np.cross(start, end)
        sin_len = np.linalg.norm(cross)
        if sin_len < 1e-8:
            chk.fail("start and end coincide or are antipodal; the great circle is undefined")
            return None
        pole = cross / sin_len
        length = float(np.arctan2(sin_len, start @ end))
        return Stripe(**common, pole=pole, e1=start, e2=np.cross(pole, start),
                      half_width=np.radians(width / 2), length=length)

    # polygon
    raw = spec.get("vertices")
    if not isinstance(raw, (list, tuple)):
        chk.fail("vertices must be a list of [ra, dec] pairs")
        return None
    pts = [chk.point(f"vertices[{j}]", v) for j, v in enumerate(raw)]
    if len(problems) > n_before:
        return None
    verts = np.array(pts)
    if len(verts) > 1 and np.allclose(verts[0], verts[-1], atol=1e-12):
        verts = verts[:-1]
    if len(verts) < 3:
        chk.fail(f"a polygon needs at least 3 distinct vertices; got {len(verts)}")
        return None
    dup = np.flatnonzero(np.einsum("ij,ij->i", verts, np.roll(verts, -1, axis=0)) > 1 - 1e-14)
    if dup.size:
        chk.fail(f"vertices {int(dup[0])} and {int((dup[0] + 1) % len(verts))} coincide")
        return None
    centre = verts.sum(axis=0)
    norm = np.linalg.norm(centre)
    cos_rho = float((verts @ centre).min() / norm) if norm > 0 else -1.0
    if norm == 0 or cos_rho <= np.sin(np.radians(0.5)):
        chk.fail("the polygon must fit inside a hemisphere (every vertex less than ~89.5° "
                 "from the mean vertex direction); split it into smaller polygons")
        return None
    return Polygon(**common, vertices=verts, centre=centre / norm, cos_rho=cos_rho)


def load_regions(spec: str | os.PathLike[str] | Mapping[str, Any]
                 ) -> tuple[list[Region], dict[str, Any], str]:
    """Parse a region description (TOML path or already-parsed dict).

    Returns
    -------
    regions, mask_metadata, source name
    """
    if isinstance(spec, Mapping):
        data, source = spec, "regions"
    else:
        source = str(spec)
        data = read_toml(spec, "region file")
    problems: list[str] = []
    unknown = set(data) - {"mask", "region"}
    if unknown:
        problems.append(f"{source}: unknown top-level keys {sorted(unknown)}; expected "
                        "[mask] and [[region]]")
    meta = data.get("mask", {})
    if not isinstance(meta, Mapping):
        problems.append(f"{source}: [mask] must be a table")
        meta = {}
    bad_meta = set(meta) - MASK_KEYS
    if bad_meta:
        problems.append(f"{source}: unknown [mask] keys {sorted(bad_meta)}; allowed "
                        f"{sorted(MASK_KEYS)}")
    raw = data.get("region")
    if not isinstance(raw, list) or not raw:
        problems.append(f"{source}: no regions; add [[region]] tables")
        raw = []
    regions = []
    for i, item in enumerate(raw, start=1):
        sub: list[str] = []
        reg = _parse_region(i, item, sub)
        problems.extend(f"{source}: {p}" for p in sub)
        if reg is not None and not sub:
            regions.append(reg)
    if problems:
        raise InputError("; ".join(problems), problems)
    return regions, dict(meta), source


def _hash64(x: NDArray[np.int64]) -> NDArray[np.uint64]:
    """Well-mixed 64-bit hash of integers (the SplitMix64 finaliser, Steele, Lea & Flood
    2014, OOPSLA), used as a reproducible pseudo-random offset per sub-pixel."""
    z = x.astype(np.uint64) + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def _paint(regions: list[Region], vec: NDArray[np.float64]) -> NDArray[np.float64]:
    pts = _Points(vec)
    out = np.zeros(vec.shape[0])
    for reg in regions:
        inside = reg.contains(pts)
        out[inside] = reg.completeness if reg.include else 0.0
    return out


def paint_regions(regions: list[Region], nside: int, *, oversample: int = DEFAULT_OVERSAMPLE,
                  nest: bool = False) -> NDArray[np.float64]:
    """Completeness per pixel from parsed regions (see module docstring for the rules)."""
    npix = hp.nside2npix(nside)
    values = np.empty(npix)
    for start in range(0, npix, BATCH_POINTS):
        pix = np.arange(start, min(npix, start + BATCH_POINTS))
        values[pix] = _paint(regions, np.column_stack(hp.pix2vec(nside, pix, nest=nest)))
    if oversample <= 0:
        return values
    step = hp.nside2resol(nside) / 4.0
    edge = np.concatenate([reg.boundary(step) for reg in regions])
    hit = np.unique(hp.vec2pix(nside, edge[:, 0], edge[:, 1], edge[:, 2], nest=nest))
    nb = hp.get_all_neighbours(nside, hit, nest=nest).ravel()
    edge_pix = np.unique(np.concatenate([hit, nb[nb >= 0]]))
    parents = edge_pix if nest else hp.ring2nest(nside, edge_pix)
    nchild = 4**oversample
    # One point uniformly placed inside each sub-pixel (a random descendant at the finest
    # HEALPix level): stratified sampling.  Sub-pixel *centres* would sit exactly on edges
    # that follow the equator or a meridian (HEALPix rings and pixel centres lie there)
    # and bias such areas by half a sub-pixel row.  The offset is a hash of the sub-pixel
    # index, so a pixel's value depends only on the regions and that pixel.
    deeper = 2 * (int(np.log2(SAMPLE_NSIDE)) - int(np.log2(nside)) - oversample)
    per_batch = max(1, BATCH_POINTS // nchild)
    for start in range(0, edge_pix.size, per_batch):
        par = parents[start:start + per_batch].astype(np.int64)
        child = ((par << (2 * oversample))[:, None] + np.arange(nchild)[None, :]).ravel()
        point = (child << deeper) + (_hash64(child) >> np.uint64(64 - deeper)).astype(np.int64)
        sub = _paint(regions, np.column_stack(hp.pix2vec(SAMPLE_NSIDE, point, nest=True)))
        values[edge_pix[start:start + per_batch]] = sub.reshape(-1, nchild).mean(axis=1)
    log.debug("painted %d regions at N_side %d; %d boundary pixels oversampled %d×",
              len(regions), nside, edge_pix.size, nchild)
    return values


def build_mask(regions: str | os.PathLike[str] | Mapping[str, Any], nside: int | None = None,
               *, oversample: int = DEFAULT_OVERSAMPLE, nest: bool = False) -> Footprint:
    """Build a completeness map from a region description.

    Parameters
    ----------
    regions : path or dict
        TOML file (schema in the module docstring) or the equivalent parsed dict.
    nside : int, optional
        HEALPix N_side (power of 2); default ``[mask] nside`` of the description.
    oversample : int
        Boundary pixels are averaged over 4^oversample sub-pixels.
    nest : bool
        NESTED ordering of the result (RING by default).

    Raises
    ------
    InputError
        Bad description (region number and key named), bad N_side, empty result.
    """
    regs, meta, source = load_regions(regions)
    if nside is None:
        nside = meta.get("nside")
        if nside is None:
            raise InputError(f"{source}: no N_side given and no [mask] nside key")
    if isinstance(nside, bool) or not isinstance(nside, (int, np.integer)) \
            or not hp.isnsideok(int(nside), nest=True):
        raise InputError(f"{source}: N_side = {nside!r} must be a power of 2 (1 … 2^29)")
    if not isinstance(oversample, (int, np.integer)) or not 0 <= oversample <= 6:
        raise InputError(f"oversample = {oversample!r}; expected an integer in [0, 6]")
    if int(nside) << int(oversample) > SAMPLE_NSIDE:
        raise InputError(f"N_side {nside} with oversample {oversample} exceeds HEALPix's "
                         f"finest level 2^29")
    values = paint_regions(regs, int(nside), oversample=int(oversample), nest=nest)
    fp = Footprint(values, nest=nest, source=source)
    fp.meta = dict(meta)
    return fp
