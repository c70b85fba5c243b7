"""The redshift-cut sweep: which redshift cut of each sample is safe to fit.

Every sample is validated, on the same cones as the main run (the configured survey), in a
list of redshift cuts: its primary and alternative cuts (reused from the main run), plus the
``[cut_sweep]`` z_max grid (each with the primary z_min) or explicit cuts. When none is
configured, the grid has ``n_grid`` values of z_max evenly spaced from the middle of the
primary cut to the shell's z_max, plus the sample's volume limit when the flux limit sets
one inside that range.

A cut's verdict is the worst of its statistics. It *passes* when every statistic passes.
The widest passing cut is the passing cut of largest comoving volume
(∝ χ(z_max)³ − χ(z_min)³); when none passes, the widest cut that does not fail is stated
instead (its statistics pass or cannot be decided by this run).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..compare import Comparison
from ..cone import volume_limit_zmax
from ..cone.settings import SampleCut
from ..config import RunConfig, SampleConfig
from ..run.inputs import cosmology_of
from .variants import ConeVariants, Piece, main_variant
from .verdicts import compare_variant

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class SweptCut:
    """One cut of the sweep and where it comes from (primary, alternative, sweep)."""

    cut: SampleCut
    source: str


def grid_label(z_min: float, z_max: float) -> str:
    """Label of a generated cut, e.g. ``z0p020-0p080`` (cut labels allow no dots)."""
    return f"z{z_min:.3f}-{z_max:.3f}".replace(".", "p")


def volume_limit(cfg: RunConfig, sample: SampleConfig) -> float | None:
    """The sample's volume-limit redshift under the flux limit (None without one)."""
    if cfg.shell.m_lim is None or sample.mag_max is None or not cfg.effects.flux_limit:
        return None
    z = float(volume_limit_zmax(cfg.shell.m_lim, sample.mag_max, cosmology_of(cfg),
                                cfg.shell))
    return z if np.isfinite(z) else None


def default_grid(cfg: RunConfig, sample: SampleConfig) -> list[float]:
    """z_max values tried when none are configured (see the module notes)."""
    lo = sample.z_min + 0.5 * (sample.z_max - sample.z_min)
    grid = [round(float(z), 4) for z in np.linspace(lo, cfg.shell.z_max,
                                                   cfg.cut_sweep.n_grid)]
    vlim = volume_limit(cfg, sample)
    if vlim is not None and lo < vlim < cfg.shell.z_max:
        grid.append(round(vlim, 4))
    return sorted(set(grid))


def plan_sweep(cfg: RunConfig) -> dict[str, list[SweptCut]]:
    """Every sample's cuts, sorted by (z_min, z_max); one cut per redshift range."""
    plan: dict[str, list[SweptCut]] = {}
    for s in cfg.samples:
        cuts = [SweptCut(c, "primary" if i == 0 else "alternative")
                for i, c in enumerate(s.cuts)]
        own = cfg.cut_sweep.samples.get(s.name)
        if own is not None:
            grid, extra = list(own.z_max), list(own.cuts)
        else:
            grid, extra = list(cfg.cut_sweep.z_max), []
        if own is None and not grid:
            grid = default_grid(cfg, s)
        new = [SampleCut(grid_label(s.z_min, z), s.mag_max, s.z_min, z) for z in grid]
        new += [SampleCut(c.label, s.mag_max, c.z_min, c.z_max) for c in extra]
        seen = {(round(c.cut.z_min, 6), round(c.cut.z_max, 6)) for c in cuts}
        for c in new:
            zr = (round(c.z_min, 6), round(c.z_max, 6))
            if zr not in seen:
                seen.add(zr)
                cuts.append(SweptCut(c, "sweep"))
        plan[s.name] = sorted(cuts, key=lambda c: (c.cut.z_min, c.cut.z_max))
    return plan


def _volume(cfg: RunConfig, cut: SampleCut) -> float:
    return float(cosmology_of(cfg).shell_volume_per_sr(cut.z_min, cut.z_max))


def _widest(cuts: dict[str, Any], ok: tuple[str, ...]) -> str | None:
    good = [(c["volume_per_sr"], label) for label, c in cuts.items() if c["verdict"] in ok]
    return max(good)[1] if good else None


def _without(cones: list[dict[str, Any]], skipped: dict[tuple[str, str], str]
             ) -> list[dict[str, Any]]:
    """The cones' records without the skipped (sample, cut) pieces."""
    out = []
    for cone in cones:
        keep = {k: {s: {c: v for c, v in cuts.items() if (s, c) not in skipped}
                    for s, cuts in cone[k].items()} for k in ("measurements", "nz")}
        out.append({**cone, **keep})
    return out


def run_sweep(variants: ConeVariants) -> dict[str, Any]:
    """The ``cuts`` section of results.json."""
    cfg = variants.cfg
    plan = plan_sweep(cfg)
    by_name = {s.name: s for s in cfg.samples}
    pieces: list[Piece] = [(by_name[n], c.cut) for n, cs in plan.items() for c in cs]
    log.info("cut sweep: %d cuts over %d samples (%d new)", len(pieces), len(plan),
             sum(c.source == "sweep" for cs in plan.values() for c in cs))
    cones = variants.measure(main_variant(cfg), pieces, stage="cut sweep",
                             skip_unmeasurable=True)
    # A cut some cone cannot measure (an automatic cut too thin for the jackknife regions,
    # say) is left out with its reason; the sweep goes on with the others.
    skipped: dict[tuple[str, str], str] = {}
    for i, cone in enumerate(cones):
        for sname, cuts in cone.get("skipped", {}).items():
            for label, reason in cuts.items():
                skipped.setdefault((sname, label), f"cone {i}: {reason}")
    for (sname, label), reason in skipped.items():
        log.warning("cut sweep: sample %s, cut %s skipped: %s", sname, label, reason)
    measured = [(s, c) for s, c in pieces if (s.name, c.label) not in skipped]
    if measured:
        tree = compare_variant(cfg, variants.box, _without(cones, skipped), measured,
                               what="cut sweep")
    else:
        tree = {"samples": {}, "overall": "warn"}
    samples: dict[str, Any] = {}
    for name, all_cuts in plan.items():
        cs = [c for c in all_cuts if (name, c.cut.label) not in skipped]
        entry = tree["samples"].get(name, {"cuts": {}})
        entry["skipped"] = {c.cut.label: skipped[(name, c.cut.label)] for c in all_cuts
                            if (name, c.cut.label) in skipped}
        for c in cs:
            rec = entry["cuts"][c.cut.label]
            stats = rec["statistics"]
            zs = [Comparison.from_dict(stats[k]).max_abs_z for k in stats]
            rec["source"] = c.source
            rec["volume_per_sr"] = _volume(cfg, c.cut)
            # an infinite or missing max |z| (null in results.json) makes the cut's null too
            rec["max_abs_z"] = (None if not zs or not all(math.isfinite(z) for z in zs)
                                else max(zs))
        entry["order"] = [c.cut.label for c in cs]
        entry["widest_passing"] = _widest(entry["cuts"], ("pass",))
        entry["widest_not_failing"] = _widest(entry["cuts"], ("pass", "warn"))
        entry["volume_limit_zmax"] = volume_limit(cfg, by_name[name])
        samples[name] = entry
    return {"samples": samples, "overall": tree["overall"],
            "rule": ("a cut passes when every statistic passes; widest = largest comoving "
                     "volume; when no cut passes, the widest cut that does not fail is "
                     "given instead")}


__all__ = ["SweptCut", "default_grid", "grid_label", "plan_sweep", "run_sweep",
           "volume_limit"]
