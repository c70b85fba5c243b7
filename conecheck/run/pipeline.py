"""The whole validation: box, randoms, cones, comparison, outputs (design.md §2, §10).

Stages, each a list of independent tasks run by an :class:`~conecheck.run.execute.Executor`
and cached by :class:`~conecheck.run.cache.TaskCache`:

1. per sample: the box measurements (box effects, box jackknife);
2. per sample and cut: the randoms and what every cone shares (wp's RR);
3. per cone: build it, then measure every sample, cut and statistic. The cache holds one
   entry per (cone, sample, cut), so changing one sample's cut recomputes only that piece.

Then the comparison (:func:`conecheck.compare.compare_statistic`) and the outputs.
"""

from __future__ import annotations

import dataclasses
import logging
import time
from collections.abc import Callable
from dataclasses import asdict
from typing import Any

import numpy as np

from .. import __version__
from ..box.sensitivity import DEFAULT_STEPS
from ..cone.settings import CorrectionSettings, EffectSwitches
from ..config import RunConfig
from .cache import TaskCache, task_key
from .execute import Executor, Task
from .inputs import (
    cosmology_of,
    input_hashes,
    load_box,
    load_footprint,
    sky_regions,
)
from .progress import Progress
from .sensitivity import hod_derivatives_task
from .tasks import (
    NZ_BINS,
    box_task,
    cone_table,
    cone_task,
    expected_count,
    randoms_task,
    shuffle_distances,
)

log = logging.getLogger(__name__)


@dataclasses.dataclass
class RunInputs:
    """Everything the stages share, built once per run."""

    cfg: RunConfig
    box: Any
    footprint: Any
    regions: Any
    hashes: dict[str, str]
    executor: Executor
    cache: TaskCache | None
    progress: Progress
    timings: dict[str, float] = dataclasses.field(default_factory=dict)

    def identity(self) -> dict[str, Any]:
        """What the box and every cone depend on besides their own settings."""
        c = self.cfg
        return {"seed": c.seed, "cosmology": asdict(c.cosmology), "box": asdict(c.box),
                "files": sorted(self.hashes.values())}


def _run_stage(inp: RunInputs, stage: str, tasks: list[Task]) -> list[Any]:
    t0 = time.perf_counter()
    out = inp.executor.run(tasks, inp.cache, inp.progress, stage=stage)
    inp.timings[stage] = inp.timings.get(stage, 0.0) + time.perf_counter() - t0
    return out


# --------------------------------------------------------------------------- stages
def box_stage(inp: RunInputs) -> dict[str, dict[str, Any]]:
    """Box measurements of every sample (sample name → box_task result)."""
    c = inp.cfg
    box_ref = inp.executor.share(inp.box)
    tasks = []
    for s in c.samples:
        key = task_key("box", {**inp.identity(), "mag_max": s.mag_max,
                               "statistics": _stat_settings(c),
                               "jackknife": asdict(c.jackknife)})
        tasks.append(Task(key=key, label=f"box / sample {s.name}", func=box_task,
                          args=(c, box_ref, s.name), kind="box"))
    results = _run_stage(inp, "box", tasks)
    return {s.name: r for s, r in zip(c.samples, results, strict=True)}


def sensitivity_stage(inp: RunInputs) -> dict[str, dict[str, Any]]:
    """HOD-parameter derivatives of every sample's box statistics (sample → task result).

    Only for boxes built from an HOD with ``parameter_shifts.enabled``; samples that are not
    one of the HOD's thresholds get an empty result with a note.
    """
    c = inp.cfg
    if not c.parameter_shifts.enabled or c.box.source == "file":
        return {}
    tasks = []
    for s in c.samples:
        key = task_key("hod-derivatives", {**inp.identity(), "mag_max": s.mag_max,
                                           "statistics": _stat_settings(c),
                                           "steps": dict(DEFAULT_STEPS)})
        tasks.append(Task(key=key, label=f"HOD derivatives / sample {s.name}",
                          func=hod_derivatives_task, args=(c, s.name), kind="box"))
    results = _run_stage(inp, "HOD derivatives", tasks)
    return {s.name: r for s, r in zip(c.samples, results, strict=True)}


def randoms_stage(inp: RunInputs, box: dict[str, dict[str, Any]],
                  effects: EffectSwitches | None = None,
                  ) -> tuple[dict[str, dict[str, Any]], dict[str, dict[str, str]]]:
    """Randoms (and shared RR) of every sample and cut, with their cache keys."""
    c = inp.cfg
    tasks, where = [], []
    # radial = "shuffle" draws distances from cone 0 of the same effects: built once here
    cone0 = (cone_table(c, inp.box, inp.footprint, 0, effects)[0]
             if c.randoms.radial == "shuffle" else None)
    for s in c.samples:
        for cut in s.cuts:
            n_exp = expected_count(c, inp.footprint, cut, box[s.name]["number_density"])
            data_chi = None if cone0 is None else shuffle_distances(c, cone0, s, cut)
            key = task_key("randoms", {
                "seed": c.seed, "cosmology": asdict(c.cosmology), "cut": asdict(cut),
                "footprint": _footprint_key(inp, effects), "randoms": asdict(c.randoms),
                "n_expected": float(n_exp), "statistics": _stat_settings(c),
                "sky_regions": c.jackknife.sky_regions,
                "data_chi": None if data_chi is None else data_chi})
            tasks.append(Task(key=key, label=f"randoms / sample {s.name} / cut {cut.label}",
                              func=randoms_task,
                              args=(c, inp.footprint, inp.regions, s.name, cut.label, n_exp,
                                    data_chi), kind="randoms"))
            where.append((s.name, cut.label))
    results = _run_stage(inp, "randoms", tasks)
    out: dict[str, dict[str, Any]] = {}
    keys: dict[str, dict[str, str]] = {}
    for (sname, label), task, r in zip(where, tasks, results, strict=True):
        out.setdefault(sname, {})[label] = r
        keys.setdefault(sname, {})[label] = task.key
    return out, keys


def cone_stage(inp: RunInputs, randoms: dict[str, dict[str, Any]],
               randoms_keys: dict[str, dict[str, str]], *,
               effects: EffectSwitches | None = None,
               correction: CorrectionSettings | None = None, tag: str = "",
               stage: str = "cones", skip_unmeasurable: bool = False) -> list[dict[str, Any]]:
    """Every cone measured on every sample and cut; one cache entry per piece.

    ``skip_unmeasurable`` records a cut a cone cannot measure as skipped instead of failing
    the stage (see :func:`~conecheck.run.tasks.cone_task`).

    Returns
    -------
    list of dict
        Per cone: ``measurements`` (sample → cut → statistic → Measurement), ``nz``,
        ``info`` and ``skipped`` (sample → cut → reason) as
        :func:`~conecheck.run.tasks.cone_task`.
    """
    c = inp.cfg
    eff = effects or c.effects
    corr = correction or c.correction
    base = {**inp.identity(), "survey": asdict(c.survey), "shell": asdict(c.shell),
            "effects": asdict(eff), "fibres": asdict(c.fibres), "correction": asdict(corr),
            "redshift_errors": asdict(c.redshift_errors), "observers": asdict(c.cones.observers),
            "n_cones": c.cones.n_cones, "tag": tag, "footprint": _footprint_key(inp, eff)}
    box_ref = inp.executor.share(inp.box)
    fp_ref, reg_ref = inp.executor.share(inp.footprint), inp.executor.share(inp.regions)
    pieces: list[dict[tuple[str, str], Any]] = []
    piece_keys: list[dict[tuple[str, str], str]] = []
    tasks, task_cones = [], []
    cache = inp.cache
    for i in range(c.cones.n_cones):
        keys, have = {}, {}
        for s in c.samples:
            for cut in s.cuts:
                keys[(s.name, cut.label)] = task_key("cone-piece", {
                    **base, "index": i, "cut": asdict(cut),
                    "statistics": _stat_settings(c), "randoms": randoms_keys[s.name][cut.label],
                    "sky_regions": c.jackknife.sky_regions})
                got = cache.get(keys[(s.name, cut.label)]) if cache is not None else None
                if got is not None and (skip_unmeasurable or not got.get("skipped")):
                    # (a stage that may not skip recomputes a cut skipped before, to fail
                    # with its reason)
                    have[(s.name, cut.label)] = got
        pieces.append(have)
        piece_keys.append(keys)
        missing = [k for k in keys if k not in have]
        if missing:
            sub = _restrict(c, missing)
            sub_randoms = {s: {cl: randoms[s][cl] for (s2, cl) in missing if s2 == s}
                           for s in {m[0] for m in missing}}
            tkey = task_key("cone", {"pieces": sorted(keys[m] for m in missing)})
            tasks.append(Task(key=tkey, label=f"cone {i}" + (f" ({tag})" if tag else ""),
                              func=cone_task,
                              args=(sub, box_ref, fp_ref, reg_ref, i, sub_randoms,
                                    eff, corr, tag, skip_unmeasurable), kind="cone"))
            task_cones.append(i)
    if tasks:
        results = _run_stage(inp, stage, tasks)
        for i, task, r in zip(task_cones, tasks, results, strict=True):
            for sname, cuts in r["measurements"].items():
                for label, meas in cuts.items():
                    piece = {"measurements": meas, "nz": r["nz"][sname][label],
                             "info": r["info"],
                             "skipped": r.get("skipped", {}).get(sname, {}).get(label)}
                    pieces[i][(sname, label)] = piece
                    if cache is not None:
                        cache.put(piece_keys[i][(sname, label)], piece,
                                  label=f"cone {i} / {sname} / {label}", kind="cone-piece")
            if cache is not None:
                # the executor kept the whole task so a run killed before this split can
                # resume; once split into pieces it is redundant
                cache.remove(task.key)
    else:
        log.info("%s: all %d cones found in the cache", stage, c.cones.n_cones)
    out = []
    for i in range(c.cones.n_cones):
        meas: dict[str, dict[str, Any]] = {}
        nz: dict[str, dict[str, Any]] = {}
        info: dict[str, Any] = {}
        skipped: dict[str, dict[str, str]] = {}
        for (sname, label), piece in pieces[i].items():
            meas.setdefault(sname, {})[label] = piece["measurements"]
            nz.setdefault(sname, {})[label] = piece["nz"]
            info = piece["info"]
            if piece.get("skipped"):
                skipped.setdefault(sname, {})[label] = piece["skipped"]
        out.append({"measurements": meas, "nz": nz, "info": info, "skipped": skipped})
    return out


def _restrict(cfg: RunConfig, pieces: list[tuple[str, str]]) -> RunConfig:
    """``cfg`` with only the samples and cuts in ``pieces`` (for a partial cone task)."""
    samples = []
    for s in cfg.samples:
        labels = {label for (name, label) in pieces if name == s.name}
        if not labels:
            continue
        cuts = s.cuts
        primary, alts = cuts[0], [cut for cut in cuts[1:] if cut.label in labels]
        if primary.label in labels:
            samples.append(dataclasses.replace(s, alt_cuts=tuple(alts)))
        else:
            first, rest = alts[0], alts[1:]
            samples.append(dataclasses.replace(s, label=first.label, z_min=first.z_min,
                                               z_max=first.z_max, alt_cuts=tuple(rest)))
    return dataclasses.replace(cfg, samples=tuple(samples))


def _stat_settings(cfg: RunConfig) -> dict[str, Any]:
    return {name: asdict(cfg.statistics.get(name)) for name in cfg.statistics.measure}


def _footprint_key(inp: RunInputs, effects: EffectSwitches | None) -> Any:
    """What the sky of a stage depends on: the footprint in use, not only its switch."""
    eff = effects or inp.cfg.effects
    fp = inp.footprint
    ident = {"source": str(fp.source), "nside": int(fp.nside),
             "area_deg2": float(fp.area_deg2)}
    if not eff.footprint:
        return {"full sky": True, **ident}
    return {"mask": inp.cfg.survey.mask, "vetoes": list(inp.cfg.survey.vetoes),
            "files": sorted(inp.hashes.values()), **ident}


# --------------------------------------------------------------------------- helpers
def nz_expected(cfg: RunConfig, footprint: Any, cut: Any, density: float) -> dict[str, Any]:
    """Expected n(z) of a cut: n_box × Ω_eff × shell volume per bin (no evolution)."""
    cosmo = cosmology_of(cfg)
    edges = np.linspace(cut.z_min, cut.z_max, NZ_BINS + 1)
    chi = cosmo.comoving_distance(edges)
    expected = density * footprint.area_sr * cosmo.volume_between_distances_per_sr(chi[:-1],
                                                                                 chi[1:])
    return {"edges": edges.tolist(), "expected": expected.tolist()}


def stage_timer(timings: dict[str, float], name: str) -> Callable[[], None]:
    """Start timing ``name``; call the returned function to stop."""
    t0 = time.perf_counter()

    def stop() -> None:
        timings[name] = timings.get(name, 0.0) + time.perf_counter() - t0
    return stop


def prepare_inputs(cfg: RunConfig, executor: Executor, cache: TaskCache | None,
                   progress: Progress) -> RunInputs:
    """Read and build the run's shared inputs (box, footprint, regions, file hashes)."""
    timings: dict[str, float] = {}
    stop = stage_timer(timings, "inputs")
    hashes = input_hashes(cfg)
    footprint = load_footprint(cfg)
    regions = sky_regions(cfg, footprint)
    box = load_box(cfg)
    stop()
    return RunInputs(cfg, box, footprint, regions, hashes, executor, cache, progress, timings)


__all__ = ["RunInputs", "__version__", "box_stage", "cone_stage", "nz_expected",
           "prepare_inputs", "randoms_stage"]
