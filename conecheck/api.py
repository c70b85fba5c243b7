"""conecheck from Python: every step of a validation on in-memory data.

The command line runs a whole validation from a configuration file; these functions give
a notebook the same steps one by one, on objects in memory, writing nothing unless asked::

    import conecheck as cc

    cfg = cc.demo_config(quick=True)            # or cc.load_config("run.toml")
    box = cc.build_box(cfg)                     # or cc.galaxy_box(table, box_size=…)
    cones = cc.build_cones(box, cfg, n=2)       # astropy Tables, one per cone
    on_box = cc.measure_box(box, "wp", config=cfg, sample="broad")
    on_cones = [cc.measure_cone(c, "wp", config=cfg, sample="broad") for c in cones]
    print(cc.compare(on_box, on_cones, config=cfg).verdict)
    results, code = cc.validate(cfg)            # the whole run, in a temporary directory

Each measurement is a :class:`~conecheck.stats.Measurement` (value, bins, jackknife
delete-one values); :func:`compare` gives the verdict of one statistic with its error
budget, as the run does. Without a configuration, the functions measure what they are given
with default settings: plain arrays and astropy Tables are accepted.
"""

from __future__ import annotations

import dataclasses
import os
import tempfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from astropy.table import Table

from .catalog import GalaxyBox, MatterParticles
from .compare import Comparison, compare_statistic
from .compare.rules import VerdictRules
from .cone import make_randoms, n_randoms, select_cut
from .cone.build import prepare_box
from .cone.settings import CompletenessSettings, RandomSettings, SampleCut
from .config import (
    CosmologyConfig,
    JackknifeConfig,
    RunConfig,
    config_from_dict,
    load_config,
)
from .demo import demo_config
from .errors import InputError
from .footprint import Footprint, SkyRegions, jackknife_regions
from .footprint.coverage import box_dilution, covered_sky
from .report import build_pages, render_html, render_report, rerender, results_to_json
from .run.cache import content_digest
from .run.inputs import load_box, load_footprint, overlap_input, sky_regions, tiles_input
from .run.specs import box_spec, cone_build_spec
from .run.tasks import (
    _cone_sample,
    cone_table,
    count_sample,
    cut_distances,
    cut_randoms_multiple,
    cut_volume_per_sr,
    measure_box_sample,
    sample_mask,
    with_prefixes,
)
from .run.tasks import (
    cone_matter as _cone_matter,
)
from .run.validate import validate as _validate_run
from .stats import STATISTICS, BoxSample, ConeGeometry, MatterSample, Measurement
from .streams import seeded_rng

#: Sky jackknife regions of a cone measured without a configuration.
DEFAULT_SKY_REGIONS = 16


# --------------------------------------------------------------------------- inputs
def galaxy_box(data: GalaxyBox | Table | Mapping[str, Any] | np.ndarray, *,
               box_size: float | None = None, redshift: float | None = None,
               velocity: np.ndarray | None = None) -> GalaxyBox:
    """A periodic galaxy box from an astropy Table, a mapping of columns or positions.

    Parameters
    ----------
    data : GalaxyBox, Table, mapping or ndarray (N, 3)
        A table or mapping with columns x, y, z [Mpc/h] (vx, vy, vz [km/s] and abs_mag
        optional), or an (N, 3) array of positions [Mpc/h].
    box_size : float, optional
        Box side L [Mpc/h]; read from the table's BOXSIZE metadata when omitted.
    redshift : float, optional
        Snapshot redshift (REDSHIFT metadata, else 0).
    velocity : ndarray (N, 3), optional
        Peculiar velocities [km/s] for an array of positions (zero when omitted).
    """
    if isinstance(data, GalaxyBox):
        return data
    if isinstance(data, np.ndarray):
        pos = np.asarray(data, dtype=np.float64)
        if pos.ndim != 2 or pos.shape[1] != 3:
            raise InputError(f"box positions: expected an (N, 3) array in Mpc/h, got shape "
                             f"{pos.shape}")
        vel = np.zeros_like(pos) if velocity is None else np.asarray(velocity, np.float64)
        data = {"x": pos[:, 0], "y": pos[:, 1], "z": pos[:, 2],
                "vx": vel[:, 0], "vy": vel[:, 1], "vz": vel[:, 2]}
    if isinstance(data, Mapping):
        data = Table({k: np.asarray(v) for k, v in data.items()})
    if not isinstance(data, Table):
        raise InputError(f"box: expected a GalaxyBox, an astropy Table, a mapping of columns "
                         f"or an (N, 3) array of positions, got {type(data).__name__}")
    table = data
    if not {"vx", "vy", "vz"} <= set(table.colnames):
        table = table.copy(copy_data=False)
        for c in ("vx", "vy", "vz"):
            table[c] = np.zeros(len(table))
    if redshift is None and "REDSHIFT" not in {k.upper() for k in table.meta}:
        redshift = 0.0
    return GalaxyBox.from_table(table, box_size, redshift, source="box")


def build_box(config: RunConfig) -> GalaxyBox:
    """The galaxy box a configuration describes (read from its file or populated)."""
    return load_box(_config(config))


def build_cones(box: GalaxyBox, config: RunConfig, n: int | None = None,
                footprint: Footprint | None = None) -> list[Table]:
    """Light cones of ``box`` under the configuration's survey, as astropy Tables.

    Cone i is the cone ``conecheck run`` measures for the same configuration (same observer,
    rotation and random draws). ``n`` limits the number of cones (default: the
    configuration's ``cones.n_cones``); ``footprint`` overrides the configured mask.
    """
    cfg = _config(config)
    box = galaxy_box(box)
    fp = footprint if footprint is not None else load_footprint(cfg)
    n = cfg.cones.n_cones if n is None else int(n)
    if n < 1:
        raise InputError(f"n = {n}: expected at least one cone")
    cells = prepare_box(box)
    box_content, fp_content = content_digest(box), content_digest(fp)
    overlap, tiles = overlap_input(cfg), tiles_input(cfg)
    return [cone_table(cone_build_spec(cfg, i, box_content, fp_content, overlap,
                                       tiles_file=tiles), box, fp, cells=cells)[0]
            for i in range(n)]


def cone_matter(box: GalaxyBox, config: RunConfig, index: int = 0) -> MatterSample:
    """The box's matter particles carried into cone ``index`` (the observer, rotation and
    replicas of :func:`build_cones`' cone ``index``), for :func:`measure_cone` of a lensing
    statistic; as far around the survey as the configuration's lensing statistics reach."""
    cfg = _config(config)
    reach = cfg.statistics.matter_reach
    if reach is None:
        raise InputError("cone_matter: the configuration measures no statistic that needs "
                         "matter (statistics.measure)")
    fp = load_footprint(cfg)
    spec = cone_build_spec(cfg, int(index), content_digest(box), content_digest(fp),
                           overlap_input(cfg), tiles_file=tiles_input(cfg))
    return _cone_matter(spec, box, fp, reach)


def survey_sky(config: RunConfig) -> tuple[Footprint, SkyRegions]:
    """The configuration's footprint and jackknife regions (kept for the last few
    configurations, so measuring many cones does not rebuild them)."""
    cfg = _config(config)
    key = (cfg.config_hash, cfg.base_dir)
    if key not in _SKY:
        fp = load_footprint(cfg)
        if len(_SKY) >= _SKY_KEPT:
            _SKY.pop(next(iter(_SKY)))
        _SKY[key] = (fp, sky_regions(cfg, fp))
    return _SKY[key]


_SKY: dict[tuple[str, str], tuple[Footprint, SkyRegions]] = {}
_SKY_KEPT = 4


# --------------------------------------------------------------------------- measure
def measure_box(box: GalaxyBox | Table | Mapping[str, Any] | np.ndarray, statistic: str, *,
                config: RunConfig | None = None, sample: str | None = None,
                settings: Any = None, box_size: float | None = None, los_axis: int = 2,
                seed: int = 0, jackknife: bool = True,
                matter: MatterSample | None = None) -> Measurement:
    """One statistic measured in a periodic box, with box jackknife errors.

    Parameters
    ----------
    box : GalaxyBox, Table, mapping or ndarray (N, 3)
        The galaxies (see :func:`galaxy_box`); positions in Mpc/h.
    statistic : str
        A registered statistic (``conecheck.stats.STATISTICS``: ``wp``, ``cic``, …).
    config : RunConfig, optional
        With a configuration, exactly as the run measures it: the sample's threshold, the
        configured box effects (redshift-space distortions along ``box.los_axis``),
        settings, jackknife and seed. Without, the positions are used as given, along
        ``los_axis``, with default or given ``settings``.
    sample : str, optional
        Sample name (default: the configuration's first sample).
    box_size : float, optional
        Box side L [Mpc/h] for an array of positions.
    matter : MatterSample, optional
        Matter particles of the box for a lensing statistic (default: the box's own).
    """
    _check_statistic(statistic)
    box = galaxy_box(box, box_size=box_size)
    if box.n_snapshots > 1:
        raise InputError(f"measure_box: this box stacks {box.n_snapshots} snapshots; measure "
                         "each one, box.snapshot_part(k), as a run does per snapshot")
    if matter is not None:
        box = dataclasses.replace(box, matter=MatterParticles(
            matter.position, matter.particle_mass, float(box.box_size)))
    if config is not None:
        cfg = _config(config)
        dilution = (box_dilution(survey_sky(cfg)[0], cfg.completeness)
                    if STATISTICS[statistic].counts_in_cells else 1.0)
        spec = box_spec(cfg, cfg.sample(sample), content_digest(box), dilution)
        if settings is not None:
            spec = dataclasses.replace(spec, statistics=dataclasses.replace(
                spec.statistics, measure=(statistic,),
                settings={**spec.statistics.settings, statistic: settings}))
        keep = sample_mask(box, spec.sample)
        return measure_box_sample(spec, box, keep, jackknife=jackknife,
                                  statistics=(statistic,))[statistic]
    jk = JackknifeConfig()
    bs = BoxSample.with_regions(np.asarray(box.position), box.box_size, los_axis,
                                n_side=jk.box_n_side, layout=jk.box_layout)
    stat = STATISTICS[statistic]
    extra = {}
    if stat.needs_matter:
        extra["matter"] = None if box.matter is None else MatterSample(
            box.matter.position, box.matter.particle_mass, box.box_size)
    return stat.measure_box(bs, settings, seeded_rng(seed, "box", statistic),
                            jackknife=jackknife, **extra)


def measure_cone(cone: Table | Mapping[str, Any], statistic: str, *,
                 config: RunConfig | None = None, sample: str | None = None,
                 cut: str | None = None, settings: Any = None,
                 footprint: Footprint | str | os.PathLike[str] | None = None,
                 regions: SkyRegions | None = None, z_min: float | None = None,
                 z_max: float | None = None, randoms_multiple: float | None = None,
                 seed: int = 0, matter: MatterSample | None = None) -> Measurement:
    """One statistic measured on a light cone, with sky jackknife errors.

    Parameters
    ----------
    cone : Table or mapping
        Columns ``ra``, ``dec`` [deg] and ``z_obs`` (or ``z``); ``weight`` and ``abs_mag``
        optional. A cone from :func:`build_cones` qualifies.
    statistic : str
        A registered statistic (``conecheck.stats.STATISTICS``: ``wp``, ``cic``, …).
    config : RunConfig, optional
        With a configuration: its footprint, jackknife regions, cosmology, the sample's
        threshold and cut (``cut``: label, default the primary cut), settings and randoms.
        Without: ``footprint`` (a Footprint, a HEALPix FITS path, or None for the full sky),
        ``z_min`` and ``z_max`` are needed; flat ΛCDM with Ω_m = 0.3.
    regions : SkyRegions, optional
        Jackknife regions (default: the configuration's, or 16 of the footprint).
    randoms_multiple : float, optional
        Randoms per galaxy for statistics that need randoms (default: the configuration's
        ``randoms.multiple``, else ``"auto"``: :func:`conecheck.cone.randoms.auto_multiple`
        from the cone's galaxy density and the statistic's smallest bin). The randoms are
        drawn for this cone alone, sized by its galaxy count.
    matter : MatterSample, optional
        Matter particles around the cone's galaxies (observer at the origin), for a lensing
        statistic: :func:`cone_matter` of the cone.
    """
    _check_statistic(statistic)
    table = _cone_table(cone)
    if config is not None:
        cfg = _config(config)
        the_cut = cfg.sample(sample).cut(cut)
        cosmo_cfg = cfg.cosmology
        if footprint is None:
            fp, default_regions = survey_sky(cfg)
        else:
            fp = _footprint(footprint)
            default_regions = None
        regions = regions if regions is not None else (
            default_regions if default_regions is not None else sky_regions(cfg, fp))
        settings = settings if settings is not None else cfg.statistics.get(statistic)
        randoms = cfg.randoms
        shell = cfg.shell
        seed = cfg.seed
        completeness = cfg.completeness
    else:
        if z_min is None or z_max is None:
            raise InputError("measure_cone without a configuration: give z_min and z_max")
        the_cut = SampleCut("cone", None, float(z_min), float(z_max))
        cosmo_cfg = CosmologyConfig()
        fp = _footprint(footprint)
        regions = regions if regions is not None else jackknife_regions(
            fp, DEFAULT_SKY_REGIONS, seed=seed)
        randoms = RandomSettings()
        shell = None
        completeness = CompletenessSettings()
    cosmo = cosmo_cfg.model()
    if "chi_obs" not in table.colnames:
        table["chi_obs"] = cosmo.comoving_distance(np.asarray(table["z_obs"], np.float64))
    sel = select_cut(table, the_cut, shell, cosmo) if shell is not None else table[
        (np.asarray(table["z_obs"]) >= the_cut.z_min) & (np.asarray(table["z_obs"])
                                                        < the_cut.z_max)]
    stat = STATISTICS[statistic]
    data = (count_sample(sel, regions, completeness) if stat.counts_in_cells
            else _cone_sample(sel, regions))
    lo, hi = cut_distances(cosmo, the_cut)
    geometry = ConeGeometry(fp, lo, hi, regions, cut_volume_per_sr(cosmo, the_cut),
                            covered_sky(fp, completeness))
    rand = None
    shared = None
    rng = seeded_rng(seed, "api-cone", statistic)
    sampling, rr_multiple = randoms.sampling, randoms.rr_multiple
    if randoms_multiple is not None:
        randoms = dataclasses.replace(randoms, multiple=float(randoms_multiple))
    if stat.needs_randoms:
        multiple = cut_randoms_multiple(randoms, stat.random_cell_volume(settings),
                                        float(data.w.sum()), fp, cosmo, the_cut)
        rt = make_randoms(fp, lo, hi, n_randoms(float(data.w.sum()), multiple), rng,
                          cosmology=cosmo, sampling=sampling)
        rand = with_prefixes(_cone_sample(rt, regions), sampling, float(data.w.sum()), fp,
                             cosmo, the_cut)
    rr_rand = rand
    if rand is not None and sampling == "qmc":
        # random pairs on an independent pseudo-random set, as a run counts them
        # (run.tasks.cut_rr_randoms)
        rr_rand = _cone_sample(make_randoms(
            fp, lo, hi, n_randoms(float(data.w.sum()), rr_multiple), rng, cosmology=cosmo),
            regions)
    shared = stat.prepare_cone(rr_rand, geometry, settings, n_data=len(data.ra), rng=rng)
    extra = {"matter": matter} if stat.needs_matter else {}
    return stat.measure_cone(data, rand, geometry, settings, rng, shared, jackknife=True,
                             **extra)


# --------------------------------------------------------------------------- compare, run
def compare(box: Measurement, cones: Sequence[Measurement], *,
            config: RunConfig | None = None, rules: VerdictRules | None = None,
            where: str = "") -> Comparison:
    """The verdict of one statistic: box against cones, with the offset's error budget.

    ``rules`` default to the configuration's ``[verdict]`` (or the defaults). Returns a
    :class:`~conecheck.compare.Comparison` (``verdict``, ``reasons``, ``offset``, ``z``,
    ``max_abs_z``, …; ``to_dict()`` is the statistic's entry of results.json).
    """
    if isinstance(cones, Measurement):
        raise InputError("cones: expected a sequence of Measurements, one per cone; got one")
    rules = rules or (_config(config).verdict if config is not None else VerdictRules())
    independent = bool(config is not None and _config(config).cones.independent)
    return compare_statistic(box, list(cones), rules, independent, where=where)


def validate(config: RunConfig, out: str | os.PathLike[str] | None = None,
             **options: Any) -> tuple[dict[str, Any], int]:
    """A whole validation: returns (results, exit code).

    With ``out`` the run writes its directory as ``conecheck run`` does (cache, results,
    report); without, it runs in a temporary directory that is removed, and nothing is left
    on disk. ``options`` are those of :func:`conecheck.run.validate.validate` (``workers``,
    ``scheduler``, ``fresh``, …).
    """
    cfg = _config(config)
    options.setdefault("progress", False)
    if out is not None:
        return _validate_run(cfg, out, **options)
    quiet = dataclasses.replace(cfg, output=dataclasses.replace(cfg.output, pdf=False,
                                                                html=False))
    with tempfile.TemporaryDirectory(prefix="conecheck-") as tmp:
        results, code = _validate_run(quiet, Path(tmp) / "run", **options)
    # the run directory is gone: results name no region file (write_report rebuilds it)
    results.setdefault("footprint", {})["regions_path"] = None
    results["provenance"]["output_dir"] = None
    return results, code


def write_report(results: Mapping[str, Any], out: str | os.PathLike[str], *,
                 config: RunConfig | None = None, html: bool = False) -> Path:
    """Write results.json and the PDF (and validation.html) of ``results`` into ``out``.

    ``config`` is the run's configuration: for results of an in-memory :func:`validate`,
    which name no jackknife-region file, the regions drawn on the footprint page are
    rebuilt from it (they depend on the configuration alone). Returns the PDF's path.
    """
    out_dir = Path(out)
    out_dir.mkdir(parents=True, exist_ok=True)
    results = dict(results)
    footprint = dict(results.get("footprint") or {})
    if config is not None and not footprint.get("regions_path"):
        _, regions = survey_sky(config)
        regions.save(out_dir / "jackknife_regions.npz")
        footprint["regions_path"] = "jackknife_regions.npz"
        results["footprint"] = footprint
    results_to_json(results, out_dir / "results.json")
    pdf = out_dir / "validation.pdf"
    pages = build_pages(results, out_dir)
    svgs: dict[int, str] | None = {} if html else None  # each figure drawn once for both
    render_report(results, out_dir, pdf, pages, svgs)
    if html:
        render_html(results, out_dir, out_dir / "validation.html", pages, svgs)
    return pdf


def render_run(run_dir: str | os.PathLike[str]) -> Path:
    """Re-render the PDF of a finished run directory from its results.json alone."""
    rerender(run_dir)
    return Path(run_dir) / "validation.pdf"


# --------------------------------------------------------------------------- helpers
def _config(config: Any) -> RunConfig:
    if isinstance(config, RunConfig):
        return config
    if isinstance(config, (str, os.PathLike)):
        return load_config(config)
    if isinstance(config, Mapping):
        return config_from_dict(config)
    raise InputError(f"config: expected a RunConfig, a TOML path or a mapping, got "
                     f"{type(config).__name__}")


def _check_statistic(name: str) -> None:
    if name not in STATISTICS:
        raise InputError(f"statistic {name!r}: expected one of {', '.join(STATISTICS)}")


def _footprint(fp: Footprint | str | os.PathLike[str] | None) -> Footprint:
    if fp is None:
        return Footprint.full_sky()
    if isinstance(fp, Footprint):
        return fp
    if isinstance(fp, (str, os.PathLike)):
        return Footprint.from_fits(fp)
    raise InputError(f"footprint: expected a Footprint, a HEALPix FITS path or None, got "
                     f"{type(fp).__name__}")


def _cone_table(cone: Any) -> Table:
    if isinstance(cone, Mapping) and not isinstance(cone, Table):
        cone = Table({k: np.asarray(v) for k, v in cone.items()})
    if not isinstance(cone, Table):
        raise InputError(f"cone: expected an astropy Table or a mapping with columns ra, dec "
                         f"and z_obs, got {type(cone).__name__}")
    t = cone.copy(copy_data=False)
    if "z_obs" not in t.colnames and "z" in t.colnames:
        t["z_obs"] = t["z"]
    missing = [c for c in ("ra", "dec", "z_obs") if c not in t.colnames]
    if missing:
        raise InputError(f"cone: missing column(s) {', '.join(missing)} (columns: "
                         f"{', '.join(t.colnames)})")
    if "weight" not in t.colnames:
        t["weight"] = np.ones(len(t))
    return t


__all__ = ["build_box", "build_cones", "compare", "cone_matter", "config_from_dict",
           "demo_config", "galaxy_box", "load_config", "measure_box", "measure_cone", "render_run",
           "survey_sky", "validate", "write_report"]
