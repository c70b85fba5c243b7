"""Checks made before any computation, shared by `conecheck check` and `conecheck run`.

Everything that can be known from the configuration and the input files without building
a cone is checked here, so that `check` says "configuration OK" only for what `run` would
accept: the overlap map's values, the observers' positions, the number of periodic
replicas the shell needs, each sample's threshold against a file box, and an estimate of
the largest task's memory and of the run's size, refused above stated limits unless the
user forces it.
"""

from __future__ import annotations

import dataclasses
import math
import os

import numpy as np

from ..catalog import GalaxyBox
from ..cone.fibres import load_overlap_map
from ..cone.geometry import check_observer, replica_offsets
from ..config import RunConfig
from ..errors import InputError
from ..footprint import Footprint
from .inputs import cosmology_of

#: Cones above this many are refused without ``--force``: a validation needs tens, and a
#: mistyped exponent should not start a run that cannot end.
MAX_CONES = 10_000
#: Fraction of the machine's memory the largest task may be estimated to need.
MEMORY_FRACTION = 0.5
#: Bytes per row of a cone or random catalogue in memory (about 20 float64 columns).
BYTES_PER_CONE_ROW = 160
#: Bytes per VPF sphere and radius (centre, counts and inside test, float64).
BYTES_PER_SPHERE_RADIUS = 48


@dataclasses.dataclass(frozen=True)
class Preflight:
    """What the pre-computation checks found.

    Attributes
    ----------
    notes : list of str
        Estimates worth printing (memory of the largest task, cones, replicas).
    problems : list of str
        Every problem, each naming its config key; empty when the run may start.
    """

    notes: list[str]
    problems: list[str]


def machine_memory_bytes() -> int | None:
    """Physical memory of this machine [bytes], or None where the OS does not say."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        return None


def preflight(cfg: RunConfig, footprint: Footprint, box: GalaxyBox | None = None,
              box_size: float | None = None, force: bool = False) -> Preflight:
    """Run every check that needs no computation.

    Parameters
    ----------
    cfg : RunConfig
        The validated configuration.
    footprint : Footprint
        The survey footprint (its area sets the cone's size).
    box : GalaxyBox, optional
        A box read from a file; with it the samples' thresholds and the box density are
        checked.  Synthetic and halo boxes are made at run time and are not built here.
    box_size : float, optional
        Box side [Mpc/h] when no box is given (config value or the synthetic default).
    force : bool
        Turn the resource limits (cones, memory) into notes instead of problems.
    """
    notes: list[str] = []
    problems: list[str] = []
    limits: list[str] = []
    L = float(box.box_size) if box is not None else box_size
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
    if box is not None and box.abs_mag is not None:
        for s in cfg.samples:
            if s.mag_max is not None and not np.any(box.abs_mag < s.mag_max):
                problems.append(f"samples '{s.name}'.mag_max = {s.mag_max}: no box galaxy is "
                                f"brighter (the box's brightest is M = "
                                f"{float(box.abs_mag.min()):.2f}); check the threshold and "
                                f"the box's magnitude column")
    if cfg.cones.n_cones > MAX_CONES:
        limits.append(f"cones.n_cones = {cfg.cones.n_cones}: above the limit of {MAX_CONES} "
                      f"cones (a validation needs tens; check the value)")
    need = _largest_task_bytes(cfg, footprint, box, L)
    have = machine_memory_bytes()
    if need is not None:
        notes.append(f"largest task: about {_gib(need)} of memory"
                     + (f" of {_gib(have)} on this machine" if have else ""))
        if have and need > MEMORY_FRACTION * have:
            limits.append(f"the largest task needs about {_gib(need)}, more than "
                          f"{MEMORY_FRACTION:.0%} of this machine's {_gib(have)} "
                          f"(statistics.vpf.n_spheres, randoms.multiple and the shell's depth "
                          f"set it); lower them")
    if force:
        notes += [f"forced past a limit: {x}" for x in limits]
    else:
        problems += [f"{x} (or pass --force to run anyway)" for x in limits]
    return Preflight(notes, problems)


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


def _largest_task_bytes(cfg: RunConfig, footprint: Footprint, box: GalaxyBox | None,
                        L: float | None) -> float | None:
    """Estimated peak memory of the largest task [bytes]: randoms or VPF spheres of a cone."""
    total = 0.0
    vpf = cfg.statistics.get("vpf") if "vpf" in cfg.statistics.measure else None
    if vpf is not None:
        total += float(vpf.n_spheres) * len(vpf.radii) * BYTES_PER_SPHERE_RADIUS
    if box is not None and L is not None:
        volume = float(cosmology_of(cfg).shell_volume(cfg.shell.z_min, cfg.shell.z_max,
                                                      footprint.area_deg2))
        n_cone = len(box) / L**3 * volume
        total += n_cone * (1.0 + cfg.randoms.multiple) * BYTES_PER_CONE_ROW
    return total or None


def box_size_of(cfg: RunConfig, default: float) -> float | None:
    """Box side [Mpc/h] known from the config (``default`` for a synthetic box)."""
    b = cfg.box
    if b.box_size is not None:
        return float(b.box_size)
    return default if b.source == "synthetic" else None


__all__ = ["MAX_CONES", "Preflight", "box_size_of", "machine_memory_bytes", "preflight",
           "raise_problems"]
