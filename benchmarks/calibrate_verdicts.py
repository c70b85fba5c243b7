"""Calibration and power of the verdicts over many seeds (one command; not run in CI).

    python benchmarks/calibrate_verdicts.py [--seeds 16] [--cones 8] [--out DIR] [--full-demo]
        [--statistics number_density,wp,cic,vpf] [--only TEXT] [--randoms-multiple auto]
        [--dr-method full|prefix]

Every seed is an independent synthetic box (the quick demo scale, one sample). Set-ups:

* null, geometry only, full sky (shell to z = 0.04): nothing in the cones that the box lacks;
* geometry only and RSD on both sides in the demo footprint: these carry one real survey
  effect, the integral constraint (each cone's wp is relative to its own mean density, in a
  small volume), so they are reported with the mean and the rms about the mean;
* planted, beyond the volume limit: the flux limit lowered to m < 15.8 so the cut
  0.02 < z < 0.055 loses faint galaxies at its far end (a number-density deficit);
* planted, luminosities inferred from z_obs (physical fluxes, RSD both sides): peculiar
  velocities scatter the analyst's magnitudes across the threshold (the nulls switch
  ``survey.effects.physical_fluxes`` off, since it is a survey effect the box lacks);
* planted, incompleteness untreated: the demo footprint's covered sky (mean completeness
  0.98) taken as complete (``threshold`` 0.55), so the cones' counts in cells are thinned
  and the box's are not;
* planted, cone-only redshift errors of 500 km/s (the counts in cylinders lose neighbours);
* planted, uncorrected fibre collisions of 600″ (wp loses small-scale pairs);
* planted, wp × (1 + 2 σ_tot/wp) in its first bin, injected at the comparison (no rebuild).

It prints, per set-up and statistic, the verdict counts, and for the nulls the rms of the
Gaussian-equivalent significance Δ/σ_Δ (1 when σ_Δ is calibrated) and the false-fail rate.
Unless ``--no-shifts``, it also prints per set-up the largest parameter shift |δθ/σ| of each
cut and how often it exceeds 0.5, 1 and 2 (on a null set-up, the false-fail rate of
``verdict.max_parameter_shift`` at those values).
With ``--full-demo`` it also runs the full demo once and injects a 5 % bias into the cones'
wp at r_p < 1 Mpc/h (and 0 % as the control), as the comparison sees it.

Runs are cached under ``--out`` (default ``reports/calibration``), so a second call only
re-does the comparison.
"""

from __future__ import annotations

import argparse
import copy
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import tomli_w
import tomllib

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from run_helpers import tiny_dict  # noqa: E402

from conecheck.config import config_from_dict  # noqa: E402
from conecheck.demo import demo_dict  # noqa: E402
from conecheck.run import validate as validate_mod  # noqa: E402

#: Marks the HOD file of the evolving-HOD snapshot, written by :func:`evolved_hod`.
EVOLVED_HOD = "<evolved HOD>"


def evolved_hod(out: Path) -> str:
    """The shipped HOD with every threshold's log M_min and log M_1 raised by 0.1 (fewer,
    more massive hosts at the higher redshift: an invented evolution), written to ``out``."""
    d = tomllib.loads((Path(__file__).resolve().parents[1] / "conecheck" / "data"
                       / "hod_default.toml").read_text())
    for t in d["threshold"]:
        t["log_mmin"] += 0.1
        t["log_m1"] += 0.1
    out.mkdir(parents=True, exist_ok=True)
    path = out / "evolved_hod.toml"
    path.write_text(tomli_w.dumps(d))
    return str(path)


NULL = {"survey.effects.redshift_errors": False, "survey.effects.fibres": False,
        "survey.effects.physical_fluxes": False}
SETUPS: dict[str, dict[str, Any]] = {
    "null, geometry only, full sky": {**NULL, "survey.effects.rsd": False, "box.rsd": False,
                                      "survey.effects.footprint": False,
                                      "survey.fibres.overlap_map": None,
                                      "survey.shell.z_max": 0.04},
    "null, geometry only": {**NULL, "survey.effects.rsd": False, "box.rsd": False},
    "null, RSD both sides": dict(NULL),
    "planted: beyond the volume limit": {**NULL, "survey.shell.m_lim": 15.8},
    "planted: luminosities inferred from z_obs": {**NULL,
                                                  "survey.effects.physical_fluxes": True},
    "planted: incompleteness untreated": {**NULL, "survey.completeness.treatment": "threshold",
                                          "survey.completeness.threshold": 0.55},
    "planted: 500 km/s redshift errors": {**NULL, "survey.effects.redshift_errors": True,
                                          "survey.redshift_errors.sigma_v_kms": 500.0},
    "null, two snapshots": {**NULL, "box.redshift": None,
                            "box.snapshots": [{"redshift": 0.03}, {"redshift": 0.07}]},
    "null, two snapshots, evolving HOD": {
        **NULL, "box.redshift": None,
        "box.snapshots": [{"redshift": 0.03}, {"redshift": 0.07, "hod": EVOLVED_HOD}]},
    "planted: fibre budget (4 % lost) uncorrected": {
        **NULL, "survey.tiles.centres": "regular", "survey.tiles.radius_deg": 1.5,
        "survey.tiles.fibres_per_tile": 40, "survey.correction.name": "none"},
    "planted: fibre budget (4 % lost), nearest-redshift correction": {
        **NULL, "survey.tiles.centres": "regular", "survey.tiles.radius_deg": 1.5,
        "survey.tiles.fibres_per_tile": 40},
    "planted: 600\" collisions uncorrected": {
        **NULL, "survey.effects.fibres": True, "survey.fibres.angle_arcsec": 600.0,
        "survey.fibres.overlap_map": None, "survey.fibres.overlap_fraction": 0.0,
        "survey.correction.name": "none"},
}


class Injector:
    """Multiplies the cones' wp in chosen bins by a factor, as the comparison receives it."""

    def __init__(self) -> None:
        self.real = validate_mod.compare_statistic
        self.factor = None  # callable(box Measurement) -> per-bin factor, or None

    def __call__(self, box, cones, *args, **kw):
        if self.factor is not None and box.name == "wp":
            f = self.factor(box)
            cones = [copy.copy(c) for c in cones]
            for c in cones:
                c.value = np.asarray(c.value) * f
                c.delete_one = np.asarray(c.delete_one) * f[None, :]
        return self.real(box, cones, *args, **kw)


def run(d: dict, out: Path) -> dict:
    res, _ = validate_mod.validate(config_from_dict(d, "calibration", out.parent), out,
                                   progress=False)
    return res


def stats_of(res: dict) -> dict[str, dict]:
    return {st: v for s in res["samples"].values() for c in s["cuts"].values()
            for st, v in c["statistics"].items()}


def summarise(name: str, runs: list[dict], null: bool) -> list[str]:
    lines = []
    names = list(stats_of(runs[0]))
    for st in names:
        recs = [stats_of(r)[st] for r in runs]
        v = [x["verdict"] for x in recs]
        counts = ", ".join(f"{v.count(k)} {k}" for k in ("pass", "warn", "fail"))
        line = f"| {name} | {st} | {counts}"
        g = np.array([[np.nan if y is None else y for y in x["significance"]] for x in recs])
        if null:
            rms = float(np.sqrt(np.nanmean(g ** 2)))
            about = float(np.sqrt(np.nanmean((g - np.nanmean(g, axis=0)) ** 2)))
            mean = np.nanmean(g, axis=0)
            line += (f" | rms Δ/σ_Δ (Gaussian-equivalent) {rms:.2f}; about the per-bin mean "
                     f"{about:.2f}; mean per bin {np.array2string(mean, precision=1)}")
        else:
            frac = np.array([[np.nan if y is None else y for y in x["fractional_offset"]]
                             for x in recs])
            z = np.array([[np.nan if y is None else y for y in x["z"]] for x in recs])
            i = int(np.nanargmax(np.nanmean(np.abs(z), axis=0)))
            line += (f" | bin {i}: offset {100 * np.nanmean(frac[:, i]):+.1f} %, "
                     f"{np.nanmean(np.abs(z[:, i])):.2f} σ_tot, "
                     f"{np.nanmean(np.abs(g[:, i])):.1f} σ_Δ")
        lines.append(line + " |")
    return lines


def shift_line(name: str, runs: list[dict]) -> str | None:
    """The parameter-shift forecast over seeds: per run and cut, the largest |δθ/σ| of any
    combination (joint fit; each parameter fitted alone where the joint one is degenerate),
    and how often it exceeds the values ``verdict.max_parameter_shift`` might take (on a
    null set-up: that rule's false-fail rate). None when no run has shifts."""
    worst = []
    for r in runs:
        for s in r["samples"].values():
            for c in s["cuts"].values():
                combos = (c.get("parameter_shifts") or {}).get("combinations") or {}
                vals = [v.get("max_abs_shift_in_sigma") for v in combos.values()]
                vals = [v for v in vals if v is not None and np.isfinite(v)]
                if not vals:  # degenerate joint fits: the one-parameter shifts
                    vals = [abs(x) for v in combos.values()
                            for x in v.get("conditional_shift_in_sigma") or []
                            if x is not None and np.isfinite(x)]
                if vals:
                    worst.append(max(vals))
    if not worst:
        return None
    w = np.array(worst)
    rates = ", ".join(f"> {t:g}: {np.count_nonzero(w > t)}/{w.size}" for t in (0.5, 1.0, 2.0))
    return (f"| {name} | parameter shifts | largest |δθ/σ| per cut: median {np.median(w):.2f}, "
            f"max {w.max():.2f} | {rates} |")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seeds", type=int, default=16)
    ap.add_argument("--cones", type=int, default=8)
    ap.add_argument("--out", type=Path, default=Path("reports") / "calibration")
    ap.add_argument("--full-demo", action="store_true")
    ap.add_argument("--only", default=None,
                    help="run only the set-ups whose name contains this text (no injection)")
    ap.add_argument("--statistics", default=None,
                    help="comma-separated statistics to measure (default: those of the "
                         "tests' tiny runs, number_density,wp,cic,vpf)")
    ap.add_argument("--no-shifts", action="store_true",
                    help="skip the HOD derivatives (they do not enter the verdicts)")
    ap.add_argument("--randoms-multiple", default=None,
                    help='randoms.multiple of every run ("auto" or a number; default: the '
                         "quick demo's 5)")
    ap.add_argument("--dr-method", default=None, choices=("full", "prefix"),
                    help="wp's dr_method of every run (default: the template's)")
    a = ap.parse_args(argv)
    extra: dict[str, Any] = {}
    if a.dr_method is not None:
        extra["statistics.wp.dr_method"] = a.dr_method
    if a.randoms_multiple is not None:
        extra["randoms.multiple"] = (a.randoms_multiple if a.randoms_multiple == "auto"
                                     else float(a.randoms_multiple))
    if a.statistics:
        extra["statistics.measure"] = a.statistics.split(",")
    if a.no_shifts:
        extra["parameter_shifts.enabled"] = False
    inj = Injector()
    validate_mod.compare_statistic = inj
    t0 = time.perf_counter()
    lines = ["| set-up | statistic | verdicts | calibration or planted offset |",
             "|---|---|---|---|"]
    for name, changes in SETUPS.items():
        if a.only is not None and a.only not in name:
            continue
        tag = "".join(ch if ch.isalnum() else "_" for ch in name)[:40]
        runs = []
        for seed in range(a.seeds):
            d = tiny_dict(seed=1000 + seed, **{"cones.n_cones": a.cones, **changes, **extra})
            for sn in d["box"].get("snapshots", []):
                if sn.get("hod") == EVOLVED_HOD:
                    sn["hod"] = evolved_hod(a.out)
            if "survey.shell.z_max" in changes:
                for smp in d["samples"]:
                    smp["z_max"] = min(smp["z_max"], changes["survey.shell.z_max"])
            runs.append(run(d, a.out / tag / f"seed{seed}"))
        new = summarise(name, runs, null=name.startswith("null"))
        shifts = shift_line(name, runs)
        new += [shifts] if shifts else []
        lines += new
        print("\n".join(new), flush=True)
    # wp bias in the first bin of 2 σ_tot, injected into the RSD null's cones
    runs = []
    with_wp = "wp" in extra.get("statistics.measure", ["wp"])
    for seed in range(a.seeds if a.only is None and with_wp else 0):
        d = tiny_dict(seed=1000 + seed, **{"cones.n_cones": a.cones,
                                           **SETUPS["null, RSD both sides"], **extra})
        out = a.out / "null__RSD_both_sides" / f"seed{seed}"
        ref = stats_of(run(d, out))["wp"]
        f = np.ones(len(ref["box"]))
        f[0] = 1 + 2 * ref["sigma_total"][0] / ref["box"][0]
        inj.factor = lambda box, f=f: f
        runs.append(run(d, out))
        inj.factor = None
    if runs:
        lines += [x for x in summarise("planted: wp bin 0 × (1 + 2 σ_tot/wp)", runs, False)
                  if "| wp |" in x]
        print(lines[-1], flush=True)
    if a.full_demo:
        d = demo_dict(quick=False)
        out = a.out / "full_demo"
        for pct in (0.0, 5.0):
            inj.factor = (lambda box, pct=pct: np.where(np.asarray(box.bins) < 1.0,
                                                        1 + pct / 100, 1.0))
            res = run(d, out)
            for sname, s in res["samples"].items():
                for cname, c in s["cuts"].items():
                    w = c["statistics"]["wp"]
                    lines.append(f"| full demo, wp × {1 + pct / 100:g} at r_p < 1 | "
                                 f"{sname}/{cname} | {w['verdict']} | "
                                 f"{'; '.join(w['reasons'])[:160]} |")
                    print(lines[-1], flush=True)
        inj.factor = None
    print(f"\n{a.seeds} seeds × {a.cones} cones; {time.perf_counter() - t0:.0f} s\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
