"""The whole validation: box, randoms, cones, comparison, outputs (docs/design.md §2, §10).

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
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from ..box.halos import HaloCatalog
from ..box.hod import HODModel
from ..box.sensitivity import DECORATION_PARAMETERS, DEFAULT_STEPS, OCCUPATION_PARAMETERS
from ..box.snapshots import snapshot_ranges, snapshot_weights
from ..catalog import GalaxyBox
from ..cone.settings import CorrectionSettings, EffectSwitches, SampleCut
from ..config import RunConfig
from ..footprint import Footprint, SkyRegions
from ..footprint.protocols import SkyFootprint
from ..stats.base import combine_measurements
from .cache import TaskCache, content_digest, spec_key
from .execute import Executor, Task
from .inputs import (
    cosmology_of,
    input_hashes,
    load_box_and_halos,
    load_footprint,
    overlap_input,
    sky_regions,
    tiles_input,
)
from .progress import Progress
from .sensitivity import hod_derivatives_task, merge_derivatives
from .specs import (
    BoxAxisSpec,
    ConeBuildSpec,
    ConePieceSpec,
    ConeSpec,
    DerivativesSpec,
    InputFile,
    box_spec,
    cone_build_spec,
    count_dilution,
    cut_spec,
    randoms_spec,
)
from .tasks import (
    NZ_BINS,
    add_los_spread,
    box_axis_task,
    box_task,
    cone_table,
    cone_task,
    cut_distances,
    expected_count,
    merge_box_results,
    other_axes,
    randoms_task,
    shuffle_distances,
    survey_model,
)

log = logging.getLogger(__name__)

#: One sample cut measured on every cone: (sample name, cut).
CutPiece = tuple[str, SampleCut]


@dataclasses.dataclass
class RunInputs:
    """Everything the stages share, built once per run.

    ``halos`` and ``hod`` are the halos and HOD the box was populated from (None for a box
    read from a galaxy file).
    """

    cfg: RunConfig
    box: GalaxyBox
    footprint: Footprint
    regions: SkyRegions
    hashes: dict[str, str]
    executor: Executor
    cache: TaskCache | None
    progress: Progress
    timings: dict[str, float] = dataclasses.field(default_factory=dict)
    halos: HaloCatalog | None = None
    hod: HODModel | None = None
    overlap: InputFile | None = None
    tiles: InputFile | None = None
    _digests: dict[int, tuple[Any, str]] = dataclasses.field(default_factory=dict,
                                                             repr=False)
    _parts: list[GalaxyBox] | None = dataclasses.field(default=None, repr=False)

    def snapshot_parts(self) -> list[GalaxyBox]:
        """The box's snapshots as plain boxes (the box itself when it has one)."""
        if self._parts is None:
            self._parts = [self.box.snapshot_part(k) for k in range(self.box.n_snapshots)]
        return self._parts

    def content(self, obj: Any) -> str:
        """Digest of an in-memory input's content (computed once per object)."""
        got = self._digests.get(id(obj))
        if got is None or got[0] is not obj:
            # the object is kept beside its digest so its id cannot be reused meanwhile
            got = (obj, content_digest(obj))
            self._digests[id(obj)] = got
        return got[1]

    def cone_build(self, index: int, effects: EffectSwitches | None = None,
                   correction: CorrectionSettings | None = None) -> ConeBuildSpec:
        """The build spec of cone ``index`` on this geometry."""
        return cone_build_spec(self.cfg, index, self.content(self.box),
                               self.content(self.footprint), self.overlap, effects,
                               correction, self.tiles)


def all_pieces(cfg: RunConfig) -> list[CutPiece]:
    """Every sample cut of the configuration, samples in order, primary cut first."""
    return [(s.name, cut) for s in cfg.samples for cut in s.cuts]


def _run_stage(inp: RunInputs, stage: str, tasks: list[Task]) -> list[Any]:
    t0 = time.perf_counter()
    out = inp.executor.run(tasks, inp.cache, inp.progress, stage=stage)
    inp.timings[stage] = inp.timings.get(stage, 0.0) + time.perf_counter() - t0
    return out


# --------------------------------------------------------------------------- stages
def box_stage(inp: RunInputs) -> dict[str, dict[str, Any]]:
    """Box measurements of every sample (sample name → box_task result).

    A box stacked from several snapshots is measured snapshot by snapshot and combined per
    cut (:func:`combine_snapshots`); :func:`box_for_cut` reads either.
    """
    c = inp.cfg
    parts = inp.snapshot_parts()
    refs = [inp.executor.share(p) for p in parts]
    # one task per statistic, and one per other axis of a statistic that depends on the
    # line of sight: a cluster's workers then share the stage evenly
    tasks, groups = [], []
    for s in c.samples:
        for k, part in enumerate(parts):
            spec = box_spec(c, s, inp.content(part), count_dilution(c, inp.footprint))
            label = f"box / sample {s.name}" + (f" / snapshot {k}" if len(parts) > 1 else "")
            group = []
            for name in spec.statistics.measure:
                one = dataclasses.replace(spec, statistics=spec.statistics.only({name}))
                main = len(tasks)
                tasks.append(Task(key=spec_key(one), label=f"{label} / {name}", func=box_task,
                                  args=(one, refs[k], False), kind="box"))
                for a in other_axes(one):
                    axis_spec = BoxAxisSpec(one, a)
                    tasks.append(Task(key=spec_key(axis_spec),
                                      label=f"{label} / {name} / axis {a}",
                                      func=box_axis_task, args=(axis_spec, refs[k]),
                                      kind="box"))
                group.append((main, len(tasks)))
            groups.append(group)
    results = _run_stage(inp, "box", tasks)
    per_part = []
    for group in groups:
        for main, end in group:
            add_los_spread(results[main]["measurements"], results[main + 1:end])
        per_part.append(merge_box_results([results[main] for main, _ in group]))
    n = len(parts)
    if n == 1:
        return {s.name: r for s, r in zip(c.samples, per_part, strict=True)}
    return {s.name: combine_snapshots(inp, s, per_part[i * n:(i + 1) * n])
            for i, s in enumerate(c.samples)}


def combine_snapshots(inp: RunInputs, sample: Any, per_snapshot: list[dict[str, Any]]
                      ) -> dict[str, Any]:
    """One sample's box result from its snapshots' (:mod:`conecheck.box.snapshots`): for
    every cut, each statistic as the weighted sum over snapshots — the number density by
    the cut's volume in each snapshot's range, the others by its expected galaxies there —
    under ``by_cut``; the sample-level keys are those of the primary cut."""
    cosmo = cosmology_of(inp.cfg)
    densities = [r["number_density"] for r in per_snapshot]
    by_cut = {}
    for cut in sample.cuts:
        lo, hi = cut_distances(cosmo, cut)
        w_vol, w_gal = snapshot_weights(inp.box, densities, lo, hi)
        meas = {name: combine_measurements([r["measurements"][name] for r in per_snapshot],
                                           w_vol if name == "number_density" else w_gal)
                for name in per_snapshot[0]["measurements"]}
        by_cut[cut.label] = {"measurements": meas,
                             "number_density": float(np.dot(w_vol, densities)),
                             "snapshot_densities": densities,
                             "weights_volume": w_vol.tolist(),
                             "weights_galaxies": w_gal.tolist()}
    primary = by_cut[sample.cuts[0].label]
    return {"measurements": primary["measurements"],
            "number_density": primary["number_density"],
            "n_galaxies": int(sum(r["n_galaxies"] for r in per_snapshot)),
            "by_cut": by_cut}


def box_for_cut(box: dict[str, Any], cut_label: str) -> dict[str, Any]:
    """The box result (``measurements``, ``number_density``) a cut is compared with: the
    sample's, or for several snapshots the cut's own combination."""
    return box.get("by_cut", {}).get(cut_label, box)


def sensitivity_stage(inp: RunInputs) -> dict[str, dict[str, Any]]:
    """HOD-parameter derivatives of every sample's box statistics (sample → task result).

    Only for boxes built from an HOD with ``parameter_shifts.enabled``; samples that are not
    one of the HOD's thresholds get an empty result with a note.
    """
    c = inp.cfg
    if not c.parameter_shifts.enabled or inp.halos is None or inp.hod is None:
        return {}
    halos_ref = inp.executor.share(inp.halos)
    steps = tuple(sorted(DEFAULT_STEPS.items()))
    # only the statistics some combination fits need derivatives
    fitted = {n for combo in c.parameter_shifts.resolved(c.statistics.measure) for n in combo}
    if not fitted:
        return {}
    tasks = []
    # one task per sample and parameter: a cluster's workers then share the stage evenly
    parameters = OCCUPATION_PARAMETERS + DECORATION_PARAMETERS
    for s in c.samples:
        bspec = box_spec(c, s, inp.content(inp.box), count_dilution(c, inp.footprint))
        bspec = dataclasses.replace(bspec, statistics=bspec.statistics.only(fitted))
        for name in parameters:
            spec = DerivativesSpec(box=bspec, halos_content=inp.content(inp.halos),
                                   hod=inp.hod, steps=steps, parameters=(name,))
            tasks.append(Task(key=spec_key(spec),
                              label=f"HOD derivatives / sample {s.name} / {name}",
                              func=hod_derivatives_task, args=(spec, halos_ref), kind="box"))
    results = _run_stage(inp, "HOD derivatives", tasks)
    n = len(parameters)
    return {s.name: merge_derivatives(results[i * n:(i + 1) * n])
            for i, s in enumerate(c.samples)}


def randoms_stage(inp: RunInputs, box: dict[str, dict[str, Any]],
                  pieces: Sequence[CutPiece] | None = None,
                  effects: EffectSwitches | None = None,
                  ) -> tuple[dict[str, dict[str, Any]], dict[str, dict[str, str]]]:
    """Randoms (and shared RR) of every sample cut in ``pieces`` (default: all), with their
    cache keys (sample → cut label → key)."""
    c = inp.cfg
    pieces = all_pieces(c) if pieces is None else list(pieces)
    cosmo = cosmology_of(c)
    tasks = []
    # radial = "shuffle" draws distances from cone 0 of the same effects: built once here
    cone0 = None
    if c.randoms.radial == "shuffle":
        build0 = inp.cone_build(0, effects)
        cone0 = cone_table(build0, inp.box, inp.footprint)[0]
        survey0 = survey_model(build0, inp.footprint)
    fp_content, reg_content = inp.content(inp.footprint), inp.content(inp.regions)
    for sname, cut in pieces:
        n_exp = expected_count(cosmo, inp.footprint, cut,
                               box_for_cut(box[sname], cut.label)["number_density"])
        data_chi = (None if cone0 is None
                    else shuffle_distances(cone0, cut, survey0, sname))
        spec = randoms_spec(c, sname, cut, n_exp, fp_content, reg_content, data_chi)
        tasks.append(Task(key=spec_key(spec), label=f"randoms / sample {sname} / cut {cut.label}",
                          func=randoms_task, args=(spec, inp.footprint, inp.regions),
                          kind="randoms"))
    results = _run_stage(inp, "randoms", tasks)
    out: dict[str, dict[str, Any]] = {}
    keys: dict[str, dict[str, str]] = {}
    for (sname, cut), task, r in zip(pieces, tasks, results, strict=True):
        out.setdefault(sname, {})[cut.label] = r
        keys.setdefault(sname, {})[cut.label] = task.key
    return out, keys


def cone_stage(inp: RunInputs, randoms: dict[str, dict[str, Any]],
               randoms_keys: dict[str, dict[str, str]],
               pieces: Sequence[CutPiece] | None = None, *,
               effects: EffectSwitches | None = None,
               correction: CorrectionSettings | None = None, tag: str = "",
               stage: str = "cones", skip_unmeasurable: bool = False) -> list[dict[str, Any]]:
    """Every cone measured on every sample cut in ``pieces`` (default: all); one cache entry
    per cone and cut.

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
    pieces = all_pieces(c) if pieces is None else list(pieces)
    box_ref = inp.executor.share(inp.box)
    fp_ref, reg_ref = inp.executor.share(inp.footprint), inp.executor.share(inp.regions)
    reg_content = inp.content(inp.regions)
    cut_specs = {(sname, cut.label): cut_spec(c, sname, cut, randoms_keys[sname][cut.label],
                                              reg_content, tag) for sname, cut in pieces}
    stored: list[dict[tuple[str, str], Any]] = []
    piece_keys: list[dict[tuple[str, str], str]] = []
    tasks, task_cones = [], []
    cache = inp.cache
    for i in range(c.cones.n_cones):
        build = inp.cone_build(i, effects, correction)
        keys = {k: spec_key(ConePieceSpec(build, cs)) for k, cs in cut_specs.items()}
        have = {}
        for k, key in keys.items():
            got = cache.get(key) if cache is not None else None
            if got is not None and (skip_unmeasurable or not got.get("skipped")):
                # (a stage that may not skip recomputes a cut skipped before, to fail
                # with its reason)
                have[k] = got
        stored.append(have)
        piece_keys.append(keys)
        missing = [k for k in keys if k not in have]
        if missing:
            spec = ConeSpec(build, tuple(cut_specs[k] for k in missing), skip_unmeasurable)
            sub_randoms: dict[str, dict[str, Any]] = {}
            for sname, label in missing:
                sub_randoms.setdefault(sname, {})[label] = randoms[sname][label]
            tasks.append(Task(key=spec_key(spec),
                              label=f"cone {i}" + (f" ({tag})" if tag else ""),
                              func=cone_task, args=(spec, box_ref, fp_ref, reg_ref, sub_randoms),
                              kind="cone"))
            task_cones.append(i)
    if tasks:
        results = _run_stage(inp, stage, tasks)
        for i, task, r in zip(task_cones, tasks, results, strict=True):
            for sname, cuts in r["measurements"].items():
                for label, meas in cuts.items():
                    piece = {"measurements": meas, "nz": r["nz"][sname][label],
                             "info": r["info"],
                             "skipped": r.get("skipped", {}).get(sname, {}).get(label)}
                    stored[i][(sname, label)] = piece
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
        for (sname, label), piece in stored[i].items():
            meas.setdefault(sname, {})[label] = piece["measurements"]
            nz.setdefault(sname, {})[label] = piece["nz"]
            info = piece["info"]
            if piece.get("skipped"):
                skipped.setdefault(sname, {})[label] = piece["skipped"]
        out.append({"measurements": meas, "nz": nz, "info": info, "skipped": skipped})
    return out


# --------------------------------------------------------------------------- helpers
def nz_expected(cfg: RunConfig, footprint: SkyFootprint, cut: SampleCut,
                density: float, box: GalaxyBox | None = None,
                snapshot_densities: Sequence[float] | None = None) -> dict[str, Any]:
    """Expected n(z) of a cut: n_box × Ω_eff × shell volume per bin; with several snapshots
    (``box`` stacked, ``snapshot_densities`` [(h/Mpc)³]) each snapshot's density over its
    own range of true distance."""
    cosmo = cosmology_of(cfg)
    edges = np.linspace(cut.z_min, cut.z_max, NZ_BINS + 1)
    chi = cosmo.comoving_distance(edges)
    if box is None or snapshot_densities is None or box.n_snapshots == 1:
        expected = density * footprint.area_sr * cosmo.volume_between_distances_per_sr(
            chi[:-1], chi[1:])
        return {"edges": edges.tolist(), "expected": expected.tolist()}
    expected = np.zeros(NZ_BINS)
    for (lo, hi), n_k in zip(snapshot_ranges(box), snapshot_densities, strict=True):
        a, b = np.clip(chi[:-1], lo, hi), np.clip(chi[1:], lo, hi)
        expected += n_k * footprint.area_sr * cosmo.volume_between_distances_per_sr(a, b)
    return {"edges": edges.tolist(), "expected": expected.tolist(),
            "snapshot_chi_edges": list(box.snapshot_chi_edges),
            "snapshot_z_edges": cosmo.redshift_at(np.asarray(box.snapshot_chi_edges)).tolist()}


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
    box, halos, hod = load_box_and_halos(cfg)
    stop()
    return RunInputs(cfg, box, footprint, regions, hashes, executor, cache, progress, timings,
                     halos=halos, hod=hod, overlap=overlap_input(cfg), tiles=tiles_input(cfg))


__all__ = ["CutPiece", "RunInputs", "all_pieces", "box_stage", "cone_stage",
           "nz_expected", "prepare_inputs", "randoms_stage", "sensitivity_stage"]
