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

from ..cosmology import C_KMS
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
    """
    rsd: bool = True
    redshift_errors: bool = True
    footprint: bool = True
    flux_limit: bool = True
    fibres: bool = True

    def __post_init__(self) -> None:
        problems = [f"{name} = {getattr(self, name)!r}: expected true or false"
                    for name in ("rsd", "redshift_errors", "footprint", "flux_limit", "fibres")
                    if not isinstance(getattr(self, name), bool)]
        _raise("effects", problems)


@dataclass(frozen=True)
class SurveyShell:
    """The outermost redshift shell every sample cut needs, and the flux limit.

    Attributes
    ----------
    z_min, z_max : float
        Observed-redshift limits of the shell (every cut must lie inside).
    m_lim : float or None
        Apparent-magnitude limit of the target selection (None: no flux limit).
    kcorr_const, kcorr_slope : float
        Optional K-correction K(z) = kcorr_const + kcorr_slope · z [mag], added to the
        apparent magnitude m = M + DM(z_obs) + K(z_obs).  Both 0 (no K-correction) by
        default.
    margin_mpch : float or None
        Extra comoving distance [Mpc/h] kept beyond the shell in true distance, so that
        RSD and redshift errors can move galaxies into it.  None: automatic, from the
        box's largest speed plus five redshift-error sigmas at z_max.
    """
    z_min: float = 0.02
    z_max: float = 0.1
    m_lim: float | None = None
    kcorr_const: float = 0.0
    kcorr_slope: float = 0.0
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
        for name in ("kcorr_const", "kcorr_slope"):
            if not (math.isfinite(getattr(self, name)) and abs(getattr(self, name)) < 20):
                problems.append(f"{name} = {getattr(self, name)!r}: expected |value| < 20 mag")
        if self.margin_mpch is not None and not (math.isfinite(self.margin_mpch)
                                                 and self.margin_mpch >= 0.0):
            problems.append(f"margin_mpch = {self.margin_mpch!r}: expected >= 0 Mpc/h or "
                            "no value (automatic)")
        _raise("shell", problems)

    def kcorrection(self, z: Any) -> Any:
        """K(z) = kcorr_const + kcorr_slope · z [mag]."""
        return self.kcorr_const + self.kcorr_slope * z

    @property
    def has_kcorrection(self) -> bool:
        """True when a non-zero K-correction is configured."""
        return self.kcorr_const != 0.0 or self.kcorr_slope != 0.0


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
    multiple : float
        Number of randoms per data galaxy (≥ 10 advised for 2-point statistics).
    radial : {"volume", "shuffle"}
        ``volume``: χ uniform in comoving volume between the cut's limits;
        ``shuffle``: χ drawn (with replacement) from the data's observed distances.
    """
    multiple: float = 20.0
    radial: Literal["volume", "shuffle"] = "volume"

    def __post_init__(self) -> None:
        problems: list[str] = []
        if not (math.isfinite(self.multiple) and 0.0 < self.multiple <= 1e4):
            problems.append(f"multiple = {self.multiple!r}: expected 0 < multiple <= 1e4")
        if self.radial not in ("volume", "shuffle"):
            problems.append(f"radial = {self.radial!r}: expected 'volume' or 'shuffle'")
        _raise("randoms", problems)
