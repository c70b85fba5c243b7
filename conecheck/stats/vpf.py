"""Void probability function P₀(R): the fraction of random spheres of radius R holding no
galaxy (docs/design.md §6).

Box: centres uniform in the periodic box.  Cone: centres uniform per solid angle on the
covered sky (``ConeGeometry.covered``: coverage, not completeness) and uniform in comoving
volume between χ_min and χ_max; at each radius only spheres wholly inside the survey are
used — χ ± R inside the shell and the covered fraction of the disc of angular radius
arcsin(R/χ) at least ``min_inside_fraction``. Incompleteness inside the covered sky is
treated as ``survey.completeness`` says (:mod:`conecheck.footprint.coverage`).

Weights: a sphere is empty when it holds no galaxy of positive weight; up-weighting a
neighbour cannot fill a sphere, so weights enter P₀ only through that test.
Jackknife: the region of a sphere is the region of its centre; delete-one k drops the
spheres centred in region k.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..pairs import nearest_distance
from ..pairs.binning import check_rp_edges
from ._common import check_filled, want_jackknife
from .base import (
    SAMPLING_TRIALS,
    SAMPLING_VARIANCE,
    BoxSample,
    ConeGeometry,
    ConeSample,
    Measurement,
)
from .settings import fraction
from .statistic import Cost, Display, Statistic

NAME = "vpf"
#: Bytes per sphere and radius a task holds (centre, counts and inside test, float64).
BYTES_PER_SPHERE_RADIUS = 48


@dataclass(frozen=True)
class VpfSettings:
    """Void probability function P₀(R).

    Attributes
    ----------
    radii : tuple of float
        Sphere radii [Mpc/h], increasing.
    n_spheres : int
        Random sphere centres drawn per catalogue (a cone keeps those wholly inside).
    min_inside_fraction : float
        Cone only: a sphere counts as inside when its disc's footprint fraction reaches this
        and χ ± R lies inside the shell.
    """

    radii: tuple[float, ...] = (2.0, 4.0, 6.0, 8.0, 10.0, 12.0, 14.0, 16.0)
    n_spheres: int = 100_000
    min_inside_fraction: float = 0.99

    def __post_init__(self) -> None:
        key = "statistics.vpf"
        r = check_rp_edges(self.radii, f"{key}.radii")
        if r[0] <= 0:
            raise InputError(f"{key}.radii: radii must be > 0 Mpc/h, got {r.tolist()}")
        object.__setattr__(self, "radii", tuple(float(x) for x in r))
        if not (isinstance(self.n_spheres, (int, np.integer)) and self.n_spheres >= 1):
            raise InputError(f"{key}.n_spheres: expected a positive integer, "
                             f"got {self.n_spheres!r}")
        fraction(self.min_inside_fraction, f"{key}.min_inside_fraction")


def _p0(empty: NDArray[np.bool_], use: NDArray[np.bool_], region: NDArray[np.int64] | None,
        n_regions: int, radii: NDArray[np.float64], extra: dict) -> Measurement:
    """P₀ per radius from ``empty``/``use`` masks of shape (n_spheres, n_radii)."""
    n_use = use.sum(axis=0).astype(np.float64)
    if np.any(n_use == 0):
        bad = radii[n_use == 0]
        raise InputError(f"vpf: no sphere of radius {bad.tolist()} Mpc/h fits inside the survey; "
                         "use smaller radii or more spheres")
    n_empty = (empty & use).sum(axis=0).astype(np.float64)
    delete_one = None
    if n_regions:
        e_k = np.zeros((n_regions, radii.size))
        u_k = np.zeros((n_regions, radii.size))
        np.add.at(e_k, region, (empty & use).astype(np.float64))
        np.add.at(u_k, region, use.astype(np.float64))
        left = n_use[None] - u_k
        if np.any(left == 0):
            raise InputError("vpf: removing one jackknife region leaves no sphere; use fewer "
                             "regions or more spheres")
        delete_one = (n_empty[None] - e_k) / left
    extra = dict(extra)
    extra["n_spheres_used"] = n_use.astype(int).tolist()
    extra[SAMPLING_TRIALS] = {"n": n_use.astype(int).tolist(), "width": [1.0] * radii.size}
    return Measurement(name=NAME, bins=radii.copy(), value=n_empty / n_use,
                       delete_one=delete_one, bin_label="R [Mpc/h]", value_label="P_0(R)",
                       extra=extra)


def _empty(nearest: NDArray[np.float64], radii: NDArray[np.float64]) -> NDArray[np.bool_]:
    """(n_spheres, n_radii): no galaxy closer than R to the centre (``nearest`` ≥ R)."""
    return nearest[:, None] >= radii[None, :]


def vpf_box(sample: BoxSample, settings: VpfSettings | None = None,
            rng: np.random.Generator | None = None, *, jackknife: bool | None = None
            ) -> Measurement:
    """P₀(R) of a periodic box sample from ``settings.n_spheres`` random spheres.

    Parameters
    ----------
    sample : BoxSample
    settings : VpfSettings, optional
    rng : numpy.random.Generator
        Seeded generator for the sphere centres (required).
    jackknife : bool, optional
        Delete-one vectors; needs ``sample.layout`` to place spheres in regions.
    """
    s = settings or VpfSettings()
    if rng is None:
        raise InputError("vpf: a seeded numpy Generator (rng) is needed for the sphere centres")
    radii = np.asarray(s.radii)
    jk = want_jackknife(jackknife, sample.n_regions, "vpf")
    if jk and sample.layout is None:
        raise InputError("vpf: the box jackknife needs the sub-volume layout (build the sample "
                         "with BoxSample.with_regions)")
    centres = rng.uniform(0.0, sample.box_size, size=(s.n_spheres, 3))
    nearest = nearest_distance(centres, sample.position[sample.w > 0], r_max=radii[-1],
                               box_size=sample.box_size)
    region = None
    if jk:
        region = sample.layout.region_of(centres)
        check_filled(region, sample.n_regions, "VPF spheres")
    use = np.ones((s.n_spheres, radii.size), dtype=bool)
    m = _p0(_empty(nearest, radii), use, region, sample.n_regions if jk else 0, radii,
            {"geometry": "box"})
    # Given the galaxies, each random sphere is empty independently with probability P₀, so
    # the box value carries a binomial sampling variance P₀(1 − P₀)/n that the cones (with
    # their own spheres) do not share: it belongs in the offset's own error.
    m.extra[SAMPLING_VARIANCE] = (m.value * (1.0 - m.value) / s.n_spheres).tolist()
    return m


def sphere_centres_cone(geometry: ConeGeometry, n: int, rng: np.random.Generator
                        ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Random centres inside the survey: uniform on the covered sky, χ uniform in volume.

    Returns ``ra, dec`` [deg] and ``chi`` [Mpc/h].
    """
    ra, dec = geometry.covered.sample(n, rng)
    u = rng.random(n)
    c3 = geometry.chi_min**3 + u * (geometry.chi_max**3 - geometry.chi_min**3)
    return np.asarray(ra, dtype=np.float64), np.asarray(dec, dtype=np.float64), np.cbrt(c3)


def vpf_cone_centres(geometry: ConeGeometry, settings: VpfSettings | None,
                     rng: np.random.Generator) -> dict[str, NDArray[Any]]:
    """Random sphere centres of one survey geometry and which of them lie inside it.

    Depends only on the footprint, the radial limits and the radii, never on the galaxies:
    the pipeline draws them once per sample and cut and shares them with every cone (like
    the randoms), which removes the footprint look-ups from every cone's measurement.

    Returns
    -------
    dict
        ``ra``, ``dec`` [deg], ``chi`` [Mpc/h] of the centres, ``use`` (n_spheres × n_radii:
        sphere wholly inside the survey, the geometric test of :func:`vpf_cone`) and
        ``region`` (sky jackknife region of each centre, −1 outside every region).
    """
    s = settings or VpfSettings()
    radii = np.asarray(s.radii)
    ra, dec, chi = sphere_centres_cone(geometry, s.n_spheres, rng)
    use = np.empty((s.n_spheres, radii.size), dtype=bool)
    for i, r in enumerate(radii):
        radial = (chi - r >= geometry.chi_min) & (chi + r <= geometry.chi_max)
        ang = np.degrees(np.arcsin(np.clip(r / chi, 0.0, 1.0)))
        frac = np.zeros(s.n_spheres)
        if radial.any():
            frac[radial] = geometry.covered.disc_fraction(ra[radial], dec[radial], ang[radial])
        use[:, i] = radial & (frac >= s.min_inside_fraction)
    region = (np.full(ra.size, -1, dtype=np.int64) if geometry.regions is None else
              np.asarray(geometry.regions.region_of(ra, dec), dtype=np.int64))
    return {"ra": ra, "dec": dec, "chi": chi, "use": use, "region": region}


def vpf_cone(sample: ConeSample, geometry: ConeGeometry, settings: VpfSettings | None = None,
             rng: np.random.Generator | None = None, *, jackknife: bool | None = None,
             centres: dict[str, NDArray[Any]] | None = None) -> Measurement:
    """P₀(R) of a cone sample from random spheres wholly inside the survey.

    Parameters
    ----------
    sample : ConeSample
    geometry : ConeGeometry
        Footprint, shell limits and (for the jackknife) the sky regions.
    settings : VpfSettings, optional
    rng : numpy.random.Generator
        Seeded generator for the sphere centres (required unless ``centres`` is given).
    jackknife : bool, optional
    centres : dict, optional
        Centres shared by every cone of one sample and cut (:func:`vpf_cone_centres`).
    """
    s = settings or VpfSettings()
    radii = np.asarray(s.radii)
    jk = want_jackknife(jackknife, sample.n_regions, "vpf")
    if centres is None:
        if rng is None:
            raise InputError("vpf: a seeded numpy Generator (rng) is needed for the sphere "
                             "centres")
        centres = vpf_cone_centres(geometry, s, rng)
    ra, dec, chi = centres["ra"], centres["dec"], centres["chi"]
    if centres["use"].shape != (ra.size, radii.size):
        raise InputError(f"vpf: shared sphere centres were made for {centres['use'].shape[1]} "
                         f"radii, the settings have {radii.size}")
    use = np.array(centres["use"], dtype=bool)
    nearest = nearest_distance(ConeSample(ra, dec, chi).xyz, sample.xyz[sample.w > 0],
                               r_max=radii[-1])
    region = None
    k = 0
    if jk:
        k = sample.n_regions
        if geometry.regions is None:
            raise InputError("vpf: the cone jackknife needs the geometry's region map")
        region = np.asarray(centres["region"], dtype=np.int64)
        outside = region < 0
        use[outside] = False
        region = np.where(outside, 0, region)
    return _p0(_empty(nearest, radii), use, region, k, radii, {"geometry": "cone"})


class VoidProbability(Statistic):
    """P₀(R) from random spheres; on cones the centres are shared by every cone of a cut."""

    name = NAME
    counts_in_cells = True
    weighted_counts = False
    settings_type = VpfSettings
    display = Display(title="void probability P_0(R)", short="voids P_0(R)", symbol="P_0",
                      order=30)

    def n_bins(self, settings=None):
        return len(self.settings_or_default(settings).radii)

    def prepare_cone(self, randoms, geometry, settings=None, *, n_data=None, rng=None):
        # sphere centres and their inside-the-survey test depend on the geometry only
        if rng is None:
            return None
        return vpf_cone_centres(geometry, self.settings_or_default(settings), rng)

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        return vpf_box(sample, settings, rng, jackknife=jackknife)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        return vpf_cone(sample, geometry, settings, rng, jackknife=jackknife, centres=shared)

    def cost(self, settings, randoms_multiple):
        s = self.settings_or_default(settings)
        sphere = 4.0 / 3.0 * math.pi * max(s.radii) ** 3
        return Cost(centre_volume=s.n_spheres * sphere,
                    task_bytes=float(s.n_spheres) * len(s.radii) * BYTES_PER_SPHERE_RADIUS)


STATISTIC = VoidProbability()
