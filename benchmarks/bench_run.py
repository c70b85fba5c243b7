"""End-to-end benchmark: a whole ``conecheck run`` against a per-cone recount baseline.

Run with ``python benchmarks/bench_run.py`` (standard workload, about 20-25 minutes on two
idle cores, half of it in the baseline) or ``--quick`` (a smoke run of about two minutes).
The conecheck side runs once per scheduler of ``--scheduler`` (default: ``local`` and
``local-cluster``).

Standard workload: the built-in synthetic box (L = 585 Mpc/h, about 10^6 galaxies) in the
invented Kestrel footprint, shell 0.02 < z < 0.10, 8 cones, the two demo samples (M < −20;
M < −21 with one alternative "near" cut), randoms at 20 times the expected galaxy count,
number density + wp + counts-in-cylinders + VPF, 25 jackknife sky regions (5 x 5 box
columns).

Both sides run in their own process started by this script (so peak memory is each
side's own ``ru_maxrss``), after a short warm-up process that fills numba's on-disk
cache of compiled kernels:

* **conecheck**: :func:`conecheck.run.validate.validate` on the configuration, with every
  output (cache, tables, PDF report).  Its stage times come from the run's provenance.
* **baseline**: the same cones, built with :func:`conecheck.run.tasks.cone_table` and cut
  with :func:`conecheck.cone.select_cut`, so its catalogues are identical.  For every cone
  and cut it draws a fresh random catalogue (same size and generator as conecheck's,
  :func:`conecheck.cone.make_randoms`) and counts DD, DR and RR afresh with
  ``Corrfunc.mocks.DDrppi_mocks`` (all cores) when Corrfunc is importable, otherwise with
  scipy's cKDTree, then forms wp by Landy–Szalay (Landy & Szalay 1993, ApJ 412, 64).  It
  computes no jackknife for wp.  Number density, counts-in-cylinders and VPF are measured
  with conecheck's own functions (with jackknife, as in the run), so those parts cost the
  same on both sides and the ratio measures the pair-count design: randoms and RR shared
  across cones, split randoms for RR (Keihänen et al. 2019, A&A 631, A73) and the engine.

Ratios reported: (1) *measurement*: baseline (cone builds + every statistic of every cone)
over conecheck's randoms + cones stages, which do the same work plus delete-one wp for every
jackknife region; (2) *whole run*: the same baseline time over conecheck's whole run
(box generation, box statistics, comparison, tables and PDF included).  The script also
checks that the two sides agree: on one cone and cut, conecheck's wp with the baseline's
randoms and a full RR equals the baseline's wp to rounding; the run's own wp (other
randoms, the configured RR) agrees within a fraction of its jackknife error; the run's number
density, counts-in-cylinders and VPF of cone 0 equal the baseline's (identical catalogues).

``--heavy`` runs the same comparison on :data:`HEAVY`: the standard workload to z = 0.15 with
every sample cut there and a flux limit that keeps them volume limited (about 80,000
galaxies in the largest cone cut, the scale at which the speed targets of issue #19 were
set); its results go to their own section of RESULTS.md.

``--scaling`` times conecheck alone on the scheduler named first (e.g. ``--scheduler
local-cluster``) for boxes of 10⁶ and 10⁷ galaxies with 8 to 64 cones (:data:`SCALING_RUNS`),
with the peak memory of the main process and of the largest worker, and without the HOD
derivatives (a box-size cost that would swamp the cones).
``--profile`` runs the conecheck side under cProfile and prints where the time goes.
Results go to benchmarks/RESULTS.md (a section between the bench_run markers) for the
standard workload, or with ``--write``; no absolute time is asserted anywhere.
"""

from __future__ import annotations

import argparse
import copy
import cProfile
import dataclasses
import datetime as dt
import io
import json
import logging
import os
import platform
import pstats
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from conecheck.atomic import write_text_atomic
from conecheck.config import RunConfig, config_from_dict
from conecheck.demo import demo_dict
from conecheck.stats import make_settings

try:
    from Corrfunc.mocks import DDrppi_mocks
except ImportError:  # pragma: no cover - optional reference
    DDrppi_mocks = None

START, END = "<!-- bench_run:start -->", "<!-- bench_run:end -->"
SCALING_START, SCALING_END = "<!-- bench_run_scaling:start -->", "<!-- bench_run_scaling:end -->"
HEAVY_START, HEAVY_END = "<!-- bench_run_heavy:start -->", "<!-- bench_run_heavy:end -->"

#: The standard workload (see the module notes); --quick shrinks it.
STANDARD = {"box_size": 585.0, "z_max": 0.10, "n_cones": 8, "sky_regions": 25,
            "box_n_side": 5}
#: The heavy workload (--heavy): the standard one to z = 0.15 with every sample cut there and
#: a flux limit faint enough to keep them volume limited, about 80,000 galaxies in the
#: largest cone cut — the scale at which the issue #19 targets were set, where the pair
#: counts rather than the fixed per-run costs dominate.
HEAVY = {"box_size": 585.0, "z_max": 0.15, "m_lim": 21.5, "samples_to_z_max": True,
         "n_cones": 8, "sky_regions": 25, "box_n_side": 5}
QUICK = {"box_size": 250.0, "z_max": 0.07, "n_cones": 2, "sky_regions": 16, "box_n_side": 4,
         "wp": {"rp_min": 0.5, "rp_max": 10.0, "n_rp": 5, "pi_max": 20.0}}
#: (box side [Mpc/h], cones) of the --scaling runs: 10⁶ and 10⁷ galaxies (the density of the
#: standard workload), each with a quarter and all of the cones; --quick shrinks them.
SCALING_RUNS = ((585.0, 8), (585.0, 32), (1260.0, 16), (1260.0, 64))
SCALING_QUICK = ((250.0, 2), (250.0, 4), (315.0, 2), (315.0, 4))
#: Statistics of the workload (number density, wp, counts-in-cylinders, VPF).
MEASURE = ["number_density", "wp", "cic", "vpf"]
#: The baseline's randoms: fresh pseudo-random points, this many per expected galaxy, per
#: cone and cut (conecheck's default before its QMC randoms; a common choice).
BASELINE_MULTIPLE = 20.0
#: Realisations of the randoms per scheme in the check of wp's random variance.
VARIANCE_REALISATIONS = 12
#: Pair-count pieces of the baseline and the statistics it measures with conecheck's code.
BASELINE_PARTS = ("build", "randoms", "dd", "dr", "rr", "ls", "number_density", "cic", "vpf")
STAGES = ("inputs", "box", "HOD derivatives", "randoms", "cones", "compare", "tables")
#: The scaling runs switch the HOD derivatives off.
SCALING_STAGES = tuple(k for k in STAGES if k != "HOD derivatives")


# --------------------------------------------------------------------------- workload
def workload(quick: bool, n_cones: int | None = None, box_size: float | None = None,
             scheduler: str = "local", heavy: bool = False) -> dict[str, Any]:
    """The benchmark configuration as a TOML-like dictionary (the demo, resized)."""
    p = dict(QUICK if quick else HEAVY if heavy else STANDARD)
    if n_cones is not None:
        p["n_cones"] = n_cones
    if box_size is not None:
        p["box_size"] = box_size
    d = copy.deepcopy(demo_dict(False))
    d["box"]["box_size"] = float(p["box_size"])
    d["survey"]["shell"]["z_max"] = p["z_max"]
    if "m_lim" in p:
        d["survey"]["shell"]["m_lim"] = p["m_lim"]
    for s in d["samples"]:
        s["z_max"] = p["z_max"] if p.get("samples_to_z_max") else min(s["z_max"], p["z_max"])
        for alt in s.get("alt_cuts", []):
            alt["z_max"] = (round(p["z_max"] - 0.02, 3) if p.get("samples_to_z_max")
                            else min(alt["z_max"], round(p["z_max"] - 0.02, 3)))
    d["statistics"]["measure"] = list(MEASURE)
    d["statistics"]["wp"].update(p.get("wp", {}))
    d["jackknife"]["sky_regions"] = int(p["sky_regions"])
    d["jackknife"]["box_n_side"] = int(p["box_n_side"])
    d["cones"]["n_cones"] = int(p["n_cones"])
    d["compute"] = {"scheduler": scheduler}
    d["output"]["cache"] = True
    return d


def warmup_dict() -> dict[str, Any]:
    """A small run through every kernel the benchmark uses (fills numba's disk cache)."""
    d = demo_dict(True)
    d["cones"]["n_cones"] = 1
    d["statistics"]["measure"] = list(MEASURE)
    d["compute"] = {"scheduler": "local"}
    # the HOD derivatives' kernels too (the keyed Poisson quantiles): without them the
    # timed run compiled one (about 1 s of its HOD derivatives stage)
    d["parameter_shifts"]["enabled"] = True
    return d


def make_config(d: dict[str, Any], base_dir: str | Path) -> RunConfig:
    return config_from_dict(d, "bench_run", base_dir)


def peak_rss_mib(who: int = resource.RUSAGE_SELF) -> float:
    """Peak resident memory [MiB] of this process, or of its largest finished child
    (``RUSAGE_CHILDREN``: the dask workers of a local cluster).  Linux reports KiB."""
    kib = resource.getrusage(who).ru_maxrss
    return kib / 1024.0 if sys.platform != "darwin" else kib / 2**20


def n_threads() -> int:
    try:
        import numba

        return int(numba.get_num_threads())
    except ImportError:  # pragma: no cover - numba is a dependency
        return os.cpu_count() or 1


# --------------------------------------------------------------------------- conecheck side
class _TimedStatistic:
    """Wraps a registry entry to add up the time of each call (in-process runs only).

    The pipeline reaches every statistic through :data:`conecheck.stats.STATISTICS`, so
    replacing the entries there times box measurements, the shared per-cut work (wp's RR)
    and per-cone measurements without touching conecheck.
    """

    def __init__(self, inner: Any, times: dict[str, float]) -> None:
        self._inner = inner
        self._times = times

    def __getattr__(self, attr: str) -> Any:
        return getattr(self._inner, attr)

    def _timed(self, what: str, method: str, *args: Any, **kwargs: Any) -> Any:
        t0 = time.perf_counter()
        try:
            return getattr(self._inner, method)(*args, **kwargs)
        finally:
            key = f"{self._inner.name} {what}"
            self._times[key] = self._times.get(key, 0.0) + time.perf_counter() - t0

    def measure_box(self, *args: Any, **kwargs: Any) -> Any:
        return self._timed("box", "measure_box", *args, **kwargs)

    def measure_box_pair(self, *args: Any, **kwargs: Any) -> Any:
        # the HOD derivatives' ± boxes measured together: box work, like measure_box
        return self._timed("box", "measure_box_pair", *args, **kwargs)

    def prepare_cone(self, *args: Any, **kwargs: Any) -> Any:
        return self._timed("shared", "prepare_cone", *args, **kwargs)

    def measure_cone(self, *args: Any, **kwargs: Any) -> Any:
        return self._timed("cone", "measure_cone", *args, **kwargs)


def part_conecheck(d: dict[str, Any], work: Path, profile: bool) -> dict[str, Any]:
    """Run the whole validation; stage times, wall time, memory and cone-0 values."""
    from conecheck.run.validate import validate
    from conecheck.stats import STATISTICS

    cfg = make_config(d, work)
    out = work / "run"
    stat_times: dict[str, float] = {}
    if cfg.compute.scheduler == "local":
        # the registry is a read-only mapping; its loaded dict is what the pipeline reads
        entries = STATISTICS._get()
        for name in list(entries):
            entries[name] = _TimedStatistic(entries[name], stat_times)
    prof = cProfile.Profile() if profile else None
    t0 = time.perf_counter()
    if prof is not None:
        prof.enable()
    results, code = validate(cfg, out, fresh=True, progress=False)
    if prof is not None:
        prof.disable()
    wall = time.perf_counter() - t0
    cone0: dict[str, Any] = {}
    for sname, s in results["samples"].items():
        for label, cut in s["cuts"].items():
            stats = cut["statistics"]
            cone0[f"{sname}/{label}"] = {
                name: {"value": st["cones"][0], "sigma_cone": st["sigma_cone"]}
                for name, st in stats.items()}
    prov = results["provenance"]
    report = {"timings": prov["timings"], "wall": wall, "exit_code": code,
              "peak_rss_mib": peak_rss_mib(),
              "peak_rss_worker_mib": peak_rss_mib(resource.RUSAGE_CHILDREN),
              "n_box": prov["box"]["n_galaxies"],
              "box_size": prov["box"]["box_size"], "cone0": cone0,
              "area_deg2": results["footprint"]["area_deg2"], "threads": n_threads(),
              "statistic_times": stat_times}
    if prof is not None:
        # cProfile sees the calling process only: numba's threads are charged to the kernel
        # that runs them, but a dask worker process is invisible to it
        where = ("the whole run (one process)" if cfg.compute.scheduler == "local" else
                 "the main process only: the tasks ran in dask worker processes, which "
                 "cProfile does not see (use --scheduler local for a profile of the work)")
        report["profile"] = f"cProfile of {where}\n" + profile_text(prof)
        # the raw statistics too, for a closer look with pstats (path printed with the profile)
        raw = work / "conecheck.prof"
        prof.dump_stats(raw)
        report["profile"] += f"\nraw cProfile statistics: {raw}\n"
    return report


def profile_text(prof: cProfile.Profile, top: int = 25) -> str:
    buf = io.StringIO()
    st = pstats.Stats(prof, stream=buf)
    st.sort_stats("cumulative").print_stats(top)
    st.sort_stats("tottime").print_stats(top)
    return buf.getvalue()


# --------------------------------------------------------------------------- baseline counts
def _unit_pi_to_bins(counts: np.ndarray, n_rp: int, pi_max: float, dpi: float) -> np.ndarray:
    """Corrfunc's unit-depth |π| bins summed into bins of width ``dpi``."""
    per = int(round(dpi))
    return counts.reshape(n_rp, int(round(pi_max)) // per, per).sum(axis=2)


def counts_corrfunc(p1: dict[str, np.ndarray], p2: dict[str, np.ndarray] | None,
                    rp_edges: np.ndarray, pi_max: float, dpi: float,
                    threads: int) -> np.ndarray:
    """Weighted pair counts with Corrfunc.mocks.DDrppi_mocks, shape (n_rp, n_pi).

    Auto counts (``p2`` None) are returned as unordered pairs (Corrfunc counts each twice).
    Weights are passed only when some differ from 1, as a user of the library would.
    """
    kw: dict[str, Any] = {"is_comoving_dist": True}
    weighted = not np.all(p1["w"] == 1.0) or (p2 is not None and not np.all(p2["w"] == 1.0))
    if weighted:
        kw["weight_type"] = "pair_product"
        kw["weights1"] = p1["w"]
    if p2 is not None:
        kw.update(RA2=p2["ra"], DEC2=p2["dec"], CZ2=p2["chi"])
        if weighted:
            kw["weights2"] = p2["w"]
    res = DDrppi_mocks(p2 is None, 2, threads, float(pi_max), np.asarray(rp_edges, float),
                       p1["ra"], p1["dec"], p1["chi"], **kw)
    n = res["npairs"].astype(np.float64)
    if weighted:
        n = n * res["weightavg"]
    c = _unit_pi_to_bins(n, len(rp_edges) - 1, pi_max, dpi)
    return c / 2.0 if p2 is None else c


def _xyz(p: dict[str, np.ndarray]) -> np.ndarray:
    ra, dec = np.radians(p["ra"]), np.radians(p["dec"])
    cd = np.cos(dec)
    return np.column_stack([p["chi"] * cd * np.cos(ra), p["chi"] * cd * np.sin(ra),
                            p["chi"] * np.sin(dec)])


def counts_kdtree(p1: dict[str, np.ndarray], p2: dict[str, np.ndarray] | None,
                  rp_edges: np.ndarray, pi_max: float, dpi: float,
                  chunk: int = 2000) -> np.ndarray:
    """The same counts with scipy's cKDTree (every pair within the bins' 3-d reach).

    Pairs come from ``sparse_distance_matrix`` in chunks of query points; r_p and π use
    the line of sight at the pair midpoint, bins closed below, as conecheck and Corrfunc.
    """
    from scipy.spatial import cKDTree

    x1 = _xyz(p1)
    x2 = x1 if p2 is None else _xyz(p2)
    w1, w2 = p1["w"], (p1 if p2 is None else p2)["w"]
    tree = cKDTree(x2)
    r_max = float(np.hypot(rp_edges[-1], pi_max))
    pi_edges = np.arange(0.0, pi_max + 0.5 * dpi, dpi)
    out = np.zeros((len(rp_edges) - 1, len(pi_edges) - 1))
    for a in range(0, len(x1), chunk):
        sub = cKDTree(x1[a:a + chunk])
        m = sub.sparse_distance_matrix(tree, r_max, output_type="coo_matrix")
        i, j = m.row + a, m.col
        if p2 is None:
            keep = j > i       # unordered distinct pairs
            i, j = i[keep], j[keep]
        s = x1[i] - x2[j]
        mid = 0.5 * (x1[i] + x2[j])
        pi = np.abs(np.einsum("ij,ij->i", s, mid)) / np.linalg.norm(mid, axis=1)
        rp = np.sqrt(np.maximum(np.einsum("ij,ij->i", s, s) - pi * pi, 0.0))
        h, _, _ = np.histogram2d(rp, pi, bins=(rp_edges, pi_edges), weights=w1[i] * w2[j])
        out += h
    return out


def landy_szalay_wp(dd: np.ndarray, dr: np.ndarray, rr: np.ndarray, wd: np.ndarray,
                    wr: np.ndarray, dpi: float) -> np.ndarray:
    """wp(r_p) = 2 Δπ Σ_π (DD − 2DR + RR)/RR with each count over its weighted pair number."""
    nd = (wd.sum() ** 2 - (wd**2).sum()) / 2.0
    nr = (wr.sum() ** 2 - (wr**2).sum()) / 2.0
    ndr = wd.sum() * wr.sum()
    rrn = rr / nr
    xi = (dd / nd - 2.0 * dr / ndr + rrn) / rrn
    return 2.0 * dpi * xi.sum(axis=1)


# --------------------------------------------------------------------------- baseline side
def wp_random_variance(cfg: RunConfig, data: Any, geometry: Any, chi_lo: float,
                       chi_hi: float, n_expected: float, regions: Any) -> dict[str, Any]:
    """wp's variance over realisations of the randoms, data fixed: the baseline's scheme
    (fresh pseudo-random points, :data:`BASELINE_MULTIPLE` per galaxy, full RR) against
    conecheck's configured one (its multiple and sampling; with QMC, RR on an independent
    pseudo-random set of ``rr_multiple`` per galaxy, split as configured). Both use
    conecheck's estimator, which equals the baseline's to rounding on the same randoms
    (the check above), so the difference is the randoms' alone. The run's jackknife
    variance of the same cone and cut is given for scale."""
    from conecheck.cone import make_randoms, n_randoms
    from conecheck.cone.randoms import randoms_multiple
    from conecheck.run.tasks import (
        _cone_sample,  # the pipeline's table → ConeSample
        smallest_random_cell,
    )
    from conecheck.stats import ConeSample
    from conecheck.stats.wp import count_rr_cone, wp_cone
    from conecheck.streams import seeded_rng

    wps = cfg.statistics.get("wp")
    full = dataclasses.replace(wps, rr_method="full")
    r = cfg.randoms
    plain = ConeSample(data.ra, data.dec, data.chi, data.weight)
    fp = geometry.footprint
    # the run's multiple for this cut (randoms.multiple = "auto" resolves it as the run does)
    multiple = randoms_multiple(r, n_expected / (fp.area_sr * geometry.volume_per_sr),
                                smallest_random_cell(cfg.statistics))

    def sample(n: int, sampling: str, *key: Any) -> Any:
        t = make_randoms(fp, chi_lo, chi_hi, n, seeded_rng(cfg.seed, "variance", *key),
                         sampling=sampling)
        return _cone_sample(t, regions)

    base, mine = [], []
    t_base = t_mine = 0.0
    for k in range(VARIANCE_REALISATIONS):
        t0 = time.perf_counter()
        rb = sample(n_randoms(n_expected, BASELINE_MULTIPLE), "pseudo", "baseline", k)
        base.append(wp_cone(plain, rb, geometry, full, jackknife=False).value)
        t1 = time.perf_counter()
        rm = sample(n_randoms(n_expected, multiple), r.sampling, "conecheck", k)
        rr = None
        if r.sampling == "qmc":
            rr_set = sample(n_randoms(n_expected, r.rr_multiple), "pseudo", "conecheck-rr", k)
            rr = count_rr_cone(rr_set, geometry, wps, n_data=len(data))
        mine.append(wp_cone(plain, rm, geometry, wps, rr=rr, jackknife=False).value)
        t_base += t1 - t0
        t_mine += time.perf_counter() - t1
    var_base = np.var(np.array(base), axis=0, ddof=1)
    var_mine = np.var(np.array(mine), axis=0, ddof=1)
    jk = wp_cone(data, sample(n_randoms(n_expected, multiple), r.sampling, "jk"), geometry,
                 wps, rr=None if r.sampling != "qmc" else count_rr_cone(
                     sample(n_randoms(n_expected, r.rr_multiple), "pseudo", "jk-rr"),
                     geometry, wps, n_data=len(data)), jackknife=True)
    var_jk = np.asarray(jk.covariance.diagonal()) if jk.delete_one is not None else None
    return {"realisations": VARIANCE_REALISATIONS, "scheme": randoms_scheme_of(r, multiple),
            "rp": np.sqrt(wps.bins.rp_edges[1:] * wps.bins.rp_edges[:-1]).tolist(),
            "var_baseline": var_base.tolist(), "var_conecheck": var_mine.tolist(),
            "var_jackknife": None if var_jk is None else var_jk.tolist(),
            "seconds_baseline": t_base / VARIANCE_REALISATIONS,
            "seconds_conecheck": t_mine / VARIANCE_REALISATIONS}


def rr_words(d: dict[str, Any]) -> str:
    """wp's configured RR and DR methods in words."""
    wp = make_settings("wp", d["statistics"]["wp"])
    words = (f"split RR above {wp.split_above:g} Mpc/h" if wp.rr_method == "split"
             else "full RR")
    if wp.dr_method == "prefix":
        words += (f", DR above {wp.split_above:g} Mpc/h on the randoms' smallest "
                  "prefix as precise as 20 pseudo-random per galaxy")
    return words


def randoms_scheme_of(r: Any, multiple: float | None = None) -> str:
    """A random scheme in words, from conecheck's ``RandomSettings`` (``multiple``: the
    number a cut resolved ``auto`` to, when known)."""
    if r.multiple == "auto":
        m = "auto (10 or 20 per cut)" if multiple is None else f"auto = {multiple:g}"
    else:
        m = f"{float(r.multiple):g}"
    if r.sampling == "qmc":
        return (f"{m}x QMC for DR, RR on an independent {r.rr_multiple:g}x "
                "pseudo-random set")
    return f"{m}x {r.sampling}"


def part_baseline(d: dict[str, Any], work: Path) -> dict[str, Any]:
    """Per cone and cut: fresh randoms, DD + DR + RR afresh, Landy–Szalay; the other
    statistics with conecheck's functions.  Returns times, memory, cone-0 values and the
    exact-agreement check."""
    from conecheck.cone import make_randoms, n_randoms
    from conecheck.footprint.coverage import covered_sky
    from conecheck.run.cache import content_digest
    from conecheck.run.inputs import (
        cosmology_of,
        load_box,
        load_footprint,
        overlap_input,
        sky_regions,
    )
    from conecheck.run.specs import cone_build_spec, count_completeness
    from conecheck.run.tasks import (
        _cone_sample,  # the pipeline's own table → ConeSample (same points dropped)
        cone_table,
        count_sample,
        cut_distances,
        cut_volume_per_sr,
        expected_count,
        sample_mask,
        select_cut,
    )
    from conecheck.stats import STATISTICS, ConeGeometry, ConeSample
    from conecheck.stats.wp import wp_cone
    from conecheck.streams import seeded_rng

    cfg = make_config(d, work)
    wps = cfg.statistics.get("wp")
    bins = wps.bins
    if abs(bins.pi_max - round(bins.pi_max)) > 1e-9 or abs(bins.dpi - round(bins.dpi)) > 1e-9:
        raise SystemExit("the baseline needs whole-Mpc/h pi_max and dpi (Corrfunc's unit bins)")
    threads = n_threads()
    use_corrfunc = DDrppi_mocks is not None
    count = ((lambda a, b: counts_corrfunc(a, b, bins.rp_edges, bins.pi_max, bins.dpi, threads))
             if use_corrfunc else
             (lambda a, b: counts_kdtree(a, b, bins.rp_edges, bins.pi_max, bins.dpi)))

    t0 = time.perf_counter()
    box = load_box(cfg)
    footprint = load_footprint(cfg)
    regions = sky_regions(cfg, footprint)
    t_inputs = time.perf_counter() - t0
    cosmo = cosmology_of(cfg)
    density = {s.name: float(sample_mask(box, s).sum()) / box.box_size**3 for s in cfg.samples}

    # the exact check runs conecheck's full RR: on the cut with the fewest randoms only
    smallest = min(((s, c) for s in cfg.samples for c in s.cuts),
                   key=lambda sc: expected_count(cosmo, footprint, sc[1], density[sc[0].name]))
    exact_key = f"{smallest[0].name}/{smallest[1].label}"
    times = dict.fromkeys(BASELINE_PARTS, 0.0)
    per_cone: list[float] = []
    cone0: dict[str, Any] = {}
    exact: dict[str, Any] = {}
    variance: dict[str, Any] = {}
    shared_of: dict[tuple[str, str], Any] = {}
    completeness = count_completeness(cfg)
    n_rand: dict[str, int] = {}
    # the inputs' digests name the cones' random streams; a run takes them once, so the
    # baseline does too, outside its timed builds (about 0.1 s for the box's each time)
    box_digest, footprint_digest = content_digest(box), content_digest(footprint)
    for i in range(cfg.cones.n_cones):
        tc = time.perf_counter()
        t = time.perf_counter()
        table, _ = cone_table(cone_build_spec(cfg, i, box_digest, footprint_digest,
                                              overlap_input(cfg)), box, footprint)
        times["build"] += time.perf_counter() - t
        for s in cfg.samples:
            for cut in s.cuts:
                key = f"{s.name}/{cut.label}"
                sel = select_cut(table, cut, cfg.shell, cosmo)
                data = _cone_sample(sel, regions)
                lo, hi = cut_distances(cosmo, cut)
                geometry = ConeGeometry(footprint, lo, hi, regions)

                t = time.perf_counter()
                n_r = n_randoms(expected_count(cosmo, footprint, cut, density[s.name]),
                                BASELINE_MULTIPLE)
                rt = make_randoms(footprint, lo, hi, n_r,
                                  seeded_rng(cfg.seed, "baseline-randoms", i, s.name, cut.label),
                                  sampling="pseudo")
                rand = {"ra": np.ascontiguousarray(rt["ra"], dtype=np.float64),
                        "dec": np.ascontiguousarray(rt["dec"], dtype=np.float64),
                        "chi": np.ascontiguousarray(rt["chi_obs"], dtype=np.float64),
                        "w": np.ascontiguousarray(rt["weight"], dtype=np.float64)}
                times["randoms"] += time.perf_counter() - t
                n_rand[key] = n_r
                gal = {"ra": data.ra, "dec": data.dec, "chi": data.chi, "w": data.w}

                t = time.perf_counter()
                dd = count(gal, None)
                times["dd"] += time.perf_counter() - t
                t = time.perf_counter()
                dr = count(gal, rand)
                times["dr"] += time.perf_counter() - t
                t = time.perf_counter()
                rr = count(rand, None)
                times["rr"] += time.perf_counter() - t
                t = time.perf_counter()
                wp = landy_szalay_wp(dd, dr, rr, gal["w"], rand["w"], bins.dpi)
                times["ls"] += time.perf_counter() - t

                values: dict[str, Any] = {"wp": wp.tolist()}
                # the other statistics exactly as the run measures them (run.tasks.
                # measure_cone_cut): the counted sample, the full geometry and the work
                # shared by the cones of a cut (the VPF's sphere centres), drawn once per cut
                counted = count_sample(sel, regions, completeness, whole=data)
                full_geometry = ConeGeometry(footprint, lo, hi, regions,
                                             cut_volume_per_sr(cosmo, cut),
                                             covered_sky(footprint, completeness))
                for name in cfg.statistics.measure:
                    if name == "wp":
                        continue
                    t = time.perf_counter()
                    stat, settings = STATISTICS[name], cfg.statistics.get(name)
                    if (key, name) not in shared_of:
                        shared_of[key, name] = stat.prepare_cone(
                            None, full_geometry, settings, n_data=max(len(data), 1),
                            rng=seeded_rng(cfg.seed, "shared", s.name, cut.label, name))
                    rng = seeded_rng(cfg.seed, "cone", i, s.name, cut.label, name, "")
                    m = stat.measure_cone(counted if stat.counts_in_cells else data, None,
                                          full_geometry, settings, rng, shared_of[key, name],
                                          jackknife=True)
                    times[name] += time.perf_counter() - t
                    values[name] = np.asarray(m.value).tolist()
                if i == 0:
                    cone0[key] = values
                    cone0[key]["n_data"] = len(data)
                if i == 0 and key == exact_key:
                    # conecheck's estimator on the very same randoms, full RR, no jackknife:
                    # must equal the baseline's wp to rounding
                    rs = ConeSample(rand["ra"], rand["dec"], rand["chi"], rand["w"])
                    plain = ConeSample(data.ra, data.dec, data.chi, data.weight)
                    full = dataclasses.replace(wps, rr_method="full")
                    mine = wp_cone(plain, rs, geometry, full, jackknife=False).value
                    exact = {"cut": key, "n_data": len(data), "n_randoms": n_r,
                             "conecheck": np.asarray(mine).tolist(), "baseline": wp.tolist(),
                             "max_rel_diff": float(np.max(np.abs(mine - wp) / np.abs(wp)))}
                    # not part of the baseline's time: the check of the randoms' own noise
                    t_var = time.perf_counter()
                    n_exp = expected_count(cosmo, footprint, cut, density[s.name])
                    variance = wp_random_variance(cfg, data, geometry, lo, hi, n_exp, regions)
                    variance["cut"] = key
                    tc += time.perf_counter() - t_var
                del rand, rt, dd, dr, rr
        per_cone.append(time.perf_counter() - tc)
    return {"times": times, "per_cone": per_cone, "inputs": t_inputs,
            "total": float(sum(times.values())), "peak_rss_mib": peak_rss_mib(),
            "cone0": cone0, "exact": exact, "variance": variance, "n_randoms": n_rand,
            "threads": threads,
            "counter": ("Corrfunc.mocks.DDrppi_mocks" if use_corrfunc
                        else "scipy cKDTree sparse_distance_matrix")}


def part_warmup(work: Path) -> dict[str, Any]:
    from conecheck.run.validate import validate

    t0 = time.perf_counter()
    validate(make_config(warmup_dict(), work), work / "warmup", fresh=True, progress=False)
    return {"wall": time.perf_counter() - t0}


# --------------------------------------------------------------------------- processes
def run_part(part: str, d: dict[str, Any], work: Path, profile: bool = False) -> dict[str, Any]:
    """Run one side in a fresh process (its own peak memory) and read its JSON report."""
    tag = f"{part}-{time.time_ns()}"
    spec, result, log = work / f"{tag}.spec.json", work / f"{tag}.json", work / f"{tag}.log"
    spec.write_text(json.dumps(d))
    cmd = [sys.executable, str(Path(__file__).resolve()), "--part", part, "--spec", str(spec),
           "--result", str(result), "--workdir", str(work)]
    if profile:
        cmd.append("--profile")
    with open(log, "w") as fh:
        proc = subprocess.run(cmd, stdout=fh, stderr=subprocess.STDOUT, check=False)
    if proc.returncode != 0:
        print(log.read_text()[-4000:], file=sys.stderr)
        raise SystemExit(f"{part} process failed (exit {proc.returncode}); log: {log}")
    return json.loads(result.read_text())


def child(args: argparse.Namespace) -> int:
    logging.basicConfig(level=logging.WARNING, format="%(name)s: %(message)s")
    work = Path(args.workdir)
    d = json.loads(Path(args.spec).read_text())
    load0 = os.getloadavg()[0]
    if args.part == "conecheck":
        out = part_conecheck(d, work / f"conecheck-{os.getpid()}", args.profile)
    elif args.part == "baseline":
        out = part_baseline(d, work)
    else:
        out = part_warmup(work)
    # other processes on the machine distort wall times: record how busy it was
    out["load_average"] = [load0, os.getloadavg()[0]]
    write_text_atomic(Path(args.result), json.dumps(out))
    return 0


# --------------------------------------------------------------------------- report
def conecheck_measure_time(c: dict[str, Any]) -> float:
    return float(c["timings"].get("randoms", 0.0) + c["timings"].get("cones", 0.0))


def randoms_scheme(d: dict[str, Any]) -> str:
    """conecheck's random scheme of the workload, from its configuration."""
    return randoms_scheme_of(make_config(d, ".").randoms)


def describe(d: dict[str, Any]) -> str:
    cuts = sum(1 + len(s.get("alt_cuts", [])) for s in d["samples"])
    return (f"synthetic box L = {d['box']['box_size']:g} Mpc/h; Kestrel footprint; shell "
            f"{d['survey']['shell']['z_min']} < z < {d['survey']['shell']['z_max']}; "
            f"{d['cones']['n_cones']} cones; {len(d['samples'])} samples, {cuts} cuts; conecheck's "
            f"randoms {randoms_scheme(d)} (baseline: {BASELINE_MULTIPLE:g}x pseudo-random, full "
            f"RR); {' + '.join(d['statistics']['measure'])}; "
            f"{d['jackknife']['sky_regions']} sky regions ({d['jackknife']['box_n_side']}^2 box "
            f"columns); wp r_p {d['statistics']['wp']['rp_min']}-{d['statistics']['wp']['rp_max']}"
            f" Mpc/h in {d['statistics']['wp']['n_rp']} bins, pi_max "
            f"{d['statistics']['wp']['pi_max']:g}, {rr_words(d)}")


def git_commit() -> str:
    """The checked-out commit, marked when the work tree differs from it."""
    repo = Path(__file__).resolve().parent.parent
    try:
        head = subprocess.run(["git", "-C", str(repo), "rev-parse", "--short", "HEAD"],
                              capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(repo), "status", "--porcelain",
                                "--untracked-files=no"], capture_output=True, text=True,
                               check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"
    return head + (" with uncommitted changes" if dirty else "")


#: What the comparison measures, written beside the numbers.
BASELINE_NOTE = (
    "The baseline is what an analysis without conecheck's design would do for the same "
    "cones: per cone and cut a fresh random catalogue (same size and generator as "
    "conecheck's) and DD, DR and RR counted afresh, then Landy–Szalay; it computes no "
    "jackknife for wp, while conecheck also produces every delete-one wp. Cone builds, "
    "number density, counts-in-cylinders and VPF run the same conecheck code on both sides "
    "(same catalogues and seeds), so they add the same time to both and dilute the ratio; "
    "the wp path alone is compared on the line below the table. The baseline runs in one "
    "process with the pair counter on every core; conecheck runs as configured "
    "(``local``: one process, numba threads on every core; ``local-cluster``: two dask "
    "worker processes of one numba thread each).")


def comparison_lines(d: dict[str, Any], runs: dict[str, dict[str, Any]], b: dict[str, Any],
                     command: str, commit: str = "unknown") -> list[str]:
    """The markdown report: ``runs`` maps each scheduler to its conecheck report."""
    c = next(iter(runs.values()))
    lines: list[str] = []
    say = lines.append
    import numba

    say(f"Date {dt.date.today().isoformat()}; machine {platform.machine()}, {os.cpu_count()} "
        f"cores, numba threads {c['threads']}; Python {platform.python_version()}, numpy "
        f"{np.__version__}, numba {numba.__version__}"
        + (", Corrfunc " + _corrfunc_version() if DDrppi_mocks is not None else "") + ".")
    say("")
    say(f"Command: `{command}`; conecheck commit {commit}.")
    say("")
    say(f"Workload: {describe(d)}. Box: {c['n_box']:,} galaxies.")
    say("")
    say(BASELINE_NOTE)
    say("")
    say("Galaxies and randoms per cone (cone 0):")
    say("")
    say("| sample / cut | galaxies | randoms |")
    say("|---|---|---|")
    for key, v in b["cone0"].items():
        say(f"| {key} | {v['n_data']:,} | {b['n_randoms'][key]:,} |")
    say("")
    say("| side | what is timed | time [s] | ratio baseline / this |")
    say("|---|---|---|---|")
    say(f"| baseline ({b['counter']}, {b['threads']} threads, one process) | cone builds + "
        f"fresh randoms + DD, DR, RR per cone and cut + Landy–Szalay (no wp jackknife) + "
        f"conecheck's number density, cic, VPF (with jackknife) | {b['total']:.1f} | 1.00 |")
    for sched, cr in runs.items():
        meas = conecheck_measure_time(cr)
        say(f"| conecheck, scheduler {sched} | randoms + cones stages (shared randoms and RR, "
            f"{rr_words(d)}, wp, cic, VPF, density, all with "
            f"{d['jackknife']['sky_regions']}-region jackknife) | {meas:.1f} | "
            f"**{b['total'] / meas:.2f}** |")
        say(f"| conecheck, scheduler {sched} | whole run: inputs (box generation), box "
            f"statistics, HOD derivatives, randoms, cones, comparison, tables, PDF and HTML "
            f"reports | {cr['wall']:.1f} | **{b['total'] / cr['wall']:.2f}** |")
        rest = cr["wall"] - meas
        say(f"| baseline + the stages it leaves out, at conecheck's own times (box generation, "
            f"box statistics, HOD derivatives, comparison, tables, reports: {rest:.1f} s) | "
            f"whole run against whole run | {b['total'] + rest:.1f} | "
            f"**{(b['total'] + rest) / cr['wall']:.2f}** |")
        deriv = float(cr["timings"].get("HOD derivatives", 0.0))
        if deriv > 0:
            like = cr["wall"] - deriv
            say(f"| conecheck, scheduler {sched} | whole run without the HOD derivatives stage "
                f"(work the baseline does not do: {deriv:.1f} s) | {like:.1f} | "
                f"**{b['total'] / like:.2f}** |")
    say("")
    say("Baseline time by part [s]: " + ", ".join(f"{k} {v:.1f}" for k, v in b["times"].items())
        + f"; per cone {np.mean(b['per_cone']):.1f} (min {min(b['per_cone']):.1f}, max "
        f"{max(b['per_cone']):.1f}); box + footprint + regions (not in the total) "
        f"{b['inputs']:.1f}.")
    pair = sum(b["times"][k] for k in ("randoms", "dd", "dr", "rr", "ls"))
    same = sum(b["times"][k] for k in ("build", "number_density", "cic", "vpf"))
    say(f"Of the baseline: wp path (randoms, DD, DR, RR, Landy–Szalay) {pair:.1f} s; parts "
        f"computed by the same code on both sides (cone builds, density, cic, VPF) {same:.1f} s.")
    for sched, cr in runs.items():
        st = cr.get("statistic_times") or {}
        if not st:
            continue
        # the randoms stage also draws the work other statistics share per cut (the VPF's
        # sphere centres and their inside-the-survey test), which is not on the wp path
        others = sum(v for k, v in st.items() if k.endswith(" shared") and k != "wp shared")
        wp_path = cr["timings"].get("randoms", 0.0) - others + st.get("wp cone", 0.0)
        say(f"wp path alone (scheduler {sched}): conecheck's randoms stage without the other "
            f"statistics' shared work ({others:.1f} s; randoms and RR of every cut) + wp on "
            f"every cone (DD, DR, delete-one wp) {wp_path:.1f} s against the baseline's "
            f"{pair:.1f} s: ratio **{pair / wp_path:.2f}**.")
        outside = cr["timings"].get("cones", 0.0) - sum(v for k, v in st.items()
                                                         if k.endswith(" cone"))
        say(f"conecheck time by statistic, scheduler {sched} [s]: " + ", ".join(
            f"{k} {v:.1f}" for k, v in sorted(st.items()) if v >= 0.05)
            + "; cone stage outside the "
            f"statistics (builds, cuts, bookkeeping) {outside:.1f}.")
    say("")
    for sched, cr in runs.items():
        say(f"conecheck stage times, scheduler {sched} [s]: " + ", ".join(
            f"{k} {cr['timings'].get(k, 0.0):.1f}" for k in STAGES)
            + f"; PDF and HTML reports "
            f"{cr['wall'] - cr['timings'].get('total before the PDF', cr['wall']):.1f}; "
            f"whole run {cr['wall']:.1f}.")
        say("")
    say("| peak memory (ru_maxrss) | MiB |")
    say("|---|---|")
    for sched, cr in runs.items():
        say(f"| conecheck run, scheduler {sched}: main process | {cr['peak_rss_mib']:.0f} |")
        if cr.get("peak_rss_worker_mib"):
            say(f"| conecheck run, scheduler {sched}: largest worker process | "
                f"{cr['peak_rss_worker_mib']:.0f} |")
    say(f"| baseline | {b['peak_rss_mib']:.0f} |")
    say(f"| box catalogue (positions, velocities, magnitudes as float64) | "
        f"{c['n_box'] * 7 * 8 / 2**20:.0f} |")
    say("")
    say("Machine load (1-minute load average at the start and end of each process; above 2 "
        "means other work shared the two cores): " + "; ".join(
            [f"conecheck {s} {r['load_average'][0]:.1f} → {r['load_average'][1]:.1f}"
             for s, r in runs.items()]
            + [f"baseline {b['load_average'][0]:.1f} → {b['load_average'][1]:.1f}"]) + ".")
    say("")
    ex = b["exact"]
    say(f"Agreement, same randoms (cone 0, {ex['cut']}: {ex['n_data']:,} galaxies, "
        f"{ex['n_randoms']:,} randoms): conecheck wp_cone with rr_method 'full' against the "
        f"baseline's Landy–Szalay wp, largest relative difference {ex['max_rel_diff']:.1e}.")
    say("")
    v = b.get("variance") or {}
    if v:
        from scipy.stats import f as f_dist

        n = v["realisations"]
        lo, hi = f_dist.ppf([0.05, 0.95], n - 1, n - 1)
        say(f"wp's variance from the randoms alone (cone 0, {v['cut']}, data fixed, {n} "
            f"realisations per scheme): conecheck's scheme ({v['scheme']}) against the "
            f"baseline's ({BASELINE_MULTIPLE:g}x pseudo-random, full RR). With {n} realisations "
            f"a ratio of two equal variances falls between {lo:.2f} and {hi:.2f} in 90 % of "
            f"runs (F({n - 1}, {n - 1})). One wp of this cut takes {v['seconds_conecheck']:.2f} s "
            f"with conecheck's randoms and {v['seconds_baseline']:.2f} s with the baseline's "
            "(conecheck's engine on both).")
        say("")
        say("| r_p [Mpc/h] | variance ratio conecheck / baseline | baseline's random variance / "
            "jackknife variance |")
        say("|---|---|---|")
        jk = v.get("var_jackknife") or [float("nan")] * len(v["rp"])
        for rp, vm, vb, vj in zip(v["rp"], v["var_conecheck"], v["var_baseline"], jk,
                                  strict=True):
            say(f"| {rp:.2f} | {vm / vb:.2f} | {vb / vj:.4f} |")
        say(f"| all bins (sum) | {sum(v['var_conecheck']) / sum(v['var_baseline']):.2f} | |")
        say("")
    say(f"Agreement with the run (scheduler {next(iter(runs))}; cone 0; the run used its own "
        f"shared randoms and {rr_words(d)}): "
        "largest |Δwp| in units of the cone's jackknife σ, and whether the run's number "
        "density, cic and VPF equal the baseline's (same catalogue, same seeds):")
    say("")
    say("| sample / cut | max abs(Δwp)/σ | density, cic, VPF identical |")
    say("|---|---|---|")
    for key, bv in b["cone0"].items():
        cv = c["cone0"][key]
        dwp = np.abs(np.asarray(cv["wp"]["value"]) - np.asarray(bv["wp"]))
        sig = np.asarray(cv["wp"]["sigma_cone"])
        ident = all(np.allclose(cv[n]["value"], bv[n], rtol=1e-12, atol=0)
                    for n in ("number_density", "cic", "vpf") if n in bv)
        say(f"| {key} | {np.max(dwp / sig):.3f} | {ident} |")
    say("")
    return lines


def _corrfunc_version() -> str:
    import Corrfunc

    return str(Corrfunc.__version__)


def scaling_lines(rows: list[tuple[str, dict[str, Any], dict[str, Any]]],
                  command: str, commit: str = "unknown") -> list[str]:
    lines = [f"Date {dt.date.today().isoformat()}; {os.cpu_count()} cores; command: "
             f"`{command}`; conecheck commit {commit}; scheduler "
             f"{rows[0][1]['compute']['scheduler']}; workload as above but for the number of "
             "cones and the box side, and without the HOD derivatives. conecheck only (the "
             "baseline repeats the same work for every cone, so its time is linear in the number "
             "of cones by construction). Peak memory is ru_maxrss: of the main process, and the "
             "largest of its finished child processes (the dask workers).", "",
             "| run | box galaxies | " + " | ".join(SCALING_STAGES) + " | whole run [s] | "
             "randoms + cones per cone [s] | cones stage per cone [s] | peak MiB, main "
             "process | peak MiB, largest worker | load average |",
             "|---" * (len(SCALING_STAGES) + 8) + "|"]
    for label, d, c in rows:
        t = c["timings"]
        lines.append(f"| {label} | {c['n_box']:,} | "
                     + " | ".join(f"{t.get(k, 0.0):.1f}" for k in SCALING_STAGES)
                     + f" | {c['wall']:.1f} | "
                     f"{conecheck_measure_time(c) / d['cones']['n_cones']:.2f} | "
                     f"{t.get('cones', 0.0) / d['cones']['n_cones']:.2f} | "
                     f"{c['peak_rss_mib']:.0f} | "
                     f"{c['peak_rss_worker_mib']:.0f} | "
                     f"{c['load_average'][0]:.1f} → {c['load_average'][1]:.1f} |")
    lines.append("")
    return lines


def write_section(start: str, end: str, title: str, lines: list[str]) -> None:
    path = Path(__file__).with_name("RESULTS.md")
    block = "\n".join([start, title, "", *lines, end])
    old = path.read_text() if path.exists() else "# Benchmark results\n"
    if start in old and end in old:
        new = old[:old.index(start)] + block + old[old.index(end) + len(end):]
    else:
        new = old.rstrip("\n") + "\n\n" + block + "\n"
    write_text_atomic(path, new)
    print(f"wrote {path}")


# --------------------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="small smoke-run workload")
    parser.add_argument("--heavy", action="store_true",
                        help="the heavy workload (about 80,000 galaxies per cone cut)")
    parser.add_argument("--cones", type=int, default=None, help="number of cones")
    parser.add_argument("--box-size", type=float, default=None, help="box side [Mpc/h]")
    parser.add_argument("--scheduler", default="local,local-cluster",
                        help="compute.scheduler of the conecheck run; a comma-separated list "
                        "runs it once per scheduler (--scaling uses the first)")
    parser.add_argument("--scaling", action="store_true",
                        help="conecheck alone for 10^6 and 10^7 galaxies, 8 to 64 cones")
    parser.add_argument("--profile", action="store_true",
                        help="run the conecheck side under cProfile and print the top")
    parser.add_argument("--no-baseline", action="store_true", help="time conecheck only")
    parser.add_argument("--write", action="store_true",
                        help="write RESULTS.md also for --quick or resized runs")
    parser.add_argument("--no-write", action="store_true", help="never write RESULTS.md")
    parser.add_argument("--workdir", default=None, help="scratch directory (default: a "
                        "temporary one, removed at the end)")
    parser.add_argument("--part", choices=("conecheck", "baseline", "warmup"),
                        help=argparse.SUPPRESS)
    parser.add_argument("--spec", help=argparse.SUPPRESS)
    parser.add_argument("--result", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.part:
        return child(args)

    command = "python benchmarks/bench_run.py " + " ".join(argv if argv is not None
                                                            else sys.argv[1:])
    command = command.strip()
    commit = git_commit()
    own_dir = args.workdir is None
    work = Path(tempfile.mkdtemp(prefix="conecheck-bench-") if own_dir else args.workdir)
    work.mkdir(parents=True, exist_ok=True)
    schedulers = [x.strip() for x in args.scheduler.split(",") if x.strip()]
    default_run = not args.quick and args.cones is None and args.box_size is None
    write = (default_run or args.write) and not args.no_write
    try:
        t0 = time.perf_counter()
        run_part("warmup", {}, work)
        print(f"warm-up (numba disk cache): {time.perf_counter() - t0:.1f} s", flush=True)
        if args.scaling:
            sched = schedulers[0]
            plan = SCALING_QUICK if args.quick else SCALING_RUNS
            runs = []
            for box_size, n_cones in plan:
                d = workload(args.quick, n_cones, box_size, sched)
                # the HOD derivatives re-populate the box 2 × (parameters) times per sample,
                # a cost of the box's size alone; this table is about cones and memory
                d["parameter_shifts"] = {"enabled": False}
                runs.append((f"{n_cones} cones, L = {box_size:g}", d))
            rows = []
            for label, d in runs:
                c = run_part("conecheck", d, work)
                rows.append((label, d, c))
                print(f"{label}: whole run {c['wall']:.1f} s", flush=True)
            lines = scaling_lines(rows, command, commit)
            print("\n".join(lines))
            if (not args.quick or args.write) and not args.no_write:
                write_section(SCALING_START, SCALING_END,
                              "## Whole run: scaling with cones and box size "
                              "(`python benchmarks/bench_run.py --scaling`)", lines)
            return 0

        runs: dict[str, dict[str, Any]] = {}
        for sched in schedulers:
            d = workload(args.quick, args.cones, args.box_size, sched, heavy=args.heavy)
            print(f"workload: {describe(d)}; scheduler {sched}", flush=True)
            c = run_part("conecheck", d, work, profile=args.profile)
            runs[sched] = c
            print(f"conecheck ({sched}): whole run {c['wall']:.1f} s, randoms + cones "
                  f"{conecheck_measure_time(c):.1f} s", flush=True)
            if args.profile:
                print(c["profile"])
        if args.no_baseline:
            print(json.dumps({s: {k: c[k] for k in ("timings", "wall", "peak_rss_mib",
                                                    "peak_rss_worker_mib")}
                              for s, c in runs.items()}, indent=1))
            return 0
        if DDrppi_mocks is None:
            print("Corrfunc is not importable: the baseline counts with scipy's cKDTree "
                  "(much slower; see DEVELOPERS.md to install Corrfunc)", flush=True)
        b = run_part("baseline", d, work)
        lines = comparison_lines(d, runs, b, command, commit)
        print("\n".join(lines))
        if write and args.heavy:
            write_section(HEAVY_START, HEAVY_END, "## Whole run against a per-cone recount, "
                          "heavy workload (`python benchmarks/bench_run.py --heavy`)", lines)
        elif write:
            write_section(START, END, "## Whole run against a per-cone recount "
                          "(`python benchmarks/bench_run.py`)", lines)
        return 0
    finally:
        if own_dir:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
