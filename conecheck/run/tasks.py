"""The run's task functions: the box of one sample, the randoms of one cut, one cone.

Each is a module-level function of plain inputs (so a dask worker can run it) returning a
structure :mod:`conecheck.run.serialize` can store (dicts, arrays, numbers, Measurements),
so every finished task can be cached. Every random draw comes from
:func:`~conecheck.run.execute.task_rng` keyed by the run seed and the task's own name,
never from execution order.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from ..box import apply_box_redshift_scatter, apply_box_rsd
from ..catalog import GalaxyBox
from ..cone import build_cone, cone_geometry, cone_rngs, make_randoms, n_randoms, select_cut
from ..cone.build import prepare_box
from ..cone.settings import CorrectionSettings, EffectSwitches, SampleCut
from ..config import RunConfig, SampleConfig
from ..errors import InputError, TaskError
from ..pairs.counts import PairCounts
from ..stats import STATISTICS, BoxSample, ConeGeometry, ConeSample, Measurement
from ..stats.base import LOS_VARIANCE
from .execute import task_rng
from .inputs import cosmology_of, survey_model

#: Number of redshift bins of the n(z) diagnostic per cut.
NZ_BINS = 12
#: Statistics whose box estimator depends on the line-of-sight axis (number density does not).
LOS_DEPENDENT = ("wp", "cic", "vpf", "annuli")


# --------------------------------------------------------------------------- box
def box_redshift_space(cfg: RunConfig, box: GalaxyBox, axis: int | None = None) -> np.ndarray:
    """Box positions [Mpc/h] with the box-side effects along ``axis`` (default: the config's)."""
    cosmo = cosmology_of(cfg)
    axis = cfg.box.los_axis if axis is None else axis
    pos = apply_box_rsd(box, axis, cosmo) if cfg.box.rsd else np.array(box.position)
    if cfg.box.redshift_scatter_kms > 0:
        pos = apply_box_redshift_scatter(pos, axis, cfg.box.redshift_scatter_kms, box.redshift,
                                         cosmo, task_rng(cfg.seed, "box-scatter"),
                                         box.box_size)
    return pos


def sample_mask(box: GalaxyBox, sample: SampleConfig) -> np.ndarray:
    """Galaxies of ``sample`` in the box (brighter than its threshold)."""
    if sample.mag_max is None:
        return np.ones(len(box), dtype=bool)
    return np.asarray(box.abs_mag) < sample.mag_max


def box_task(cfg: RunConfig, box: GalaxyBox, sample_name: str) -> dict[str, Any]:
    """Every statistic of one sample measured in the box, with box jackknife.

    Returns
    -------
    dict
        ``measurements`` (statistic → Measurement), ``n_galaxies``, ``number_density``
        [(h/Mpc)³].
    """
    sample = _sample(cfg, sample_name)
    keep = sample_mask(box, sample)
    out = measure_box_sample(cfg, box, sample, keep, jackknife=True)
    others = [measure_box_sample(cfg, box, sample, keep, jackknife=False, axis=a,
                                 statistics=LOS_DEPENDENT)
              for a in range(3) if a != cfg.box.los_axis]
    for name, m in out.items():
        if name in LOS_DEPENDENT:
            # The cones see the box along every direction, the box estimator along one axis:
            # the spread over the three axes measures that part of the box value which no
            # cone shares (design: the offset's own error).
            values = np.array([m.value] + [o[name].value for o in others], dtype=np.float64)
            m.extra[LOS_VARIANCE] = values.var(axis=0, ddof=1).tolist()
    return {"measurements": out, "n_galaxies": int(keep.sum()),
            "number_density": sample_density(box, sample)}


def measure_box_sample(cfg: RunConfig, box: GalaxyBox, sample: SampleConfig,
                       keep: np.ndarray, *, jackknife: bool, axis: int | None = None,
                       statistics: tuple[str, ...] | None = None) -> dict[str, Measurement]:
    """The configured statistics of the galaxies ``keep`` of ``box`` (statistic → value).

    The box effects of the run are applied along ``axis`` (default ``box.los_axis``), which
    is also the estimators' line of sight; ``statistics`` restricts the configured list.
    Each statistic draws from the generator of the run's box task for that sample, so boxes
    measured here with the same galaxies get the same random spheres (common random numbers
    for the HOD derivatives and the line-of-sight spread).
    """
    axis = cfg.box.los_axis if axis is None else axis
    if keep.sum() < 2:
        raise InputError(f"sample '{sample.name}': {int(keep.sum())} box galaxies brighter "
                         f"than mag_max = {sample.mag_max}; check the threshold and the box")
    pos = box_redshift_space(cfg, box, axis)
    bs = BoxSample.with_regions(pos[keep], box.box_size, axis,
                                n_side=cfg.jackknife.box_n_side,
                                layout=cfg.jackknife.box_layout)
    out = {}
    for name in cfg.statistics.measure:
        if statistics is not None and name not in statistics:
            continue
        rng = task_rng(cfg.seed, "box", sample.name, name)
        out[name] = STATISTICS[name].measure_box(bs, cfg.statistics.get(name), rng,
                                                 jackknife=jackknife)
    return out


# --------------------------------------------------------------------------- randoms
def cut_distances(cfg: RunConfig, cut: SampleCut) -> tuple[float, float]:
    """Comoving distance limits [Mpc/h] of a redshift cut."""
    cosmo = cosmology_of(cfg)
    return (float(cosmo.comoving_distance(cut.z_min)),
            float(cosmo.comoving_distance(cut.z_max)))


def expected_count(cfg: RunConfig, footprint: Any, cut: SampleCut, density: float) -> float:
    """Galaxies a cone should hold: n_box × V_eff, V_eff = Ω_eff × the shell's comoving volume
    per steradian (the cosmology's, curvature included)."""
    return density * footprint.area_sr * cut_volume_per_sr(cfg, cut)


def cut_volume_per_sr(cfg: RunConfig, cut: SampleCut) -> float:
    """Comoving volume per steradian of a cut's shell [(Mpc/h)³]."""
    lo, hi = cut_distances(cfg, cut)
    return float(cosmology_of(cfg).volume_between_distances_per_sr(lo, hi))


def _pair_counts_to_dict(pc: PairCounts) -> dict[str, Any]:
    return {f.name: getattr(pc, f.name) for f in dataclasses.fields(pc)}


def sample_density(box: GalaxyBox, sample: SampleConfig) -> float:
    """Number density [(h/Mpc)³] of ``sample`` in the box (real-space counts over L³)."""
    return float(np.count_nonzero(sample_mask(box, sample))) / float(box.box_size) ** 3


def shuffle_distances(cfg: RunConfig, table: Any, sample: SampleConfig,
                      cut: SampleCut) -> np.ndarray:
    """Observed distances [Mpc/h] of a cone's galaxies in a cut: the ``shuffle`` source."""
    sel = select_cut(table, cut, cfg.shell, cosmology_of(cfg))
    if len(sel) == 0:
        raise InputError(f"randoms.radial = 'shuffle': cone 0 has no galaxies in sample "
                         f"'{sample.name}', cut '{cut.label}' to draw distances from")
    return np.asarray(sel["chi_obs"], dtype=np.float64)


def cut_randoms(cfg: RunConfig, footprint: Any, sample: SampleConfig, cut: SampleCut,
                n_expected: float, data_chi: np.ndarray | None) -> Any:
    """The random catalogue of one sample and cut (seeded by the run seed, sample and cut).

    ``n_expected`` galaxies × ``randoms.multiple`` points inside the footprint between the
    cut's distances; ``data_chi`` [Mpc/h] is the radial source of ``radial = "shuffle"``.
    """
    lo, hi = cut_distances(cfg, cut)
    n = n_randoms(n_expected, cfg.randoms.multiple)
    rng = task_rng(cfg.seed, "randoms", sample.name, cut.label)
    return make_randoms(footprint, lo, hi, n, rng, cfg.randoms.radial, data_chi,
                        cosmology_of(cfg))


def randoms_task(cfg: RunConfig, footprint: Any, regions: Any, sample_name: str,
                 cut_label: str, n_expected: float, data_chi: np.ndarray | None
                 ) -> dict[str, Any]:
    """The randoms of one sample and cut with everything every cone shares (wp's RR).

    Returns
    -------
    dict
        ``ra``, ``dec`` [deg], ``chi`` [Mpc/h], ``weight``, ``region`` arrays and ``shared``
        (statistic → ``{"pair_counts": …}`` for wp's RR or ``{"arrays": …}`` for the VPF's
        sphere centres).
    """
    sample = _sample(cfg, sample_name)
    cut = _cut(sample, cut_label)
    lo, hi = cut_distances(cfg, cut)
    rand = _cone_sample(cut_randoms(cfg, footprint, sample, cut, n_expected, data_chi),
                        regions)
    geometry = ConeGeometry(footprint, lo, hi, regions, cut_volume_per_sr(cfg, cut))
    shared = {}
    for name in cfg.statistics.measure:
        s = STATISTICS[name].prepare_cone(
            rand, geometry, cfg.statistics.get(name), n_data=max(int(round(n_expected)), 1),
            rng=task_rng(cfg.seed, "shared", sample.name, cut.label, name))
        if isinstance(s, PairCounts):
            shared[name] = {"pair_counts": _pair_counts_to_dict(s)}
        elif isinstance(s, dict):
            shared[name] = {"arrays": s}
    return {"ra": rand.ra, "dec": rand.dec, "chi": rand.chi, "weight": rand.w,
            "region": rand.region, "shared": shared}


def randoms_sample(payload: dict[str, Any], regions: Any) -> ConeSample:
    """The ConeSample of a randoms task result."""
    return ConeSample(payload["ra"], payload["dec"], payload["chi"], payload["weight"],
                      payload["region"], regions.k)


def shared_counts(payload: dict[str, Any]) -> dict[str, Any]:
    """What every cone of a cut shares, per statistic (pair counts, sphere centres)."""
    out: dict[str, Any] = {}
    for k, v in payload.get("shared", {}).items():
        out[k] = PairCounts(**v["pair_counts"]) if "pair_counts" in v else v["arrays"]
    return out


# --------------------------------------------------------------------------- cones
def _cone_sample(table: Any, regions: Any) -> ConeSample:
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


def cone_table(cfg: RunConfig, box: GalaxyBox, footprint: Any, index: int,
               effects: EffectSwitches | None = None,
               correction: CorrectionSettings | None = None, cells: Any = None,
               keep_targets: bool = False) -> tuple[Any, dict[str, Any]]:
    """Build cone ``index`` (observer, rotation and draws from the run seed and the index)."""
    survey = survey_model(cfg, footprint, effects, correction)
    o, rot = cone_geometry(cfg.cones.observers, box.box_size, cfg.cones.n_cones, cfg.seed,
                           index)
    return build_cone(box, survey, o, rot, cone_rngs(cfg.seed, index),
                      cells=cells if cells is not None else prepare_box(box),
                      keep_targets=keep_targets)


def measure_cone_cut(cfg: RunConfig, table: Any, footprint: Any, regions: Any,
                     sample: SampleConfig, cut: SampleCut, randoms: dict[str, Any],
                     index: int, tag: str = "") -> tuple[dict[str, Measurement], np.ndarray]:
    """Every statistic of one sample cut measured on one cone (with sky jackknife)."""
    cosmo = cosmology_of(cfg)
    sel = select_cut(table, cut, cfg.shell, cosmo)
    data = _cone_sample(sel, regions)
    lo, hi = cut_distances(cfg, cut)
    geometry = ConeGeometry(footprint, lo, hi, regions, cut_volume_per_sr(cfg, cut))
    rand = randoms_sample(randoms, regions)
    shared = shared_counts(randoms)
    out = {}
    for name in cfg.statistics.measure:
        rng = task_rng(cfg.seed, "cone", index, sample.name, cut.label, name, tag)
        out[name] = STATISTICS[name].measure_cone(data, rand, geometry,
                                                  cfg.statistics.get(name), rng,
                                                  shared.get(name), jackknife=True)
    edges = np.linspace(cut.z_min, cut.z_max, NZ_BINS + 1)
    nz, _ = np.histogram(np.asarray(sel["z_obs"]), bins=edges,
                         weights=np.asarray(sel["weight"]))
    return out, nz


def cone_task(cfg: RunConfig, box: GalaxyBox, footprint: Any, regions: Any, index: int,
              randoms: dict[str, dict[str, dict[str, Any]]],
              effects: EffectSwitches | None = None,
              correction: CorrectionSettings | None = None, tag: str = "",
              skip_unmeasurable: bool = False) -> dict[str, Any]:
    """Build cone ``index`` and measure every sample, cut and statistic on it.

    Parameters
    ----------
    skip_unmeasurable : bool
        A cut this cone cannot measure (an input problem such as an empty jackknife
        region) is recorded as skipped, with the reason, instead of failing the task:
        for explorations over many cuts, where one thin cut must not stop the others.

    Returns
    -------
    dict
        ``measurements`` (sample → cut → statistic → Measurement; None for a skipped cut),
        ``nz`` (sample → cut → weighted counts in :data:`NZ_BINS` redshift bins), ``info``
        (replicas, fibre statistics, sizes) and ``skipped`` (sample → cut → reason).
    """
    table, info = cone_table(cfg, box, footprint, index, effects, correction)
    meas: dict[str, Any] = {}
    nz: dict[str, Any] = {}
    skipped: dict[str, dict[str, str]] = {}
    for sample in cfg.samples:
        meas[sample.name], nz[sample.name] = {}, {}
        for cut in sample.cuts:
            where = f"sample {sample.name}, cut {cut.label}"
            try:
                m, h = measure_cone_cut(cfg, table, footprint, regions, sample, cut,
                                        randoms[sample.name][cut.label], index, tag)
            except InputError as exc:
                if skip_unmeasurable:
                    meas[sample.name][cut.label] = nz[sample.name][cut.label] = None
                    skipped.setdefault(sample.name, {})[cut.label] = str(exc)
                    continue
                raise InputError(f"{where}: {exc}", [f"{where}: {p}" for p in exc.problems]
                                 ) from exc
            except Exception as exc:
                # name the sample and cut; the executor adds the cone
                raise TaskError(where, f"{type(exc).__name__}: {exc}") from exc
            meas[sample.name][cut.label] = m
            nz[sample.name][cut.label] = h
    fib = info.get("fibres", {})
    summary = {"n_replicas": int(info.get("n_replicas", 0)),
               "n_repeated": int(info.get("n_repeated", 0)),
               "n_galaxies": int(info.get("n_galaxies", len(table))),
               "n_targets": int(info.get("n_targets", 0)),
               "collided_fraction": float(fib.get("collided_fraction", 0.0)),
               "recovered_fraction": float(fib.get("recovered_fraction", 0.0)),
               "build_seconds": float(info.get("timing_s", {}).get("total", 0.0))}
    return {"measurements": meas, "nz": nz, "info": summary, "skipped": skipped}


# --------------------------------------------------------------------------- helpers
def _sample(cfg: RunConfig, name: str) -> SampleConfig:
    for s in cfg.samples:
        if s.name == name:
            return s
    raise InputError(f"no sample named {name!r} in the configuration")


def _cut(sample: SampleConfig, label: str) -> SampleCut:
    for c in sample.cuts:
        if c.label == label:
            return c
    raise InputError(f"sample '{sample.name}' has no cut labelled {label!r}")
