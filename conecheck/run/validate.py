"""`conecheck run`: every stage, the comparison and the outputs of one validation.

Outputs (all written atomically) in the run directory: ``results.json``, one ECSV table per
sample × cut × statistic under ``tables/``, ``validation.pdf``, ``config.resolved.toml``,
``jackknife_regions.npz`` (read by the report), ``run.log`` and the task cache under
``cache/``.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import logging
import platform
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from ..atomic import remove_partial_files, write_text_atomic
from ..compare import compare_statistic, exit_code, rollup_verdicts
from ..compare.fisher import shifts_for_cut
from ..cone import volume_limit_zmax
from ..cone.photometry import expected_targets_per_sr, full_list_collided_fraction
from ..cone.settings import fibres_limit_targets
from ..config import RunConfig, config_warnings, resolved_toml
from ..cosmology import DEG2_PER_SR
from ..errors import InputError
from ..footprint.coverage import covered_sky, mean_completeness
from ..report import (
    build_pages,
    render_html,
    render_report,
    results_to_json,
    summary_table,
    write_statistic_tables,
)
from ..version import __version__
from .cache import TaskCache
from .execute import InterruptLatch, make_executor
from .inputs import cosmology_of
from .pipeline import (
    RunInputs,
    box_for_cut,
    box_stage,
    cone_stage,
    nz_expected,
    prepare_inputs,
    randoms_stage,
    sensitivity_stage,
)
from .preflight import preflight, raise_problems
from .progress import Progress
from .specs import count_dilution

log = logging.getLogger(__name__)

INDEPENDENCE_NOTE_SHARED = (
    "All cones are cut from one box. Given the box, each cone is an independent draw (its "
    "own observer, rotation and random numbers), so the offset's own error is the "
    "cone-to-cone scatter over √N and shrinks as cones are added; the box's own fluctuation "
    "is common to the box and every cone and cancels in the offset (set cones.independent = "
    "true only for cones from independent boxes).")
INDEPENDENCE_NOTE_INDEPENDENT = (
    "The configuration states that the cones are independent realisations; the offset's "
    "error uses the cone-to-cone scatter divided by the number of cones.")

#: Exit code of a run whose requested extension (ladder, corrections, cut sweep) failed.
EXIT_INCOMPLETE = 2

#: Hooks run after the main comparison (the effect ladder adds itself here).
Extension = Callable[[RunInputs, dict[str, Any], dict[str, Any]], None]


def output_dir(cfg: RunConfig, out: str | Path | None) -> Path:
    """The run directory (``--out`` wins over ``output.directory``), created if needed."""
    path = (Path(out) if out is not None else Path(cfg.base_dir) / cfg.output.directory).resolve()
    if path.exists() and not path.is_dir():
        raise InputError(f"output directory {path} exists and is a file, not a directory "
                         f"(output.directory or --out)")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"output directory {path}: cannot create it ({exc.strerror})") from None
    return path


def _versions() -> dict[str, str]:
    import astropy
    import healpy
    import matplotlib
    import numba
    import scipy

    return {"conecheck": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__,
            "astropy": astropy.__version__, "healpy": healpy.__version__,
            "numba": numba.__version__, "matplotlib": matplotlib.__version__}


def compare_all(inp: RunInputs, box: dict[str, Any], cones: list[dict[str, Any]],
                derivatives: dict[str, dict[str, Any]] | None = None) -> dict[str, Any]:
    """results["samples"]: every sample, cut and statistic compared and given a verdict.

    ``derivatives`` (sample → :func:`~conecheck.run.sensitivity.hod_derivatives_task`
    result) adds each cut's parameter shifts; without it, with parameter shifts enabled,
    only the bound √χ² is given.
    """
    cfg = inp.cfg
    samples: dict[str, Any] = {}
    cosmo = cosmology_of(cfg)
    for s in cfg.samples:
        density = box[s.name]["number_density"]
        cuts = {}
        for j, cut in enumerate(s.cuts):
            stats = {}
            box_cut = box_for_cut(box[s.name], cut.label)
            for name in cfg.statistics.measure:
                where = f"sample {s.name}, cut {cut.label}, statistic {name}"
                stats[name] = compare_statistic(
                    box_cut["measurements"][name],
                    [c["measurements"][s.name][cut.label][name] for c in cones],
                    cfg.verdict, cfg.cones.independent, where=where).to_dict()
            shifts = _shifts(cfg, box_cut["measurements"],
                             [c["measurements"][s.name][cut.label] for c in cones],
                             (derivatives or {}).get(s.name),
                             f"sample {s.name}, cut {cut.label}")
            nz = nz_expected(cfg, inp.footprint, cut, box_cut["number_density"], inp.box,
                             box_cut.get("snapshot_densities"))
            nz["cones"] = [np.asarray(c["nz"][s.name][cut.label]).tolist() for c in cones]
            cuts[cut.label] = {"z_min": cut.z_min, "z_max": cut.z_max, "primary": j == 0,
                               "n_galaxies_cones": [
                                   float(np.sum(c["nz"][s.name][cut.label])) for c in cones],
                               "nz": nz, "statistics": stats}
            if shifts is not None:
                cuts[cut.label]["parameter_shifts"] = shifts
            if "weights_volume" in box_cut:
                cuts[cut.label]["box_snapshots"] = {
                    k: box_cut[k] for k in ("number_density", "snapshot_densities",
                                            "weights_volume", "weights_galaxies")}
        vlim = None
        if cfg.shell.m_lim is not None and s.mag_max is not None and cfg.effects.flux_limit:
            vlim = float(volume_limit_zmax(cfg.shell.m_lim, s.mag_max, cosmo, cfg.shell))
        samples[s.name] = {
            "mag_max": s.mag_max, "volume_limit_zmax": vlim,
            "box_number_density": density, "box_n_galaxies": box[s.name]["n_galaxies"],
            "fibres": {"enabled": bool(cfg.effects.fibres),
                       "collided_fraction": [c["info"].get("collided_fraction", 0.0)
                                             for c in cones],
                       "recovered_fraction": [c["info"].get("recovered_fraction", 0.0)
                                              for c in cones],
                       "correction": cfg.correction.name,
                       **budget_record([c["info"].get("budget") for c in cones])},
            "cuts": cuts}
        lum = luminosity_record([c["info"].get("luminosity", {}).get(s.name, {})
                                 .get(s.cuts[0].label) for c in cones])
        if lum is not None:
            samples[s.name]["luminosity"] = {"physical_fluxes": bool(cfg.effects.physical_fluxes),
                                             "cut": s.cuts[0].label, **lum}
    return samples


#: Share of the luminosity function's targets below which the run warns that the box's
#: target list (and so its collision rate) falls short.
TARGET_FRACTION_WARN = 0.9


def target_record(cfg: RunConfig, inp: RunInputs, cones: list[dict[str, Any]]
                  ) -> dict[str, Any] | None:
    """The box's target density against the luminosity function's, per deg² of effective
    area, and the collided fraction a full target list would imply
    (:func:`~conecheck.cone.photometry.full_list_collided_fraction`). None without a flux
    limit or fibre collisions."""
    if (cfg.shell.m_lim is None or not cfg.effects.flux_limit
            or not fibres_limit_targets(cfg.effects, cfg.tiles)):
        return None
    area = float(inp.footprint.area_deg2)
    n_all = np.array([c["info"].get("n_targets_in_shell", 0) for c in cones], dtype=float)
    n_fill = np.array([c["info"].get("n_fill_in_shell", 0) for c in cones], dtype=float)
    lf = expected_targets_per_sr(cfg.luminosity_function, cfg.shell,
                                 cosmology_of(cfg)) / DEG2_PER_SR
    box = float(np.mean(n_all - n_fill)) / area
    listed = float(np.mean(n_all)) / area
    collided = float(np.mean([c["info"].get("collided_fraction", 0.0) for c in cones]))
    ratio = box / lf if lf > 0 else float("nan")
    filled = bool(n_fill.sum() > 0)
    return {"source": "fill" if filled else "box",
            "box_per_deg2": ((n_all - n_fill) / area).tolist(),
            "list_per_deg2": (n_all / area).tolist(),
            "lf_per_deg2": lf, "box_fraction": ratio,
            "list_fraction": listed / lf if lf > 0 else float("nan"),
            "collided_fraction_cones": collided,
            # with the fill the cones' own fraction is the full list's; without, the
            # random-sky scaling estimates it
            "collided_fraction_full_estimate": collided if filled else
            full_list_collided_fraction(collided, 1.0 / ratio if ratio > 0 else float("nan")),
            "luminosity_function": dataclasses.asdict(cfg.luminosity_function)}


def budget_record(per_cone: list[dict[str, Any] | None]) -> dict[str, Any]:
    """The fibre budget's losses per cone and against the tile load, summed over cones
    (from :func:`~conecheck.cone.tiles.assign_budget`); empty without tiles."""
    recs = [r for r in per_cone if r]
    if not recs:
        return {}
    return {"budget": {
        "n_tiles": recs[0]["n_tiles"], "tile_source": recs[0]["tile_source"],
        "radius_deg": recs[0]["radius_deg"], "fibres_per_tile": recs[0]["fibres_per_tile"],
        "n_passes": recs[0]["n_passes"],
        "lost_fraction": [r["budget_lost_fraction"] for r in recs],
        "off_tiles": [r["n_off_tiles"] for r in recs],
        "load_lower_edges": recs[0]["load_lower_edges"],
        "load_count": np.sum([r["load_count"] for r in recs], axis=0).tolist(),
        "load_lost": np.sum([r["load_lost"] for r in recs], axis=0).tolist()}}


def luminosity_record(per_cone: list[dict[str, Any] | None]) -> dict[str, Any] | None:
    """Per-cone membership changes and the rms of M_inferred − M_true by redshift, summed
    over cones, from each cone's :func:`~conecheck.cone.photometry.luminosity_scatter`."""
    recs = [r for r in per_cone if r]
    if not recs:
        return None
    n_true = np.array([r["n_true"] for r in recs], dtype=np.float64)
    safe = np.maximum(n_true, 1.0)
    count = np.sum([r["count"] for r in recs], axis=0)
    sum_sq = np.sum([r["sum_sq"] for r in recs], axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        rms = np.where(count > 0, np.sqrt(sum_sq / np.maximum(count, 1)), np.nan)
    return {"membership_changed_fraction": (np.array([r["n_changed"] for r in recs]) / safe
                                            ).tolist(),
            "count_change_fraction": (np.array([r["n_inferred"] for r in recs]) / safe - 1.0
                                      ).tolist(),
            "z_edges": list(recs[0]["z_edges"]), "rms_mag": rms.tolist(),
            "n_in_bin": count.astype(int).tolist()}


def validate(cfg: RunConfig, out: str | Path | None = None, *, fresh: bool = False,
             scheduler: str | None = None, workers: int | None = None,
             progress: bool | None = None, config_path: str | Path | None = None,
             extensions: tuple[Extension, ...] = (), force: bool = False
             ) -> tuple[dict[str, Any], int]:
    """Run a whole validation and write its outputs.

    Parameters
    ----------
    cfg : RunConfig
        The validated configuration.
    out : path, optional
        Run directory (default: ``output.directory`` relative to the config file).
    fresh : bool
        Ignore cached task results (they are still rewritten).
    scheduler, workers : optional
        Override ``compute.scheduler`` / ``compute.workers``.
    progress : bool or None
        Progress display (None: only on a terminal).
    config_path : path, optional
        The configuration file, copied into the provenance.
    extensions : tuple of callables
        Extra stages run after the comparison, each given (inputs, box results, results).
    force : bool
        Run even when the pre-flight estimate exceeds a resource limit.

    Returns
    -------
    (results, exit code)
        Exit code 0 when every statistic passes (or only warns), 1 when any fails, 2 when
        an extension that was asked for did not complete (its section holds the error).
    """
    t_start = time.perf_counter()
    run_dir = output_dir(cfg, out)
    handler = logging.FileHandler(run_dir / "run.log", mode="a", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger("conecheck")
    root.addHandler(handler)
    prev_level = root.level
    if root.level == logging.NOTSET or root.level > logging.INFO:
        root.setLevel(logging.INFO)
    try:
        for w in config_warnings(cfg):
            log.warning("config: %s", w)
        n_partial = remove_partial_files(run_dir)
        if n_partial:
            log.info("removed %d partly written file(s) left by an interrupted run in %s",
                     n_partial, run_dir)
        # The configuration as this run used it: the command line's directory, scheduler
        # and workers replace the file's, so the record says where and how it ran.
        as_run = dataclasses.replace(
            cfg, output=dataclasses.replace(cfg.output, directory=str(run_dir)),
            compute=dataclasses.replace(
                cfg.compute, scheduler=scheduler or cfg.compute.scheduler,
                workers=workers if workers is not None else cfg.compute.workers))
        resolved = resolved_toml(as_run)
        write_text_atomic(run_dir / "config.resolved.toml", resolved)
        cache = TaskCache(run_dir / "cache", enabled=not fresh) if cfg.output.cache else None
        prog = Progress(enabled=progress)
        executor = make_executor(scheduler or cfg.compute.scheduler,
                                 workers if workers is not None else cfg.compute.workers)
        # the stages outside the tasks run numba kernels too (the input stage reads and
        # builds the box, footprint and regions): a Ctrl-C landing in one is recorded by
        # the latch and raised at the next check, as the executor does after each task
        with executor, InterruptLatch() as latch:
            inp = prepare_inputs(cfg, executor, cache, prog)
            latch.check()
            checked = preflight(cfg, inp.footprint, inp.box, force=force)
            latch.check()
            for note in checked.notes:
                log.info("pre-flight: %s", note)
            for caution in checked.cautions:
                log.warning("pre-flight: %s", caution)
            raise_problems(checked)
            inp.regions.save(run_dir / "jackknife_regions.npz")
            box = box_stage(inp)
            derivatives = sensitivity_stage(inp)
            randoms, rkeys = randoms_stage(inp, box)
            cones = cone_stage(inp, randoms, rkeys)
            t0 = time.perf_counter()
            results = _results(inp, run_dir, config_path, resolved)
            results["samples"] = compare_all(inp, box, cones, derivatives)
            targets = target_record(cfg, inp, cones)
            if targets is not None:
                results["targets"] = targets
                if (targets["source"] == "box"
                        and targets["box_fraction"] < TARGET_FRACTION_WARN):
                    log.warning(
                        "targets: the box supplies %.0f %% of the %.1f targets per deg² a "
                        "Schechter luminosity function (survey.luminosity_function) predicts "
                        "above m_lim = %g; fibre collisions among the full list would be "
                        "about %.1f %% of targets instead of the cones' %.1f %% "
                        "(survey.targets.source = 'fill' adds the missing targets)",
                        100 * targets["box_fraction"], targets["lf_per_deg2"], cfg.shell.m_lim,
                        100 * targets["collided_fraction_full_estimate"],
                        100 * targets["collided_fraction_cones"])
            rollup_verdicts(results)
            inp.timings["compare"] = time.perf_counter() - t0
            for ext in extensions:
                ext(inp, {"box": box, "randoms": randoms, "randoms_keys": rkeys,
                          "cones": cones}, results)
            rollup_verdicts(results)
            results["provenance"]["extensions"] = [k for k in ("ladder", "corrections", "cuts")
                                                   if k in results]
            results["provenance"]["replicas_per_cone"] = [c["info"].get("n_replicas", 0)
                                                          for c in cones]
            results["provenance"]["repeated_per_cone"] = [c["info"].get("n_repeated", 0)
                                                          for c in cones]
            _warn_repeats(results["provenance"]["repeated_per_cone"],
                          [c["info"].get("n_galaxies", 0) for c in cones], inp.box.box_size)
            latch.check()
        t0 = time.perf_counter()
        # An old report must never sit beside new results: if this run is killed before
        # its PDF is written, there is no PDF (`conecheck report DIR` renders it) rather
        # than one that contradicts results.json.
        (run_dir / "validation.pdf").unlink(missing_ok=True)
        (run_dir / "validation.html").unlink(missing_ok=True)
        results_to_json(results, run_dir / "results.json")
        write_statistic_tables(results, run_dir / "tables")
        inp.timings["tables"] = time.perf_counter() - t0
        inp.timings["total before the PDF"] = time.perf_counter() - t_start
        results["provenance"]["timings"] = dict(inp.timings)
        if cache is not None:
            results["provenance"]["cache"] = dict(cache.stats)
        pages = build_pages(results, run_dir) if cfg.output.pdf or cfg.output.html else []
        n_pages = 0
        # with both reports, each figure is drawn once: the PDF pass also keeps its SVG
        svgs: dict[int, str] | None = {} if cfg.output.html else None
        if cfg.output.pdf:
            t0 = time.perf_counter()
            n_pages = render_report(results, run_dir, run_dir / "validation.pdf", pages, svgs)
            inp.timings["pdf" if svgs is None else "pdf (and the html's figures)"] = (
                time.perf_counter() - t0)
        if cfg.output.html:
            t0 = time.perf_counter()
            render_html(results, run_dir, run_dir / "validation.html", pages, svgs)
            inp.timings["html"] = time.perf_counter() - t0
        inp.timings["total"] = time.perf_counter() - t_start
        # results.json keeps the complete timings (the PDF cannot contain its own)
        results["provenance"]["timings"] = dict(inp.timings)
        results_to_json(results, run_dir / "results.json")
        log.info("wrote %s, results.json and %d tables",
                 f"{run_dir / 'validation.pdf'} ({n_pages} pages)" if cfg.output.pdf
                 else "no PDF (output.pdf = false)",
                 sum(len(c["statistics"]) for s in results["samples"].values()
                     for c in s["cuts"].values()))
        for stage, sec in inp.timings.items():
            log.info("timing: %s %.1f s", stage, sec)
        if cache is not None:
            n_old, size = cache.prune_other_code()
            if n_old:
                log.info("cache: removed %d entries (%.1f MB) written by other versions of "
                         "conecheck", n_old, size / 1e6)
        code = exit_code(results["overall"], cfg.verdict.warn_is_failure)
        incomplete = [k for k, v in results.items() if isinstance(v, dict) and "error" in v]
        if incomplete:
            # Asked for and not delivered: the run is unusable as a whole even though the
            # main verdicts above are complete and written.
            log.error("not completed: %s (see the errors above and in run.log); the main "
                      "verdicts are complete in results.json", ", ".join(incomplete))
            code = EXIT_INCOMPLETE
        return results, code
    finally:
        root.removeHandler(handler)
        handler.close()
        root.setLevel(prev_level)


def _warn_repeats(repeated: list[int], galaxies: list[int], box_size: float) -> None:
    """One warning, from the cones' own counts, when any cone holds a box galaxy twice."""
    hit = [(r, g) for r, g in zip(repeated, galaxies, strict=True) if r > 0]
    if not hit:
        return
    worst = max(r / g if g else 0.0 for r, g in hit)
    log.warning("%d of %d cones hold some box galaxies twice (up to %.2g %% of a cone's "
                "galaxies): the shell is wider than the box side L = %g Mpc/h, so structures "
                "repeat within a cone; a larger box or a shallower shell avoids it",
                len(hit), len(repeated), 100 * worst, box_size)


def _shifts(cfg: RunConfig, box: dict[str, Any], cones: list[dict[str, Any]],
            deriv: dict[str, Any] | None, where: str) -> dict[str, Any] | None:
    if not cfg.parameter_shifts.enabled:
        return None
    combos = cfg.parameter_shifts.resolved(cfg.statistics.measure)
    if deriv is not None and deriv["parameters"]:
        out = shifts_for_cut(box, cones, combos, cfg.verdict, deriv["derivatives"],
                             deriv["parameters"], where)
        out["values"] = list(deriv["values"])
        out["steps"] = list(deriv["steps"])
        out["notes"] = list(deriv["notes"])
        return out
    out = shifts_for_cut(box, cones, combos, cfg.verdict, None, (), where)
    out["notes"] = list(deriv["notes"]) if deriv is not None else []
    return out


def _results(inp: RunInputs, run_dir: Path, config_path: str | Path | None,
             resolved: str) -> dict[str, Any]:
    cfg = inp.cfg
    text = Path(config_path).read_text(encoding="utf-8") if config_path else resolved_toml(cfg)
    mask = cfg.resolve_path(cfg.survey.mask) if cfg.effects.footprint else None
    return {
        "conecheck_version": __version__, "config_hash": cfg.config_hash, "overall": "warn",
        "samples": {},
        "provenance": {
            "config_text": text, "config_path": str(config_path or cfg.source),
            "resolved_config": resolved, "output_dir": str(run_dir),
            "input_files": inp.hashes, "versions": _versions(),
            "seeds": {"run": cfg.seed}, "date": _dt.datetime.now().isoformat(timespec="seconds"),
            "command": " ".join(sys.argv[:1] + sys.argv[1:]) if sys.argv else "",
            "n_cones": cfg.cones.n_cones, "cones_independent": cfg.cones.independent,
            "independence_note": (INDEPENDENCE_NOTE_INDEPENDENT if cfg.cones.independent
                                  else INDEPENDENCE_NOTE_SHARED),
            "box": {"source": cfg.box.source, "box_size": float(inp.box.box_size),
                    "redshift": float(inp.box.redshift), "n_galaxies": len(inp.box),
                    "snapshot_redshifts": list(inp.box.snapshot_redshifts),
                    "snapshot_chi_edges": list(inp.box.snapshot_chi_edges),
                    "los_axis": cfg.box.los_axis, "rsd": cfg.box.rsd,
                    "redshift_scatter_kms": cfg.box.redshift_scatter_kms},
            "survey": {"name": cfg.survey.name, "effects": dataclasses.asdict(cfg.effects),
                       "correction": cfg.correction.name,
                       "shell": dataclasses.asdict(cfg.shell)},
            "randoms_multiple": cfg.randoms.multiple,
        },
        "footprint": {"mask_path": str(mask) if mask is not None else None,
                      "veto_paths": [str(cfg.resolve_path(v)) for v in cfg.survey.vetoes]
                      if cfg.effects.footprint else [],
                      "regions_path": "jackknife_regions.npz",
                      "area_deg2": float(inp.footprint.area_deg2),
                      "n_regions": int(inp.regions.k), "nside": int(inp.footprint.nside),
                      "completeness": {
                          **dataclasses.asdict(cfg.completeness),
                          "covered_area_deg2": float(
                              covered_sky(inp.footprint, cfg.completeness).area_deg2),
                          "mean_completeness": mean_completeness(inp.footprint,
                                                                 cfg.completeness),
                          "box_dilution": count_dilution(cfg, inp.footprint)}},
        "verdict_rules": cfg.verdict.to_dict(),
    }


def print_summary(results: dict[str, Any], run_dir: Path, stream: Any = None) -> None:
    """The terminal verdict table and where the outputs are."""
    stream = stream or sys.stdout
    print(summary_table(results), file=stream)
    pdf = run_dir / "validation.pdf"
    where = pdf if pdf.is_file() else f"not drawn (`conecheck report {run_dir}` draws it)"
    print(f"\nreport: {where}\nresults: {run_dir / 'results.json'}", file=stream)


__all__ = ["INDEPENDENCE_NOTE_SHARED", "TaskCache", "compare_all", "output_dir",
           "print_summary", "validate"]
