"""Settings of the light-cone stage: frozen dataclasses with simple-typed fields.

Every field has a default and every class validates itself in ``__post_init__``,
raising :class:`~conecheck.errors.InputError` whose ``problems`` each name the
field, its value and what was expected.  The configuration loader builds these
classes directly from TOML tables whose keys equal the field names.

Units: distances comoving Mpc/h, velocities km/s, angles in degrees (arcsec where
the name says so), magnitudes M − 5 log10 h.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy.integrate import quad

from ..cosmology import C_KMS, Cosmology
from ..errors import InputError
from .corrections import correction_problem

Triple = tuple[float, float, float]


def _raise(cls_name: str, problems: list[str]) -> None:
    if problems:
        raise InputError(f"{cls_name}: " + "; ".join(problems), problems)


def _triples(name: str, value: Any, problems: list[str]) -> tuple[Triple, ...]:
    """Normalise ``value`` (nested triples or a flat list of 3k numbers) to triples."""
    if value is None:
        return ()
    try:
        items = list(value)
        if items and all(isinstance(v, (int, float)) for v in items):
            if len(items) % 3:
                raise ValueError
            items = [items[i:i + 3] for i in range(0, len(items), 3)]
        out = []
        for item in items:
            trip = tuple(float(v) for v in item)
            if len(trip) != 3 or not all(math.isfinite(v) for v in trip):
                raise ValueError
            out.append(trip)
        return tuple(out)  # type: ignore[return-value]
    except (TypeError, ValueError):
        problems.append(f"{name} = {value!r}: expected a list of finite [a, b, c] triples")
        return ()


@dataclass(frozen=True)
class ObserverSettings:
    """Where the observers sit in the box and how each cone is oriented.

    Attributes
    ----------
    placement : {"random", "grid", "given"}
        ``random``: uniform in the box, seeded per cone; ``grid``: the centres of a
        regular m×m×m grid of cells, m = ceil(n_cones^(1/3)), in row order;
        ``given``: ``positions`` (cone i uses entry i mod len(positions)).
    positions : tuple of (x, y, z)
        Observer positions in box coordinates [Mpc/h], each in [0, L)³.
    rotation : {"random", "none", "given"}
        ``random``: a uniform random rotation per cone (Haar measure, seeded);
        ``none``: the box axes are the equatorial axes; ``given``: ``euler_deg``.
    euler_deg : tuple of (alpha, beta, gamma)
        Intrinsic z-y'-z'' Euler angles in degrees (scipy ``Rotation.from_euler("ZYZ")``);
        cone i uses entry i mod len(euler_deg).  A cone's sky vector is
        r = R (x + n L − o).
    replication : {"warn", "refuse"}
        What to do when the shell's diameter 2 χ_max (plus margin) exceeds the box side L,
        i.e. a full-sky cone could contain the same structure twice: log a warning, or
        refuse with an InputError.
    max_replicas : int
        Hard cap on the number of periodic replicas a cone may touch (time guard);
        exceeding it is always an InputError.
    """
    placement: Literal["random", "grid", "given"] = "random"
    positions: tuple[Triple, ...] = ()
    rotation: Literal["random", "none", "given"] = "random"
    euler_deg: tuple[Triple, ...] = ()
    replication: Literal["warn", "refuse"] = "warn"
    max_replicas: int = 1000

    def __post_init__(self) -> None:
        problems: list[str] = []
        if self.placement not in ("random", "grid", "given"):
            problems.append(f"placement = {self.placement!r}: expected 'random', 'grid' or "
                            "'given'")
        if self.rotation not in ("random", "none", "given"):
            problems.append(f"rotation = {self.rotation!r}: expected 'random', 'none' or 'given'")
        if self.replication not in ("warn", "refuse"):
            problems.append(f"replication = {self.replication!r}: expected 'warn' or 'refuse'")
        object.__setattr__(self, "positions", _triples("positions", self.positions, problems))
        object.__setattr__(self, "euler_deg", _triples("euler_deg", self.euler_deg, problems))
        if self.placement == "given" and not self.positions:
            problems.append("positions = (): placement 'given' needs at least one [x, y, z] "
                            "triple in Mpc/h")
        if self.rotation == "given" and not self.euler_deg:
            problems.append("euler_deg = (): rotation 'given' needs at least one "
                            "[alpha, beta, gamma] triple in degrees")
        if not isinstance(self.max_replicas, int) or self.max_replicas < 1:
            problems.append(f"max_replicas = {self.max_replicas!r}: expected an integer >= 1")
        _raise("observers", problems)


@dataclass(frozen=True)
class RedshiftErrorSettings:
    """Gaussian redshift-measurement errors.

    Attributes
    ----------
    model : {"velocity", "sigma_z"}
        ``velocity``: z_obs += (1 + z_cos) σ_v / c · N(0, 1);
        ``sigma_z``: z_obs += σ_z0 (1 + z_cos) · N(0, 1).
    sigma_v_kms : float
        Velocity error σ_v [km/s] (``velocity`` model).  30 km/s is typical of
        fibre spectrographs at low redshift (common practice, from memory).
    sigma_z0 : float
        σ_z0 of the ``sigma_z`` model (dimensionless).
    """
    model: Literal["velocity", "sigma_z"] = "velocity"
    sigma_v_kms: float = 30.0
    sigma_z0: float = 0.0

    def __post_init__(self) -> None:
        problems: list[str] = []
        if self.model not in ("velocity", "sigma_z"):
            problems.append(f"model = {self.model!r}: expected 'velocity' or 'sigma_z'")
        if not (math.isfinite(self.sigma_v_kms) and 0.0 <= self.sigma_v_kms < 1e4):
            problems.append(f"sigma_v_kms = {self.sigma_v_kms!r}: expected 0 <= sigma_v < 1e4 "
                            "km/s")
        if not (math.isfinite(self.sigma_z0) and 0.0 <= self.sigma_z0 < 0.5):
            problems.append(f"sigma_z0 = {self.sigma_z0!r}: expected 0 <= sigma_z0 < 0.5")
        _raise("redshift_errors", problems)

    def sigma_z(self, z_cos: Any) -> Any:
        """Redshift error σ_z at cosmological redshift ``z_cos`` (array-friendly)."""
        if self.model == "velocity":
            return (1.0 + z_cos) * self.sigma_v_kms / C_KMS
        return (1.0 + z_cos) * self.sigma_z0


@dataclass(frozen=True)
class FibreSettings:
    """Fibre-collision emulator (switched on and off by ``EffectSwitches.fibres``).

    Attributes
    ----------
    angle_arcsec : float
        Collision angle θ_fc [arcsec]: two targets closer than this cannot both get a
        fibre on one pass.  55″ is the plug-plate value (Blanton et al. 2003, AJ 125, 2276).
    overlap_map : str or None
        HEALPix FITS map of the per-pixel probability that a collided target lies in a
        tile overlap and so gets a second pass.  When given it replaces ``overlap_fraction``.
    overlap_map_nest : bool
        Pixel ordering of ``overlap_map`` when its header does not say (NESTED if True).
    overlap_fraction : float
        Probability that a collided target gets a second pass when no map is given.
        About 30 % of collided pairs lie in tile overlaps (Blanton et al. 2003; trade
        figure, from memory).
    second_pass_collisions : bool
        If True, second-pass targets also collide among themselves (two of them closer
        than θ_fc cannot both be recovered on the same second pass).
    exact_group_max : int
        Largest collision group (number of targets) decollided exactly (maximum
        independent set by enumeration, 2^k subsets); larger groups use a greedy rule.
    """
    angle_arcsec: float = 55.0
    overlap_map: str | None = None
    overlap_map_nest: bool = False
    overlap_fraction: float = 0.3
    second_pass_collisions: bool = True
    exact_group_max: int = 10

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not (math.isfinite(self.angle_arcsec) and 0.0 < self.angle_arcsec < 3600.0):
            problems.append(f"angle_arcsec = {self.angle_arcsec!r}: expected 0 < angle < 3600")
        if not (math.isfinite(self.overlap_fraction) and 0.0 <= self.overlap_fraction <= 1.0):
            problems.append(f"overlap_fraction = {self.overlap_fraction!r}: expected a "
                            "probability in [0, 1]")
        if not isinstance(self.exact_group_max, int) or not 2 <= self.exact_group_max <= 16:
            problems.append(f"exact_group_max = {self.exact_group_max!r}: expected an integer "
                            "in [2, 16] (exact search costs 2^k per group)")
        if self.overlap_map is not None and not str(self.overlap_map).strip():
            problems.append("overlap_map = '': expected a FITS file path or no value")
        _raise("fibres", problems)


@dataclass(frozen=True)
class CorrectionSettings:
    """Which fibre-collision correction the cones get.

    Attributes
    ----------
    name : str
        A key of :data:`conecheck.cone.corrections.CORRECTIONS`: ``none`` (drop collided
        targets), ``nearest_redshift`` (a collided target takes the observed redshift of
        its nearest fibred angular neighbour) or ``nearest_upweight`` (drop it and add its
        weight to that neighbour).
    """
    name: str = "nearest_redshift"

    def __post_init__(self) -> None:
        problem = correction_problem(self.name)
        if problem:
            _raise("correction", [problem])


@dataclass(frozen=True)
class EffectSwitches:
    """Switch every survey effect on its own (all on by default).

    Attributes
    ----------
    rsd : bool
        Redshift-space distortions along the radial line of sight (off: z_obs = z_cos).
    redshift_errors : bool
        Add the configured redshift errors.
    footprint : bool
        Sample the footprint's completeness (off: full sky with completeness 1).
    flux_limit : bool
        Apply the apparent-magnitude limit ``survey.shell.m_lim`` (off: ignore it).
    fibres : bool
        Emulate fibre collisions (off: every target gets a fibre).
    physical_fluxes : bool
        Apparent magnitudes from the true distance and the galaxy's own Doppler shift, and
        sample cuts on the absolute magnitude the analyst infers from the measured
        redshift (:mod:`conecheck.cone.photometry`). Off: m from the observed redshift, so
        the inferred magnitude equals the box's exactly.
    target_fill : bool
        Add the faint targets the box lacks when ``survey.targets.source = "fill"``
        (:mod:`conecheck.cone.targets`); off: the box's targets only.
    fibre_budget : bool
        Limit fibres per tile when ``survey.tiles.centres`` is set
        (:mod:`conecheck.cone.tiles`); off: collisions only.
    """
    rsd: bool = True
    redshift_errors: bool = True
    footprint: bool = True
    flux_limit: bool = True
    fibres: bool = True
    physical_fluxes: bool = True
    target_fill: bool = True
    fibre_budget: bool = True

    def __post_init__(self) -> None:
        problems = [f"{name} = {getattr(self, name)!r}: expected true or false"
                    for name in ("rsd", "redshift_errors", "footprint", "flux_limit", "fibres",
                                 "physical_fluxes", "target_fill", "fibre_budget")
                    if not isinstance(getattr(self, name), bool)]
        _raise("effects", problems)


@dataclass(frozen=True)
class LuminosityFunction:
    """Schechter luminosity function of the survey's full target population.

    Used to estimate how many targets above the flux limit the box lacks (a box usually
    stops at the faintest sample threshold, a survey targets everything brighter than
    m_lim), and so how far the fibre-collision rate of the cones falls short.
    Φ(M) dM = 0.4 ln 10 φ* x^(α+1) e^(−x) dM with x = 10^(−0.4 (M − M*)).

    Attributes
    ----------
    phi_star : float
        φ* [h³ Mpc⁻³ mag⁻¹].
    m_star : float
        M* − 5 log10 h [mag].
    alpha : float
        Faint-end slope α.

    Defaults: the r-band (band-shifted to z = 0.1) fit of Blanton et al. (2003, ApJ 592,
    819), φ* = 1.49e-2, M* = −20.44, α = −1.05 (values from memory).
    """
    phi_star: float = 1.49e-2
    m_star: float = -20.44
    alpha: float = -1.05

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not (math.isfinite(self.phi_star) and 0.0 < self.phi_star < 1.0):
            problems.append(f"phi_star = {self.phi_star!r}: expected 0 < φ* < 1 h³ Mpc⁻³")
        if not (math.isfinite(self.m_star) and -30.0 < self.m_star < -10.0):
            problems.append(f"m_star = {self.m_star!r}: expected −30 < M* < −10")
        if not (math.isfinite(self.alpha) and -2.5 < self.alpha < 1.0):
            problems.append(f"alpha = {self.alpha!r}: expected −2.5 < α < 1")
        _raise("luminosity_function", problems)

    def density_brighter(self, abs_mag: float) -> float:
        """Number density of galaxies brighter than ``abs_mag`` [h³ Mpc⁻³]: ∫ Φ(M) dM up
        to ``abs_mag`` (quadrature in x = L/L*, from x(abs_mag) to 60 L*)."""
        x_lo = 10.0 ** (-0.4 * (float(abs_mag) - self.m_star))
        if x_lo >= 60.0:
            return 0.0
        # in x: Φ dM = φ* x^α e^(−x) dx (the 0.4 ln 10 is the Jacobian dM → dx/x)
        val, _ = quad(lambda x: x**self.alpha * math.exp(-x), x_lo, 60.0, limit=200)
        return self.phi_star * val


#: Where the target list comes from (:class:`TargetSettings`).
TARGET_SOURCES = ("box", "fill")


@dataclass(frozen=True)
class TargetSettings:
    """The survey's target list: the box's galaxies, or those plus the faint ones it lacks.

    A survey targets every galaxy brighter than its flux limit; a box usually stops at the
    faintest sample threshold, so its cones collide and crowd tiles less than the survey.

    Attributes
    ----------
    source : {"box", "fill"}
        ``box``: the box's galaxies above the flux limit (the run reports the density the
        luminosity function predicts and the collided fraction it implies). ``fill``: add
        faint targets to the density of ``survey.luminosity_function``
        (:mod:`conecheck.cone.targets`), placed around box galaxies at the box's own
        nearest-neighbour distances so they pair as closely as its galaxies do; they take
        part in collisions, the fibre budget and the corrections' neighbour search, and
        never enter a sample.
    """
    source: Literal["box", "fill"] = "box"

    def __post_init__(self) -> None:
        problems: list[str] = []
        if self.source not in TARGET_SOURCES:
            problems.append(f"source = {self.source!r}: expected one of "
                            f"{', '.join(TARGET_SOURCES)}")
        _raise("targets", problems)


@dataclass(frozen=True)
class TileSettings:
    """Spectrograph tiles and their fibre budget (:mod:`conecheck.cone.tiles`).

    Without ``centres`` the survey is limited by collisions only (the default). With
    them, every target the collision emulator gives a fibre still needs one of the
    ``fibres_per_tile`` fibres of a tile that covers it; tiles are visited one after
    another, pass after pass, and a target a full tile leaves gets its chance from the
    next tile that covers it (tile overlaps, later passes).

    Attributes
    ----------
    centres : str
        ``regular``: a quasi-regular (Fibonacci) lattice over the sphere dense enough that
        every point lies within ``radius_deg`` of a centre, keeping the tiles that touch the
        footprint; or a table file (FITS, CSV, ECSV; anything astropy reads) with columns
        ``ra`` and ``dec`` [deg] and optionally ``pass`` (1, 2, …). Empty: no budget.
    radius_deg : float
        Tile radius [deg].
    fibres_per_tile : int
        Fibres one tile can place.
    passes : int
        Passes over a ``regular`` tiling (each pass a rotated copy of the lattice); a file
        gives its passes in its ``pass`` column.
    """
    centres: str = ""
    radius_deg: float = 1.2
    fibres_per_tile: int = 400
    passes: int = 1

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not isinstance(self.centres, str):
            problems.append(f"centres = {self.centres!r}: expected 'regular', a table file "
                            "path, or '' (no budget)")
        if not (isinstance(self.radius_deg, (int, float)) and math.isfinite(self.radius_deg)
                and 0.01 <= self.radius_deg <= 30.0):
            problems.append(f"radius_deg = {self.radius_deg!r}: expected 0.01 <= radius <= 30 "
                            "deg")
        if not (isinstance(self.fibres_per_tile, int) and not isinstance(
                self.fibres_per_tile, bool) and self.fibres_per_tile >= 1):
            problems.append(f"fibres_per_tile = {self.fibres_per_tile!r}: expected an integer "
                            ">= 1 (a tile with no fibres observes nothing)")
        if not (isinstance(self.passes, int) and not isinstance(self.passes, bool)
                and 1 <= self.passes <= 20):
            problems.append(f"passes = {self.passes!r}: expected an integer in [1, 20]")
        _raise("tiles", problems)

    @property
    def enabled(self) -> bool:
        """True when tiles are configured."""
        return bool(str(self.centres).strip())


def fibres_limit_targets(effects: EffectSwitches, tiles: TileSettings) -> bool:
    """True when fibre collisions or a tile budget can leave a target without a fibre (the
    one rule for whether the target list's faint fill, the correction and the target
    record matter)."""
    return effects.fibres or (tiles.enabled and effects.fibre_budget)


#: How count statistics treat an incomplete survey (:class:`CompletenessSettings`).
COMPLETENESS_TREATMENTS = ("dilute", "weight", "threshold")


@dataclass(frozen=True)
class CompletenessSettings:
    """Coverage and completeness as a survey analysis of counts treats them.

    Coverage says where the survey *is* (a pixel is inside when its completeness exceeds
    ``coverage_min``); it decides which spheres and cylinders lie inside the survey (the
    VPF and the counts' edge treatment). Completeness says what fraction of the targets
    there got a redshift; it thins the cones' galaxies. Statistics that count galaxies
    around centres (counts in cylinders and annuli, count ratios, the VPF:
    ``Statistic.counts_in_cells``) see a thinned field, so box and cones are made
    comparable in one of three ways, applied identically to both:

    Attributes
    ----------
    treatment : {"dilute", "weight", "threshold"}
        ``dilute``: the box's galaxies are kept at random (seeded) with the mean
        completeness of the covered sky, as the cones are. ``weight``: each cone galaxy
        counts 1/completeness as a neighbour and as a centre (not for the VPF: an empty
        sphere cannot be weighted). ``threshold``: only sky with completeness ≥
        ``threshold`` is inside the survey for these statistics, taken as complete (the
        box is not diluted).
    coverage_min : float
        A pixel is inside the survey when its completeness exceeds this (0: every
        observed pixel). A mask whose edge pixels hold the fraction of their area inside
        the survey reads best with 0.5 (a pixel is inside when most of it is).
    threshold : float
        Completeness from which the ``threshold`` treatment keeps the sky.
    """
    treatment: Literal["dilute", "weight", "threshold"] = "dilute"
    coverage_min: float = 0.0
    threshold: float = 0.8

    def __post_init__(self) -> None:
        problems: list[str] = []
        if self.treatment not in COMPLETENESS_TREATMENTS:
            problems.append(f"treatment = {self.treatment!r}: expected one of "
                            f"{', '.join(COMPLETENESS_TREATMENTS)}")
        if not (isinstance(self.coverage_min, (int, float))
                and math.isfinite(self.coverage_min) and 0.0 <= self.coverage_min < 1.0):
            problems.append(f"coverage_min = {self.coverage_min!r}: expected 0 <= value < 1")
        if not (isinstance(self.threshold, (int, float)) and math.isfinite(self.threshold)
                and 0.0 < self.threshold <= 1.0):
            problems.append(f"threshold = {self.threshold!r}: expected 0 < value <= 1")
        _raise("completeness", problems)


@dataclass(frozen=True)
class SurveyShell:
    """The outermost redshift shell every sample cut needs, and the flux limit.

    Attributes
    ----------
    z_min, z_max : float
        Observed-redshift limits of the shell (every cut must lie inside).
    m_lim : float or None
        Apparent-magnitude limit of the target selection (None: no flux limit).
    kcorrection : tuple of float
        Polynomial K-correction K(z) = Σ_i c_i z^i [mag], coefficients from the constant
        term up (empty: none, the default). It enters the apparent magnitude at the
        redshift of the light and the analyst's absolute magnitude at the measured
        redshift (:mod:`conecheck.cone.photometry`).
    evolution_q : float
        Luminosity evolution Q [mag per unit redshift]: E(z) = −Q (z − evolution_z_ref),
        the form of Blanton et al. (2003, ApJ 592, 819); box magnitudes are magnitudes at
        ``evolution_z_ref``. 0 (none) by default.
    evolution_z_ref : float
        Reference redshift of the evolution term.
    margin_mpch : float or None
        Extra comoving distance [Mpc/h] kept beyond the shell in true distance, so that
        RSD and redshift errors can move galaxies into it.  None: automatic, from the
        box's largest speed plus five redshift-error sigmas at z_max.
    """
    z_min: float = 0.02
    z_max: float = 0.1
    m_lim: float | None = None
    kcorrection: tuple[float, ...] = ()
    evolution_q: float = 0.0
    evolution_z_ref: float = 0.0
    margin_mpch: float | None = None

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not (math.isfinite(self.z_min) and self.z_min >= 0.0):
            problems.append(f"z_min = {self.z_min!r}: expected >= 0")
        if not (math.isfinite(self.z_max) and 0.0 < self.z_max <= 5.0):
            problems.append(f"z_max = {self.z_max!r}: expected 0 < z_max <= 5")
        elif math.isfinite(self.z_min) and self.z_max <= self.z_min:
            problems.append(f"z_max = {self.z_max!r}: expected > z_min = {self.z_min!r}")
        if self.m_lim is not None and not (math.isfinite(self.m_lim) and -10 < self.m_lim < 40):
            problems.append(f"m_lim = {self.m_lim!r}: expected an apparent magnitude in "
                            "(-10, 40) or no value")
        try:
            coeffs = tuple(float(c) for c in self.kcorrection)
            if not all(math.isfinite(c) and abs(c) < 100 for c in coeffs) or len(coeffs) > 8:
                raise ValueError
            object.__setattr__(self, "kcorrection", coeffs)
        except (TypeError, ValueError):
            problems.append(f"kcorrection = {self.kcorrection!r}: expected a list of at most 8 "
                            "finite polynomial coefficients [c0, c1, ...] in mag, |c| < 100")
        if not (math.isfinite(self.evolution_q) and abs(self.evolution_q) < 20):
            problems.append(f"evolution_q = {self.evolution_q!r}: expected |Q| < 20 mag per "
                            "unit redshift")
        if not (math.isfinite(self.evolution_z_ref) and 0.0 <= self.evolution_z_ref <= 5.0):
            problems.append(f"evolution_z_ref = {self.evolution_z_ref!r}: expected 0 <= z <= 5")
        if self.margin_mpch is not None and not (math.isfinite(self.margin_mpch)
                                                 and self.margin_mpch >= 0.0):
            problems.append(f"margin_mpch = {self.margin_mpch!r}: expected >= 0 Mpc/h or "
                            "no value (automatic)")
        _raise("shell", problems)

    @property
    def has_colour_terms(self) -> bool:
        """True when a non-zero K-correction or evolution term is configured."""
        return any(c != 0.0 for c in self.kcorrection) or self.evolution_q != 0.0

    def colour_terms(self, z_k: Any, z_e: Any = None) -> Any:
        """K(z_k) + E(z_e) [mag] (``z_e`` defaults to ``z_k``); 0.0 without either term.

        K(z) = Σ_i c_i z^i (``kcorrection``, constant term first); E(z) = −Q (z − z_ref).
        """
        if not self.has_colour_terms:
            return 0.0
        z_k = np.asarray(z_k, dtype=np.float64)
        z_e = z_k if z_e is None else np.asarray(z_e, dtype=np.float64)
        out = np.zeros(np.broadcast_shapes(z_k.shape, z_e.shape))
        if self.kcorrection:
            out = out + np.polynomial.polynomial.polyval(z_k, self.kcorrection)
        if self.evolution_q:
            out = out - self.evolution_q * (z_e - self.evolution_z_ref)
        return out

    def flux_monotonic_problem(self, cosmology: Cosmology) -> str | None:
        """Why DM(z) + K(z) + E(z) is not increasing over the redshifts a cone can hold.

        A K polynomial or an evolution term that makes a galaxy brighter with distance
        breaks the flux limit's one-to-one link between m and z (and the volume limits);
        the check covers 0 < z ≤ 1.5 z_max + 0.05, beyond any margin RSD and errors add.
        """
        if not self.has_colour_terms:
            return None
        z = np.linspace(1e-4, 1.5 * self.z_max + 0.05, 4001)
        step = np.diff(cosmology.distance_modulus(z) + self.colour_terms(z))
        if np.all(step > 0):
            return None
        bad = z[1:][step <= 0][0]
        return (f"shell.kcorrection = {list(self.kcorrection)} with shell.evolution_q = "
                f"{self.evolution_q}: the apparent magnitude DM(z) + K(z) + E(z) stops "
                f"increasing with redshift at z = {bad:.4f}; a flux limit needs m to grow with "
                f"distance over the shell (0 < z <= {z[-1]:.3f}); check the coefficients' "
                "signs and units (mag per unit redshift)")


@dataclass(frozen=True)
class SampleCut:
    """One sample cut applied to a cone: a magnitude threshold and a redshift range.

    A sample has one primary cut plus any number of alternative cuts; every cut is
    applied to the same cone.

    Attributes
    ----------
    label : str
        Name used in file names and the report.
    mag_max : float or None
        Keep galaxies with abs_mag < mag_max (M − 5 log10 h; brighter than the threshold).
    z_min, z_max : float or None
        Keep z_min <= z_obs < z_max (None: no limit on that side).
    """
    label: str = "all"
    mag_max: float | None = None
    z_min: float | None = None
    z_max: float | None = None

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not self.label or not str(self.label).replace("_", "").replace("-", "").isalnum():
            problems.append(f"label = {self.label!r}: expected letters, digits, '_' or '-'")
        if self.mag_max is not None and not math.isfinite(self.mag_max):
            problems.append(f"mag_max = {self.mag_max!r}: expected a finite magnitude")
        for name in ("z_min", "z_max"):
            v = getattr(self, name)
            if v is not None and not (math.isfinite(v) and v >= 0):
                problems.append(f"{name} = {v!r}: expected >= 0 or no value")
        if (self.z_min is not None and self.z_max is not None and not problems
                and self.z_max <= self.z_min):
            problems.append(f"z_max = {self.z_max!r}: expected > z_min = {self.z_min!r}")
        _raise(f"sample cut '{self.label}'", problems)


@dataclass(frozen=True)
class RandomSettings:
    """Random catalogues of one sample and cut.

    Attributes
    ----------
    multiple : float or "auto"
        Number of randoms per data galaxy (≥ 10 advised for 2-point statistics). ``auto``
        (the default) gives every bin the random noise of 20 pseudo-random points per
        galaxy or less at the lowest data–random cost: 20 for pseudo-random points; for QMC
        points 10 when the smallest bin's cell around a galaxy (wp: the innermost r_p
        annulus × 2 π_max) holds at least 10 of them, else 20 — below that QMC points are no
        more even than pseudo-random ones (:func:`conecheck.cone.randoms.auto_multiple`,
        benchmarks/RESULTS.md, bench_randoms).
    radial : {"volume", "shuffle"}
        ``volume``: χ uniform in comoving volume between the cut's limits;
        ``shuffle``: χ drawn (with replacement) from the data's observed distances.
    sampling : {"pseudo", "qmc"}
        ``pseudo``: independent random points; ``qmc``: a scrambled Sobol sequence, whose
        evenly spread points give the data–random counts a smaller variance at equal size
        (Kerscher 2022, A&A 666, A181; :mod:`conecheck.cone.randoms`). QMC points avoid each
        other at small separations, so their own pair counts (RR) would be biased: with
        ``qmc``, RR is counted on an independent pseudo-random set of ``rr_multiple``.
    rr_multiple : float
        Randoms per galaxy of the pseudo-random set RR is counted on with ``qmc`` sampling
        (RR is counted once per cut and shared by every cone, so it can afford many).
    """
    multiple: float | Literal["auto"] = "auto"
    radial: Literal["volume", "shuffle"] = "volume"
    sampling: Literal["pseudo", "qmc"] = "qmc"
    rr_multiple: float = 20.0

    def __post_init__(self) -> None:
        problems: list[str] = []
        if self.multiple != "auto" and not (
                isinstance(self.multiple, (int, float)) and not isinstance(self.multiple, bool)
                and math.isfinite(self.multiple) and 0.0 < self.multiple <= 1e4):
            problems.append(f"multiple = {self.multiple!r}: expected \"auto\" or a number "
                            "0 < multiple <= 1e4")
        if self.radial not in ("volume", "shuffle"):
            problems.append(f"radial = {self.radial!r}: expected 'volume' or 'shuffle'")
        if self.sampling not in ("pseudo", "qmc"):
            problems.append(f"sampling = {self.sampling!r}: expected 'pseudo' or 'qmc'")
        if not (math.isfinite(self.rr_multiple) and 0.0 < self.rr_multiple <= 1e4):
            problems.append(f"rr_multiple = {self.rr_multiple!r}: expected 0 < value <= 1e4")
        _raise("randoms", problems)
