"""Checks made before any computation, shared by `conecheck check` and `conecheck run`.

Everything that can be known from the configuration and the input files without building
a cone is checked here, so that `check` says "configuration OK" only for what `run` would
accept: the overlap map's values, the observers' positions, the number of periodic
replicas the shell needs, each sample's threshold against the box (counted in a built
box, expected from the HOD for halo and synthetic boxes), and estimates of the largest
task's memory and of the run's pair-counting work, refused above stated limits unless the
user forces it.
"""

from __future__ import annotations

import dataclasses
import math
import os

import numpy as np

from ..box import (
    HaloCatalog,
    HODModel,
    density_brighter_than,
    halo_threshold_densities,
    synthetic_threshold_densities,
)
from ..box.sensitivity import DEFAULT_STEPS
from ..catalog import GalaxyBox
from ..cone.fibres import load_overlap_map
from ..cone.geometry import check_observer, replica_offsets
from ..cone.randoms import largest_multiple
from ..config import SYNTHETIC_REDSHIFT, RunConfig
from ..cosmology import C_KMS
from ..errors import InputError
from ..footprint import Footprint
from ..stats import STATISTICS
from .inputs import cosmology_of

#: Cones above this many are refused without ``--force``: a validation needs tens, and a
#: mistyped exponent should not start a run that cannot end.
MAX_CONES = 10_000
#: Fraction of the machine's memory the largest task may be estimated to need.
MEMORY_FRACTION = 0.5
#: Bytes per row of a cone or random catalogue in memory (about 20 float64 columns).
BYTES_PER_CONE_ROW = 160
#: Pairs the engine examines per core-second: the cone DD and DR rows of
#: benchmarks/RESULTS.md (≈ 5·10⁷ pairs/s on 2 threads), so ≈ 2.5·10⁷ per core.
PAIRS_PER_CORE_SECOND = 2.5e7
#: Runs estimated above this many core-hours of pair counting are refused without
#: ``--force`` (a demo needs minutes; a production run on a cluster tens of core-hours).
MAX_CORE_HOURS = 2000.0


@dataclasses.dataclass(frozen=True)
class Preflight:
    """What the pre-computation checks found.

    Attributes
    ----------
    notes : list of str
        Estimates worth printing (memory of the largest task, cones, replicas).
    problems : list of str
        Every problem, each naming its config key; empty when the run may start.
    cautions : list of str
        Warnings: the run may start, but a result may mislead (logged as warnings).
    """

    notes: list[str]
    problems: list[str]
    cautions: list[str] = dataclasses.field(default_factory=list)


def machine_memory_bytes() -> int | None:
    """Physical memory of this machine [bytes], or None where the OS does not say."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        return None


def sample_densities(cfg: RunConfig, box: GalaxyBox | None = None,
                     model: HODModel | None = None,
                     halos: HaloCatalog | None = None) -> dict[str | None, float] | None:
    """Galaxy density of each sample [(h/Mpc)³], and of the whole box under key None.

    Counted in ``box`` when one is given; otherwise expected from the HOD ``model`` over
    ``halos`` (a halo file) or over the synthetic box's mass function; None without either.
    """
    if box is not None:
        # a box stacked from snapshots holds each snapshot's volume once: the mean density
        volume = float(box.box_size) ** 3 * box.n_snapshots
        mags = box.abs_mag
        out: dict[str | None, float] = {None: len(box) / volume}
        for s in cfg.samples:
            kept = len(box) if s.mag_max is None or mags is None else np.count_nonzero(
                np.asarray(mags) < s.mag_max)
            out[s.name] = kept / volume
        return out
    if model is None:
        return None
    if halos is not None:
        per_threshold = halo_threshold_densities(halos, model)
    else:
        b = cfg.box
        per_threshold = synthetic_threshold_densities(
            SYNTHETIC_REDSHIFT if b.redshift is None else b.redshift, cosmology_of(cfg),
            b.sigma8, b.n_s, b.omega_b, model)
    out = {None: density_brighter_than(model, per_threshold, None)}
    for s in cfg.samples:
        out[s.name] = density_brighter_than(model, per_threshold, s.mag_max)
    return out


def preflight(cfg: RunConfig, footprint: Footprint, box: GalaxyBox | None = None,
              box_size: float | None = None, force: bool = False,
              model: HODModel | None = None, halos: HaloCatalog | None = None) -> Preflight:
    """Run every check that needs no computation.

    Parameters
    ----------
    cfg : RunConfig
        The validated configuration.
    footprint : Footprint
        The survey footprint (its area sets the cone's size).
    box : GalaxyBox, optional
        The galaxy box (read from a file, or built by the run); its samples are counted.
    box_size : float, optional
        Box side [Mpc/h] when no box is given (config value or the synthetic default).
    force : bool
        Turn the resource limits (cones, memory, work) into notes instead of problems.
    model : HODModel, optional
        The HOD of a halo or synthetic box not built yet: the samples' densities are then
        expected from it (over ``halos`` when given, else the synthetic mass function).
    halos : HaloCatalog, optional
        The halo file's catalogue.
    """
    notes: list[str] = []
    problems: list[str] = []
    limits: list[str] = []
    L = float(box.box_size) if box is not None else (
        float(halos.box_size) if halos is not None else box_size)
    if cfg.effects.fibres and cfg.fibres.overlap_map:
        try:
            load_overlap_map(str(cfg.resolve_path(cfg.fibres.overlap_map)))
        except InputError as exc:
            problems.append(str(exc))
    obs = cfg.cones.observers
    if L is not None:
        for pos in (obs.positions if obs.placement == "given" else ()):
            try:
                check_observer(pos, L)
            except InputError as exc:
                problems.append(f"cones.{exc}")
        cosmo = cosmology_of(cfg)
        chi_min = float(cosmo.comoving_distance(cfg.shell.z_min))
        chi_max = float(cosmo.comoving_distance(cfg.shell.z_max))
        # Without the velocity margin (it needs the box's velocities): a lower bound.
        n_rep = _replicas_lower_bound(L, chi_min, chi_max, obs.max_replicas)
        if n_rep > obs.max_replicas:
            problems.append(
                f"survey.shell.z_max = {cfg.shell.z_max}: the shell reaches χ = {chi_max:.0f} "
                f"Mpc/h and needs at least {n_rep} periodic replicas of the {L:g} Mpc/h box, "
                f"above cones.observers.max_replicas = {obs.max_replicas}; lower the shell's "
                f"z_max or use a larger box")
        else:
            notes.append(f"replicas per cone: about {n_rep}")
    density = sample_densities(cfg, box, model, halos)
    if density is not None and L is not None:
        problems += _empty_samples(cfg, density, L, box, model)
        how = "in the box" if box is not None else "expected from the HOD"
        for s in cfg.samples:
            notes.append(f"sample '{s.name}': n = {density[s.name]:.3g} (h/Mpc)³, about "
                         f"{density[s.name] * L**3:.0f} galaxies {how}")
    if cfg.cones.n_cones > MAX_CONES:
        limits.append(f"cones.n_cones = {cfg.cones.n_cones}: above the limit of {MAX_CONES} "
                      f"cones (a validation needs tens; check the value)")
    need = _largest_task_bytes(cfg, footprint, density)
    have = machine_memory_bytes()
    if need is not None:
        notes.append(f"largest task: about {_gib(need)} of memory"
                     + (f" of {_gib(have)} on this machine" if have else ""))
        if have and need > MEMORY_FRACTION * have:
            limits.append(f"the largest task needs about {_gib(need)}, more than "
                          f"{MEMORY_FRACTION:.0%} of this machine's {_gib(have)} "
                          f"(statistics.vpf.n_spheres, randoms.multiple and the shell's depth "
                          f"set it); lower them")
    if density is not None and L is not None:
        hours = pair_work(cfg, footprint, density, L, matter_density(cfg, box, L)
                          ) / PAIRS_PER_CORE_SECOND / 3600.0
        workers = max(1, cfg.compute.workers or os.cpu_count() or 1)
        notes.append(f"pair counting: about {hours:.2g} core-hours, {hours / workers:.2g} h "
                     f"on {workers} worker(s) (order of magnitude; --ladder adds about one "
                     f"run per rung)")
        if hours > MAX_CORE_HOURS:
            limits.append(f"the run's pair counting is estimated at {hours:.3g} core-hours, "
                          f"above the limit of {MAX_CORE_HOURS:g} (cones.n_cones, "
                          f"randoms.multiple, the samples' depth and statistics.wp.rp_max / "
                          f"pi_max set it); check the values")
    if force:
        notes += [f"forced past a limit: {x}" for x in limits]
    else:
        problems += [f"{x} (or pass --force to run anyway)" for x in limits]
    cautions = faint_end_cautions(cfg, box) if box is not None else []
    return Preflight(notes, problems, cautions)


def raise_problems(result: Preflight) -> None:
    """Raise one InputError listing every problem of ``result`` (none: nothing)."""
    if result.problems:
        raise InputError("; ".join(result.problems), result.problems)


def _gib(n: float) -> str:
    return f"{n / 2**30:.3g} GiB"


def _replicas_lower_bound(L: float, chi_min: float, chi_max: float, limit: int) -> int:
    """Replicas the shell needs around a box-centre observer (a lower bound over observers).

    The exact enumeration grows as (χ_max/L)³; beyond the limit a volume count suffices
    to refuse (the shell's volume over a box's, itself a lower bound).
    """
    by_volume = (4.0 / 3.0) * math.pi * (chi_max**3 - chi_min**3) / L**3
    if by_volume > 8 * limit:
        return int(by_volume)
    return len(replica_offsets(np.full(3, 0.5 * L), L, chi_min, chi_max))


def _empty_samples(cfg: RunConfig, density: dict[str | None, float], L: float,
                   box: GalaxyBox | None, model: HODModel | None) -> list[str]:
    """A problem per sample with no galaxy in the box (counted, or expected below one)."""
    out = []
    for s in cfg.samples:
        n_box = density[s.name] * L**3
        if s.mag_max is None or n_box >= (0.5 if box is not None else 1.0):
            continue
        if box is not None:
            brightest = (f" (the box's brightest is M = {float(np.min(box.abs_mag)):.2f})"
                         if box.abs_mag is not None and len(box) else "")
            out.append(f"samples '{s.name}'.mag_max = {s.mag_max}: no box galaxy is "
                       f"brighter{brightest}; check the threshold and the box's magnitude "
                       f"column")
        elif model is not None:
            out.append(f"samples '{s.name}'.mag_max = {s.mag_max}: the HOD expects "
                       f"{n_box:.2g} galaxies brighter in the {L:g} Mpc/h box (its brightest "
                       f"threshold is {float(model.mag_limits[-1]):g}); check the threshold "
                       f"against box.hod")
    return out


def faint_end_cautions(cfg: RunConfig, box: GalaxyBox) -> list[str]:
    """A caution per sample whose threshold lies too near the box's faintest magnitude.

    With physical fluxes the analyst's magnitude scatters around the true one by about
    (5/ln 10) σ / (c z) at low redshift (σ: the line-of-sight velocity dispersion plus the
    redshift error), so a luminosity-threshold sample gains galaxies from just below its
    threshold as well as losing some. A box with no galaxy fainter than the threshold can
    only lose them, and its cones then show a number deficit no survey has. The margin
    asked for is two such scatters at the sample's lowest redshift.
    """
    fx = cfg.effects
    if (box.abs_mag is None or not len(box) or not fx.physical_fluxes
            or not (fx.rsd or fx.redshift_errors)):
        return []
    sigma2 = float(np.mean(box.velocity**2)) if fx.rsd else 0.0
    if fx.redshift_errors:
        e = cfg.redshift_errors
        sigma2 += (e.sigma_v_kms if e.model == "velocity" else C_KMS * e.sigma_z0) ** 2
    faintest = float(np.max(box.abs_mag))
    out = []
    for s in cfg.samples:
        if s.mag_max is None:
            continue
        z_lo = max(min(c.z_min for c in s.cuts), 1e-3)
        scatter = 5.0 / math.log(10.0) * math.sqrt(sigma2) / (C_KMS * z_lo)
        if faintest < s.mag_max + 2.0 * scatter:
            out.append(f"samples '{s.name}'.mag_max = {s.mag_max}: the box's faintest galaxy "
                       f"has M = {faintest:.2f}, but inferred magnitudes scatter by about "
                       f"{scatter:.2f} mag at z = {z_lo:g}; the cones can lose members across "
                       f"the threshold without gaining any, which biases their density low. "
                       f"Use a box complete to M = {s.mag_max + 2.0 * scatter:.2f}, or set "
                       f"survey.effects.physical_fluxes = false")
    return out


def _cut_volumes(cfg: RunConfig, footprint: Footprint) -> dict[str, list[float]]:
    """Comoving volume of each sample's cuts over the footprint [(Mpc/h)³]."""
    cosmo = cosmology_of(cfg)
    return {s.name: [float(cosmo.shell_volume(c.z_min, c.z_max, footprint.area_deg2))
                     for c in s.cuts] for s in cfg.samples}


def matter_density(cfg: RunConfig, box: GalaxyBox | None, L: float) -> float:
    """Matter particles per (Mpc/h)³ the run's lensing statistics will meet (0: none)."""
    if cfg.statistics.matter_reach is None:
        return 0.0
    if box is not None and box.matter is not None:
        return len(box.matter) / L**3
    return cfg.box.particle_density if not cfg.box.particles else 0.0


def pair_work(cfg: RunConfig, footprint: Footprint, density: dict[str | None, float],
              L: float, n_matter: float = 0.0) -> float:
    """Pairs the run's estimators examine, an order-of-magnitude count.

    Each galaxy (or random, or a statistic's own centre such as a VPF sphere) meets the
    ``n × V`` neighbours inside its search volume V, which each statistic states
    (:meth:`~conecheck.stats.Statistic.cost`; e.g. the wp cylinder (r_p,max, ±π_max) with
    (1 + randoms multiple)² for DD, DR and RR in every cone and three line-of-sight axes in
    the box), and ``n_matter × V`` matter particles [per (Mpc/h)³] inside its lensing
    search volume.  HOD boxes add two box runs per derivative.
    Clustering raises DD above this by 1 + ξ̄, a factor of order one at these scales.
    """
    stats = cfg.statistics
    multiple = largest_multiple(cfg.randoms)
    costs = [STATISTICS[n].cost(stats.get(n), multiple) for n in stats.measure]
    search = sum(c.cone_volume for c in costs)  # per cone galaxy [(Mpc/h)³]
    box_search = sum(c.box_volume for c in costs)
    centres = sum(c.centre_volume for c in costs)  # the statistics' own centres
    volumes = _cut_volumes(cfg, footprint)
    box_runs = 1 + (2 * len(DEFAULT_STEPS) if cfg.parameter_shifts.enabled
                    and cfg.box.source != "file" else 0)
    total = 0.0
    for s in cfg.samples:
        n = density[s.name]
        n_cone = sum(n * v for v in volumes[s.name])
        total += cfg.cones.n_cones * n_cone * (n * search
                                               + n_matter * sum(c.matter_volume for c in costs))
        total += box_runs * n * L**3 * (n * box_search
                                        + n_matter * sum(c.box_matter_volume for c in costs))
        total += (cfg.cones.n_cones + box_runs) * centres * len(volumes[s.name]) * n
    return total


def _largest_task_bytes(cfg: RunConfig, footprint: Footprint,
                        density: dict[str | None, float] | None) -> float | None:
    """Estimated peak memory of the largest task [bytes]: a cone's randoms and what its
    statistics hold (e.g. VPF spheres)."""
    multiple = largest_multiple(cfg.randoms)
    total = sum(STATISTICS[n].cost(cfg.statistics.get(n), multiple).task_bytes
                for n in cfg.statistics.measure)
    if density is not None:
        volume = float(cosmology_of(cfg).shell_volume(cfg.shell.z_min, cfg.shell.z_max,
                                                      footprint.area_deg2))
        n_cone = density[None] * volume
        total += n_cone * (1.0 + multiple) * BYTES_PER_CONE_ROW
    return total or None


def box_size_of(cfg: RunConfig, default: float) -> float | None:
    """Box side [Mpc/h] known from the config (``default`` for a synthetic box)."""
    b = cfg.box
    if b.box_size is not None:
        return float(b.box_size)
    return default if b.source == "synthetic" else None


__all__ = ["MAX_CONES", "MAX_CORE_HOURS", "Preflight", "box_size_of", "machine_memory_bytes",
           "pair_work", "preflight", "raise_problems", "sample_densities"]
