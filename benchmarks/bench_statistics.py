"""Benchmark: the cost of each statistic relative to wp(r_p), on one cone and on the box.

    python benchmarks/bench_statistics.py [--quick] [--repeat 2]

The demo's configuration (all eight statistics with the template's settings; ``--quick``:
the quick demo's) on its synthetic box: sample "broad", primary cut, cone 0. For each
statistic it times, best of ``--repeat``:

* cone: the measurement of one cone (jackknife included), and the work shared by all cones
  of the cut (``prepare_cone``: the RR counts of wp and the multipoles) separately;
  ΔΣ's cone time includes carrying the matter into the cone, which every cone does once;
* box: the box measurement along the configured line of sight (jackknife included);

and prints each as a ratio to wp's time measured in the same run. No absolute time is
asserted anywhere; the absolute seconds are printed for the record.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import platform
import subprocess
from pathlib import Path

import numpy as np
from bench_pairs import best_of  # the same best-of-N timer (this script's directory)

import conecheck as cc
from conecheck.cone import make_randoms, n_randoms, select_cut
from conecheck.run.cache import content_digest
from conecheck.run.inputs import overlap_input
from conecheck.run.specs import box_spec, cone_build_spec
from conecheck.run.tasks import (
    _cone_sample,
    box_redshift_space,
    cone_matter,
    cut_distances,
    cut_randoms_multiple,
    cut_volume_per_sr,
    sample_mask,
    smallest_random_cell,
)
from conecheck.stats import STATISTICS, BoxSample, ConeGeometry, MatterSample


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeat", type=int, default=2)
    a = ap.parse_args()
    cfg = cc.demo_config(quick=a.quick)
    box = cc.build_box(cfg)
    fp, regions = cc.survey_sky(cfg)
    sample = cfg.sample("broad")
    cut = sample.cut(None)
    stats = cfg.statistics
    cosmo = cfg.cosmology.model()

    # the cone, its cut and randoms, as the run builds them
    spec = cone_build_spec(cfg, 0, content_digest(box), content_digest(fp), overlap_input(cfg))
    table = cc.build_cones(box, cfg, n=1)[0]
    data = _cone_sample(select_cut(table, cut, cfg.shell, cosmo), regions)
    lo, hi = cut_distances(cosmo, cut)
    geometry = ConeGeometry(fp, lo, hi, regions, cut_volume_per_sr(cosmo, cut))
    rng = np.random.default_rng(1)
    multiple = cut_randoms_multiple(cfg.randoms, smallest_random_cell(stats),
                                    float(data.w.sum()), fp, cosmo, cut)
    rand = _cone_sample(make_randoms(fp, lo, hi, n_randoms(float(data.w.sum()), multiple),
                                     rng, cosmology=cosmo), regions)

    # the box sample along the configured line of sight
    bspec = box_spec(cfg, sample, content_digest(box))
    keep = sample_mask(box, bspec.sample)
    pos = box_redshift_space(bspec, box, bspec.effects.los_axis)
    bs = BoxSample.with_regions(pos[keep], box.box_size, bspec.effects.los_axis,
                                n_side=bspec.jackknife.n_side, layout=bspec.jackknife.layout)
    box_matter = MatterSample(box.matter.position, box.matter.particle_mass, box.box_size)

    rows = {}
    for name in stats.measure:
        stat, st = STATISTICS[name], stats.get(name)
        t_shared, shared = best_of(lambda stat=stat, st=st: stat.prepare_cone(
            rand, geometry, st, n_data=len(data), rng=np.random.default_rng(2)), a.repeat)
        if stat.needs_matter:
            def cone_run(stat=stat, st=st):
                m = cone_matter(spec, box, fp, stats.matter_reach)
                return stat.measure_cone(data, rand, geometry, st, np.random.default_rng(3),
                                         None, jackknife=True, matter=m)
            kw = {"matter": box_matter}
        else:
            def cone_run(stat=stat, st=st, shared=shared):
                return stat.measure_cone(data, rand, geometry, st, np.random.default_rng(3),
                                         shared, jackknife=True)
            kw = {}
        t_cone, _ = best_of(cone_run, a.repeat)
        t_box, _ = best_of(lambda stat=stat, st=st, kw=kw: stat.measure_box(
            bs, st, np.random.default_rng(4), jackknife=True, **kw), a.repeat)
        rows[name] = (t_cone, t_shared, t_box)
        print(f"{name}: cone {t_cone:.2f} s, shared per cut {t_shared:.2f} s, "
              f"box {t_box:.2f} s", flush=True)

    wp_cone, wp_shared, wp_box = rows["wp"]
    commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                            text=True, cwd=Path(__file__).resolve().parent).stdout.strip()
    print(f"\n{dt.date.today()}, commit {commit}, {platform.machine()} {os.cpu_count()} cores, "
          f"load {os.getloadavg()[0]:.2f}; {'quick' if a.quick else 'full'} demo, cone 0, "
          f"broad/primary: {len(data)} galaxies, {len(rand)} randoms, {len(bs)} box "
          f"galaxies, {len(box.matter)} box matter particles\n")
    print("| statistic | cone / wp cone | shared per cut / wp's | box / wp box |")
    print("|---|---|---|---|")
    for name, (c, s, b) in rows.items():
        print(f"| {name} | {c / wp_cone:.2f} | {s / wp_shared:.2f} | {b / wp_box:.2f} |")


if __name__ == "__main__":
    main()
