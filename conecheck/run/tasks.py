"""The run's task functions: the box of one sample, the randoms of one cut, one cone.

Each is a module-level function (so a dask worker can run it) of a frozen spec
(:mod:`conecheck.run.specs`) and the large in-memory inputs the spec names by content,
returning a structure :mod:`conecheck.run.serialize` can store (dicts, arrays, numbers,
Measurements), so every finished task can be cached under the hash of its spec. Every
random draw comes from :func:`~conecheck.streams.seeded_rng` keyed by the run seed and
the task's own names, never from execution order.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from ..box import apply_box_redshift_scatter, apply_box_rsd
from ..box.effects import galaxy_normals, galaxy_uniforms
from ..catalog import GalaxyBox
from ..cone import build_cone, cone_geometry, cone_rngs, make_randoms, n_randoms, select_cut
from ..cone.build import SurveyModel, prepare_box
from ..cone.matter import carry_matter
from ..cone.photometry import luminosity_scatter
from ..cone.randoms import prefix_cells, randoms_multiple
from ..cone.settings import CompletenessSettings, RandomSettings, SampleCut
from ..cosmology import Cosmology
from ..errors import InputError, TaskError
from ..footprint import Footprint, SkyRegions
from ..footprint.coverage import count_weights, covered_sky
from ..stats import STATISTICS, BoxSample, ConeGeometry, ConeSample, MatterSample, Measurement
from ..stats.base import LOS_VARIANCE
from ..streams import seeded_rng
from .specs import (
    BoxAxisSpec,
    BoxSpec,
    ConeBuildSpec,
    ConeSpec,
    CutSpec,
    RandomsSpec,
    SampleThreshold,
)

#: Number of redshift bins of the n(z) diagnostic per cut.
NZ_BINS = 12


# --------------------------------------------------------------------------- box
def box_redshift_space(spec: BoxSpec, box: GalaxyBox, axis: int | None = None) -> np.ndarray:
    """Box positions [Mpc/h] with the box-side effects along ``axis`` (default: the spec's)."""
    cosmo = spec.model()
    eff = spec.effects
    axis = eff.los_axis if axis is None else axis
    pos = apply_box_rsd(box, axis, cosmo) if eff.rsd else np.array(box.position)
    if eff.redshift_scatter_kms > 0:
        pos = apply_box_redshift_scatter(pos, axis, eff.redshift_scatter_kms, box.redshift,
                                         cosmo, galaxy_normals(box, spec.seed, "box-scatter"),
                                         box.box_size)
    return pos


def sample_mask(box: GalaxyBox, sample: SampleThreshold | Any) -> np.ndarray:
    """Galaxies of ``sample`` (anything with ``mag_max``) in the box: brighter than its
    threshold."""
    if sample.mag_max is None:
        return np.ones(len(box), dtype=bool)
    return np.asarray(box.abs_mag) < sample.mag_max


def box_task(spec: BoxSpec, box: GalaxyBox, spread: bool = True) -> dict[str, Any]:
    """Every statistic of one sample measured in the box, with box jackknife.

    With ``spread`` (default) the line-of-sight-dependent statistics are also measured
    along the box's two other axes (:func:`box_axis_task`) for their spread
    (:func:`add_los_spread`); the run makes those separate tasks and joins them.

    Returns
    -------
    dict
        ``measurements`` (statistic → Measurement), ``n_galaxies``, ``number_density``
        [(h/Mpc)³].
    """
    keep = sample_mask(box, spec.sample)
    out = measure_box_sample(spec, box, keep, jackknife=True)
    if spread:
        add_los_spread(out, [box_axis_task(BoxAxisSpec(spec, a), box)
                             for a in other_axes(spec)])
    return {"measurements": out, "n_galaxies": int(keep.sum()),
            "number_density": sample_density(box, spec.sample)}


def other_axes(spec: BoxSpec) -> list[int]:
    """The box axes other than the spec's line of sight, when it measures a statistic that
    depends on the line of sight (else none)."""
    if not any(STATISTICS[n].los_dependent for n in spec.statistics.measure):
        return []
    return [a for a in range(3) if a != spec.effects.los_axis]


def box_axis_task(spec: BoxAxisSpec, box: GalaxyBox) -> dict[str, np.ndarray]:
    """Values (statistic → array) of the line-of-sight-dependent statistics of
    ``spec.box`` measured along ``spec.axis``, without jackknife."""
    los_dependent = tuple(n for n in spec.box.statistics.measure
                          if STATISTICS[n].los_dependent)
    out = measure_box_sample(spec.box, box, sample_mask(box, spec.box.sample),
                             jackknife=False, axis=spec.axis, statistics=los_dependent)
    return {name: np.asarray(m.value, dtype=np.float64) for name, m in out.items()}


def add_los_spread(measurements: dict[str, Measurement],
                   others: list[dict[str, np.ndarray]]) -> None:
    """Record in each line-of-sight-dependent measurement the variance of its value over
    the box's three axes (``others``: :func:`box_axis_task` of the two other axes)."""
    for name, m in measurements.items():
        if others and name in others[0]:
            # The cones see the box along every direction, the box estimator along one axis:
            # the spread over the three axes measures that part of the box value which no
            # cone shares (docs/design.md §8: the offset's own error).
            values = np.array([m.value] + [o[name] for o in others], dtype=np.float64)
            m.extra[LOS_VARIANCE] = values.var(axis=0, ddof=1).tolist()


def merge_box_results(parts: list[dict[str, Any]]) -> dict[str, Any]:
    """One sample's box result from :func:`box_task` results over disjoint statistics, in
    their order (the result of one task over all of them)."""
    return {"measurements": {name: m for p in parts for name, m in p["measurements"].items()},
            "n_galaxies": parts[0]["n_galaxies"],
            "number_density": parts[0]["number_density"]}


def measure_box_sample(spec: BoxSpec, box: GalaxyBox, keep: np.ndarray, *, jackknife: bool,
                       axis: int | None = None, statistics: tuple[str, ...] | None = None
                       ) -> dict[str, Measurement]:
    """The spec's statistics of the galaxies ``keep`` of ``box`` (statistic → value).

    The box effects are applied along ``axis`` (default ``spec.effects.los_axis``), which is
    also the estimators' line of sight; ``statistics`` restricts the spec's list. Each
    statistic draws from the generator of the box task of the spec's sample, so boxes
    measured here with the same galaxies get the same random spheres (common random numbers
    for the HOD derivatives and the line-of-sight spread).
    """
    axis = spec.effects.los_axis if axis is None else axis
    sample = spec.sample
    if keep.sum() < 2:
        raise InputError(f"sample '{sample.name}': {int(keep.sum())} box galaxies brighter "
                         f"than mag_max = {sample.mag_max}; check the threshold and the box")
    pos = box_redshift_space(spec, box, axis)

    def sample_of(points: np.ndarray) -> BoxSample:
        return BoxSample.with_regions(points, box.box_size, axis,
                                      n_side=spec.jackknife.n_side,
                                      layout=spec.jackknife.layout)

    bs = sample_of(pos[keep])
    counted = bs
    if spec.dilution < 1.0 and any(STATISTICS[n].counts_in_cells
                                   for n in spec.statistics.measure):
        # the cones' galaxies are thinned by the survey's completeness: so are the box's for
        # the statistics that count in cells (one draw per galaxy of the box, so every axis
        # and every box of the HOD derivatives keeps the same galaxies where it can)
        u = galaxy_uniforms(box, spec.seed, "box-dilution", sample.name)
        counted = sample_of(pos[keep & (u < spec.dilution)])
    matter = None if box.matter is None else MatterSample(
        box.matter.position, box.matter.particle_mass, box.box_size)
    out = {}
    for name in spec.statistics.measure:
        if statistics is not None and name not in statistics:
            continue
        rng = seeded_rng(spec.seed, "box", sample.name, name)
        stat = STATISTICS[name]
        extra = {"matter": matter} if stat.needs_matter else {}
        out[name] = stat.measure_box(counted if stat.counts_in_cells else bs,
                                     spec.statistics.get(name), rng, jackknife=jackknife,
                                     **extra)
    return out


def measure_box_pair(spec: BoxSpec, first: GalaxyBox, second: GalaxyBox
                     ) -> tuple[dict[str, Measurement], dict[str, Measurement]]:
    """The spec's statistics of every galaxy of two boxes whose galaxies carry identities
    (``draw_key``: the HOD derivatives' ± boxes), without jackknife.

    Each result equals :func:`measure_box_sample` of its box. A statistic with an estimator
    for two boxes (:meth:`~conecheck.stats.Statistic.measure_box_pair`, e.g. wp's pair
    counts) gets the galaxies both boxes hold once and the rest of each; the others, and
    those that count in cells (their box sample is thinned), measure each box whole.
    """
    if first.draw_key is None or second.draw_key is None:
        raise ValueError("measure_box_pair: both boxes need galaxy identities (draw_key)")
    axis = spec.effects.los_axis
    pos1, pos2 = box_redshift_space(spec, first), box_redshift_space(spec, second)
    _, i1, i2 = np.intersect1d(first.draw_key, second.draw_key, assume_unique=True,
                               return_indices=True)
    if not np.array_equal(pos1[i1], pos2[i2]):
        raise ValueError("measure_box_pair: a galaxy both boxes hold sits at two places")
    only1, only2 = np.ones(len(first), bool), np.ones(len(second), bool)
    only1[i1], only2[i2] = False, False

    def sample_of(points: np.ndarray) -> BoxSample:
        return BoxSample(points, first.box_size, axis)

    common = sample_of(pos1[i1])
    paired: tuple[dict[str, Measurement], dict[str, Measurement]] = ({}, {})
    for name in spec.statistics.measure:
        stat = STATISTICS[name]
        if stat.counts_in_cells or stat.needs_matter:
            continue
        both = stat.measure_box_pair(common, sample_of(pos1[only1]), sample_of(pos2[only2]),
                                     spec.statistics.get(name),
                                     seeded_rng(spec.seed, "box", spec.sample.name, name))
        if both is not None:
            paired[0][name], paired[1][name] = both
    rest = tuple(n for n in spec.statistics.measure if n not in paired[0])
    out = []
    for box, done in ((first, paired[0]), (second, paired[1])):
        whole = (measure_box_sample(spec, box, np.ones(len(box), dtype=bool), jackknife=False,
                                    statistics=rest) if rest else {})
        out.append({n: done[n] if n in done else whole[n] for n in spec.statistics.measure})
    return out[0], out[1]


def sample_density(box: GalaxyBox, sample: SampleThreshold | Any) -> float:
    """Number density [(h/Mpc)³] of ``sample`` in the box (real-space counts over L³)."""
    return float(np.count_nonzero(sample_mask(box, sample))) / float(box.box_size) ** 3


# --------------------------------------------------------------------------- randoms
def cut_distances(cosmology: Cosmology, cut: SampleCut) -> tuple[float, float]:
    """Comoving distance limits [Mpc/h] of a redshift cut."""
    return (float(cosmology.comoving_distance(cut.z_min)),
            float(cosmology.comoving_distance(cut.z_max)))


def cut_volume_per_sr(cosmology: Cosmology, cut: SampleCut) -> float:
    """Comoving volume per steradian of a cut's shell [(Mpc/h)³] (curvature included)."""
    lo, hi = cut_distances(cosmology, cut)
    return float(cosmology.volume_between_distances_per_sr(lo, hi))


def cut_volume(cosmology: Cosmology, footprint: Footprint, cut: SampleCut) -> float:
    """A cut's effective comoving volume V_eff = Ω_eff × the shell's volume per steradian
    [(Mpc/h)³]: where a cone holds its galaxies and randoms."""
    return footprint.area_sr * cut_volume_per_sr(cosmology, cut)


def expected_count(cosmology: Cosmology, footprint: Footprint, cut: SampleCut,
                   density: float) -> float:
    """Galaxies a cone should hold: n_box [(h/Mpc)³] × V_eff (:func:`cut_volume`)."""
    return density * cut_volume(cosmology, footprint, cut)


def shuffle_distances(table: Any, cut: SampleCut, survey: SurveyModel,
                      sample_name: str) -> np.ndarray:
    """Observed distances [Mpc/h] of a cone's galaxies in a cut: the ``shuffle`` source."""
    sel = select_cut(table, cut, survey.shell, survey.cosmology)
    if len(sel) == 0:
        raise InputError(f"randoms.radial = 'shuffle': cone 0 has no galaxies in sample "
                         f"'{sample_name}', cut '{cut.label}' to draw distances from")
    return np.asarray(sel["chi_obs"], dtype=np.float64)


def smallest_random_cell(statistics: Any) -> float | None:
    """Smallest :meth:`~conecheck.stats.Statistic.random_cell_volume` [(Mpc/h)³] of the
    measured statistics (``statistics``: a StatisticsConfig); None when none counts pairs
    with randoms."""
    volumes = [STATISTICS[n].random_cell_volume(statistics.get(n)) for n in statistics.measure]
    volumes = [v for v in volumes if v is not None]
    return min(volumes) if volumes else None


def cut_randoms_multiple(randoms: RandomSettings, cell_volume: float | None,
                         n_galaxies: float, footprint: Footprint, cosmology: Cosmology,
                         cut: SampleCut) -> float:
    """Randoms per galaxy of one cut: ``randoms.multiple``, or the ``auto`` choice from the
    cut's mean galaxy density (``n_galaxies`` over the footprint's area × the cut's shell)
    and the smallest cell [(Mpc/h)³] of the statistics counted with randoms
    (:func:`smallest_random_cell`)."""
    density = n_galaxies / max(cut_volume(cosmology, footprint, cut), 1e-300)
    return randoms_multiple(randoms, density, cell_volume)


def cut_randoms(spec: RandomsSpec, footprint: Footprint) -> Any:
    """The random catalogue of one sample and cut (seeded by the run seed, sample and cut).

    ``spec.n_expected`` galaxies × the cut's randoms multiple (:func:`cut_randoms_multiple`)
    points inside the footprint between the cut's distances; ``spec.data_chi`` [Mpc/h] is
    the radial source of ``shuffle``.
    """
    cosmo = spec.model()
    lo, hi = cut_distances(cosmo, spec.cut)
    multiple = cut_randoms_multiple(spec.randoms, smallest_random_cell(spec.statistics),
                                    spec.n_expected, footprint, cosmo, spec.cut)
    n = n_randoms(spec.n_expected, multiple)
    rng = seeded_rng(spec.seed, "randoms", spec.sample_name, spec.cut.label)
    return make_randoms(footprint, lo, hi, n, rng, spec.randoms.radial, spec.data_chi, cosmo,
                        spec.randoms.sampling)


def cut_rr_randoms(spec: RandomsSpec, footprint: Footprint) -> Any:
    """The randoms the cut's shared random-pair counts (RR) are counted on: the cut's own
    randoms, or with ``qmc`` sampling an independent pseudo-random set of ``rr_multiple``
    per galaxy (QMC points avoid each other at small separations; :mod:`conecheck.cone.
    randoms`). None when they are the cut's own."""
    if spec.randoms.sampling != "qmc":
        return None
    cosmo = spec.model()
    lo, hi = cut_distances(cosmo, spec.cut)
    n = n_randoms(spec.n_expected, spec.randoms.rr_multiple)
    rng = seeded_rng(spec.seed, "randoms-rr", spec.sample_name, spec.cut.label)
    return make_randoms(footprint, lo, hi, n, rng, spec.randoms.radial, spec.data_chi, cosmo,
                        "pseudo")


def with_prefixes(randoms: ConeSample, sampling: str, n_expected: float,
                  footprint: Footprint, cosmology: Cosmology, cut: SampleCut) -> ConeSample:
    """``randoms`` of one cut (drawn with ``sampling`` for ``n_expected`` galaxies) with the
    leading parts data–random counts of large cells may use in their place
    (:func:`~conecheck.cone.randoms.prefix_cells`, from their density in the cut's volume)."""
    volume = cut_volume(cosmology, footprint, cut)
    n = len(randoms)
    return dataclasses.replace(randoms, prefixes=prefix_cells(
        sampling, n, n / max(n_expected, 1e-300), n / max(volume, 1e-300)))


def randoms_task(spec: RandomsSpec, footprint: Footprint, regions: SkyRegions
                 ) -> dict[str, Any]:
    """The randoms of one sample and cut with everything every cone shares.

    Returns
    -------
    dict
        ``ra``, ``dec`` [deg], ``chi`` [Mpc/h], ``weight``, ``region`` arrays, ``prefixes``
        (:func:`~conecheck.cone.randoms.prefix_cells`) and ``shared`` (statistic → its
        :meth:`~conecheck.stats.Statistic.pack_shared` mapping, e.g. wp's RR counts or the
        VPF's sphere centres).
    """
    cosmo = spec.model()
    lo, hi = cut_distances(cosmo, spec.cut)
    rand = with_prefixes(_cone_sample(cut_randoms(spec, footprint), regions),
                         spec.randoms.sampling, spec.n_expected, footprint, cosmo, spec.cut)
    rr_table = cut_rr_randoms(spec, footprint)
    rr_rand = rand if rr_table is None else _cone_sample(rr_table, regions)
    geometry = ConeGeometry(footprint, lo, hi, regions, cut_volume_per_sr(cosmo, spec.cut),
                            covered_sky(footprint, spec.completeness))
    shared = {}
    for name in spec.statistics.measure:
        # the statistics that count random pairs count them on the RR set
        s = STATISTICS[name].prepare_cone(
            rr_rand if STATISTICS[name].needs_randoms else rand, geometry,
            spec.statistics.get(name),
            n_data=max(int(round(spec.n_expected)), 1),
            rng=seeded_rng(spec.seed, "shared", spec.sample_name, spec.cut.label, name))
        if s is not None:
            shared[name] = STATISTICS[name].pack_shared(s)
    return {"ra": rand.ra, "dec": rand.dec, "chi": rand.chi, "weight": rand.w,
            "region": rand.region, "prefixes": [list(p) for p in rand.prefixes],
            "shared": shared}


def randoms_sample(payload: dict[str, Any], regions: SkyRegions) -> ConeSample:
    """The ConeSample of a randoms task result."""
    return ConeSample(payload["ra"], payload["dec"], payload["chi"], payload["weight"],
                      payload["region"], regions.k,
                      tuple(tuple(p) for p in payload.get("prefixes", ())))


def shared_counts(payload: dict[str, Any]) -> dict[str, Any]:
    """What every cone of a cut shares, per statistic (pair counts, sphere centres)."""
    return {k: STATISTICS[k].unpack_shared(v) for k, v in payload.get("shared", {}).items()
            if k in STATISTICS}


# --------------------------------------------------------------------------- cones
def _cone_sample(table: Any, regions: SkyRegions) -> ConeSample:
    ra = np.asarray(table["ra"], dtype=np.float64)
    dec = np.asarray(table["dec"], dtype=np.float64)
    chi = np.asarray(table["chi_obs"], dtype=np.float64)
    w = np.asarray(table["weight"], dtype=np.float64)
    region = np.asarray(regions.region_of(ra, dec), dtype=np.int64)
    inside = region >= 0
    if not inside.all():
        # a handful of points on pixels the region map's resolution misses: drop them rather
        # than attribute them to a wrong region
        ra, dec, chi, w, region = ra[inside], dec[inside], chi[inside], w[inside], \
            region[inside]
    return ConeSample(ra, dec, chi, w, region, regions.k)


def count_sample(table: Any, regions: SkyRegions, settings: CompletenessSettings,
                 whole: ConeSample | None = None) -> ConeSample:
    """The cone galaxies the statistics that count in cells use: those on covered sky, with
    weights per ``survey.completeness`` (:func:`~conecheck.footprint.coverage.count_weights`).

    ``whole``: the sample of all of ``table``, returned as it is when the treatment keeps
    every galaxy at its weight (no second region lookup).
    """
    if "completeness" not in table.colnames:
        return whole if whole is not None else _cone_sample(table, regions)
    keep, w = count_weights(table["completeness"], table["weight"], settings)
    if keep.all() and settings.treatment != "weight":
        return whole if whole is not None else _cone_sample(table, regions)
    sub = table[keep]
    sub["weight"] = w
    return _cone_sample(sub, regions)


def survey_model(spec: ConeBuildSpec, footprint: Footprint) -> SurveyModel:
    """The cone builder's survey description of a build spec."""
    fibres, tiles = spec.fibres, spec.tiles
    if spec.overlap_map is not None:
        fibres = dataclasses.replace(fibres, overlap_map=spec.overlap_map.path)
    if spec.tiles_file is not None:
        tiles = dataclasses.replace(tiles, centres=spec.tiles_file.path)
    return SurveyModel(cosmology=spec.model(), shell=spec.shell, footprint=footprint,
                       effects=spec.effects, fibres=fibres, correction=spec.correction,
                       redshift_errors=spec.redshift_errors, observers=spec.observers,
                       targets=spec.targets, luminosity_function=spec.luminosity_function,
                       tiles=tiles)


def cone_table(spec: ConeBuildSpec, box: GalaxyBox, footprint: Footprint, cells: Any = None,
               keep_targets: bool = False) -> tuple[Any, dict[str, Any]]:
    """Build cone ``spec.index`` (observer, rotation and draws from the seed and the index)."""
    o, rot = cone_geometry(spec.observers, box.box_size, spec.n_cones, spec.seed, spec.index)
    return build_cone(box, survey_model(spec, footprint), o, rot,
                      cone_rngs(spec.seed, spec.index),
                      cells=cells if cells is not None else prepare_box(box),
                      keep_targets=keep_targets)


def cone_matter(spec: ConeBuildSpec, box: GalaxyBox, footprint: Footprint,
                reach: tuple[float, float] | None) -> MatterSample | None:
    """The box's matter carried into cone ``spec.index`` (same observer, rotation and
    replicas as its galaxies) as far as ``reach`` (across, along the LOS) [Mpc/h] around the
    survey; None when nothing needs it."""
    if reach is None:
        return None
    if box.matter is None:
        raise InputError("a lensing statistic is measured but the box has no matter "
                         "particles; set box.particles")
    o, rot = cone_geometry(spec.observers, box.box_size, spec.n_cones, spec.seed, spec.index)
    xyz = carry_matter(box.matter, survey_model(spec, footprint), o, rot, *reach)
    return MatterSample(xyz, box.matter.particle_mass)


def measure_cone_cut(build: ConeBuildSpec, cut_spec: CutSpec, table: Any,
                     footprint: Footprint, regions: SkyRegions, randoms: dict[str, Any],
                     matter: MatterSample | None = None
                     ) -> tuple[dict[str, Measurement], np.ndarray]:
    """Every statistic of one sample cut measured on one built cone (with sky jackknife);
    ``matter``: the cone's matter (:func:`cone_matter`) for lensing statistics."""
    cosmo = build.model()
    cut = cut_spec.cut
    sel = select_cut(table, cut, build.shell, cosmo)
    data = _cone_sample(sel, regions)
    stats = cut_spec.statistics
    # the galaxies the statistics that count in cells see: the same sample unless the
    # completeness treatment drops or re-weights some
    counted = (count_sample(sel, regions, cut_spec.completeness, whole=data)
               if any(STATISTICS[n].counts_in_cells for n in stats.measure) else data)
    lo, hi = cut_distances(cosmo, cut)
    geometry = ConeGeometry(footprint, lo, hi, regions, cut_volume_per_sr(cosmo, cut),
                            covered_sky(footprint, cut_spec.completeness))
    rand = randoms_sample(randoms, regions)
    shared = shared_counts(randoms)
    out = {}
    for name in stats.measure:
        rng = seeded_rng(build.seed, "cone", build.index, cut_spec.sample_name, cut.label, name,
                       cut_spec.tag)
        stat = STATISTICS[name]
        extra = {"matter": matter} if stat.needs_matter else {}
        out[name] = stat.measure_cone(counted if stat.counts_in_cells else data, rand,
                                      geometry, stats.get(name), rng, shared.get(name),
                                      jackknife=True, **extra)
    edges = np.linspace(cut.z_min, cut.z_max, NZ_BINS + 1)
    nz, _ = np.histogram(np.asarray(sel["z_obs"]), bins=edges,
                         weights=np.asarray(sel["weight"]))
    return out, nz


def cone_task(spec: ConeSpec, box: GalaxyBox, footprint: Footprint, regions: SkyRegions,
              randoms: dict[str, dict[str, dict[str, Any]]]) -> dict[str, Any]:
    """Build cone ``spec.build.index`` and measure every cut of ``spec.cuts`` on it.

    ``randoms`` holds the randoms task result of each cut (sample → cut label → payload).
    With ``spec.skip_unmeasurable``, a cut this cone cannot measure (an input problem such
    as an empty jackknife region) is recorded as skipped, with the reason, instead of
    failing the task: for explorations over many cuts, where one thin cut must not stop
    the others.

    Returns
    -------
    dict
        ``measurements`` (sample → cut → statistic → Measurement; None for a skipped cut),
        ``nz`` (sample → cut → weighted counts in :data:`NZ_BINS` redshift bins), ``info``
        (replicas, fibre statistics, sizes) and ``skipped`` (sample → cut → reason).
    """
    table, info = cone_table(spec.build, box, footprint)
    reach = [cs.statistics.matter_reach for cs in spec.cuts]
    reach = [r for r in reach if r is not None]
    matter = cone_matter(spec.build, box, footprint,
                         (max(r[0] for r in reach), max(r[1] for r in reach)) if reach else None)
    meas: dict[str, Any] = {}
    nz: dict[str, Any] = {}
    skipped: dict[str, dict[str, str]] = {}
    luminosity: dict[str, dict[str, Any]] = {}
    for cs in spec.cuts:
        name, label = cs.sample_name, cs.cut.label
        meas.setdefault(name, {})
        nz.setdefault(name, {})
        scatter = luminosity_scatter(table, cs.cut.mag_max, cs.cut.z_min, cs.cut.z_max)
        if scatter is not None:
            luminosity.setdefault(name, {})[label] = scatter
        where = f"sample {name}, cut {label}"
        try:
            m, h = measure_cone_cut(spec.build, cs, table, footprint, regions,
                                    randoms[name][label], matter)
        except InputError as exc:
            if spec.skip_unmeasurable:
                meas[name][label] = nz[name][label] = None
                skipped.setdefault(name, {})[label] = str(exc)
                continue
            raise InputError(f"{where}: {exc}", [f"{where}: {p}" for p in exc.problems]
                             ) from exc
        except Exception as exc:
            # name the sample and cut; the executor adds the cone
            raise TaskError(where, f"{type(exc).__name__}: {exc}") from exc
        meas[name][label] = m
        nz[name][label] = h
    fib = info.get("fibres", {})
    summary = {"n_replicas": int(info.get("n_replicas", 0)),
               "n_repeated": int(info.get("n_repeated", 0)),
               "n_galaxies": int(info.get("n_galaxies", len(table))),
               "n_targets": int(info.get("n_targets", 0)),
               "n_targets_in_shell": int(info.get("n_targets_in_shell", 0)),
               "n_fill_in_shell": int(info.get("n_fill_in_shell", 0)),
               "collided_fraction": float(fib.get("collided_fraction", 0.0)),
               "recovered_fraction": float(fib.get("recovered_fraction", 0.0)),
               "budget": fib.get("budget"),
               "build_seconds": float(info.get("timing_s", {}).get("total", 0.0)),
               "n_matter_particles": 0 if matter is None else len(matter),
               "luminosity": luminosity}
    return {"measurements": meas, "nz": nz, "info": summary, "skipped": skipped}
