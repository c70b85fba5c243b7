"""Turn a validated :class:`~conecheck.config.RunConfig` into the run's inputs.

The box catalogue (with the halos and HOD it was populated from), the footprint, the
jackknife sky regions and the digests of the input files are built here once per run;
everything downstream receives them as arguments (the cone builder's survey model is made
from a task's spec, :func:`conecheck.run.tasks.survey_model`).
"""

from __future__ import annotations

import dataclasses
import logging
from pathlib import Path
from typing import Any

import healpy as hp
import numpy as np

from ..box import default_hod_model, load_hod, populate, read_halo_catalog
from ..box.halos import HaloCatalog
from ..box.hod import HODModel
from ..box.snapshots import snapshot_chi_edges, stack_snapshots
from ..box.synthetic import populate_synthetic, synthetic_halos_for
from ..catalog import GalaxyBox, file_sha256, read_galaxy_box, read_matter_particles
from ..config import SYNTHETIC_BOX_SIZE, SYNTHETIC_REDSHIFT, RunConfig, snapshot_box
from ..cosmology import Cosmology
from ..errors import InputError
from ..footprint import Footprint, jackknife_regions
from ..footprint.jackknife import SkyRegions
from ..streams import seeded_rng
from .specs import InputFile

log = logging.getLogger(__name__)

#: N_side of the full-sky footprint used when the footprint effect is switched off.
FULL_SKY_NSIDE = 32


def cosmology_of(cfg: RunConfig) -> Cosmology:
    """The fiducial cosmology of the run."""
    return cfg.cosmology.model()


def _existing(cfg: RunConfig, value: str | None, key: str) -> Path | None:
    path = cfg.resolve_path(value)
    if path is not None and path.is_dir():
        raise InputError(f"{cfg.source}: {key} = {value!r}: {path} is a directory; expected "
                         f"a file")
    if path is not None and not path.is_file():
        raise InputError(f"{cfg.source}: {key} = {value!r}: file {path} not found")
    return path


def input_files(cfg: RunConfig) -> dict[str, Path]:
    """Every file the configuration names, checked to exist (key path → absolute path)."""
    files: dict[str, Path | None] = {
        "survey.mask": _existing(cfg, cfg.survey.mask, "survey.mask"),
        "box.path": _existing(cfg, cfg.box.path, "box.path"),
        "box.hod": _existing(cfg, cfg.box.hod, "box.hod"),
        "box.particles": _existing(cfg, cfg.box.particles, "box.particles"),
        "survey.fibres.overlap_map": _existing(cfg, cfg.fibres.overlap_map,
                                               "survey.fibres.overlap_map"),
        "survey.tiles.centres": (_existing(cfg, cfg.tiles.centres, "survey.tiles.centres")
                                 if cfg.tiles.enabled and cfg.tiles.centres != "regular"
                                 else None),
    }
    for i, v in enumerate(cfg.survey.vetoes):
        files[f"survey.vetoes[{i}]"] = _existing(cfg, v, f"survey.vetoes[{i}]")
    for i, sn in enumerate(cfg.box.snapshots):
        for key in ("path", "hod"):
            files[f"box.snapshots[{i}].{key}"] = _existing(cfg, getattr(sn, key),
                                                           f"box.snapshots[{i}].{key}")
    return {k: v for k, v in files.items() if v is not None}


def overlap_input(cfg: RunConfig) -> InputFile | None:
    """The fibre overlap map the cone builders open, with the digest of its content."""
    path = input_files(cfg).get("survey.fibres.overlap_map")
    return None if path is None else InputFile(str(path), file_sha256(path))


def tiles_input(cfg: RunConfig) -> InputFile | None:
    """The tile-centre file the cone builders read, with the digest of its content."""
    path = input_files(cfg).get("survey.tiles.centres")
    return None if path is None else InputFile(str(path), file_sha256(path))


def input_hashes(cfg: RunConfig) -> dict[str, str]:
    """SHA-256 of every input file's content, keyed by absolute path."""
    return {str(p): file_sha256(p) for p in input_files(cfg).values()}


def needs_magnitudes(cfg: RunConfig) -> bool:
    """True when a sample threshold or the flux limit needs an abs_mag column."""
    flux = cfg.effects.flux_limit and cfg.shell.m_lim is not None
    return flux or any(s.mag_max is not None for s in cfg.samples)


def hod_model_of(cfg: RunConfig) -> HODModel:
    """The HOD of a ``halos`` or ``synthetic`` box (``box.hod``, else the shipped one)."""
    hod_path = _existing(cfg, cfg.box.hod, "box.hod")
    return load_hod(hod_path) if hod_path else default_hod_model()


def box_halos(cfg: RunConfig) -> tuple[HaloCatalog, HODModel, np.random.Generator]:
    """Halos, HOD and the generator that populates them, for a ``halos``/``synthetic`` box.

    The generator has drawn exactly what the halos needed, so ``populate(halos, model, rng)``
    reproduces the run's box; callers that vary the HOD use their own generators.
    """
    b = cfg.box
    if b.source == "file":
        raise InputError("box.source = 'file': a galaxy catalogue carries no halos or HOD")
    model = hod_model_of(cfg)
    rng = seeded_rng(cfg.seed, "box")
    if b.source == "halos":
        halos = read_halo_catalog(_existing(cfg, b.path, "box.path"), b.columns or None,
                                  b.box_size, b.redshift, hdf5_path=b.hdf5_path,
                                  hubble_h=cfg.cosmology.h)
    else:
        # the synthetic box draws its own matter when a lensing statistic needs it and no
        # particle file is given, from a generator of its own (the halos stay the same)
        own_matter = cfg.statistics.matter_reach is not None and not b.particles
        halos = synthetic_halos_for(b.box_size or SYNTHETIC_BOX_SIZE,
                                    SYNTHETIC_REDSHIFT if b.redshift is None else b.redshift,
                                    cosmology_of(cfg), b.sigma8, b.n_s, b.omega_b, model, rng,
                                    grid=b.grid,
                                    matter_density=b.particle_density if own_matter else 0.0,
                                    matter_rng=seeded_rng(cfg.seed, "box-matter"))
    return halos, model, rng


def load_box_and_halos(cfg: RunConfig) -> tuple[GalaxyBox, HaloCatalog | None,
                                                  HODModel | None]:
    """The real-space galaxy box the run starts from, with the halos and HOD it was
    populated from (None, None for a galaxy file).

    With ``box.snapshots`` every snapshot is loaded as a box of its own and they are
    stacked (:func:`~conecheck.box.snapshots.stack_snapshots`); the halos and HOD are then
    None, since the HOD derivatives of the parameter shifts need one population.
    """
    b = cfg.box
    cosmo = cosmology_of(cfg)
    if b.snapshots:
        if len(b.snapshots) == 1:
            return load_box_and_halos(dataclasses.replace(cfg, box=snapshot_box(b, 0)))
        parts = [_snapshot_box(cfg, k) for k in range(len(b.snapshots))]
        redshifts = [sn.redshift for sn in b.snapshots]
        edges = snapshot_chi_edges(redshifts, [sn.z_max for sn in b.snapshots], cosmo)
        log.info("box: %d snapshots at z = %s, handing over at chi = %s Mpc/h", len(parts),
                 ", ".join(f"{z:g}" for z in redshifts), ", ".join(f"{e:.1f}" for e in edges))
        return stack_snapshots(parts, redshifts, edges), None, None
    halos = model = None
    if b.source == "file":
        box = read_galaxy_box(_existing(cfg, b.path, "box.path"), b.columns or None,
                              b.box_size, b.redshift, require_magnitudes=needs_magnitudes(cfg),
                              hdf5_path=b.hdf5_path, hubble_h=cfg.cosmology.h)
    else:
        halos, model, rng = box_halos(cfg)
        fill = populate_synthetic if b.source == "synthetic" else populate
        box = fill(halos, model, rng, cosmo)
    if b.particles and cfg.statistics.matter_reach is not None:
        box.matter = read_matter_particles(_existing(cfg, b.particles, "box.particles"),
                                           b.particle_mass, box.box_size,
                                           b.particle_columns or None, None,
                                           cfg.cosmology.h)
    elif cfg.statistics.matter_reach is None:
        box.matter = None  # nothing measured needs it: keep it out of every task and key
    if halos is not None:
        halos.matter = box.matter  # the HOD derivatives repopulate the halos
    if needs_magnitudes(cfg) and box.abs_mag is None:
        raise InputError("box: the samples' magnitude thresholds or the flux limit need an "
                         "absolute magnitude column; map one as box.columns.abs_mag")
    log.info("box: %d galaxies, L = %.1f Mpc/h, z = %.3f (%s)", len(box), box.box_size,
             box.redshift, b.source)
    return box, halos, model


def _snapshot_box(cfg: RunConfig, k: int) -> GalaxyBox:
    """Snapshot ``k`` of ``box.snapshots`` as a box, its problems named by its key.

    The snapshots of a synthetic box are those of one simulation: they share its halos
    (drawn once, at the first snapshot's redshift, so the structure is continuous across a
    hand-over) and each populates them with its own HOD from the same generator state.
    """
    b = cfg.box
    sub = dataclasses.replace(cfg, box=snapshot_box(b, k))
    where = f"box.snapshots[{k}]" + (f" ({b.snapshots[k].path})" if b.snapshots[k].path
                                     else "")
    try:
        if b.source != "synthetic":
            return load_box_and_halos(sub)[0]
        halos, _, rng = box_halos(dataclasses.replace(cfg, box=snapshot_box(b, 0)))
        box = populate_synthetic(halos, hod_model_of(sub), rng, cosmology_of(cfg))
        box.redshift = float(b.snapshots[k].redshift)
        box.matter = None  # lensing statistics are refused with several snapshots
        return box
    except InputError as exc:
        raise InputError(f"{where}: {exc}", [f"{where}: {p}" for p in exc.problems]) from None


def load_box(cfg: RunConfig) -> GalaxyBox:
    """The real-space galaxy box (positions, velocities, magnitudes) the run starts from."""
    return load_box_and_halos(cfg)[0]


#: Header keywords of a box file that may state the simulation's cosmology (Ω_m, h).
_HEADER_OMEGA_M = ("OMEGA_M", "OMEGAM", "OM0", "OMEGA0")
_HEADER_H = ("HUBBLE", "H", "LITTLEH", "HUBBLE_H")


def header_disagreements(cfg: RunConfig, meta: dict[str, Any]) -> list[str]:
    """Where a box file's header disagrees with the configuration (box size, redshift, Ω_m, h).

    The configuration's values win in a run; a disagreement usually means the wrong file or
    a stale setting, so ``check`` says so.
    """
    head = {str(k).upper(): v for k, v in meta.items()}
    out = []

    def differ(a: Any, b: float, rel: float) -> bool:
        try:
            return abs(float(a) - b) > rel * max(abs(b), 1e-12)
        except (TypeError, ValueError):
            return False

    b = cfg.box
    if b.box_size is not None and "BOXSIZE" in head and differ(head["BOXSIZE"], b.box_size, 1e-6):
        out.append(f"box.box_size = {b.box_size:g} Mpc/h but the file's header says BOXSIZE = "
                   f"{head['BOXSIZE']}")
    if b.redshift is not None and "REDSHIFT" in head and differ(head["REDSHIFT"], b.redshift,
                                                                 1e-3):
        out.append(f"box.redshift = {b.redshift:g} but the file's header says REDSHIFT = "
                   f"{head['REDSHIFT']}")
    for keys, value, name in ((_HEADER_OMEGA_M, cfg.cosmology.omega_m, "cosmology.omega_m"),
                              (_HEADER_H, cfg.cosmology.h, "cosmology.h")):
        key = next((k for k in keys if k in head), None)
        if key is not None and differ(head[key], value, 1e-3):
            out.append(f"{name} = {value:g} but the file's header says {key} = {head[key]}")
    return out


def load_footprint(cfg: RunConfig) -> Footprint:
    """The survey footprint in RING ordering, or the full sky when the footprint effect is off."""
    if not cfg.effects.footprint:
        return Footprint.full_sky(FULL_SKY_NSIDE)
    mask = _existing(cfg, cfg.survey.mask, "survey.mask")
    vetoes = [_existing(cfg, v, f"survey.vetoes[{i}]") for i, v in enumerate(cfg.survey.vetoes)]
    # One canonical ordering: random positions, sphere centres and the k-means of the sky
    # regions run over the pixels in storage order, so the same footprint saved NESTED
    # instead of RING would otherwise give different numbers.
    return Footprint.from_fits(mask, vetoes).reordered(nest=False)


def cap_footprint(footprint: Footprint, completeness: float = 1.0) -> Footprint:
    """A round cap of ``footprint``'s effective area around its centre, at a uniform
    ``completeness``.

    The survey's solid angle without its edges, holes and completeness variations: the sky
    of the effect ladder's rungs before the footprint step. Centre: the completeness-
    weighted mean direction of the footprint's pixels; opening angle θ from
    Ω = 2π (1 − cos θ) = Ω_eff / completeness (area of a spherical cap), at the footprint's
    N_side, so its effective area is the footprint's.
    """
    vec = footprint.occupied_vectors()
    w = footprint.values[footprint.occupied]
    centre = (vec * w[:, None]).sum(axis=0)
    norm = float(np.linalg.norm(centre))
    if norm < 1e-6:  # a footprint spread evenly over the sky: no meaningful centre
        centre, norm = np.array([0.0, 0.0, 1.0]), 1.0
    centre = centre / norm
    cos_theta = max(1.0 - footprint.area_sr / completeness / (2.0 * np.pi), -1.0)
    values = np.zeros(hp.nside2npix(footprint.nside))
    values[hp.query_disc(footprint.nside, centre, float(np.arccos(cos_theta)),
                         nest=footprint.nest)] = completeness
    ra, dec = hp.vec2ang(centre, lonlat=True)
    return Footprint(values, nest=footprint.nest,
                     source=(f"cap of {footprint.area_deg2:.1f} deg2 around RA {ra[0]:.2f}, "
                             f"Dec {dec[0]:.2f} (from {footprint.source})"))


def sky_regions(cfg: RunConfig, footprint: Footprint) -> SkyRegions:
    """K near-equal-area jackknife regions of the footprint (seeded by the run seed)."""
    return jackknife_regions(footprint, cfg.jackknife.sky_regions, seed=cfg.seed)
