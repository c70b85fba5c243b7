"""The run configuration: one TOML file → typed, frozen, validated settings.

The stages own their settings classes (``cone.settings``, ``stats.settings``,
``compare.rules``); this module only adds the run-level sections (cosmology, box, survey
files, samples, jackknife, cones, compute, output) and one generic loader that

* rejects unknown keys (naming the key path and the allowed keys),
* checks every value against the field's type hint (``float`` accepts integers),
* fills the documented defaults, and
* collects *every* problem of the file before raising one :class:`InputError`.

Relative paths are resolved against the config file's directory. ``builtin:kestrel`` names
the invented demo footprint (and ``builtin:kestrel-overlap`` its tile-overlap map) shipped
with the package.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
from collections.abc import Collection, Mapping
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any, Literal

import tomli_w
from astropy import cosmology as apc

from .attribution.settings import (
    CorrectionsConfig,
    CutSweepConfig,
    LadderConfig,
    cut_sweep_section,
    sweep_problems,
    switched_on,
)
from .compare.rules import VerdictRules
from .cone.settings import (
    CompletenessSettings,
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    LuminosityFunction,
    ObserverSettings,
    RandomSettings,
    RedshiftErrorSettings,
    SampleCut,
    SurveyShell,
    TargetSettings,
    TileSettings,
    fibres_limit_targets,
)
from .cosmology import Cosmology
from .errors import InputError
from .loader import build_section, read_toml
from .stats.registry import SETTINGS_TYPES, STATISTICS

BUILTIN_FILES = {"builtin:kestrel": "kestrel_mask.fits",
                 "builtin:kestrel-overlap": "kestrel_overlap.fits"}
STATISTIC_NAMES = tuple(SETTINGS_TYPES)
#: Statistics that need a matter tracer.
NEEDS_MATTER = tuple(n for n, s in STATISTICS.items() if s.needs_matter)


# --------------------------------------------------------------------------- sections
@dataclass(frozen=True)
class CosmologyConfig:
    """Fiducial cosmology (flat ΛCDM unless ``omega_k`` is set).

    Attributes
    ----------
    omega_m : float
        Matter density parameter today.
    omega_k : float
        Curvature density parameter (0: flat).
    h : float
        H0 / (100 km/s/Mpc); used for magnitudes and to convert input columns in Mpc or Msun.
    realisation : str or None
        Name of an astropy realisation (Planck18, WMAP9, …) whose Ω_m, Ω_k and h are used
        instead of the three keys above (radiation and neutrinos are left out: comoving
        distances then differ from astropy's by < 6·10⁻⁴ up to z = 0.5 for Planck18).
    """

    omega_m: float = 0.3
    omega_k: float = 0.0
    h: float = 0.7
    realisation: str | None = None

    def __post_init__(self) -> None:
        problems = []
        if not 0.01 < self.omega_m < 2:
            problems.append(f"omega_m = {self.omega_m!r}: expected 0.01 < omega_m < 2")
        if not -1 < self.omega_k < 1:
            problems.append(f"omega_k = {self.omega_k!r}: expected -1 < omega_k < 1")
        if not 0.2 < self.h < 2:
            problems.append(f"h = {self.h!r}: expected 0.2 < h < 2")
        if problems:
            raise InputError("; ".join(problems), problems)

    def model(self) -> Cosmology:
        """The distance–redshift model of these parameters."""
        return Cosmology(omega_m=self.omega_m, omega_k=self.omega_k, h=self.h)


#: Side [Mpc/h] and snapshot redshift of the synthetic box when neither the configuration
#: nor the command line gives them (`run` and `mockbox` share them).
SYNTHETIC_BOX_SIZE = 250.0
SYNTHETIC_REDSHIFT = 0.06


@dataclass(frozen=True)
class SnapshotConfig:
    """One snapshot of an evolving box (``[[box.snapshots]]``, in increasing redshift).

    Attributes
    ----------
    redshift : float
        Snapshot redshift.
    path : str or None
        Its galaxy file (``box.source = "file"``) or halo file (``"halos"``); none for a
        synthetic box.
    hod : str or None
        Its HOD parameter file (``halos`` and ``synthetic``; default: ``box.hod``).
    z_max : float or None
        Upper redshift of its range; default the midpoint in comoving distance to the next
        snapshot's redshift (unused for the last).
    """

    redshift: float = -1.0
    path: str | None = None
    hod: str | None = None
    z_max: float | None = None

    def __post_init__(self) -> None:
        problems = []
        if not (isinstance(self.redshift, (int, float)) and 0 <= self.redshift < 10):
            problems.append(f"redshift = {self.redshift!r}: required, 0 <= z < 10")
        if self.z_max is not None and not (0 < self.z_max < 10):
            problems.append(f"z_max = {self.z_max!r}: expected 0 < z_max < 10 or no value")
        if problems:
            raise InputError("; ".join(problems), problems)


@dataclass(frozen=True)
class BoxConfig:
    """The periodic galaxy box the model predictions come from.

    Attributes
    ----------
    source : {"synthetic", "file", "halos"}
        ``file``: a galaxy catalogue; ``halos``: a halo catalogue populated with the HOD;
        ``synthetic``: the built-in lognormal halo box populated with the HOD.
    path : str or None
        Galaxy file (``file``) or halo file (``halos``): FITS, HDF5, ECSV, Parquet or .npz.
    columns : table of str
        Column mapping, conecheck name → name in the file (x, y, z, vx, vy, vz, abs_mag, …).
    box_size : float or None
        Box side L [Mpc/h] (read from the file's metadata when omitted; synthetic: 250).
    redshift : float or None
        Snapshot redshift (file metadata when omitted; synthetic: 0.06).
    hdf5_path : str or None
        HDF5 files: the table dataset, or the group holding one dataset per column (default:
        the first table in the file, else the root group's datasets).
    los_axis : int
        Line-of-sight axis of the box estimators (0, 1, 2 for x, y, z).
    hod : str or None
        HOD parameter file (TOML) for ``halos`` and ``synthetic``; the shipped default when
        omitted.
    sigma8 : float
        Synthetic box: amplitude of linear fluctuations.
    n_s : float
        Synthetic box: primordial spectral index.
    omega_b : float
        Synthetic box: baryon density (shape of the Eisenstein & Hu 1998 spectrum).
    grid : int or None
        Synthetic box: FFT grid cells per side (default from the box size).
    rsd : bool
        Apply plane-parallel redshift-space distortions along ``los_axis`` in the box.
    redshift_scatter_kms : float
        Box: Gaussian line-of-sight velocity scatter [km/s] mirroring redshift errors (0: off).
    particles : str or None
        Matter particle file of the same box (x, y, z in Mpc/h; a BOXSIZE header must equal
        the galaxies'), for lensing statistics. A synthetic box draws its own when omitted.
    particle_columns : table of str
        Column mapping of the particle file (x, y, z).
    particle_mass : float or None
        Mass of one particle of the file [M_⊙/h].
    particle_density : float
        Synthetic box: matter particles per (Mpc/h)³ (drawn only when a lensing statistic is
        measured).
    snapshots : list of tables
        Several snapshots of one simulation for an evolving cone (``[[box.snapshots]]``:
        redshift, path, hod, z_max), in increasing redshift; they replace ``path`` and
        ``redshift`` and share every other key (:mod:`conecheck.box.snapshots`).
    """

    source: Literal["synthetic", "file", "halos"] = "synthetic"
    path: str | None = None
    columns: dict[str, str] = field(default_factory=dict)
    box_size: float | None = None
    redshift: float | None = None
    hdf5_path: str | None = None
    los_axis: int = 2
    hod: str | None = None
    sigma8: float = 0.8
    n_s: float = 0.96
    omega_b: float = 0.048
    grid: int | None = None
    rsd: bool = True
    redshift_scatter_kms: float = 0.0
    particles: str | None = None
    particle_columns: dict[str, str] = field(default_factory=dict)
    particle_mass: float | None = None
    particle_density: float = 0.05
    snapshots: tuple[SnapshotConfig, ...] = ()

    def __post_init__(self) -> None:
        problems = []
        problems += snapshot_problems(self)
        if self.particles and not (self.particle_mass and self.particle_mass > 0):
            problems.append(f"particle_mass = {self.particle_mass!r}: a particle file needs "
                            "the mass of one particle, > 0 M_⊙/h")
        if not self.particles and (self.particle_mass is not None or self.particle_columns):
            problems.append("particles: particle_mass / particle_columns are given but no "
                            "particle file")
        if not (0 < self.particle_density <= 10):
            problems.append(f"particle_density = {self.particle_density!r}: expected "
                            "0 < particles per (Mpc/h)³ ≤ 10")
        if self.source not in ("synthetic", "file", "halos"):
            problems.append(f"source = {self.source!r}: expected 'synthetic', 'file' or "
                            f"'halos'")
        if self.source in ("file", "halos") and not self.path and not self.snapshots:
            problems.append(f"path: source = '{self.source}' needs the catalogue file")
        if self.source == "synthetic" and self.path:
            problems.append("path: a synthetic box reads no file; remove path or set "
                            "source = 'file' or 'halos'")
        if self.source == "file" and self.hod:
            problems.append("hod: a galaxy file is used as it is; the HOD applies to "
                            "source = 'halos' or 'synthetic'")
        if self.box_size is not None and not self.box_size > 0:
            problems.append(f"box_size = {self.box_size!r}: expected > 0 Mpc/h")
        if self.redshift is not None and not 0 <= self.redshift < 10:
            problems.append(f"redshift = {self.redshift!r}: expected 0 <= z < 10")
        if self.los_axis not in (0, 1, 2):
            problems.append(f"los_axis = {self.los_axis!r}: expected 0, 1 or 2")
        if not 0.1 < self.sigma8 < 2:
            problems.append(f"sigma8 = {self.sigma8!r}: expected 0.1 < sigma8 < 2")
        if self.redshift_scatter_kms < 0:
            problems.append(f"redshift_scatter_kms = {self.redshift_scatter_kms!r}: "
                            f"expected >= 0 km/s")
        if self.grid is not None and self.grid < 8:
            problems.append(f"grid = {self.grid!r}: expected >= 8 cells per side")
        if problems:
            raise InputError("; ".join(problems), problems)


def snapshot_problems(box: BoxConfig) -> list[str]:
    """What is wrong with ``box.snapshots`` (each problem names its key)."""
    snaps = box.snapshots
    if not snaps:
        return []
    out = []
    if box.path or box.redshift is not None:
        out.append("path/redshift: with snapshots each [[box.snapshots]] entry gives its own "
                   "redshift and file; remove box.path and box.redshift")
    for i, (a, b) in enumerate(zip(snaps, snaps[1:], strict=False)):
        if not b.redshift > a.redshift:
            out.append(f"snapshots[{i + 1}].redshift = {b.redshift}: snapshots must be listed "
                       f"in increasing redshift (snapshots[{i}].redshift = {a.redshift})")
        if a.z_max is not None and not a.redshift <= a.z_max <= b.redshift:
            out.append(f"snapshots[{i}].z_max = {a.z_max}: expected between its redshift "
                       f"{a.redshift} and the next snapshot's {b.redshift} (ranges must not "
                       "overlap)")
    for i, sn in enumerate(snaps):
        if box.source in ("file", "halos") and not sn.path:
            out.append(f"snapshots[{i}].path: source = '{box.source}' needs each snapshot's "
                       "file")
        if box.source == "synthetic" and sn.path:
            out.append(f"snapshots[{i}].path: a synthetic box reads no file")
        if box.source == "file" and sn.hod:
            out.append(f"snapshots[{i}].hod: a galaxy file is used as it is")
    return out


def snapshot_box(box: BoxConfig, k: int) -> BoxConfig:
    """The box settings of snapshot ``k``: the shared keys with its redshift, file and HOD."""
    sn = box.snapshots[k]
    return dataclasses.replace(box, snapshots=(), redshift=sn.redshift, path=sn.path,
                               hod=sn.hod or box.hod)


@dataclass(frozen=True)
class SurveyFiles:
    """Sky files of the survey.

    Attributes
    ----------
    name : str
        Survey name for the report.
    mask : str
        HEALPix completeness map (FITS), or ``builtin:kestrel`` for the invented demo survey.
    vetoes : list of str
        Veto maps multiplied into the mask.
    """

    name: str = ""
    mask: str = ""
    vetoes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not self.mask:
            raise InputError("mask: the survey's HEALPix completeness map is required "
                             "(a FITS path, or 'builtin:kestrel' for the demo footprint)")


@dataclass(frozen=True)
class SampleConfig:
    """One galaxy sample: a magnitude threshold, a primary redshift cut and alternatives.

    Attributes
    ----------
    name : str
        Sample name (letters, digits, '_' or '-').
    mag_max : float or None
        Keep galaxies brighter than this absolute magnitude (M − 5 log10 h).
    z_min, z_max : float
        Primary redshift cut.
    label : str
        Name of the primary cut.
    alt_cuts : list of tables
        Alternative cuts, each with ``label``, ``z_min``, ``z_max``.
    """

    name: str = ""
    mag_max: float | None = None
    z_min: float = 0.0
    z_max: float = 0.0
    label: str = "primary"
    alt_cuts: tuple[SampleCut, ...] = ()

    def __post_init__(self) -> None:
        if not re.fullmatch(r"[A-Za-z0-9_-]+", self.name or ""):
            raise InputError(f"name = {self.name!r}: expected letters, digits, '_' or '-'")
        SampleCut(self.label, self.mag_max, self.z_min, self.z_max)
        labels = [self.label] + [c.label for c in self.alt_cuts]
        dup = sorted({x for x in labels if labels.count(x) > 1})
        if dup:
            raise InputError(f"alt_cuts: cut labels must differ, {dup} repeat")

    @property
    def cuts(self) -> tuple[SampleCut, ...]:
        """Primary cut first, then the alternatives (each with this sample's threshold)."""
        first = SampleCut(self.label, self.mag_max, self.z_min, self.z_max)
        return (first,) + tuple(dataclasses.replace(c, mag_max=self.mag_max)
                                for c in self.alt_cuts)

    def cut(self, label: str | None = None) -> SampleCut:
        """The cut labelled ``label`` (default: the primary cut)."""
        cuts = self.cuts
        if label is None:
            return cuts[0]
        for c in cuts:
            if c.label == label:
                return c
        raise InputError(f"cut {label!r}: sample '{self.name}' has "
                         f"{', '.join(c.label for c in cuts)}")


@dataclass(frozen=True)
class StatisticsConfig:
    """Which statistics to measure, each with its settings table ``[statistics.<name>]``.

    Attributes
    ----------
    measure : list of str
        Names of registered statistics (``conecheck check`` lists them, built in and
        installed; the ``[statistics.<name>]`` tables below are the built-in ones).
    """

    measure: tuple[str, ...] = ("number_density", "wp", "cic", "vpf")
    settings: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        bad = [s for s in self.measure if s not in STATISTIC_NAMES]
        if bad or not self.measure:
            raise InputError(f"measure = {list(self.measure)!r}: expected a non-empty list of "
                             f"{', '.join(STATISTIC_NAMES)}")

    def get(self, name: str) -> Any:
        """Settings of statistic ``name`` (defaults when not configured)."""
        return self.settings.get(name) or SETTINGS_TYPES[name]()

    def only(self, names: Collection[str]) -> StatisticsConfig:
        """The same configuration measuring only the statistics in ``names`` (in this
        configuration's order), e.g. for a task that measures one of them."""
        return StatisticsConfig(measure=tuple(n for n in self.measure if n in names),
                                settings={n: v for n, v in self.settings.items() if n in names})

    @property
    def matter_reach(self) -> tuple[float, float] | None:
        """Largest (across, along the LOS) separations [Mpc/h] at which a measured statistic
        uses matter; None when none does."""
        reach = [STATISTICS[n].matter_reach(self.get(n)) for n in self.measure
                 if STATISTICS[n].needs_matter]
        if not reach:
            return None
        return max(r[0] for r in reach), max(r[1] for r in reach)

    def restricted(self) -> StatisticsConfig:
        """The measured statistics with their settings spelled out (defaults filled in),
        nothing else: equal for two configurations that measure the same thing."""
        return StatisticsConfig(tuple(self.measure),
                                {name: self.get(name) for name in self.measure})


#: Most jackknife regions a run accepts (sky or box).
MAX_JACKKNIFE_REGIONS = 1000


@dataclass(frozen=True)
class JackknifeConfig:
    """Jackknife layouts.

    Attributes
    ----------
    sky_regions : int
        Cone: number K of near-equal-area sky regions (k-means on the footprint).
    box_n_side : int
        Box: sub-volumes per side (``columns``: n² columns along the line of sight;
        ``cubes``: n³ cubes).
    box_layout : {"columns", "cubes"}
        Shape of the box sub-volumes.
    """

    sky_regions: int = 25
    box_n_side: int = 5
    box_layout: Literal["columns", "cubes"] = "columns"

    def __post_init__(self) -> None:
        problems = []
        if self.sky_regions < 2:
            problems.append(f"sky_regions = {self.sky_regions!r}: expected >= 2")
        if self.box_n_side < 2:
            problems.append(f"box_n_side = {self.box_n_side!r}: expected >= 2")
        # Jackknife covariances use tens to a few hundred regions (common practice); more
        # regions than that leave most of them nearly empty and the run refuses later.
        if self.sky_regions > MAX_JACKKNIFE_REGIONS:
            problems.append(f"sky_regions = {self.sky_regions!r}: expected at most "
                            f"{MAX_JACKKNIFE_REGIONS}")
        if self.box_n_side >= 2 and self.box_regions > MAX_JACKKNIFE_REGIONS:
            problems.append(f"box_n_side = {self.box_n_side!r}: {self.box_regions} box regions "
                            f"({self.box_layout}); expected at most {MAX_JACKKNIFE_REGIONS}")
        if problems:
            raise InputError("; ".join(problems), problems)

    @property
    def box_regions(self) -> int:
        """Number of box sub-volumes."""
        return self.box_n_side ** (2 if self.box_layout == "columns" else 3)


@dataclass(frozen=True)
class ConesConfig:
    """How many cones, and whether they are independent realisations.

    Attributes
    ----------
    n_cones : int
        Number of light cones cut from the box.
    independent : bool
        Set true only when the cones share no structure (e.g. one box each); otherwise the
        error on their mean is not reduced by the number of cones.
    """

    n_cones: int = 8
    independent: bool = False
    observers: ObserverSettings = field(default_factory=ObserverSettings)

    def __post_init__(self) -> None:
        if self.n_cones < 1:
            raise InputError(f"n_cones = {self.n_cones!r}: expected >= 1")


SCHEDULER_HELP = ("expected 'local' (in-process), 'local-cluster' (a dask cluster of worker "
                  "processes on this machine) or a dask scheduler address such as "
                  "'tcp://host:8786' or 'tls://host:8786'")


def scheduler_ok(value: object) -> bool:
    """Whether ``value`` is a valid ``compute.scheduler`` (the one rule, used everywhere)."""
    return isinstance(value, str) and (
        value in ("local", "local-cluster")
        or re.fullmatch(r"(tcp|tls)://[^\s:/]+:\d{1,5}", value) is not None)


@dataclass(frozen=True)
class ComputeConfig:
    """Where the tasks run.

    Attributes
    ----------
    scheduler : str
        ``local`` (in-process, numba threads), ``local-cluster`` (a dask LocalCluster on
        loopback) or a dask scheduler address ``tcp://HOST:PORT``.
    workers : int or None
        Workers of a ``local-cluster`` (default 2).
    """

    scheduler: str = "local"
    workers: int | None = None

    def __post_init__(self) -> None:
        problems = []
        if not scheduler_ok(self.scheduler):
            problems.append(f"scheduler = {self.scheduler!r}: {SCHEDULER_HELP}")
        if self.workers is not None and self.workers < 1:
            problems.append(f"workers = {self.workers!r}: expected >= 1")
        if problems:
            raise InputError("; ".join(problems), problems)


@dataclass(frozen=True)
class OutputConfig:
    """Where results go.

    Attributes
    ----------
    directory : str
        Run directory (results.json, tables, validation.pdf, cache, log).
    write_cones : bool
        Also write every cone and the randoms as FITS under ``<directory>/cones``.
    cache : bool
        Keep finished tasks on disk so a re-run or an interrupted run resumes.
    pdf : bool
        Write validation.pdf (``conecheck report DIR`` draws it later from results.json).
    html : bool
        Also write validation.html: the report as one self-contained web page.
    """

    directory: str = "reports/run"
    write_cones: bool = False
    cache: bool = True
    pdf: bool = True
    html: bool = True


@dataclass(frozen=True)
class ParameterShiftsConfig:
    """The offset in units of the HOD parameters (boxes built from halos + HOD).

    Attributes
    ----------
    enabled : bool
        Differentiate every box statistic with respect to the sample's HOD parameters
        (central differences on the box) and report, per cut and combination of statistics,
        how far the cone–box offset would move each parameter in units of its error.
    combinations : list of str
        Statistics fitted together, each written "a+b" (e.g. "number_density+wp"); empty:
        number density + wp, + counts in cylinders, and every measured statistic.
    """

    enabled: bool = True
    combinations: tuple[str, ...] = ()

    def resolved(self, measured: tuple[str, ...]) -> tuple[tuple[str, ...], ...]:
        """The combinations to report, each restricted to what is measured, without repeats."""
        if self.combinations:
            combos = [tuple(c.split("+")) for c in self.combinations]
        else:
            combos = [("number_density", "wp"), ("number_density", "wp", "cic"), measured]
        out: list[tuple[str, ...]] = []
        for c in combos:
            kept = tuple(s for s in measured if s in c)
            if kept and kept not in out:
                out.append(kept)
        return tuple(out)




@dataclass(frozen=True)
class RunConfig:
    """A whole validation run (every section resolved and validated)."""

    seed: int
    cosmology: CosmologyConfig
    box: BoxConfig
    survey: SurveyFiles
    shell: SurveyShell
    effects: EffectSwitches
    fibres: FibreSettings
    correction: CorrectionSettings
    redshift_errors: RedshiftErrorSettings
    completeness: CompletenessSettings
    luminosity_function: LuminosityFunction
    targets: TargetSettings
    tiles: TileSettings
    samples: tuple[SampleConfig, ...]
    statistics: StatisticsConfig
    jackknife: JackknifeConfig
    cones: ConesConfig
    randoms: RandomSettings
    verdict: VerdictRules
    compute: ComputeConfig
    output: OutputConfig
    source: str = "<dict>"
    base_dir: str = "."
    # optional attribution sections (conecheck.attribution)
    parameter_shifts: ParameterShiftsConfig = field(default_factory=ParameterShiftsConfig)
    ladder: LadderConfig = field(default_factory=LadderConfig)
    corrections: CorrectionsConfig = field(default_factory=CorrectionsConfig)
    cut_sweep: CutSweepConfig = field(default_factory=CutSweepConfig)

    def resolve_path(self, value: str | None) -> Path | None:
        """Absolute path of a configured file (``builtin:`` names → shipped data)."""
        return resolve_path(value, self.base_dir)

    def sample(self, name: str | None = None) -> SampleConfig:
        """The sample called ``name`` (default: the first)."""
        if name is None:
            return self.samples[0]
        for s in self.samples:
            if s.name == name:
                return s
        raise InputError(f"sample {name!r}: the configuration has "
                         f"{', '.join(s.name for s in self.samples)}")

    def to_dict(self) -> dict[str, Any]:
        """The resolved configuration as plain TOML-ready data (None values dropped)."""
        return _plain(_nested(self))

    @property
    def config_hash(self) -> str:
        """SHA-256 of the resolved settings (file contents are hashed separately)."""
        d = self.to_dict()
        d.pop("source", None)
        d.pop("base_dir", None)
        text = json.dumps(d, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()


def resolve_path(value: str | None, base_dir: str | Path = ".") -> Path | None:
    """Absolute path of a configured file; ``builtin:`` names map to the package data."""
    if value is None or value == "":
        return None
    if value in BUILTIN_FILES:
        return Path(__file__).parent / "data" / BUILTIN_FILES[value]
    if value.startswith("builtin:"):
        raise InputError(f"{value!r}: unknown built-in file; expected one of "
                         f"{', '.join(BUILTIN_FILES)}")
    p = Path(value).expanduser()
    return p if p.is_absolute() else (Path(base_dir) / p).resolve()


# --------------------------------------------------------------------------- loading
#: TOML layout: section path → (class, sub-tables handled separately)
_SURVEY_SUBTABLES = {"shell": SurveyShell, "effects": EffectSwitches, "fibres": FibreSettings,
                     "correction": CorrectionSettings,
                     "redshift_errors": RedshiftErrorSettings,
                     "completeness": CompletenessSettings,
                     "luminosity_function": LuminosityFunction,
                     "targets": TargetSettings, "tiles": TileSettings}
_TOP_KEYS = ("seed", "cosmology", "box", "survey", "samples", "statistics", "jackknife",
             "cones", "randoms", "verdict", "compute", "output", "parameter_shifts",
             "ladder", "corrections", "cut_sweep")


def _astropy_values(cosmo: Any) -> dict[str, float]:
    """Ω_m, Ω_k and h of an astropy cosmology object."""
    return {"omega_m": float(cosmo.Om0), "omega_k": float(cosmo.Ok0),
            "h": float(cosmo.H0.to_value("km / (Mpc s)")) / 100.0}


def _cosmology_table(table: Any, problems: list[str]) -> Any:
    """The [cosmology] table with an astropy object or a named realisation resolved.

    From Python, ``cosmology`` may be an astropy Cosmology instance; in a file,
    ``realisation = "Planck18"`` names one of astropy's realisations and then stands alone.
    """
    if isinstance(table, apc.Cosmology):
        return {**_astropy_values(table), "realisation": table.name or None}
    if not isinstance(table, Mapping) or table.get("realisation") is None:
        return table
    name = table["realisation"]
    if isinstance(name, str) and name in apc.realizations.available:
        values = _astropy_values(getattr(apc, name))
        # a resolved configuration repeats the realisation's values: they may stay
        others = sorted(k for k in set(table) - {"realisation"}
                        if not (k in values and isinstance(table[k], (int, float))
                                and math.isclose(table[k], values[k], rel_tol=1e-12)))
    else:
        others = []
    if others:
        problems.append(f"cosmology.realisation = {name!r} sets Ω_m, Ω_k and h; remove "
                        f"{', '.join(f'cosmology.{k}' for k in others)} or the realisation")
        return None
    if not isinstance(name, str) or name not in apc.realizations.available:
        problems.append(f"cosmology.realisation = {name!r}: expected one of astropy's "
                        f"{', '.join(apc.realizations.available)}")
        return None
    return {**_astropy_values(getattr(apc, name)), "realisation": name}


def _box(table: Any, problems: list[str]) -> BoxConfig | None:
    """The [box] table, with its [[box.snapshots]] list built entry by entry."""
    if not isinstance(table, Mapping) or not table.get("snapshots"):
        # an empty list (a resolved configuration without snapshots) means none
        return build_section(BoxConfig, table, "box", problems, skip=("snapshots",))
    raw = table["snapshots"]
    if not isinstance(raw, list):
        problems.append("box.snapshots: expected a list of [[box.snapshots]] tables "
                        "(redshift, path, hod, z_max)")
        return None
    snaps = []
    for i, entry in enumerate(raw):
        if isinstance(entry, Mapping) and "redshift" not in entry:
            problems.append(f"box.snapshots[{i}].redshift: required")
            continue
        sn = build_section(SnapshotConfig, entry, f"box.snapshots[{i}]", problems)
        if sn is not None:
            snaps.append(sn)
    if len(snaps) < len(raw):
        return None
    return build_section(BoxConfig, table, "box", problems, skip=("snapshots",),
                         extra={"snapshots": tuple(snaps)})


def _samples(value: Any, problems: list[str]) -> tuple[SampleConfig, ...]:
    if not isinstance(value, list) or not value:
        problems.append("samples: expected at least one [[samples]] table (name, mag_max, "
                        "z_min, z_max)")
        return ()
    out = []
    for i, table in enumerate(value):
        path = f"samples[{i}]"
        if not isinstance(table, Mapping):
            problems.append(f"{path}: expected a table")
            continue
        alts = []
        raw_alts = table.get("alt_cuts", [])
        if not isinstance(raw_alts, list):
            problems.append(f"{path}.alt_cuts: expected a list of tables (label, z_min, z_max)")
            raw_alts = []
        n0 = len(problems)
        for j, alt in enumerate(raw_alts):
            if isinstance(alt, Mapping) and "mag_max" in alt:
                problems.append(f"{path}.alt_cuts[{j}].mag_max: an alternative cut shares its "
                                f"sample's magnitude threshold; set it on the sample")
                continue
            cut = build_section(SampleCut, alt, f"{path}.alt_cuts[{j}]", problems)
            if cut is not None:
                alts.append(cut)
        for key in ("name", "z_min", "z_max"):
            if key not in table:
                problems.append(f"{path}.{key}: required")
        if len(problems) > n0:
            continue
        s = build_section(SampleConfig, table, path, problems, skip=("alt_cuts",),
                          extra={"alt_cuts": tuple(alts)})
        if s is not None:
            out.append(s)
    names = [s.name for s in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        problems.append(f"samples: sample names must differ, {dup} repeat")
    return tuple(out)


def _statistics(table: Any, problems: list[str]) -> StatisticsConfig | None:
    if not isinstance(table, Mapping):
        problems.append("statistics: expected a table")
        return None
    settings: dict[str, Any] = {}
    for name, sub in table.items():
        if name == "measure":
            continue
        if name not in STATISTIC_NAMES:
            problems.append(f"statistics.{name}: unknown statistic (expected measure = [...] "
                            f"and tables among {', '.join(STATISTIC_NAMES)})")
            continue
        s = build_section(SETTINGS_TYPES[name], sub, f"statistics.{name}", problems)
        if s is not None:
            settings[name] = s
    measure = table.get("measure", list(StatisticsConfig.measure))
    return build_section(StatisticsConfig, {"measure": measure}, "statistics", problems,
                         extra={"settings": settings})


def n_bins(name: str, settings: Any) -> int:
    """Length of statistic ``name``'s data vector with ``settings``."""
    return STATISTICS[name].n_bins(settings)


#: Randoms per galaxy below which the 2-point statistics carry noticeable random shot noise
#: (common practice: 10-50 per galaxy for Landy–Szalay estimates).
RECOMMENDED_RANDOMS_MULTIPLE = 10


def _cross_checks(cfg: RunConfig, problems: list[str]) -> list[str]:
    """Problems that involve several sections; returns warnings."""
    warnings = []
    if cfg.randoms.multiple != "auto" and cfg.randoms.multiple < RECOMMENDED_RANDOMS_MULTIPLE:
        warnings.append(f"randoms.multiple = {cfg.randoms.multiple:g}: fewer than "
                        f"{RECOMMENDED_RANDOMS_MULTIPLE} randoms per galaxy adds noticeable "
                        f"shot noise to 2-point statistics; raise it for a final run")
    shell = cfg.shell
    if cfg.effects.flux_limit and shell.m_lim is not None:
        problem = shell.flux_monotonic_problem(cfg.cosmology.model())
        if problem:
            problems.append(problem)
    for i, s in enumerate(cfg.samples):
        for cut in s.cuts:
            where = (f"samples[{i}]" if cut.label == s.label
                     else f"samples[{i}].alt_cuts['{cut.label}']")
            if cut.z_min < shell.z_min - 1e-12 or cut.z_max > shell.z_max + 1e-12:
                problems.append(f"{where}: cut {cut.z_min}–{cut.z_max} lies outside the survey "
                                f"shell survey.shell z_min–z_max = {shell.z_min}–{shell.z_max}")
    for i, combo in enumerate(cfg.parameter_shifts.combinations):
        names = combo.split("+")
        unknown = [s for s in names if s not in STATISTIC_NAMES]
        if unknown:
            problems.append(f"parameter_shifts.combinations[{i}] = {combo!r}: "
                            f"{', '.join(unknown)} is not a statistic (measured: "
                            f"{', '.join(cfg.statistics.measure)}); join names with +")
            continue
        # a statistic taken out of statistics.measure simply leaves its combinations
        unmeasured = [s for s in names if s not in cfg.statistics.measure]
        if unmeasured:
            warnings.append(f"parameter_shifts.combinations[{i}] = {combo!r}: "
                            f"{', '.join(unmeasured)} not measured, left out of this "
                            "combination")
    matter = [s for s in cfg.statistics.measure if s in NEEDS_MATTER]
    if matter and cfg.box.snapshots:
        problems.append(f"statistics.measure: {', '.join(matter)} with box.snapshots is not "
                        "supported (the lensing matter comes from one box); measure it on a "
                        "single box")
    if matter and cfg.box.source != "synthetic" and not cfg.box.particles:
        problems.append(f"statistics.measure: {', '.join(matter)} "
                        f"{'needs' if len(matter) == 1 else 'need'} a matter tracer; "
                        "set box.particles to a particle file of the same box (with "
                        "box.particle_mass), or use a synthetic box, which draws its own")
    if cfg.completeness.treatment == "weight":
        unweighted = [s for s in cfg.statistics.measure
                      if STATISTICS[s].counts_in_cells and not STATISTICS[s].weighted_counts]
        if unweighted:
            problems.append(f"survey.completeness.treatment = 'weight': {', '.join(unweighted)} "
                            "only asks whether a cell is empty, which a weight cannot change; "
                            "use 'dilute' or 'threshold', or leave it out of statistics.measure")
    for name in cfg.statistics.measure:
        p = n_bins(name, cfg.statistics.get(name))
        need = p + 3
        for label, k, key in (("sky", cfg.jackknife.sky_regions, "jackknife.sky_regions"),
                              ("box", cfg.jackknife.box_regions, "jackknife.box_n_side")):
            if k < need:
                problems.append(
                    f"{key}: {k} {label} jackknife regions are too few for statistic "
                    f"'{name}' with {p} bins — the Hartlap factor (n − p − 2)/(n − 1) must be "
                    f"positive, so at least {need} regions are needed (or use fewer bins)")
    if cfg.cones.n_cones < cfg.verdict.min_cones:
        warnings.append(f"cones.n_cones = {cfg.cones.n_cones} is below verdict.min_cones = "
                        f"{cfg.verdict.min_cones}: every statistic will be 'warn' at best")
    if cfg.cones.independent and cfg.cones.n_cones < 2:
        warnings.append("cones.independent = true with one cone: the cone-to-cone scatter is "
                        "undefined, the offset's error falls back to the shared-structure form")
    if cfg.targets.source == "fill" and (shell.m_lim is None or not cfg.effects.flux_limit):
        problems.append("survey.targets.source = 'fill': the faint targets are those above "
                        "the flux limit, so it needs survey.shell.m_lim and "
                        "survey.effects.flux_limit = true")
    if cfg.targets.source == "fill" and not fibres_limit_targets(cfg.effects, cfg.tiles):
        warnings.append("survey.targets.source = 'fill' with neither fibre collisions nor "
                        "tiles: fill targets only act on fibres, so they change nothing")
    if cfg.effects.fibres and not cfg.effects.footprint:
        warnings.append("survey.effects: fibres without the footprint collide over the full "
                        "sky shell")
    out = Path(cfg.base_dir) / cfg.output.directory
    if out.exists() and not out.is_dir():
        problems.append(f"output.directory = {cfg.output.directory!r}: {out} exists and is a "
                        f"file, not a directory")
    return warnings


def config_from_dict(data: Mapping[str, Any], source: str = "<dict>",
                     base_dir: str | Path = ".") -> RunConfig:
    """Validate a parsed TOML document into a :class:`RunConfig`.

    Raises
    ------
    InputError
        Listing every problem found, each naming its key path, value and expectation.
    """
    problems: list[str] = []
    for key in data:
        if key not in _TOP_KEYS:
            problems.append(f"{key}: unknown top-level key (allowed: {', '.join(_TOP_KEYS)})")
    seed = data.get("seed", 12345)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        problems.append(f"seed = {seed!r}: expected an integer >= 0")
    survey = data.get("survey", {})
    if not isinstance(survey, Mapping):
        problems.append("survey: expected a table")
        survey = {}
    parts: dict[str, Any] = {
        "cosmology": build_section(CosmologyConfig, _cosmology_table(data.get("cosmology"),
                                                                     problems),
                                   "cosmology", problems),
        "box": _box(data.get("box"), problems),
        "survey": build_section(SurveyFiles, survey, "survey", problems,
                                skip=tuple(_SURVEY_SUBTABLES)),
    }
    for key, cls in _SURVEY_SUBTABLES.items():
        parts[key] = build_section(cls, survey.get(key), f"survey.{key}", problems)
    parts["samples"] = _samples(data.get("samples"), problems)
    parts["statistics"] = _statistics(data.get("statistics", {}), problems)
    parts["jackknife"] = build_section(JackknifeConfig, data.get("jackknife"), "jackknife",
                                       problems)
    cones = data.get("cones", {})
    if not isinstance(cones, Mapping):
        problems.append("cones: expected a table")
        cones = {}
    observers = build_section(ObserverSettings, cones.get("observers"), "cones.observers",
                              problems)
    parts["cones"] = build_section(ConesConfig, cones, "cones", problems, skip=("observers",),
                                   extra={"observers": observers or ObserverSettings()})
    parts["randoms"] = build_section(RandomSettings, data.get("randoms"), "randoms", problems)
    parts["verdict"] = build_section(VerdictRules, data.get("verdict"), "verdict", problems)
    parts["compute"] = build_section(ComputeConfig, data.get("compute"), "compute", problems)
    parts["output"] = build_section(OutputConfig, data.get("output"), "output", problems)
    parts["parameter_shifts"] = build_section(ParameterShiftsConfig,
                                              data.get("parameter_shifts"),
                                              "parameter_shifts", problems)
    parts["ladder"] = build_section(LadderConfig, switched_on(data.get("ladder")), "ladder",
                                    problems)
    parts["corrections"] = build_section(CorrectionsConfig, switched_on(
        data.get("corrections")), "corrections", problems)
    parts["cut_sweep"] = cut_sweep_section(data.get("cut_sweep"), problems)
    if problems or any(v is None for v in parts.values()):
        raise InputError(_joined(source, problems), problems)
    cfg = RunConfig(seed=seed, source=source, base_dir=str(base_dir), **parts)
    warnings = _cross_checks(cfg, problems)
    problems.extend(sweep_problems(cfg.cut_sweep, cfg.samples, cfg.shell))
    if problems:
        raise InputError(_joined(source, problems), problems)
    object.__setattr__(cfg, "_warnings", tuple(warnings))
    return cfg


def config_warnings(cfg: RunConfig) -> tuple[str, ...]:
    """Non-fatal remarks found while validating ``cfg``."""
    return getattr(cfg, "_warnings", ())


def _joined(source: str, problems: list[str]) -> str:
    n = len(problems)
    head = f"{source}: {n} problem{'s' if n != 1 else ''} in the configuration"
    return head + ":\n  - " + "\n  - ".join(problems)


def load_config(path: str | Path) -> RunConfig:
    """Read and validate a TOML run configuration."""
    path = Path(path)
    data = read_toml(path, "configuration file")
    return config_from_dict(data, str(path), path.parent.resolve())


def config_text(path: str | Path) -> str:
    """The configuration file's text (for provenance)."""
    return Path(path).read_text(encoding="utf-8")


# --------------------------------------------------------------------------- output
def _nested(obj: Any) -> Any:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _nested(getattr(obj, f.name)) for f in fields(obj)
                if not f.name.startswith("_")}
    if isinstance(obj, (list, tuple)):
        return [_nested(v) for v in obj]
    if isinstance(obj, Mapping):
        return {k: _nested(v) for k, v in obj.items()}
    return obj


def _plain(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {k: _plain(v) for k, v in obj.items() if v is not None}
    if isinstance(obj, list):
        return [_plain(v) for v in obj]
    return obj


def resolved_toml(cfg: RunConfig) -> str:
    """The resolved configuration (every default filled in) as TOML text."""
    d = cfg.to_dict()
    survey = dict(d.pop("survey"))
    for key in _SURVEY_SUBTABLES:
        survey[key] = d.pop(key)
    stats = d.pop("statistics")
    statistics = {"measure": stats["measure"], **stats.get("settings", {})}
    samples = d.pop("samples")
    cones = d.pop("cones")
    d.pop("source", None)
    d.pop("base_dir", None)
    out = {"seed": d.pop("seed"), "cosmology": d.pop("cosmology"), "box": d.pop("box"),
           "survey": survey, "samples": samples, "statistics": statistics, **d,
           "cones": cones}
    return ("# conecheck resolved configuration: every default filled in\n"
            + tomli_w.dumps(out))
