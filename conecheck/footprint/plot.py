"""Pictures of a footprint, optionally with its jackknife regions.

Two projections: ``"mollweide"`` (the whole sky, equal area) and ``"zoom"`` (plate
carrée on the footprint's RA/Dec bounding box, aspect corrected at the mid
declination).  RA increases to the left, as on the sky.  The map is rasterised by
looking up the HEALPix pixel of every image cell, so the picture is exact to the
cell size whatever the N_side.
"""

from __future__ import annotations

import os

import matplotlib

matplotlib.use("Agg")

import healpy as hp  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.colors import ListedColormap  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import FuncFormatter  # noqa: E402
from numpy.typing import NDArray  # noqa: E402

from ..atomic import atomic_path  # noqa: E402
from ..errors import InputError  # noqa: E402
from .jackknife import SkyRegions  # noqa: E402
from .maps import Footprint  # noqa: E402
from .summary import bounding_box  # noqa: E402

PROJECTIONS = ("auto", "mollweide", "zoom")
#: Colours cycled over jackknife regions (a stride through tab20 so neighbours differ).
_REGION_COLOURS = plt.get_cmap("tab20")(np.arange(20))


def _central_ra(fp: Footprint) -> float:
    bb = bounding_box(fp)
    width = (bb["ra_max"] - bb["ra_min"]) % 360.0 or 360.0
    return (bb["ra_min"] + width / 2.0) % 360.0


def _grid(fp: Footprint, projection: str, ra_c: float, ncells: int
          ) -> tuple[NDArray[np.float64], NDArray[np.float64], dict[str, float]]:
    """Cell-centre offsets dRA (east positive) and Dec of the image grid, degrees."""
    if projection == "mollweide":
        lim = {"x0": -180.0, "x1": 180.0, "y0": -90.0, "y1": 90.0}
        nx, ny = ncells, ncells // 2
    else:
        bb = bounding_box(fp)
        pad = 2.0 * np.degrees(hp.max_pixrad(fp.nside)) + 0.5
        width = (bb["ra_max"] - bb["ra_min"]) % 360.0 or 360.0
        half = min(180.0, width / 2.0 + pad)
        lim = {"x0": -half, "x1": half, "y0": max(-90.0, bb["dec_min"] - pad),
               "y1": min(90.0, bb["dec_max"] + pad)}
        cosd = max(np.cos(np.radians(0.5 * (lim["y0"] + lim["y1"]))), 0.1)
        aspect = (lim["x1"] - lim["x0"]) * cosd / (lim["y1"] - lim["y0"])
        nx, ny = (ncells, max(50, int(ncells / aspect))) if aspect >= 1 else \
            (max(50, int(ncells * aspect)), ncells)
        lim["aspect"] = 1.0 / cosd
    xe = np.linspace(lim["x0"], lim["x1"], nx + 1)
    ye = np.linspace(lim["y0"], lim["y1"], ny + 1)
    return xe, ye, lim


def _lookup(fp: Footprint, xe, ye, ra_c) -> NDArray[np.int64]:
    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
    dra, dec = np.meshgrid(xc, yc)
    return hp.ang2pix(fp.nside, (ra_c + dra) % 360.0, dec, nest=fp.nest, lonlat=True)


def _region_boundaries(img: NDArray[np.int64]) -> NDArray[np.bool_]:
    edge = np.zeros(img.shape, dtype=bool)
    dx = img[:, 1:] != img[:, :-1]
    dy = img[1:, :] != img[:-1, :]
    edge[:, 1:] |= dx
    edge[1:, :] |= dy
    return edge & (img >= 0)


def _region_colours(reg: NDArray[np.int64], k: int) -> NDArray[np.float64]:
    """Colours per region such that regions touching in the image differ (greedy)."""
    pairs = set()
    for a, b in ((reg[:, 1:], reg[:, :-1]), (reg[1:, :], reg[:-1, :])):
        diff = (a != b) & (a >= 0) & (b >= 0)
        pairs.update(zip(a[diff].tolist(), b[diff].tolist(), strict=True))
    neighbours: list[set[int]] = [set() for _ in range(k)]
    for a, b in pairs:
        neighbours[a].add(b)
        neighbours[b].add(a)
    choice = np.zeros(k, dtype=np.int64)
    used = np.zeros(len(_REGION_COLOURS), dtype=np.int64)
    for r in range(k):
        taken = {int(choice[n]) for n in neighbours[r] if n < r}
        free = [c for c in np.argsort(used, kind="stable") if c not in taken]
        choice[r] = free[0] if free else (7 * r) % len(_REGION_COLOURS)
        used[choice[r]] += 1
    return _REGION_COLOURS[choice]


def _draw(ax, fp: Footprint, projection: str, ra_c: float, ncells: int,
          regions: SkyRegions | None, title: str):
    xe, ye, lim = _grid(fp, projection, ra_c, ncells)
    pix = _lookup(fp, xe, ye, ra_c)
    moll = projection == "mollweide"
    # East (larger RA) to the left: plot x = −dRA.
    X = np.radians(-xe) if moll else -xe
    Y = np.radians(ye) if moll else ye
    if regions is None:
        img = np.ma.masked_equal(fp.values[pix], 0.0)
        cmap = plt.get_cmap("viridis").with_extremes(bad="#e8e8e8")
        mesh = ax.pcolormesh(X, Y, img, cmap=cmap, vmin=0.0, vmax=1.0, shading="flat",
                             rasterized=True)
        ax.figure.colorbar(mesh, ax=ax, orientation="horizontal", pad=0.08, fraction=0.05,
                           label="completeness")
    else:
        if regions.nside != fp.nside or regions.nest != fp.nest:
            raise InputError("plot: jackknife regions and mask have different N_side/ordering")
        reg = regions.region_map[pix]
        colours = ListedColormap(_region_colours(reg, regions.k))
        ax.pcolormesh(X, Y, np.ma.masked_less(reg, 0), cmap=colours, vmin=-0.5,
                      vmax=regions.k - 0.5, shading="flat", rasterized=True)
        edge = np.ma.masked_where(~_region_boundaries(reg), np.ones(reg.shape))
        ax.pcolormesh(X, Y, edge, cmap=ListedColormap(["#202020"]), shading="flat",
                      rasterized=True)
        if regions.k <= 80:
            dra = (regions.centres_ra_deg - ra_c + 180.0) % 360.0 - 180.0
            for i, (x, y) in enumerate(zip(-dra, regions.centres_dec_deg, strict=True)):
                ax.text(np.radians(x) if moll else x, np.radians(y) if moll else y, str(i),
                        ha="center", va="center", fontsize=6 if regions.k > 30 else 8)
    ax.set_title(title, fontsize=10)

    def ra_label(v, _pos):
        deg = np.degrees(v) if moll else v
        return f"{(ra_c - deg) % 360.0:.0f}°"

    # Ticks at round RA values (multiples of 30° or 60°).
    span = lim["x1"] - lim["x0"]
    step = 60.0 if span > 200 else 30.0 if span > 60 else 10.0
    ras = np.arange(0.0, 360.0, step)
    off = (ras - ra_c + 180.0) % 360.0 - 180.0
    off = off[(off > lim["x0"] + 1e-6) & (off < lim["x1"] - 1e-6)]
    ax.set_xticks(np.radians(-off) if moll else -off)
    ax.xaxis.set_major_formatter(FuncFormatter(ra_label))
    if moll:
        ax.grid(True, color="0.6", lw=0.4)
        ax.tick_params(axis="x", labelsize=7)
    else:
        # plot x = −ΔRA: increasing x is westward, so east (larger RA) is on the left as
        # on the sky and in the report
        ax.set_xlim(lim["x0"], lim["x1"])
        ax.set_ylim(lim["y0"], lim["y1"])
        ax.set_aspect(lim["aspect"])
        ax.set_xlabel("RA")
        ax.set_ylabel("Dec [deg]")
        ax.grid(True, color="0.7", lw=0.4)


def plot_footprint(fp: Footprint, regions: SkyRegions | None = None, *,
                   projection: str = "auto", ncells: int = 900, title: str | None = None
                   ) -> Figure:
    """Figure of the completeness map (and the jackknife regions, in a second panel).

    Parameters
    ----------
    projection : {"auto", "mollweide", "zoom"}
        ``auto``: zoom when the footprint covers under 30 % of the sky.
    ncells : int
        Image cells along the long side.
    """
    if projection not in PROJECTIONS:
        raise InputError(f"plot: projection {projection!r}; expected one of {PROJECTIONS}")
    if projection == "auto":
        projection = "zoom" if fp.sky_fraction < 0.3 else "mollweide"
    ra_c = _central_ra(fp)
    panels = 1 if regions is None else 2
    sub = {"projection": "mollweide"} if projection == "mollweide" else {}
    if projection == "mollweide":
        panel_h = 4.6
    else:
        _, _, lim = _grid(fp, projection, ra_c, 10)
        shape = (lim["y1"] - lim["y0"]) * lim["aspect"] / (lim["x1"] - lim["x0"])
        panel_h = float(np.clip(6.5 * shape, 1.5, 7.0)) + (1.6 if regions is None else 0.9)
    fig = plt.figure(figsize=(7.5, panel_h * panels + (0.7 if regions is not None else 0.0)),
                     layout="constrained")
    name = title or str(fp.meta.get("name", "") or os.path.basename(fp.source))
    ax = fig.add_subplot(panels, 1, 1, **sub)
    _draw(ax, fp, projection, ra_c, ncells, None,
          f"{name}: {fp.area_deg2:.0f} deg² effective, N_side {fp.nside}")
    if regions is not None:
        ax2 = fig.add_subplot(panels, 1, 2, **sub)
        _draw(ax2, fp, projection, ra_c, ncells, regions,
              f"{regions.k} jackknife regions, area {regions.min_area_deg2:.1f}–"
              f"{regions.max_area_deg2:.1f} deg²")
    return fig


def save_footprint_plot(fp: Footprint, path: str | os.PathLike[str],
                        regions: SkyRegions | None = None, **kwargs) -> None:
    """Write :func:`plot_footprint` to an image file atomically (format from the suffix)."""
    fig = plot_footprint(fp, regions, **kwargs)
    try:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=150)
    finally:
        plt.close(fig)
