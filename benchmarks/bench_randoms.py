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

``--cells`` measures what the ``randoms.multiple = "auto"`` rule rests on
(:func:`conecheck.cone.randoms.auto_multiple`): on cone 0 of bench_run's standard workload,
every sample and cut, the variance over realisations of the data–random count DR (summed
over |π| < 40 Mpc/h, normalised by N_D N_R) in 16 fine r_p bins from 0.1 to 20 Mpc/h, for
QMC and pseudo-random points at 10 and 20 per galaxy. The ratio g of the QMC variance to
the pseudo-random variance at the same number of points is tabulated against λ, the
expected number of randoms per galaxy in the bin's cell (m n π (r₂² − r₁²) 2 π_max): QMC
helps where λ is large. Written between the bench_randoms_cells markers.

``--prefix`` measures wp's ``dr_method = "prefix"`` (DR above ``split_above`` from the leading
part of the randoms :func:`conecheck.cone.randoms.prefix_cells` offers): on cone 0 of
bench_run's standard workload, every sample and cut, wp's variance over realisations of the
randoms (data fixed) for the baseline scheme (20 pseudo-random points per galaxy, every
random pair counted) and for the run's scheme (its ``auto`` multiple of QMC points, RR on an
independent pseudo-random set, split as configured) with DR from all randoms and with the
prefix — both on the same randoms and RR in each realisation — and the time of one wp of
each (the shared RR given). Written between the bench_randoms_prefix markers.
"""

from __future__ import annotations

import argparse
import dataclasses
import functools
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from bench_run import make_config, workload  # bench_run's standard workload
from scipy.stats import f as f_dist

from conecheck.api import build_box, build_cones, measure_cone, survey_sky
from conecheck.atomic import write_text_atomic
from conecheck.cone import make_randoms, n_randoms, select_cut
from conecheck.cone.randoms import QMC_FILLED_CELL_COUNT, QMC_MULTIPLE_FILLED
from conecheck.demo import demo_config
from conecheck.pairs import count_rppi_cone
from conecheck.run.tasks import (
    _cone_sample,  # the pipeline's table → ConeSample
    cut_distances,
    cut_randoms_multiple,
    cut_volume_per_sr,
    smallest_random_cell,
    with_prefixes,
)
from conecheck.stats import ConeGeometry, ConeSample
from conecheck.stats.wp import WpSettings, count_rr_cone, wp_cone
from conecheck.streams import seeded_rng

START = "<!-- bench_randoms:start -->"
END = "<!-- bench_randoms:end -->"
CELLS_START = "<!-- bench_randoms_cells:start -->"
CELLS_END = "<!-- bench_randoms_cells:end -->"
PREFIX_START = "<!-- bench_randoms_prefix:start -->"
PREFIX_END = "<!-- bench_randoms_prefix:end -->"
#: r_p edges [Mpc/h] and |π| limit [Mpc/h] of the --cells measurement.
CELL_EDGES = np.geomspace(0.1, 20.0, 17)
CELL_PI_MAX = 40.0
#: λ classes of the --cells table (expected randoms per galaxy in a cell).
LAMBDA_CLASSES = (0.0, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0, 300.0, np.inf)
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


def _xyz(t) -> np.ndarray:
    ra, dec = np.radians(np.asarray(t["ra"])), np.radians(np.asarray(t["dec"]))
    chi = np.asarray(t["chi_obs"])
    return np.column_stack([chi * np.cos(dec) * np.cos(ra), chi * np.cos(dec) * np.sin(ra),
                            chi * np.sin(dec)])


def _write_block(start: str, end: str, heading: str, head: str, text: str) -> None:
    path = Path(__file__).with_name("RESULTS.md")
    old = path.read_text()
    block = f"{start}\n{head}\n\n{text}\n{end}"
    if start in old and end in old:
        new = old[:old.index(start)] + block + old[old.index(end) + len(end):]
    else:
        new = old.rstrip("\n") + f"\n\n{heading}\n\n" + block + "\n"
    write_text_atomic(path, new)


def _head(command: str) -> str:
    commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                            text=True).stdout.strip()
    load = Path("/proc/loadavg").read_text().split()[:3] if Path(
        "/proc/loadavg").exists() else ["?"]
    return (f"{time.strftime('%Y-%m-%d')}, commit {commit}, {platform.machine()} "
            f"{platform.system()}, load average {' '.join(load)} at the end, `{command}`.")


def _standard_cone0():
    """bench_run's standard workload: its configuration, cone 0, footprint, jackknife
    regions and cosmology."""
    cfg = make_config(workload(False), Path(__file__).parent)
    cone = build_cones(build_box(cfg), cfg, n=1)[0]
    fp, regions = survey_sky(cfg)
    return cfg, cone, fp, regions, cfg.cosmology.model()


def cells(realisations: int, write: bool) -> int:
    """The --cells measurement (module notes)."""
    cfg, cone, fp, _, cosmo = _standard_cone0()
    cell = WpSettings(rp_edges=tuple(CELL_EDGES), pi_max=CELL_PI_MAX,
                      dpi=CELL_PI_MAX).cell_volumes
    lam, g, rows = [], [], []
    for s in cfg.samples:
        for cut in s.cuts:
            d = _xyz(select_cut(cone, cut, cfg.shell, cosmo))
            lo, hi = cut_distances(cosmo, cut)
            density = len(d) / (fp.area_sr * (hi**3 - lo**3) / 3.0)
            var = {}
            for scheme in ("pseudo", "qmc"):
                for m in (10.0, 20.0):
                    vals = []
                    for r in range(realisations):
                        rr = _xyz(make_randoms(fp, lo, hi, int(m * len(d)),
                                               np.random.default_rng(1000 + r),
                                               cosmology=cosmo, sampling=scheme))
                        pc = count_rppi_cone(d, None, None, rr, None, None, rp_edges=CELL_EDGES,
                                             pi_max=CELL_PI_MAX, dpi=CELL_PI_MAX)
                        vals.append(pc.total.sum(axis=1) / (len(d) * len(rr)))
                    var[(scheme, m)] = np.var(vals, axis=0, ddof=1)
            # the pseudo-random variance scales as 1/m: pool both multiples at m = 20
            pseudo20 = 0.5 * (var[("pseudo", 20.0)] + 0.5 * var[("pseudo", 10.0)])
            for m in (10.0, 20.0):
                lam += list(m * density * cell)
                g += list(var[("qmc", m)] / (pseudo20 * 20.0 / m))
            rows.append((f"{s.name}/{cut.label}", len(d), density))
            print(f"{s.name}/{cut.label}: {len(d)} galaxies", flush=True)
    lam_a, g_a = np.asarray(lam), np.asarray(g)
    lines = [f"Data: cone 0 of bench_run's standard workload; {realisations} realisations of "
             "the randoms per scheme and multiple; DR summed over |π| < 40 Mpc/h in 16 r_p "
             "bins from 0.1 to 20 Mpc/h. Samples and cuts: "
             + "; ".join(f"{k} ({n:,} galaxies, n = {d:.3g} (h/Mpc)³)" for k, n, d in rows)
             + ". g = variance of QMC points / variance of as many pseudo-random points "
             "(the pseudo-random variance pooled over 10 and 20 per galaxy, scaled as 1/m), "
             "per class of λ, the expected randoms per galaxy in the bin's cell "
             "(m n π (r₂² − r₁²) 2 π_max). Each entry is an F-distributed ratio with "
             f"({realisations - 1}, {realisations - 1}) degrees of freedom, so a class "
             "mean over k bins has a relative scatter of about "
             f"{np.sqrt(2.0 * 2.0 / (realisations - 1)):.2f}/√k.", "",
             "| λ (randoms per galaxy in the cell) | bins | mean g | median g | "
             "QMC × 10 / pseudo × 20 (= 2 g) |", "|---|---|---|---|---|"]
    for lo, hi in zip(LAMBDA_CLASSES[:-1], LAMBDA_CLASSES[1:], strict=True):
        sel = (lam_a >= lo) & (lam_a < hi)
        if not sel.any():
            continue
        lines.append(f"| {lo:g}–{hi:g} | {int(sel.sum())} | {g_a[sel].mean():.2f} | "
                     f"{np.median(g_a[sel]):.2f} | {2.0 * g_a[sel].mean():.2f} |")
    lines += ["", f"The rule: {QMC_MULTIPLE_FILLED:g} QMC randoms per galaxy where the smallest "
              f"cell holds λ ≥ {QMC_FILLED_CELL_COUNT:g} of them (g ≤ 0.5 there), else 20."]
    text = "\n".join(lines)
    print(text)
    if write:
        _write_block(CELLS_START, CELLS_END, "## Randoms: when QMC points help (issue #19)",
                     _head(f"python benchmarks/bench_randoms.py --cells --realisations "
                           f"{realisations}"), text)
    return 0


def prefix(realisations: int, write: bool) -> int:
    """The --prefix measurement (module notes)."""
    cfg, cone, fp, regions, cosmo = _standard_cone0()
    wps = cfg.statistics.get("wp")
    if wps.dr_method != "prefix" or cfg.randoms.sampling != "qmc":
        raise SystemExit("--prefix needs the template's dr_method = 'prefix' and QMC randoms")
    full_dr = dataclasses.replace(wps, dr_method="full")
    baseline = dataclasses.replace(wps, dr_method="full", rr_method="full")
    r_p = np.sqrt(wps.bins.rp_edges[1:] * wps.bins.rp_edges[:-1])
    split = wps.bins.rp_edges[:-1] >= wps.split_above
    rows = []
    for s in cfg.samples:
        for cut in s.cuts:
            sel = select_cut(cone, cut, cfg.shell, cosmo)
            data = _cone_sample(sel, regions)
            data = ConeSample(data.ra, data.dec, data.chi, data.weight)  # no jackknife
            lo, hi = cut_distances(cosmo, cut)
            geometry = ConeGeometry(fp, lo, hi, None, cut_volume_per_sr(cosmo, cut))
            n_d = float(data.w.sum())
            multiple = cut_randoms_multiple(cfg.randoms, smallest_random_cell(cfg.statistics),
                                            n_d, fp, cosmo, cut)
            vals: dict[str, list[np.ndarray]] = {"baseline": [], "full": [], "prefix": []}
            t_dr = {"full": 0.0, "prefix": 0.0}
            used = 0
            draw = functools.partial(_draw, fp, regions, cosmo, cut, n_d)
            for r in range(realisations):
                rb = draw(20.0, "pseudo", seeded_rng(r, "baseline"))
                vals["baseline"].append(wp_cone(data, rb, geometry, baseline,
                                                jackknife=False).value)
                rq = draw(multiple, "qmc", seeded_rng(r, "run"))
                rr = count_rr_cone(draw(cfg.randoms.rr_multiple, "pseudo", seeded_rng(r, "rr")),
                                   geometry, wps, n_data=len(data))
                for name, st in (("full", full_dr), ("prefix", wps)):
                    t0 = time.perf_counter()
                    m = wp_cone(data, rq, geometry, st, rr=rr, jackknife=False)
                    t_dr[name] += time.perf_counter() - t0
                    vals[name].append(m.value)
                    if name == "prefix":
                        used = m.extra["dr_randoms_above_split"]
                        n_all = len(rq)
            var = {k: np.var(np.array(v), axis=0, ddof=1) for k, v in vals.items()}
            rows.append((f"{s.name}/{cut.label}", len(data), n_all, used, var,
                         t_dr["prefix"] / t_dr["full"]))
            print(f"{s.name}/{cut.label}: {len(data)} galaxies, {n_all} randoms, "
                  f"{used} above the split", flush=True)
    lo90, hi90 = _f_range(realisations)
    lines = [f"Data: cone 0 of bench_run's standard workload; {realisations} realisations of "
             "the randoms per scheme, data fixed, no jackknife. wp's variance over the "
             "realisations divided by the baseline's (20 pseudo-random points per galaxy, "
             "every random pair counted), per r_p bin "
             f"({', '.join(f'{x:.2g}' for x in r_p)} Mpc/h; the bins from split_above = "
             f"{wps.split_above:g} Mpc/h on are marked *), for the run's scheme (its auto "
             "multiple of QMC points, RR on an independent "
             f"{cfg.randoms.rr_multiple:g}x pseudo-random set split as configured) with DR "
             "from all randoms and with dr_method = \"prefix\", on the same randoms and RR in "
             f"each realisation. A ratio of two equal variances falls between {lo90:.2f} and "
             f"{hi90:.2f} in 90 % of runs (F({realisations - 1}, {realisations - 1})). Time: "
             "one wp with the shared RR given (DD + DR + Landy–Szalay), prefix / full.", "",
             "| cut | galaxies | randoms (above the split) | scheme | variance ratio per r_p "
             "bin | mean over * bins | wp time prefix / full |", "|---|---|---|---|---|---|---|"]
    for key, n_d, n_r, used, var, t in rows:
        for name in ("full", "prefix"):
            ratio = var[name] / var["baseline"]
            cells_ = " ".join(f"{x:.2f}{'*' if m else ''}" for x, m in zip(ratio, split,
                                                                         strict=True))
            lines.append(f"| {key} | {n_d:,} | {n_r:,} ({used:,}) | DR {name} | {cells_} | "
                         f"{ratio[split].mean():.2f} | {t:.2f} |" if name == "prefix" else
                         f"| {key} | {n_d:,} | {n_r:,} | DR {name} | {cells_} | "
                         f"{ratio[split].mean():.2f} | |")
    text = "\n".join(lines)
    print(text)
    if write:
        _write_block(PREFIX_START, PREFIX_END,
                     "## Randoms: DR from a prefix of the QMC randoms (issue #19)",
                     _head(f"python benchmarks/bench_randoms.py --prefix --realisations "
                           f"{realisations}"), text)
    return 0


def _draw(fp, regions, cosmo, cut, n_data: float, multiple: float, sampling: str,
          rng: np.random.Generator):
    """Randoms of ``cut`` for ``n_data`` galaxies, as a run makes them (without regions)."""
    lo, hi = cut_distances(cosmo, cut)
    c = _cone_sample(make_randoms(fp, lo, hi, n_randoms(n_data, multiple), rng,
                                  cosmology=cosmo, sampling=sampling), regions)
    return with_prefixes(ConeSample(c.ra, c.dec, c.chi, c.weight), sampling, n_data, fp,
                         cosmo, cut)


def _f_range(realisations: int) -> tuple[float, float]:
    """5 % and 95 % points of the ratio of two sample variances of equal true variance."""
    dof = realisations - 1
    return float(f_dist.ppf(0.05, dof, dof)), float(f_dist.ppf(0.95, dof, dof))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--realisations", type=int, default=24)
    ap.add_argument("--no-write", action="store_true")
    ap.add_argument("--cells", action="store_true",
                    help="measure QMC's gain against the randoms per galaxy in a cell")
    ap.add_argument("--prefix", action="store_true",
                    help="measure wp's variance and time with DR from a prefix of the randoms")
    a = ap.parse_args(argv)
    if a.prefix:
        return prefix(a.realisations, not a.no_write)
    if a.cells:
        return cells(a.realisations, not a.no_write)
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
        _write_block(START, END, "## Randoms: pseudo-random against QMC (issue #19)",
                     _head(f"python benchmarks/bench_randoms.py --realisations "
                           f"{a.realisations}"), text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
