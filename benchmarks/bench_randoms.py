"""Precision of wp per random point: pseudo-random against quasi-Monte-Carlo randoms.

Run:  python benchmarks/bench_randoms.py [--realisations R] [--no-write]

The data are fixed: cone 0 of the quick demo, sample "broad", its primary cut. wp(r_p) is
measured on them R times per random scheme and multiple, each time with fresh randoms (a new
seed), so the spread over realisations is the randoms' own noise and nothing else. For each
scheme the table gives, per r_p bin, the variance over realisations divided by that of
today's default (pseudo-random, 20 randoms per galaxy), and the time of one measurement,
also relative to the default, from the same run.

The counts in cylinders, the VPF and the other count statistics read the footprint map, not
randoms, so randoms add no noise to them; wp (and the multipoles) are the statistics whose
precision the random scheme sets. Results go to benchmarks/RESULTS.md (between the
bench_randoms markers) unless --no-write.
"""

from __future__ import annotations

import argparse
import dataclasses
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from conecheck.api import build_box, build_cones, measure_cone, survey_sky
from conecheck.atomic import write_text_atomic
from conecheck.cone import make_randoms, select_cut
from conecheck.demo import demo_config
from conecheck.pairs import count_rppi_cone
from conecheck.run.tasks import cut_distances

START = "<!-- bench_randoms:start -->"
END = "<!-- bench_randoms:end -->"
SCHEMES = (("pseudo", 20.0), ("pseudo", 10.0), ("pseudo", 5.0), ("qmc", 20.0), ("qmc", 10.0),
           ("qmc", 5.0), ("qmc", 2.0))


def dr_times(cfg, cone) -> dict[tuple[str, float], float]:
    """Seconds of one DR count (data × randoms) of the cone per scheme (best of three)."""
    fp, _ = survey_sky(cfg)
    cut = cfg.samples[0].cuts[0]
    cosmo = cfg.cosmology.model()
    data = select_cut(cone, cut, cfg.shell, cosmo)
    lo, hi = cut_distances(cosmo, cut)
    bins = cfg.statistics.get("wp").bins

    def xyz(t):
        ra, dec = np.radians(np.asarray(t["ra"])), np.radians(np.asarray(t["dec"]))
        chi = np.asarray(t["chi_obs"])
        return np.column_stack([chi * np.cos(dec) * np.cos(ra), chi * np.cos(dec) * np.sin(ra),
                                chi * np.sin(dec)])
    d = xyz(data)
    out = {}
    for scheme, multiple in SCHEMES:
        r = xyz(make_randoms(fp, lo, hi, int(multiple * len(d)), np.random.default_rng(0),
                             cosmology=cosmo, sampling=scheme))
        best = np.inf
        for _ in range(3):
            t0 = time.perf_counter()
            count_rppi_cone(d, np.ones(len(d)), None, r, np.ones(len(r)), None,
                            rp_edges=bins.rp_edges, pi_max=bins.pi_max, dpi=bins.dpi)
            best = min(best, time.perf_counter() - t0)
        out[(scheme, multiple)] = best
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--realisations", type=int, default=24)
    ap.add_argument("--no-write", action="store_true")
    a = ap.parse_args(argv)
    cfg = demo_config(quick=True)
    box = build_box(cfg)
    cone = build_cones(box, cfg, n=1)[0]
    sample = cfg.samples[0]
    values: dict[tuple[str, float], list[np.ndarray]] = {}
    seconds: dict[tuple[str, float], float] = {}
    dr_seconds = dr_times(cfg, cone)
    for scheme, multiple in SCHEMES:
        c = dataclasses.replace(cfg, randoms=dataclasses.replace(cfg.randoms, sampling=scheme))
        vals = []
        t0 = time.perf_counter()
        for r in range(a.realisations):
            m = measure_cone(cone, "wp", config=dataclasses.replace(c, seed=1000 + r),
                             sample=sample.name, randoms_multiple=multiple)
            vals.append(np.asarray(m.value))
        seconds[(scheme, multiple)] = (time.perf_counter() - t0) / a.realisations
        values[(scheme, multiple)] = vals
        print(f"{scheme} × {multiple:g}: {seconds[(scheme, multiple)]:.2f} s per wp", flush=True)
    ref_var = np.var(values[("pseudo", 20.0)], axis=0, ddof=1)
    ref_t = seconds[("pseudo", 20.0)]
    r_p = np.asarray(m.bins)
    lines = [f"Data: quick-demo cone 0, sample {sample.name}, {a.realisations} realisations of "
             "the randoms per row. Variance of wp over realisations / that of pseudo × 20, "
             f"per r_p bin ({', '.join(f'{x:.2g}' for x in r_p)} Mpc/h). Cost: the time of "
             "the data–random count DR of one cone (what every cone of a run pays; RR is "
             "counted once per cut and shared) and of one whole API measurement (which "
             "recounts RR each time), both / those of pseudo × 20, same run.", "",
             "| randoms | variance ratio per r_p bin | median | DR time ratio | "
             "measurement time ratio |", "|---|---|---|---|---|"]
    for key in SCHEMES:
        ratio = np.var(values[key], axis=0, ddof=1) / ref_var
        lines.append(f"| {key[0]} × {key[1]:g} | {' '.join(f'{x:.2f}' for x in ratio)} | "
                     f"{np.median(ratio):.2f} | "
                     f"{dr_seconds[key] / dr_seconds[('pseudo', 20.0)]:.2f} | "
                     f"{seconds[key] / ref_t:.2f} |")
    # the randoms' noise against the data's own: wp's jackknife variance at the default
    lines.append("")
    lines.append("(For scale: the randoms' variance at pseudo × 20 is "
                 + ", ".join(f"{v:.2g}" for v in ref_var / np.maximum(
                     np.asarray(m.covariance).diagonal(), 1e-300))
                 + " of wp's jackknife variance per bin, from the last measurement.)")
    text = "\n".join(lines)
    print(text)
    if not a.no_write:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                                text=True).stdout.strip()
        load = Path("/proc/loadavg").read_text().split()[:3] if Path(
            "/proc/loadavg").exists() else ["?"]
        head = (f"{time.strftime('%Y-%m-%d')}, commit {commit}, {platform.machine()} "
                f"{platform.system()}, load average {' '.join(load)} at the end, "
                f"`python benchmarks/bench_randoms.py --realisations {a.realisations}`.")
        path = Path(__file__).with_name("RESULTS.md")
        old = path.read_text()
        block = f"{START}\n{head}\n\n{text}\n{END}"
        if START in old and END in old:
            new = old[:old.index(START)] + block + old[old.index(END) + len(END):]
        else:
            new = old.rstrip("\n") + "\n\n## Randoms: pseudo-random against QMC (issue #19)\n\n" \
                + block + "\n"
        write_text_atomic(path, new)
    return 0


if __name__ == "__main__":
    sys.exit(main())
