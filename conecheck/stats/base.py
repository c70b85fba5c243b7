"""The one small interface every statistic shares.

A statistic measures a data vector with bin labels from a catalogue (box or cone),
optionally with jackknife delete-one vectors; :class:`Measurement` carries that to
the comparison stage, which never needs to know which statistic it holds.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..cosmology import DEG2_PER_SR, Cosmology
from ..errors import InputError
from ..footprint.protocols import JackknifeRegions, SkyFootprint
from ..jackknife import BoxRegions, jackknife_covariance
from ..sphere import radec_chi_to_xyz

#: Key of ``Measurement.extra`` holding, per bin, the variance of a box value that comes from
#: the box estimator's own random sampling (e.g. random sphere centres), which the cones do
#: not share. The comparison adds it to the offset's own error.
SAMPLING_VARIANCE = "sampling_variance"
#: Key of ``Measurement.extra`` for statistics that are fractions of independent trials (a
#: count distribution over its centres, the VPF over its spheres): ``{"n": trials per bin,
#: "width": per-bin divisor}``, the value being (fraction of trials) / width. The comparison
#: uses it for the binomial noise the box's probabilities imply where the cones cannot show
#: any (every cone empty in a bin).
SAMPLING_TRIALS = "sampling_trials"
#: Key of ``Measurement.extra`` holding, per bin, the variance of a box value over the box's
#: three axes taken as the line of sight. The cones look along every direction, so this part
#: of the box value is not shared by them; the comparison adds it to the offset's own error,
#: with the two degrees of freedom of a three-value variance.
LOS_VARIANCE = "los_variance"


@dataclass
class Measurement:
    """One statistic measured on one catalogue.

    Attributes
    ----------
    name : str
        Statistic key: ``number_density``, ``wp``, ``cic``, ``vpf``, ``annuli``.
    bins : ndarray, shape (p,)
        Bin labels (e.g. r_p bin centres in Mpc/h, counts N, radii in Mpc/h).
    value : ndarray, shape (p,)
        The measured vector.
    delete_one : ndarray, shape (K, p) or None
        Jackknife delete-one vectors (region k removed), when requested.
    bin_edges : ndarray or None
        Bin edges (p + 1) where the bins are intervals.
    bin_label : str
        Axis label with units, e.g. ``r_p [Mpc/h]``.
    value_label : str
        Label of the measured quantity with units, e.g. ``w_p [Mpc/h]``.
    extra : dict
        Statistic-specific diagnostics (pair counts, number of centres kept, …);
        only JSON-friendly values.
    """
    name: str
    bins: NDArray[np.float64]
    value: NDArray[np.float64]
    delete_one: NDArray[np.float64] | None = None
    bin_edges: NDArray[np.float64] | None = None
    bin_label: str = ""
    value_label: str = ""
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def n_regions(self) -> int:
        """Number of jackknife regions (0 when no jackknife was run)."""
        return 0 if self.delete_one is None else int(self.delete_one.shape[0])

    @property
    def covariance(self) -> NDArray[np.float64]:
        """Jackknife covariance (K−1)/K Σ_k (x_k − x̄)(x_k − x̄)ᵀ, shape (p, p)."""
        if self.delete_one is None:
            raise ValueError(f"{self.name}: no jackknife delete-one vectors were measured")
        return jackknife_covariance(self.delete_one)


def combine_measurements(parts: list[Measurement], weights: NDArray[np.float64]
                         ) -> Measurement:
    """Σ_k w_k m_k of measurements of one statistic on several boxes (snapshots).

    The values and, region by region, the jackknife delete-one vectors combine with the
    weights (the boxes share their sub-volume layout); the line-of-sight variance of the
    box estimate (``extra[LOS_VARIANCE]``) combines as Σ w_k² var_k (independent axes of
    each box). Other diagnostics come from the part with the largest weight.
    """
    w = np.asarray(weights, dtype=np.float64)
    if len(parts) != len(w) or not parts:
        raise ValueError("combine_measurements: one weight per measurement")
    ref = parts[int(np.argmax(w))]
    value = np.sum([wk * p.value for wk, p in zip(w, parts, strict=True)], axis=0)
    delete_one = None
    if all(p.delete_one is not None for p in parts) and len(
            {p.delete_one.shape for p in parts}) == 1:  # type: ignore[union-attr]
        delete_one = np.sum([wk * p.delete_one for wk, p in zip(w, parts, strict=True)],
                            axis=0)
    extra = dict(ref.extra)
    if all(LOS_VARIANCE in p.extra for p in parts):
        extra[LOS_VARIANCE] = np.sum([wk**2 * np.asarray(p.extra[LOS_VARIANCE])
                                      for wk, p in zip(w, parts, strict=True)],
                                     axis=0).tolist()
    extra["snapshot_weights"] = w.tolist()
    return Measurement(ref.name, ref.bins, value, delete_one, ref.bin_edges, ref.bin_label,
                       ref.value_label, extra)


# --------------------------------------------------------------------------- inputs
def _as_float(a: Any, name: str, n: int | None = None) -> NDArray[np.float64]:
    try:
        x = np.ascontiguousarray(a, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: expected numbers, got {type(a).__name__}") from exc
    if n is not None and x.shape[0] != n:
        raise InputError(f"{name}: expected {n} rows, got {x.shape[0]}")
    if not np.all(np.isfinite(x)):
        bad = int(np.argwhere(~np.isfinite(x.reshape(x.shape[0], -1)))[0, 0])
        raise InputError(f"{name}: row {bad} is not finite ({x[bad]!r})")
    return x


def _as_regions(region: Any, n_regions: int, n: int, name: str) -> NDArray[np.int64] | None:
    if n_regions < 0:
        raise InputError(f"{name}: n_regions must be ≥ 0, got {n_regions}")
    if region is None:
        if n_regions > 0:
            raise InputError(f"{name}: n_regions = {n_regions} but no region labels given")
        return None
    r = np.ascontiguousarray(region)
    if r.shape != (n,) or (r.size and not np.issubdtype(r.dtype, np.integer)):
        raise InputError(f"{name}: region labels must be {n} integers, got shape {r.shape}, "
                         f"dtype {r.dtype}")
    r = r.astype(np.int64)
    if r.size and (r.min() < 0 or r.max() >= n_regions):
        raise InputError(f"{name}: region labels must lie in [0, {n_regions}), got "
                         f"[{r.min()}, {r.max()}] (points outside every jackknife region?)")
    return r


@dataclass(frozen=True)
class BoxSample:
    """A galaxy sample in a periodic box, ready for the estimators.

    Attributes
    ----------
    position : ndarray, shape (N, 3)
        Positions [Mpc/h], already in redshift space along ``los_axis``.
    box_size : float
        Box side L [Mpc/h].
    los_axis : int
        Line-of-sight axis (0, 1, 2).
    weight : ndarray, shape (N,) or None
        Galaxy weights (None: 1).
    region : ndarray of int, shape (N,) or None
        Jackknife sub-volume of each galaxy, in [0, n_regions).
    n_regions : int
        Number of jackknife sub-volumes (0: no jackknife).
    layout : BoxRegions or None
        The sub-volume layout the labels came from; needed to place random VPF spheres
        in regions and for the exact delete-one RR of wp (see :mod:`.wp`).
    """
    position: NDArray[np.float64]
    box_size: float
    los_axis: int = 2
    weight: NDArray[np.float64] | None = None
    region: NDArray[np.int64] | None = None
    n_regions: int = 0
    layout: Any = None

    def __post_init__(self) -> None:
        pos = _as_float(self.position, "box sample positions")
        if pos.ndim != 2 or pos.shape[1] != 3:
            raise InputError(f"box sample positions must have shape (N, 3), got {pos.shape}")
        object.__setattr__(self, "position", pos)
        if not (np.isfinite(self.box_size) and self.box_size > 0):
            raise InputError(f"box_size: expected a positive number of Mpc/h, "
                             f"got {self.box_size!r}")
        if self.los_axis not in (0, 1, 2):
            raise InputError(f"los_axis: expected 0, 1 or 2, got {self.los_axis!r}")
        if self.weight is not None:
            object.__setattr__(self, "weight",
                               _as_float(self.weight, "box sample weights", len(pos)))
        object.__setattr__(self, "region", _as_regions(self.region, int(self.n_regions),
                                                       len(pos), "box sample"))

    @classmethod
    def with_regions(cls, position: ArrayLike, box_size: float, los_axis: int = 2,
                     weight: ArrayLike | None = None, n_side: int = 4,
                     layout: str = "columns") -> BoxSample:
        """Build a sample and label its galaxies with :func:`conecheck.jackknife.box_regions`.

        ``n_side = 0`` builds a sample without jackknife regions.
        """
        pos = np.asarray(position, dtype=np.float64)
        w = None if weight is None else np.asarray(weight, dtype=np.float64)
        if not n_side:
            return cls(pos, float(box_size), int(los_axis), w)
        lay = BoxRegions(float(box_size), int(los_axis), int(n_side), layout)
        return cls(pos, float(box_size), int(los_axis), w, lay.region_of(pos), lay.k, lay)

    def __len__(self) -> int:
        return int(self.position.shape[0])

    @property
    def w(self) -> NDArray[np.float64]:
        """Weights, 1 when none were given."""
        return np.ones(len(self)) if self.weight is None else self.weight

    @property
    def volume(self) -> float:
        """Box volume L³ [(Mpc/h)³]."""
        return float(self.box_size) ** 3


@dataclass(frozen=True)
class MatterSample:
    """A matter tracer for lensing statistics: particles of equal mass.

    Attributes
    ----------
    position : ndarray, shape (N, 3)
        Real-space positions [Mpc/h]: box coordinates in [0, box_size), or Cartesian with
        the observer at the origin for a cone.
    particle_mass : float
        Mass of one particle [M_⊙/h].
    box_size : float or None
        Side of the periodic box [Mpc/h]; None for a cone.
    """

    position: NDArray[np.float64]
    particle_mass: float
    box_size: float | None = None

    def __post_init__(self) -> None:
        pos = _as_float(self.position, "matter particle positions")
        if pos.ndim != 2 or pos.shape[1] != 3:
            raise InputError(f"matter particle positions: expected shape (N, 3), got "
                             f"{pos.shape}")
        object.__setattr__(self, "position", pos)
        m = self.particle_mass
        if not (isinstance(m, (int, float, np.floating)) and np.isfinite(m) and m > 0):
            raise InputError(f"particle mass: expected a positive number of M_⊙/h, got {m!r}")
        object.__setattr__(self, "particle_mass", float(m))

    def __len__(self) -> int:
        return int(self.position.shape[0])


@dataclass(frozen=True)
class ConeSample:
    """Galaxies (or randoms) of one light cone, in observed sky and distance coordinates.

    Attributes
    ----------
    ra, dec : ndarray, shape (N,)
        Sky position [deg].
    chi : ndarray, shape (N,)
        Observed comoving distance χ(z_obs) [Mpc/h].
    weight : ndarray, shape (N,) or None
        Weights (e.g. fibre-collision up-weights; None: 1).
    region : ndarray of int, shape (N,) or None
        Jackknife sky region of each object, in [0, n_regions).
    n_regions : int
        Number of sky regions (0: no jackknife).
    prefixes : tuple of (int, float)
        For randoms: leading parts of the catalogue that may stand in for all of it in
        data–random counts, as ``(size, smallest cell volume [(Mpc/h)³])`` — in bins whose
        cells are at least that large, the first ``size`` points are as precise as the
        catalogue is meant to be (:func:`conecheck.cone.randoms.prefix_cells`). Empty: none.
    """
    ra: NDArray[np.float64]
    dec: NDArray[np.float64]
    chi: NDArray[np.float64]
    weight: NDArray[np.float64] | None = None
    region: NDArray[np.int64] | None = None
    n_regions: int = 0
    prefixes: tuple[tuple[int, float], ...] = ()

    def __post_init__(self) -> None:
        ra = _as_float(self.ra, "cone sample ra").ravel()
        n = ra.size
        dec = _as_float(self.dec, "cone sample dec", n).ravel()
        chi = _as_float(self.chi, "cone sample chi", n).ravel()
        if n and (np.abs(dec).max() > 90.0 or chi.min() <= 0):
            raise InputError("cone sample: dec must lie in [-90, 90] deg and chi be > 0 Mpc/h")
        object.__setattr__(self, "ra", ra)
        object.__setattr__(self, "dec", dec)
        object.__setattr__(self, "chi", chi)
        if self.weight is not None:
            object.__setattr__(self, "weight",
                               _as_float(self.weight, "cone sample weights", n).ravel())
        object.__setattr__(self, "region", _as_regions(self.region, int(self.n_regions), n,
                                                       "cone sample"))
        prefixes = tuple((int(size), float(volume)) for size, volume in self.prefixes)
        if any(not (0 < size <= n and volume >= 0) for size, volume in prefixes):
            raise InputError(f"cone sample: prefixes {prefixes} must be (size in [1, {n}], "
                             "cell volume >= 0 (Mpc/h)^3) pairs")
        object.__setattr__(self, "prefixes", prefixes)

    def __len__(self) -> int:
        return int(self.ra.size)

    @property
    def w(self) -> NDArray[np.float64]:
        """Weights, 1 when none were given."""
        return np.ones(len(self)) if self.weight is None else self.weight

    @property
    def xyz(self) -> NDArray[np.float64]:
        """Cartesian positions [Mpc/h], observer at the origin, shape (N, 3)."""
        return radec_chi_to_xyz(self.ra, self.dec, self.chi)

    @classmethod
    def from_xyz(cls, xyz: ArrayLike, weight: ArrayLike | None = None,
                 region: ArrayLike | None = None, n_regions: int = 0) -> ConeSample:
        """Build a sample from Cartesian positions [Mpc/h] (observer at the origin)."""
        p = np.asarray(xyz, dtype=np.float64)
        chi = np.linalg.norm(p, axis=1)
        dec = np.degrees(np.arcsin(np.clip(p[:, 2] / np.where(chi > 0, chi, 1.0), -1, 1)))
        ra = np.mod(np.degrees(np.arctan2(p[:, 1], p[:, 0])), 360.0)
        return cls(ra, dec, chi, None if weight is None else np.asarray(weight),
                   None if region is None else np.asarray(region), int(n_regions))


@dataclass(frozen=True)
class ConeGeometry:
    """Survey geometry shared by every cone of one sample and redshift cut.

    Attributes
    ----------
    footprint : Footprint
        Completeness map (``area_deg2``, ``disc_fraction``, ``sample``).
    chi_min, chi_max : float
        Radial limits of the shell [Mpc/h].
    regions : object or None
        Sky jackknife regions (``k``, ``areas_deg2``, ``region_of(ra, dec)``).
    volume_per_sr : float or None
        Comoving volume per steradian between the limits [(Mpc/h)³], from the run's
        cosmology (curvature included); flat space when omitted.
    coverage : Footprint or None
        Where the survey is for statistics that count galaxies in cells (1 inside, 0
        outside: :func:`conecheck.footprint.coverage.covered_sky`); their inside tests and
        sphere centres use it. None: the footprint itself.
    """
    footprint: SkyFootprint
    chi_min: float
    chi_max: float
    regions: JackknifeRegions | None = None
    volume_per_sr: float | None = None
    coverage: SkyFootprint | None = None

    def __post_init__(self) -> None:
        if not (np.isfinite(self.chi_min) and np.isfinite(self.chi_max)
                and 0 <= self.chi_min < self.chi_max):
            raise InputError(f"cone geometry: need 0 ≤ chi_min < chi_max, got "
                             f"{self.chi_min!r}, {self.chi_max!r} Mpc/h")
        if self.volume_per_sr is None:  # flat space unless the run's cosmology says more
            object.__setattr__(self, "volume_per_sr", float(
                Cosmology.flat_volume_per_sr(self.chi_min, self.chi_max)))

    @property
    def covered(self) -> SkyFootprint:
        """The sky count statistics place their cells in (``coverage`` or the footprint)."""
        return self.footprint if self.coverage is None else self.coverage

    @property
    def omega_sr(self) -> float:
        """Effective solid angle Ω_eff (completeness-weighted) [sr]."""
        return float(self.footprint.area_deg2) / DEG2_PER_SR

    @property
    def volume(self) -> float:
        """Effective volume V_eff = Ω_eff × (comoving volume per sr of the shell) [(Mpc/h)³]."""
        return self.omega_sr * float(self.volume_per_sr)

    def region_volumes(self) -> NDArray[np.float64]:
        """Effective volume of each sky region [(Mpc/h)³], shape (K,)."""
        areas = np.asarray(self.regions.areas_deg2, dtype=np.float64)
        return areas / DEG2_PER_SR * float(self.volume_per_sr)

    def radial_fraction(self, chi: ArrayLike, half_length: float) -> NDArray[np.float64]:
        """Fraction of [χ − H, χ + H] inside [χ_min, χ_max] (χ, H in Mpc/h)."""
        c = np.asarray(chi, dtype=np.float64)
        inside = np.minimum(c + half_length, self.chi_max) - np.maximum(c - half_length,
                                                                         self.chi_min)
        return np.clip(inside / (2.0 * half_length), 0.0, 1.0)

    def inside_fraction(self, ra_deg: ArrayLike, dec_deg: ArrayLike, chi: ArrayLike,
                        radius: float, half_length: float) -> NDArray[np.float64]:
        """Geometric fraction of a cylinder inside the survey.

        Parameters
        ----------
        ra_deg, dec_deg : array_like
            Cylinder axis direction [deg].
        chi : array_like
            Comoving distance of the cylinder centre [Mpc/h].
        radius, half_length : float
            Cylinder radius R and half-length H [Mpc/h].

        Angular part: fraction of the disc of angular radius arcsin(R/χ) on covered sky
        (:attr:`covered`: coverage, not completeness); radial part: :meth:`radial_fraction`.
        """
        c = np.asarray(chi, dtype=np.float64)
        ang = np.degrees(np.arcsin(np.clip(radius / np.maximum(c, radius), 0.0, 1.0)))
        frac = np.asarray(self.covered.disc_fraction(ra_deg, dec_deg, ang))
        return frac * self.radial_fraction(c, half_length)
