"""What each task of a run reads, as frozen specs; a task's cache key is the hash of its spec.

A task function receives its spec and the large in-memory inputs it works on (the galaxy
box, the footprint, the jackknife regions, the halos), never the run configuration. Those
large inputs enter the spec as the digest of their *content*
(:func:`~conecheck.run.cache.content_digest`), input files as the digest of their bytes, and
every setting by value. The cache key is :func:`~conecheck.run.cache.spec_key` of the spec,
which also folds in the code version. So a task cannot read something its key leaves out:
a new input has to be added to the spec to reach the task at all.

The builders at the bottom (``box_spec``, ``randoms_spec``, ``cone_build_spec``, …) are the
one place where the run configuration is cut into what each task reads. A setting of one
sample or cut reaches only that sample's or cut's specs, so changing it recomputes nothing
else.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..box.hod import HODModel
from ..cone.settings import (
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
)
from ..config import CosmologyConfig, RunConfig, SampleConfig, StatisticsConfig
from ..cosmology import Cosmology
from ..footprint.coverage import box_dilution
from ..footprint.protocols import SkyFootprint
from ..stats import STATISTICS


@dataclass(frozen=True)
class InputFile:
    """A file a task opens itself: its absolute path and the SHA-256 of its bytes.

    Only the content enters the cache key, so moving an unchanged file recomputes nothing.
    """

    path: str
    sha256: str

    def cache_token(self) -> str:
        """What identifies the file in a cache key: its content."""
        return self.sha256


@dataclass(frozen=True)
class SampleThreshold:
    """A sample as the box sees it: its name (which seeds its draws) and its threshold."""

    name: str
    mag_max: float | None

    @classmethod
    def of(cls, sample: SampleConfig) -> SampleThreshold:
        return cls(sample.name, sample.mag_max)


@dataclass(frozen=True)
class BoxEffects:
    """The box-side effects and the box estimators' line of sight."""

    los_axis: int
    rsd: bool
    redshift_scatter_kms: float


@dataclass(frozen=True)
class BoxJackknife:
    """The box's jackknife sub-volumes."""

    n_side: int
    layout: str


@dataclass(frozen=True)
class BoxSpec:
    """What the box measurement of one sample reads.

    Attributes
    ----------
    seed : int
        Run seed (with the sample's name it seeds the box's random spheres).
    cosmology : CosmologyConfig
        Converts velocities [km/s] to redshift-space displacements [Mpc/h].
    box_content : str
        Digest of the galaxy box the task receives.
    effects : BoxEffects
    sample : SampleThreshold
    statistics : StatisticsConfig
    jackknife : BoxJackknife
    dilution : float
        Fraction of the sample's galaxies the statistics that count in cells keep (seeded),
        as the survey's completeness thins the cones (:func:`count_dilution`).
    """

    seed: int
    cosmology: CosmologyConfig
    box_content: str
    effects: BoxEffects
    sample: SampleThreshold
    statistics: StatisticsConfig
    jackknife: BoxJackknife
    dilution: float = 1.0

    def model(self) -> Cosmology:
        return self.cosmology.model()


@dataclass(frozen=True)
class BoxAxisSpec:
    """The values of the line-of-sight-dependent statistics of ``box`` measured along
    another ``axis`` (0, 1 or 2) of the box, without jackknife: the box's spread over the
    lines of sight (:func:`~conecheck.run.tasks.add_los_spread`)."""

    box: BoxSpec
    axis: int


@dataclass(frozen=True)
class DerivativesSpec:
    """What the HOD-parameter derivatives of one sample read: the box measurement's inputs,
    the halos it repopulates (by content), the HOD model, the step of each parameter and
    the parameters this task differentiates (``None``: every one of the sample's)."""

    box: BoxSpec
    halos_content: str
    hod: HODModel
    steps: tuple[tuple[str, float], ...]
    parameters: tuple[str, ...] | None = None


@dataclass(frozen=True)
class RandomsSpec:
    """What the randoms of one sample and cut (and the work every cone shares) read.

    Attributes
    ----------
    n_expected : float
        Galaxies a cone should hold in the cut (sets the number of randoms).
    data_chi : ndarray or None
        Observed distances [Mpc/h] the ``shuffle`` radial law draws from.
    """

    seed: int
    cosmology: CosmologyConfig
    sample_name: str
    cut: SampleCut
    randoms: RandomSettings
    statistics: StatisticsConfig
    n_expected: float
    footprint_content: str
    regions_content: str
    data_chi: np.ndarray | None = None
    completeness: CompletenessSettings = CompletenessSettings()

    def model(self) -> Cosmology:
        return self.cosmology.model()


@dataclass(frozen=True)
class ConeBuildSpec:
    """What building cone ``index`` reads: the box (by content), the observers, the survey
    model and the footprint it is cut to (by content)."""

    seed: int
    index: int
    n_cones: int
    cosmology: CosmologyConfig
    box_content: str
    footprint_content: str
    shell: SurveyShell
    effects: EffectSwitches
    fibres: FibreSettings
    correction: CorrectionSettings
    redshift_errors: RedshiftErrorSettings
    observers: ObserverSettings
    overlap_map: InputFile | None
    targets: TargetSettings = TargetSettings()
    luminosity_function: LuminosityFunction = LuminosityFunction()
    tiles: TileSettings = TileSettings()
    tiles_file: InputFile | None = None

    def model(self) -> Cosmology:
        return self.cosmology.model()


@dataclass(frozen=True)
class CutSpec:
    """What measuring one sample cut on a built cone reads besides the cone itself.

    ``randoms_key`` is the cache key of the cut's randoms task (their content); ``tag``
    separates the random streams of a stage that measures the same cone twice.
    """

    sample_name: str
    cut: SampleCut
    statistics: StatisticsConfig
    randoms_key: str
    regions_content: str
    tag: str = ""
    completeness: CompletenessSettings = CompletenessSettings()


@dataclass(frozen=True)
class ConeSpec:
    """One cone task: build cone ``build.index`` and measure ``cuts`` on it.

    ``skip_unmeasurable`` records a cut the cone cannot measure instead of failing.
    Each (build, cut) pair is cached on its own (:func:`piece_key`).
    """

    build: ConeBuildSpec
    cuts: tuple[CutSpec, ...]
    skip_unmeasurable: bool = False


@dataclass(frozen=True)
class ConePieceSpec:
    """One cut measured on one built cone: the unit the cache stores, so a cut's change
    recomputes that cut alone on every cone."""

    build: ConeBuildSpec
    cut: CutSpec


# --------------------------------------------------------------------------- builders
def counts_in_cells(cfg: RunConfig) -> bool:
    """True when ``cfg`` measures a statistic that counts galaxies in cells."""
    return any(STATISTICS[n].counts_in_cells for n in cfg.statistics.measure)


def count_completeness(cfg: RunConfig) -> CompletenessSettings:
    """``survey.completeness`` as the tasks read it: the defaults when no measured statistic
    counts in cells (so that changing it recomputes nothing)."""
    return cfg.completeness if counts_in_cells(cfg) else CompletenessSettings()


def count_dilution(cfg: RunConfig, footprint: SkyFootprint) -> float:
    """Fraction of box galaxies kept for the statistics that count in cells: the covered
    sky's mean completeness under ``survey.completeness.treatment = "dilute"`` (1 under the
    other treatments, or when no measured statistic counts in cells)."""
    return box_dilution(footprint, cfg.completeness) if counts_in_cells(cfg) else 1.0


def box_spec(cfg: RunConfig, sample: SampleConfig, box_content: str,
             dilution: float = 1.0) -> BoxSpec:
    """The box measurement of ``sample`` under ``cfg`` (``dilution``: :func:`count_dilution`)."""
    b = cfg.box
    return BoxSpec(seed=cfg.seed, cosmology=cfg.cosmology, box_content=box_content,
                   effects=BoxEffects(b.los_axis, b.rsd, b.redshift_scatter_kms),
                   sample=SampleThreshold.of(sample),
                   statistics=measured_statistics(cfg.statistics),
                   jackknife=BoxJackknife(cfg.jackknife.box_n_side, cfg.jackknife.box_layout),
                   dilution=float(dilution))


def randoms_spec(cfg: RunConfig, sample_name: str, cut: SampleCut, n_expected: float,
                 footprint_content: str, regions_content: str,
                 data_chi: np.ndarray | None) -> RandomsSpec:
    """The randoms of one sample cut under ``cfg``."""
    return RandomsSpec(seed=cfg.seed, cosmology=cfg.cosmology, sample_name=sample_name,
                       cut=cut, randoms=cfg.randoms,
                       statistics=measured_statistics(cfg.statistics),
                       n_expected=float(n_expected), footprint_content=footprint_content,
                       regions_content=regions_content, data_chi=data_chi,
                       completeness=count_completeness(cfg))


def cone_build_spec(cfg: RunConfig, index: int, box_content: str, footprint_content: str,
                    overlap_map: InputFile | None, effects: EffectSwitches | None = None,
                    correction: CorrectionSettings | None = None,
                    tiles_file: InputFile | None = None) -> ConeBuildSpec:
    """Cone ``index`` of ``cfg`` under ``effects`` and ``correction`` (default: the
    configured ones); ``tiles_file``: the tile-centre file (by content) when
    ``survey.tiles.centres`` names one."""
    return ConeBuildSpec(seed=cfg.seed, index=int(index), n_cones=cfg.cones.n_cones,
                         cosmology=cfg.cosmology, box_content=box_content,
                         footprint_content=footprint_content, shell=cfg.shell,
                         effects=effects or cfg.effects, fibres=cfg.fibres,
                         correction=correction or cfg.correction,
                         redshift_errors=cfg.redshift_errors, observers=cfg.cones.observers,
                         overlap_map=overlap_map, targets=cfg.targets,
                         luminosity_function=cfg.luminosity_function, tiles=cfg.tiles,
                         tiles_file=tiles_file)


def cut_spec(cfg: RunConfig, sample_name: str, cut: SampleCut, randoms_key: str,
             regions_content: str, tag: str = "") -> CutSpec:
    """One sample cut measured on a cone of ``cfg``."""
    return CutSpec(sample_name=sample_name, cut=cut,
                   statistics=measured_statistics(cfg.statistics), randoms_key=randoms_key,
                   regions_content=regions_content, tag=tag,
                   completeness=count_completeness(cfg))


def measured_statistics(stats: StatisticsConfig) -> StatisticsConfig:
    """``stats`` without the settings of statistics it does not measure (which no task
    reads, so changing them recomputes nothing)."""
    return stats.restricted()


__all__ = ["BoxAxisSpec", "BoxEffects", "BoxJackknife", "BoxSpec", "ConeBuildSpec", "ConePieceSpec",
           "count_dilution",
           "ConeSpec", "CutSpec", "DerivativesSpec", "InputFile", "RandomsSpec",
           "SampleThreshold", "box_spec", "cone_build_spec", "cut_spec", "measured_statistics",
           "randoms_spec"]
