"""Speed of the (r_p, π) pair-counting engine against Corrfunc and scipy's cKDTree.

Run:  python benchmarks/bench_pairs.py [--quick] [--no-write]

Measured in one run, on the same points, two threads for every threaded code:

* box DD(r_p, π): N = 10⁶ uniform points in L = 500 Mpc/h, π_max = 40 Mpc/h (Δπ = 1),
  14 log r_p bins from 0.1 to 30 Mpc/h — conecheck (without and with 25 jackknife
  regions), ``Corrfunc.theory.DDrppi`` (nthreads=2) and cKDTree ``query_pairs``;
* cone DD and DR on two geometries, 10 randoms per data point: a distant cap (2×10⁵
  data in a 30°-radius cap between χ = 600 and 1200 Mpc/h, r_p ≤ 30) and the nearby wide
  shell of the run workload (8×10⁴ data in a 40°-radius cap between χ = 60 and
  290 Mpc/h, r_p ≤ 20) — conecheck, ``Corrfunc.mocks.DDrppi_mocks`` (comoving
  distances) and cKDTree ``sparse_distance_matrix``;
* cone RR of a thin cylinder, the small-scale RR the split random method leaves whole:
  1.7×10⁶ randoms (the heavy run workload's largest cut) in a 40°-radius cap between
  χ = 45 and 440 Mpc/h, r_p 0.3–2.45 Mpc/h, π_max = 40 — conecheck in sky columns (its
  default there), conecheck in cubic cells, and ``Corrfunc.mocks.DDrppi_mocks``;
* linear growth of the engine's run time with N at fixed density (box);
* box DD at the lower densities of the HOD samples (2×10⁴ to 2×10⁶ points in
  L = 585 Mpc/h, r_p ≤ 20) — conecheck, conecheck with the former fixed r_p,max / 2 cells,
  and ``Corrfunc.theory.DDrppi``.

The cKDTree route returns every pair within r_max, so it runs on a subset and its time is
scaled to the full size (time ∝ number of query points at fixed density: stated in the
output).  Results go to benchmarks/RESULTS.md (section between the bench_pairs markers)
unless --no-write.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numba
import numpy as np
from scipy.spatial import cKDTree

from conecheck.atomic import write_text_atomic
from conecheck.pairs import count_rppi_box, count_rppi_cone

THREADS = 2
START = "<!-- bench_pairs:start -->"
END = "<!-- bench_pairs:end -->"

try:
    import Corrfunc
    from Corrfunc.mocks import DDrppi_mocks
    from Corrfunc.theory import DDrppi
except ImportError:  # pragma: no cover - optional reference
    Corrfunc = None


def best_of(fn, repeat):
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def ckd_box(pos, L, edges, pi_max):
    """(r_p, π) counts via cKDTree pair finding (periodic), as a user would do it."""
    t = cKDTree(pos, boxsize=L)
    pairs = t.query_pairs(np.hypot(edges[-1], pi_max), output_type="ndarray")
    d = pos[pairs[:, 1]] - pos[pairs[:, 0]]
    d -= L * np.round(d / L)
    rp = np.hypot(d[:, 0], d[:, 1])
    h, _, _ = np.histogram2d(rp, np.abs(d[:, 2]), bins=[edges, np.arange(pi_max + 1)])
    return h


def ckd_cone(p1, tree2, p2, edges, pi_max):
    """Midpoint-LOS counts of query points p1 against a prebuilt tree of p2."""
    sm = cKDTree(p1).sparse_distance_matrix(tree2, np.hypot(edges[-1], pi_max),
                                            output_type="coo_matrix")
    a, b = p1[sm.row], p2[sm.col]
    s = a - b
    ell = a + b
    pi = np.abs(np.einsum("ij,ij->i", s, ell)) / np.linalg.norm(ell, axis=1)
    rp = np.sqrt(np.maximum(np.einsum("ij,ij->i", s, s) - pi**2, 0))
    h, _, _ = np.histogram2d(rp, pi, bins=[edges, np.arange(pi_max + 1)])
    return h


def cap_points(rng, n, chi_lo, chi_hi, radius_deg):
    """Uniform in volume inside a polar cap of the given radius."""
    cos_min = np.cos(np.radians(radius_deg))
    mu = rng.uniform(cos_min, 1.0, n)
    phi = rng.uniform(0, 2 * np.pi, n)
    chi = np.cbrt(rng.uniform(chi_lo**3, chi_hi**3, n))
    st = np.sqrt(1 - mu**2)
    xyz = np.column_stack([chi * st * np.cos(phi), chi * st * np.sin(phi), chi * mu])
    ra = np.degrees(phi)
    dec = np.degrees(np.arcsin(mu))
    return xyz, ra, dec, chi


#: The cone geometries: a distant narrow cap, and the nearby wide shell of the standard
#: run workload (benchmarks/bench_run.py), where the line of sight turns most across a
#: cell's neighbourhood.
CONE_GEOMETRIES = (
    {"name": "distant cap", "n_data": 200_000, "chi": (600.0, 1200.0), "radius": 30.0,
     "edges": np.geomspace(0.1, 30.0, 15)},
    {"name": "nearby wide shell", "n_data": 80_000, "chi": (60.0, 290.0), "radius": 40.0,
     "edges": np.geomspace(0.3, 20.0, 9)},
)
PI_MAX = 40.0


def cone_rows(rng, geo, scale, repeat, say) -> float:
    """DD and DR rows of one cone geometry; returns the larger time ratio to Corrfunc."""
    n_d = int(geo["n_data"] * scale)
    n_r = 10 * n_d
    radius = geo["radius"] if scale == 1.0 else geo["radius"] * np.sqrt(scale)
    lo, hi = geo["chi"]
    edges, pi_max = geo["edges"], PI_MAX
    nb = len(edges) - 1
    dxyz, dra, ddec, dchi = cap_points(rng, n_d, lo, hi, radius)
    rxyz, rra, rdec, rchi = cap_points(rng, n_r, lo, hi, radius)
    t_dd, dd = best_of(lambda: count_rppi_cone(dxyz, rp_edges=edges, pi_max=pi_max), repeat)
    t_dr, dr = best_of(lambda: count_rppi_cone(dxyz, None, None, rxyz, rp_edges=edges,
                                               pi_max=pi_max), repeat)
    say(f"## Cone DD and DR, {geo['name']}: {n_d:,} data, {n_r:,} randoms, cap of radius "
        f"{radius:.0f}°, {lo:.0f} < χ < {hi:.0f} Mpc/h, r_p {edges[0]:g}–{edges[-1]:g} "
        f"Mpc/h in {nb} bins, π_max = {pi_max:.0f} Mpc/h")
    say()
    say("| count | code | time [s] | ratio to conecheck | pairs/s |")
    say("|---|---|---|---|---|")
    worst = 0.0
    say(f"| DD | conecheck | {t_dd:.2f} | 1.00 | {dd.total.sum() / t_dd:.3g} |")
    if Corrfunc:
        kw = {"is_comoving_dist": True}
        t_cdd, rdd = best_of(lambda: DDrppi_mocks(1, 2, THREADS, pi_max, edges, dra, ddec,
                                                  dchi, **kw), repeat)
        worst = max(worst, t_dd / t_cdd)
        say(f"| DD | Corrfunc.mocks.DDrppi_mocks | {t_cdd:.2f} | {t_cdd / t_dd:.2f} | "
            f"{dd.total.sum() / t_cdd:.3g} |")
    n_q = max(1000, n_d // 40)
    dtree = cKDTree(dxyz)
    t0 = time.perf_counter()
    ckd_cone(dxyz[:n_q], dtree, dxyz, edges, pi_max)
    t_kdd = (time.perf_counter() - t0) * n_d / n_q / 2  # ordered pairs: half the work needed
    say(f"| DD | cKDTree ({n_q:,} query points, scaled ×{n_d / n_q:.0f}, /2 for ordered "
        f"pairs) | {t_kdd:.1f} | {t_kdd / t_dd:.1f} | {dd.total.sum() / t_kdd:.3g} |")
    say(f"| DR | conecheck | {t_dr:.2f} | 1.00 | {dr.total.sum() / t_dr:.3g} |")
    if Corrfunc:
        t_cdr, rdr = best_of(lambda: DDrppi_mocks(0, 2, THREADS, pi_max, edges, dra, ddec,
                                                  dchi, RA2=rra, DEC2=rdec, CZ2=rchi, **kw),
                             repeat)
        worst = max(worst, t_dr / t_cdr)
        say(f"| DR | Corrfunc.mocks.DDrppi_mocks | {t_cdr:.2f} | {t_cdr / t_dr:.2f} | "
            f"{dr.total.sum() / t_cdr:.3g} |")
    t0 = time.perf_counter()
    rtree = cKDTree(rxyz)
    t_build = time.perf_counter() - t0
    n_q = max(500, n_d // 200)
    t0 = time.perf_counter()
    ckd_cone(dxyz[:n_q], rtree, rxyz, edges, pi_max)
    t_kdr = t_build + (time.perf_counter() - t0) * n_d / n_q
    say(f"| DR | cKDTree (tree of all randoms + {n_q:,} data queries, scaled "
        f"×{n_d / n_q:.0f}) | {t_kdr:.1f} | {t_kdr / t_dr:.1f} | {dr.total.sum() / t_kdr:.3g} |")
    say()
    if Corrfunc:
        cdd = rdd["npairs"].astype(float).reshape(nb, int(pi_max)) / 2
        cdr = rdr["npairs"].astype(float).reshape(nb, int(pi_max))
        say(f"Counts identical to Corrfunc: DD {np.array_equal(cdd, dd.total)}, DR "
            f"{np.array_equal(cdr, dr.total)} (largest difference, relative to the fullest "
            f"bin: DD {np.max(np.abs(cdd - dd.total)) / dd.total.max():.1e}, DR "
            f"{np.max(np.abs(cdr - dr.total)) / dr.total.max():.1e}; Corrfunc rebuilds "
            "Cartesian positions from RA, Dec, χ, so a pair within rounding of a bin edge "
            "could move).")
        say()
    return worst


#: The thin-cylinder RR row: (randoms, χ range [Mpc/h], cap radius [deg], r_p edges [Mpc/h]).
THIN_RR = {"n": 1_700_000, "chi": (45.0, 440.0), "radius": 40.0,
           "edges": np.array([0.3, 0.5, 0.84, 1.4, 2.45])}


def thin_rows(rng, scale, repeat, say) -> float:
    """RR of a thin cylinder: sky columns, cubic cells and Corrfunc; returns the ratio of
    conecheck's default to Corrfunc's time."""
    n = int(THIN_RR["n"] * scale)
    lo, hi = THIN_RR["chi"]
    radius = THIN_RR["radius"] if scale == 1.0 else THIN_RR["radius"] * np.sqrt(scale)
    edges, pi_max = THIN_RR["edges"], PI_MAX
    nb = len(edges) - 1
    xyz, ra, dec, chi = cap_points(rng, n, lo, hi, radius)
    t_sky, sky = best_of(lambda: count_rppi_cone(xyz, rp_edges=edges, pi_max=pi_max), repeat)
    t_cub, cub = best_of(lambda: count_rppi_cone(xyz, rp_edges=edges, pi_max=pi_max,
                                                 cells="cubic"), repeat)
    say(f"## Cone RR of a thin cylinder: {n:,} randoms, cap of radius {radius:.0f}°, "
        f"{lo:.0f} < χ < {hi:.0f} Mpc/h, r_p {edges[0]:g}–{edges[-1]:g} Mpc/h in {nb} bins, "
        f"π_max = {pi_max:.0f} Mpc/h")
    say()
    say("| code | time [s] | ratio to conecheck | pairs/s |")
    say("|---|---|---|---|")
    say(f"| conecheck (sky columns, its default for r_p,max ≤ π_max/4) | {t_sky:.2f} | 1.00 | "
        f"{sky.total.sum() / t_sky:.3g} |")
    say(f"| conecheck, cubic cells (`cells=\"cubic\"`) | {t_cub:.2f} | {t_cub / t_sky:.2f} | "
        f"{cub.total.sum() / t_cub:.3g} |")
    worst = 0.0
    if Corrfunc:
        t_cf, res = best_of(lambda: DDrppi_mocks(1, 2, THREADS, pi_max, edges, ra, dec, chi,
                                                 is_comoving_dist=True), repeat)
        worst = t_sky / t_cf
        say(f"| Corrfunc.mocks.DDrppi_mocks | {t_cf:.2f} | {t_cf / t_sky:.2f} | "
            f"{sky.total.sum() / t_cf:.3g} |")
    say()
    say(f"Sky columns and cubic cells count the same pairs: "
        f"{np.array_equal(sky.total, cub.total)}.")
    if Corrfunc:
        crr = res["npairs"].astype(float).reshape(nb, int(pi_max)) / 2
        say(f"Counts identical to Corrfunc: {np.array_equal(crr, sky.total)} (largest "
            f"difference, relative to the fullest bin: "
            f"{np.max(np.abs(crr - sky.total)) / sky.total.max():.1e}).")
    say()
    return worst


#: Box sizes of the sparse-box rows: the HOD samples' densities in the run workload's box.
SPARSE_BOX = {"box_size": 585.0, "n": (40_000, 150_000, 500_000, 2_000_000),
              "edges": np.geomspace(0.3, 20.0, 9), "pi_max": 40.0}


def sparse_rows(rng, scale, repeat, say) -> float:
    """Box DD at the densities of the HOD samples (10⁻⁴ to 10⁻² h³/Mpc³): conecheck,
    conecheck with the former fixed cells of r_p,max / 2, and Corrfunc. Returns the largest
    ratio of conecheck's time to Corrfunc's (0 without Corrfunc)."""
    g = SPARSE_BOX
    edges, pi_max = g["edges"], g["pi_max"]
    n_pi = int(pi_max)
    say(f"## Box DD at lower densities: L = {g['box_size']:.0f} Mpc/h (scaled with N in a quick "
        f"run), r_p {edges[0]:g}–{edges[-1]:g} Mpc/h in {len(edges) - 1} bins, π_max = "
        f"{pi_max:g} Mpc/h")
    say()
    say("Cells are r_p,max wide, widened to hold about `BOX_CELL_POINTS` points on average; "
        "the former rule kept r_p,max / 2 at every density.")
    say()
    say("| N | density [h³/Mpc³] | conecheck [s] | former r_p,max / 2 cells [s] | Corrfunc [s] "
        "| conecheck / Corrfunc | counts identical |")
    say("|---|---|---|---|---|---|---|")
    worst = 0.0
    for n_full in g["n"]:
        n = int(n_full * scale)
        density = n_full / g["box_size"] ** 3
        L = np.cbrt(n / density)
        pos = rng.uniform(0, L, (n, 3))
        t_new, pc = best_of(lambda pos=pos, L=L: count_rppi_box(
            pos, box_size=L, rp_edges=edges, pi_max=pi_max), repeat)
        t_old, old = best_of(lambda pos=pos, L=L: count_rppi_box(
            pos, box_size=L, rp_edges=edges, pi_max=pi_max, refine=2, cell_points=0.0), repeat)
        same = np.array_equal(old.total, pc.total)
        cf_cell = ratio_cell = "—"
        if Corrfunc:
            x, y, z = (np.ascontiguousarray(pos[:, i]) for i in range(3))
            t_cf, res = best_of(lambda x=x, y=y, z=z, L=L: DDrppi(
                1, THREADS, pi_max, edges, x, y, z, boxsize=L, periodic=True), repeat)
            cf_tot = res["npairs"].astype(float).reshape(len(edges) - 1, n_pi) / 2
            same = same and np.array_equal(cf_tot, pc.total)
            worst = max(worst, t_new / t_cf)
            cf_cell, ratio_cell = f"{t_cf:.3f}", f"{t_new / t_cf:.2f}"
        say(f"| {n:,} | {density:.2e} | {t_new:.3f} | {t_old:.3f} | {cf_cell} | {ratio_cell} "
            f"| {same} |")
    say()
    if Corrfunc:
        say(f"Largest ratio of conecheck's time to Corrfunc's over these rows: {worst:.2f}.")
        say()
    return worst


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10× smaller sizes, for a smoke run")
    ap.add_argument("--no-write", action="store_true", help="do not update RESULTS.md")
    args = ap.parse_args(argv)
    numba.set_num_threads(min(THREADS, numba.config.NUMBA_NUM_THREADS))
    rng = np.random.default_rng(2024)
    scale = 0.1 if args.quick else 1.0
    repeat = 1 if args.quick else 3
    edges = np.geomspace(0.1, 30.0, 15)
    pi_max = 40.0
    lines = []

    def say(s=""):
        print(s, flush=True)
        lines.append(s)

    commit = subprocess.run(["git", "-C", str(Path(__file__).parent), "describe", "--always",
                             "--dirty"], capture_output=True, text=True).stdout.strip()
    load0 = os.getloadavg()[0]
    say(f"Date {datetime.date.today()}; conecheck commit {commit or 'unknown'}; 1-minute "
        f"load average at the start {load0:.2f}.")
    say(f"Machine: {platform.processor() or platform.machine()}, {THREADS} threads; "
        f"numba {numba.__version__}, numpy {np.__version__}"
        + (f", Corrfunc {Corrfunc.__version__}" if Corrfunc else ", Corrfunc not installed")
        + (" — QUICK run (sizes /10)" if args.quick else ""))
    say()

    # warm-up: compile the kernels outside the timings
    small = rng.uniform(0, 100, (2000, 3))
    count_rppi_box(small, box_size=100.0, rp_edges=edges, pi_max=pi_max)
    count_rppi_box(small, None, np.zeros(2000, int), box_size=100.0, rp_edges=edges,
                   pi_max=pi_max, n_regions=2)
    count_rppi_cone(small + 500, rp_edges=edges, pi_max=pi_max)
    count_rppi_cone(small + 500, None, None, small + 510, rp_edges=edges, pi_max=pi_max)
    count_rppi_cone(small + 500, rp_edges=THIN_RR["edges"], pi_max=pi_max)  # sky columns

    # ------------------------------------------------------------------ box
    n_box = int(1_000_000 * scale)
    density = 1_000_000 / 500.0**3
    L = np.cbrt(n_box / density)
    pos = rng.uniform(0, L, (n_box, 3))
    t_eng, pc = best_of(lambda: count_rppi_box(pos, box_size=L, rp_edges=edges,
                                               pi_max=pi_max), repeat)
    n_pairs = pc.total.sum()
    reg = (np.floor(pos[:, 0] / (L / 5)) * 5 + np.floor(pos[:, 1] / (L / 5))).astype(int)
    t_jk, _ = best_of(lambda: count_rppi_box(pos, None, reg, box_size=L, rp_edges=edges,
                                             pi_max=pi_max, n_regions=25), repeat)
    say(f"## Box DD(r_p, π): N = {n_box:,}, L = {L:.0f} Mpc/h, r_p ≤ 30, π_max = 40 Mpc/h")
    say()
    say("| code | time [s] | ratio to conecheck | pairs/s |")
    say("|---|---|---|---|")
    say(f"| conecheck | {t_eng:.2f} | 1.00 | {n_pairs / t_eng:.3g} |")
    say(f"| conecheck, 25 jackknife regions | {t_jk:.2f} | {t_jk / t_eng:.2f} | "
        f"{n_pairs / t_jk:.3g} |")
    if Corrfunc:
        x, y, z = (np.ascontiguousarray(pos[:, i]) for i in range(3))
        t_cf, res = best_of(lambda: DDrppi(1, THREADS, pi_max, edges, x, y, z, boxsize=L,
                                           periodic=True), repeat)
        cf_tot = res["npairs"].astype(float).reshape(len(edges) - 1, int(pi_max)) / 2
        same = np.array_equal(cf_tot, pc.total)
        say(f"| Corrfunc.theory.DDrppi (nthreads=2) | {t_cf:.2f} | {t_cf / t_eng:.2f} | "
            f"{n_pairs / t_cf:.3g} |")
    n_sub = max(2000, int(8000 * scale))
    l_sub = np.cbrt(n_sub / density)
    sub = rng.uniform(0, l_sub, (n_sub, 3))
    t0 = time.perf_counter()
    ckd_box(sub, l_sub, edges, pi_max)
    t_ckd = (time.perf_counter() - t0) * n_box / n_sub
    say(f"| scipy cKDTree query_pairs + histogram (single thread; {n_sub:,} points in "
        f"L = {l_sub:.0f}, scaled ×{n_box / n_sub:.0f}) | {t_ckd:.1f} | {t_ckd / t_eng:.1f} | "
        f"{n_pairs / t_ckd:.3g} |")
    say()
    if Corrfunc:
        say(f"Counts identical to Corrfunc (its ordered pairs / 2): {same}.")
        say()

    # ------------------------------------------------------------------ linear scaling
    say("## Box: run time against N at fixed density (conecheck)")
    say()
    say("| N | L [Mpc/h] | time [s] | time / N [µs] |")
    say("|---|---|---|---|")
    for f in (0.125, 0.25, 0.5, 1.0):
        n = int(n_box * f)
        ll = np.cbrt(n / density)
        p = rng.uniform(0, ll, (n, 3))
        t, _ = best_of(lambda p=p, ll=ll: count_rppi_box(p, box_size=ll, rp_edges=edges,
                                                         pi_max=pi_max), repeat)
        say(f"| {n:,} | {ll:.0f} | {t:.3f} | {t / n * 1e6:.3f} |")
    say()

    # ------------------------------------------------------------------ sparse boxes
    sparse_rows(rng, scale, repeat, say)

    # ------------------------------------------------------------------ cones
    worst = 0.0
    for geo in CONE_GEOMETRIES:
        worst = max(worst, cone_rows(rng, geo, scale, repeat, say))
    worst = max(worst, thin_rows(rng, scale, repeat, say))
    if Corrfunc:
        say(f"Largest ratio of conecheck's time to Corrfunc's over the cone rows: {worst:.2f} "
            "(target ≤ 1.0, goal 0.8).")
        say()

    load1 = os.getloadavg()[0]
    say(f"1-minute load average at the end: {load1:.2f}"
        + (f" (above {THREADS}: other work shared the cores)." if load1 > THREADS else "."))
    if not args.no_write:
        path = Path(__file__).with_name("RESULTS.md")
        body = "\n".join(["## Pair counting (`python benchmarks/bench_pairs.py`)", "",
                          *lines])
        block = f"{START}\n{body}\n{END}"
        old = path.read_text() if path.exists() else "# Benchmark results\n"
        if START in old and END in old:
            new = old[:old.index(START)] + block + old[old.index(END) + len(END):]
        else:
            new = old.rstrip("\n") + "\n\n" + block + "\n"
        write_text_atomic(path, new)
        print(f"\nwrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
