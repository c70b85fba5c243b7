"""Footprint page: completeness and jackknife regions on an equal-area sky map.

The map is a Lambert azimuthal equal-area projection centred on the footprint (east to the
left, north up), which keeps areas honest, never cuts the footprint at an RA seam and suits
small and large footprints alike. Pixels are looked up per image cell, so the picture is
exact to the cell size whatever the HEALPix resolution.
"""

from __future__ import annotations

import logging
import math
import os
from pathlib import Path
from typing import Any

import healpy as hp
import numpy as np
from matplotlib.colors import ListedColormap
from numpy.typing import NDArray
from scipy import ndimage

from . import access as ac
from . import style as st
from .layout import Page, wrap
from .pagespec import PageSpec

log = logging.getLogger(__name__)

_CELLS = 420  # image cells along the long side


def _resolve(path: Any, run_dir: str | os.PathLike[str] | None) -> Path | None:
    if not path:
        return None
    p = Path(str(path))
    if not p.is_absolute() and run_dir is not None:
        p = Path(run_dir) / p
    return p


def load_mask(path: Path) -> NDArray[np.float64]:
    """Completeness map in RING ordering (healpy.read_map converts NESTED files)."""
    m = np.asarray(hp.read_map(str(path), dtype=np.float64), dtype=np.float64)
    m[~np.isfinite(m) | (m == hp.UNSEEN) | (m < 0)] = 0.0
    return m


def apply_vetoes(mask: NDArray[np.float64], paths: list[Path]) -> NDArray[np.float64]:
    """The mask times each veto map, resampled to the mask's N_side as the run does."""
    nside = hp.npix2nside(mask.size)
    out = mask.copy()
    for path in paths:
        veto = load_mask(path)
        if veto.size != mask.size:
            veto = hp.ud_grade(veto, nside)
        out *= veto
    return out


def load_regions(path: Path) -> tuple[NDArray[np.int64], bool]:
    """Region map (−1 outside) and its ordering flag from a regions ``.npz``."""
    with np.load(path, allow_pickle=False) as d:
        return np.asarray(d["region_map"], dtype=np.int64), bool(d["nest"]) \
            if "nest" in d else False


class _Frame:
    """Lambert azimuthal equal-area projection about a unit vector (unit sphere)."""

    def __init__(self, centre: NDArray[np.float64]):
        self.e0 = centre / np.linalg.norm(centre)
        pole = np.array([0.0, 0.0, 1.0])
        if abs(self.e0 @ pole) > 0.999:
            pole = np.array([1.0, 0.0, 0.0])
        self.east = np.cross(pole, self.e0)
        self.east /= np.linalg.norm(self.east)
        self.north = np.cross(self.e0, self.east)

    def forward(self, v: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
        """Plot coordinates (x with east to the left, y north) of unit vectors (..., 3)."""
        cosc = np.clip(v @ self.e0, -1.0, 1.0)
        k = np.sqrt(2.0 / np.maximum(1.0 + cosc, 1e-12))
        return -k * (v @ self.east), k * (v @ self.north)

    def inverse(self, x: NDArray, y: NDArray) -> tuple[NDArray, NDArray[np.bool_]]:
        """Unit vectors of plot points, and which points lie on the sphere (ρ ≤ 2)."""
        rho = np.hypot(x, y)
        ok = rho <= 2.0
        c = 2.0 * np.arcsin(np.clip(rho / 2.0, 0.0, 1.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            ux, uy = np.where(rho > 0, -x / rho, 0.0), np.where(rho > 0, y / rho, 0.0)
        v = (np.cos(c)[..., None] * self.e0 + np.sin(c)[..., None]
             * (ux[..., None] * self.east + uy[..., None] * self.north))
        return v, ok


def _vec(ra: NDArray, dec: NDArray) -> NDArray[np.float64]:
    r, d = np.radians(ra), np.radians(dec)
    return np.stack([np.cos(d) * np.cos(r), np.cos(d) * np.sin(r), np.sin(d)], axis=-1)


def _ang(v: NDArray) -> tuple[NDArray, NDArray]:
    ra = np.degrees(np.arctan2(v[..., 1], v[..., 0])) % 360.0
    dec = np.degrees(np.arcsin(np.clip(v[..., 2], -1, 1)))
    return ra, dec


class SkyImage:
    """Image grid of a footprint in the projection, with pixel lookups."""

    def __init__(self, mask: NDArray[np.float64], aspect: float):
        nside = hp.npix2nside(mask.size)
        occ = np.flatnonzero(mask > 0)
        vec = np.array(hp.pix2vec(nside, occ)).T
        mean = (vec * mask[occ, None]).sum(axis=0)
        centre = mean if np.linalg.norm(mean) > 1e-3 * len(occ) else np.array([1.0, 0, 0])
        self.frame = _Frame(centre)
        x, y = self.frame.forward(vec)
        pad = 2.5 * hp.max_pixrad(nside) + 0.01
        x0, x1, y0, y1 = x.min() - pad, x.max() + pad, y.min() - pad, y.max() + pad
        # Grow the short side so the image keeps the panel's aspect (height / width).
        w, h = x1 - x0, y1 - y0
        if h / w < aspect:
            grow = (aspect * w - h) / 2
            y0, y1 = y0 - grow, y1 + grow
        else:
            grow = (h / aspect - w) / 2
            x0, x1 = x0 - grow, x1 + grow
        self.extent = (x0, x1, y0, y1)
        nx = _CELLS if aspect <= 1 else max(60, int(_CELLS / aspect))
        ny = max(60, int(nx * aspect))
        self.xe, self.ye = np.linspace(x0, x1, nx + 1), np.linspace(y0, y1, ny + 1)
        xc, yc = np.meshgrid(0.5 * (self.xe[1:] + self.xe[:-1]),
                             0.5 * (self.ye[1:] + self.ye[:-1]))
        v, self.on_sphere = self.frame.inverse(xc, yc)
        self.ra, self.dec = _ang(v)
        self.mask_pix = hp.ang2pix(nside, self.ra, self.dec, lonlat=True)
        self.completeness = np.where(self.on_sphere, mask[self.mask_pix], 0.0)

    def lookup(self, values: NDArray, nest: bool, fill: float) -> NDArray:
        nside = hp.npix2nside(values.size)
        pix = hp.ang2pix(nside, self.ra, self.dec, nest=nest, lonlat=True)
        return np.where(self.on_sphere, values[pix], fill)


def _graticule(ax, img: SkyImage) -> None:
    x0, x1, y0, y1 = img.extent
    span = math.degrees(max(x1 - x0, y1 - y0))  # rough angular size
    step = 5.0 if span < 25 else 10.0 if span < 50 else 15.0 if span < 100 else 30.0
    ra_step = step * 2 if span >= 50 else step
    fr = img.frame
    t = np.linspace(0.0, 1.0, 721)
    dec_lines = np.arange(-90 + step, 90, step)
    ra_lines = np.arange(0.0, 360.0, ra_step)
    for dec in dec_lines:
        ra = 360.0 * t
        v = _vec(ra, np.full_like(ra, dec))
        x, y = fr.forward(v)
        ok = (v @ fr.e0) > -0.95
        x, y = np.where(ok, x, np.nan), np.where(ok, y, np.nan)
        ax.plot(x, y, color=st.MUTED, lw=0.35, alpha=0.6, zorder=3)
        _label_line(ax, x, y, f"{dec:+.0f}°", img, "left")
    for ra in ra_lines:
        dec = -89.0 + 178.0 * t
        v = _vec(np.full_like(dec, ra), dec)
        x, y = fr.forward(v)
        ok = (v @ fr.e0) > -0.95
        x, y = np.where(ok, x, np.nan), np.where(ok, y, np.nan)
        ax.plot(x, y, color=st.MUTED, lw=0.35, alpha=0.6, zorder=3)
        _label_line(ax, x, y, f"{ra:.0f}°", img, "bottom")


#: Fraction of the frame next to the lower-left corner kept free of the other axis's labels,
#: so that a Dec label near the bottom never sits on an RA label near the left.
_CORNER = 0.2


def _label_line(ax, x, y, text, img: SkyImage, side: str) -> None:
    """Label a graticule line where it meets the left (Dec) or bottom (RA) frame edge."""
    x0, x1, y0, y1 = img.extent
    mx, my = 0.05 * (x1 - x0), 0.05 * (y1 - y0)
    inside = (x > x0 + mx) & (x < x1 - mx) & (y > y0 + my) & (y < y1 - my)
    inside &= (y > y0 + _CORNER * (y1 - y0)) if side == "left" else \
        (x > x0 + _CORNER * (x1 - x0))
    if not inside.any():
        return
    i = np.flatnonzero(inside)
    j = i[np.argmin(x[i])] if side == "left" else i[np.argmin(y[i])]
    ax.text(x[j], y[j], text, fontsize=st.SMALL, color=st.MUTED, ha="center", va="center",
            zorder=4, clip_on=True, parse_math=False,
            bbox={"boxstyle": "round,pad=0.12", "fc": "white", "ec": "none", "alpha": 0.8})


def _region_colours(img_reg: NDArray[np.int64], k: int) -> NDArray:
    """Greedy colouring so that regions touching in the image get different colours."""
    nb: list[set[int]] = [set() for _ in range(k)]
    for a, b in ((img_reg[:, 1:], img_reg[:, :-1]), (img_reg[1:, :], img_reg[:-1, :])):
        m = (a != b) & (a >= 0) & (b >= 0)
        for u, v in set(zip(a[m].tolist(), b[m].tolist(), strict=True)):
            nb[u].add(v)
            nb[v].add(u)
    n = len(st.REGION_CYCLE)
    choice = np.zeros(k, dtype=np.int64)
    for r in range(k):
        taken = {int(choice[q]) for q in nb[r] if q < r}
        free = [c for c in ((r + i) % n for i in range(n)) if c not in taken]
        choice[r] = free[0] if free else r % n
    return np.array(st.REGION_CYCLE)[choice]


def _panel(ax, img: SkyImage, data, cmap, vmin, vmax, title: str):
    x0, x1, y0, y1 = img.extent
    back = np.ma.masked_where(~img.on_sphere, np.zeros(img.on_sphere.shape))
    ax.pcolormesh(img.xe, img.ye, back, cmap=ListedColormap([st.EMPTY_SKY]),
                  shading="flat", rasterized=True)
    mesh = ax.pcolormesh(img.xe, img.ye, data, cmap=cmap, vmin=vmin, vmax=vmax,
                         shading="flat", rasterized=True)
    # _Frame.forward puts east at negative x: an ordinary axis shows it on the left, as on
    # the sky and in `conecheck mask plot`
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_title(title, fontsize=st.BODY + 1, loc="left")
    _graticule(ax, img)
    return mesh


def footprint_pages(results: dict[str, Any], run_dir: str | os.PathLike[str] | None
                    ) -> list[PageSpec]:
    """One page: the completeness map and the jackknife regions (or why they are missing)."""
    fp = results.get("footprint") if isinstance(results.get("footprint"), dict) else {}
    mask_path = _resolve(fp.get("mask_path"), run_dir)
    reg_path = _resolve(fp.get("regions_path"), run_dir)
    problems: list[str] = []
    mask = regions = None
    if mask_path is None:
        problems.append("results.json names no footprint mask (footprint.mask_path).")
    elif not mask_path.is_file():
        problems.append(f"footprint mask not found: {mask_path}")
    else:
        try:
            mask = load_mask(mask_path)
        except (OSError, ValueError, TypeError, KeyError) as exc:
            problems.append(f"footprint mask {mask_path} could not be read: {exc}")
    if mask is not None:
        # the completeness the cones saw: the mask times the vetoes (as the area and the
        # regions are), not the mask file alone
        vetoes = [_resolve(v, run_dir) for v in fp.get("veto_paths") or []]
        missing = [str(v) for v in vetoes if v is None or not v.is_file()]
        if missing:
            problems.append(f"veto map(s) not found: {', '.join(missing)}; the completeness "
                            f"panel shows the mask without them")
        else:
            try:
                mask = apply_vetoes(mask, [v for v in vetoes if v is not None])
            except (OSError, ValueError, TypeError, KeyError) as exc:
                problems.append(f"veto maps could not be applied ({exc}); the completeness "
                                f"panel shows the mask without them")
    if mask is not None and not (mask > 0).any():
        problems.append(f"footprint mask {mask_path} is empty (no pixel with completeness > 0)")
        mask = None
    if reg_path is None:
        problems.append("results.json names no jackknife region file (footprint.regions_path).")
    elif not reg_path.is_file():
        problems.append(f"jackknife region file not found: {reg_path}")
    else:
        try:
            regions = load_regions(reg_path)
        except (OSError, ValueError, KeyError) as exc:
            problems.append(f"jackknife region file {reg_path} could not be read: {exc}")
    for p in problems:
        log.warning("report: %s", p)

    info = []
    if fp.get("area_deg2") is not None:
        info.append(f"effective area {ac.fmt(ac.num(fp, 'area_deg2'), 4)} deg²")
    if fp.get("nside") is not None:
        info.append(f"N_side {fp['nside']}")
    if fp.get("n_regions") is not None:
        info.append(f"{fp['n_regions']} jackknife regions")
    comp = fp.get("completeness") if isinstance(fp.get("completeness"), dict) else {}
    counts_line = ""
    if comp:
        how = {"dilute": "the box diluted to the mean completeness",
               "weight": "cone galaxies weighted by 1/completeness",
               "threshold": f"only sky with completeness ≥ {comp.get('threshold')} "
                            "(taken as complete)"}.get(str(comp.get("treatment")), "?")
        area = ac.fmt(ac.num(comp, "covered_area_deg2"), 4)
        mean = ac.fmt_fixed(ac.num(comp, "mean_completeness"), 3)
        counts_line = (f"Counts in cells: covered sky {area} deg², mean completeness {mean}; "
                       f"incompleteness treated as '{comp.get('treatment')}': {how}.")
    axes = (("footprint:completeness", "footprint:colourbar") if mask is not None else ()) + \
        (("footprint:regions",) if mask is not None and regions is not None else ())

    def draw(page: Page) -> None:
        x0, w = st.MARGIN_X, page.content_width
        y = 1.1
        page.text(x0, y, " · ".join(info) or "footprint summary not recorded", st.BODY)
        for line in wrap(counts_line, w, st.BODY) if counts_line else []:
            y += 0.18
            page.text(x0, y, line, st.BODY)
        y += 0.1
        for p in problems:
            for line in wrap(p, w, st.BODY):
                y += 0.18
                page.text(x0, y, line, st.BODY, colour=st.VERDICT_COLOURS["warn"])
        if mask is None:
            page.text(x0, y + 0.4, "No footprint map can be drawn.", st.H2, bold=True)
            return
        top = y + 0.25
        panel_h = (page.h - st.CONTENT_BOTTOM - top - 1.0) / 2
        img = SkyImage(mask, panel_h / w)
        ax = page.axes(x0, top + 0.25, w, panel_h - 0.2, "footprint:completeness")
        comp = np.ma.masked_less_equal(img.completeness, 0.0)
        mesh = _panel(ax, img, comp, st.COMPLETENESS_CMAP, 0.0, 1.0,
                      "Completeness (east to the left, equal-area projection)")
        cax = page.axes(x0 + w - 2.2, top + panel_h + 0.12, 2.2, 0.1, "footprint:colourbar")
        cb = page.fig.colorbar(mesh, cax=cax, orientation="horizontal")
        cb.set_label("completeness", fontsize=st.SMALL)
        cb.ax.tick_params(labelsize=st.SMALL)
        if regions is None:
            page.text(x0, top + panel_h + 0.9, "Jackknife regions: not available.", st.BODY,
                      bold=True)
            return
        rmap, nest = regions
        reg = img.lookup(rmap, nest, -1).astype(np.int64)
        reg[img.completeness <= 0] = -1
        k = int(max(rmap.max() + 1, 1))
        colours = ListedColormap(_region_colours(reg, k))
        top2 = top + panel_h + 0.65
        ax2 = page.axes(x0, top2 + 0.25, w, panel_h - 0.2, "footprint:regions")
        _panel(ax2, img, np.ma.masked_less(reg, 0), colours, -0.5, k - 0.5,
               f"{k} jackknife regions")
        edge = np.zeros(reg.shape, dtype=bool)
        edge[:, 1:] |= reg[:, 1:] != reg[:, :-1]
        edge[1:, :] |= reg[1:, :] != reg[:-1, :]
        edge &= reg >= 0
        ax2.pcolormesh(img.xe, img.ye, np.ma.masked_where(~edge, np.ones(reg.shape)),
                       cmap=ListedColormap([st.INK]), shading="flat", rasterized=True,
                       zorder=2)
        if k <= 60:
            xc = 0.5 * (img.xe[1:] + img.xe[:-1])
            yc = 0.5 * (img.ye[1:] + img.ye[:-1])
            xx, yy = np.meshgrid(xc, yc)
            for r in range(k):
                m = reg == r
                if m.sum() < 4:
                    continue
                # The region's cell farthest from its edge: inside its largest piece even
                # when the region is curved or split (a median can fall outside it).
                depth = ndimage.distance_transform_edt(np.pad(m, 1))[1:-1, 1:-1]
                j = np.unravel_index(np.argmax(depth), m.shape)
                ax2.text(xx[j], yy[j], str(r), fontsize=st.SMALL,
                         ha="center", va="center", color="white", weight="bold", zorder=5,
                         clip_on=True)

    return [PageSpec("Footprint and jackknife regions", "footprint", draw, axes)]
