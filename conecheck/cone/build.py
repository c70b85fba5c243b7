"""Build light cones from a periodic galaxy box.

One cone, in order (docs/design.md §4): replicate the box around the observer and rotate
it → sky coordinates and cosmological redshift → footprint sampling → radial RSD →
redshift errors → fluxes and flux limit (the *target* list, :mod:`.photometry`) →
fibre-collision emulator → correction → the analyst's absolute magnitudes from the
assigned redshifts → cut to the shell in observed redshift.  Footprint sampling is applied
while scanning replicas (it does not depend on redshifts), so only galaxies inside the
footprint are ever kept in memory.  Galaxies are kept out to a margin beyond the shell
in true distance (``SurveyShell.margin_mpch``) so that RSD and errors can move them in;
the fibre emulator sees every target in that padded shell (targets just outside still
collide with those inside), and the final cut to z_min <= z_obs < z_max follows the
correction.  A galaxy blueshifted to z_obs <= 0 is dropped (no survey shell holds it).

Randomness is split into independent streams per stage (footprint, redshift errors,
fibres, corrections), so switching one effect off leaves the draws of every other
stage unchanged, and :func:`build_all_cones` derives every cone's streams from
``seeded_rng(seed, "cone-build", cone_index, stage)`` (:mod:`conecheck.streams`, the one
scheme of every draw): a cone's content depends only on the seed and its index, never on the
order in which cones are built.
"""

from __future__ import annotations

import logging
import time
import warnings
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from astropy.table import Table, vstack
from numpy.typing import ArrayLike, NDArray
from scipy.spatial.transform import Rotation

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError
from ..footprint.protocols import SkyFootprint
from ..sphere import radec_to_vec
from ..streams import seeded_rng
from .corrections import (
    CORRECTIONS,
    ZFLAG_COLLIDED,
    ZFLAG_OWN_FIBRE,
    ZFLAG_SECOND_PASS,
    correction_problem,
)
from .fibres import FibreResult, OverlapMap, assign_fibres, load_overlap_map, no_fibres
from .geometry import (
    BoxCells,
    SkyCoverage,
    as_rotation_matrix,
    check_observer,
    check_replication,
    iter_shell_chunks,
    observer_position,
    replica_offsets,
    rotation_matrix,
    sky_coordinates,
    sky_coverage,
)
from .photometry import apparent_magnitude, inferred_abs_mag, observed_frame_magnitude
from .redshift_space import add_redshift_errors, doppler_redshift, redshift_margin
from .selection import footprint_keep
from .settings import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    LuminosityFunction,
    ObserverSettings,
    RedshiftErrorSettings,
    SurveyShell,
    TargetSettings,
    TileSettings,
    fibres_limit_targets,
)
from .targets import BoxFillInputs, FillTargets, box_fill_inputs, fill_targets
from .tiles import Tiling, assign_budget, make_tiling

log = logging.getLogger(__name__)

#: The stages of a cone's construction that draw random numbers, each from its own stream
#: ``seeded_rng(seed, "cone-build", cone_index, stage)`` (:mod:`conecheck.streams`).
CONE_STAGES: tuple[str, ...] = ("observer", "rotation", "footprint", "redshift_errors",
                                "fibres", "corrections", "fill", "tiles")


@dataclass
class SurveyModel:
    """Everything a cone needs besides the box, the observer and the rotation.

    Attributes
    ----------
    cosmology : Cosmology
        Fiducial cosmology (true and analysis distances use the same one).
    shell : SurveyShell
        Outer redshift shell, flux limit, K-correction, margin.
    footprint : Footprint or None
        Sky mask with ``completeness(ra_deg, dec_deg)``, ``nside`` and ``area_deg2``;
        None (or ``effects.footprint = False``) means full sky with completeness 1.
    effects : EffectSwitches
    fibres : FibreSettings
    correction : CorrectionSettings
    redshift_errors : RedshiftErrorSettings
    observers : ObserverSettings
        Only its replication policy is used by :func:`build_cone`.
    overlap : OverlapMap or None
        Second-pass probability map; loaded from ``fibres.overlap_map`` when None.
    targets : TargetSettings
        Whether faint targets are added to the box's (``source = "fill"``).
    luminosity_function : LuminosityFunction
        Density of the full target population (for the fill).
    tiles : TileSettings
        Tiles and their fibre budget (none by default).
    """

    cosmology: Cosmology = field(default_factory=Cosmology)
    shell: SurveyShell = field(default_factory=SurveyShell)
    footprint: SkyFootprint | None = None
    effects: EffectSwitches = field(default_factory=EffectSwitches)
    fibres: FibreSettings = field(default_factory=FibreSettings)
    correction: CorrectionSettings = field(default_factory=CorrectionSettings)
    redshift_errors: RedshiftErrorSettings = field(default_factory=RedshiftErrorSettings)
    observers: ObserverSettings = field(default_factory=ObserverSettings)
    overlap: OverlapMap | None = None
    targets: TargetSettings = field(default_factory=TargetSettings)
    luminosity_function: LuminosityFunction = field(default_factory=LuminosityFunction)
    tiles: TileSettings = field(default_factory=TileSettings)
    _coverage: SkyCoverage | None = field(default=None, init=False, repr=False)
    _coverage_done: bool = field(default=False, init=False, repr=False)
    _tiling: Tiling | None = field(default=None, init=False, repr=False)

    def __post_init__(self) -> None:
        if (self.overlap is None and self.fibres.overlap_map is not None
                and self.effects.fibres):
            self.overlap = load_overlap_map(self.fibres.overlap_map, self.fibres.overlap_map_nest)

    @property
    def active_footprint(self) -> Any:
        """The footprint in use, or None for the full sky."""
        return self.footprint if self.effects.footprint else None

    def coverage(self) -> SkyCoverage | None:
        """Coarse footprint coverage used to skip replicas (computed once)."""
        if not self._coverage_done:
            fp = self.active_footprint
            if fp is not None:
                area = float(getattr(fp, "area_deg2", 1.0))
                if not area > 0:
                    raise InputError("footprint: effective area is zero (every pixel has "
                                     "completeness 0); check the mask and its vetoes")
            self._coverage = None if fp is None else sky_coverage(fp)
            self._coverage_done = True
        return self._coverage

    @property
    def fills_targets(self) -> bool:
        """True when the cones add the faint targets the box lacks."""
        return (self.targets.source == "fill" and self.effects.target_fill
                and self.effects.flux_limit and self.shell.m_lim is not None
                # fill targets act only on fibres: without collisions or a budget, skip them
                and fibres_limit_targets(self.effects, self.tiles))

    def tiling(self) -> Tiling | None:
        """The tiles of the fibre budget on the active footprint (built once), or None."""
        if not (self.tiles.enabled and self.effects.fibre_budget):
            return None
        if self._tiling is None:
            self._tiling = make_tiling(self.tiles, self.active_footprint)
        return self._tiling

    def settings_dict(self) -> dict[str, Any]:
        """The plain settings, for manifests."""
        return {"shell": asdict(self.shell), "effects": asdict(self.effects),
                "fibres": asdict(self.fibres), "correction": asdict(self.correction),
                "redshift_errors": asdict(self.redshift_errors),
                "observers": asdict(self.observers), "targets": asdict(self.targets),
                "luminosity_function": asdict(self.luminosity_function),
                "tiles": asdict(self.tiles),
                "cosmology": {"omega_m": self.cosmology.omega_m,
                              "omega_k": self.cosmology.omega_k, "h": self.cosmology.h}}


# ------------------------------------------------------------------ randomness
def cone_rngs(seed: int, cone_index: int) -> dict[str, np.random.Generator]:
    """One independent generator per stage of cone ``cone_index``, from the run seed."""
    return {name: seeded_rng(seed, "cone-build", cone_index, name) for name in CONE_STAGES}


def _stage_rngs(rng: np.random.Generator | Mapping[str, np.random.Generator]
                ) -> Mapping[str, np.random.Generator]:
    if isinstance(rng, Mapping):
        missing = {"footprint", "redshift_errors", "fibres", "corrections", "fill",
                   "tiles"} - set(rng)
        if missing:
            raise ValueError(f"rng mapping lacks streams {sorted(missing)}")
        return rng
    # one generator given: it seeds the stage streams (for a cone built outside a run)
    seed = int(rng.integers(0, 2**63 - 1))
    return {name: seeded_rng(seed, "cone-build", name) for name in CONE_STAGES}


def cone_geometry(observers: ObserverSettings, box_size: float, n_cones: int, seed: int,
                  cone_index: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Observer position [Mpc/h] and rotation matrix of cone ``cone_index``."""
    streams = cone_rngs(seed, cone_index)
    o = observer_position(observers, box_size, n_cones, cone_index, streams["observer"])
    return o, rotation_matrix(observers, cone_index, streams["rotation"])


#: Seed of the generator that picks the box galaxies whose neighbour distances the fill
#: keeps (with the snapshot index; see :func:`fill_inputs`).
FILL_NEIGHBOUR_SEED = 0x6E6E


@dataclass
class StackedCells:
    """The cells of a box stacked from several snapshots, one set per snapshot.

    Attributes
    ----------
    rows : list of ndarray
        Rows of the stacked box that belong to each snapshot.
    positions : list of ndarray
        Their positions [Mpc/h].
    cells : list of BoxCells
    """

    rows: list[NDArray[np.int64]]
    positions: list[NDArray[np.float64]]
    cells: list[BoxCells]


def prepare_box(box: GalaxyBox) -> BoxCells | StackedCells:
    """Sort the box into cells once (per snapshot for a stacked box); pass the result to
    every :func:`build_cone` call.

    The result is kept with the box object, so every cone task of a process (or of a dask
    worker, which holds the shared box once) reuses it, and with it the fill's inputs
    (:func:`fill_inputs`): at 10⁷ galaxies both take seconds.
    """
    cached = box.__dict__.get("_prepared_cells")
    if cached is not None:
        return cached
    if box.snapshot is None:
        cells: BoxCells | StackedCells = BoxCells.build(box.position, box.box_size)
    else:
        rows = [np.flatnonzero(box.snapshot == k) for k in range(box.n_snapshots)]
        positions = [box.position[r] for r in rows]
        cells = StackedCells(rows, positions,
                             [BoxCells.build(p, box.box_size) for p in positions])
    box.__dict__["_prepared_cells"] = cells
    return cells


def _snapshot_slices(box: GalaxyBox, cells: BoxCells | StackedCells, r_in: float,
                     r_out: float) -> Any:
    """(rows or None, positions, cells, χ_lo, χ_hi) of every snapshot reaching r_in–r_out
    [Mpc/h]: the whole box for a plain one, else each snapshot within its own range."""
    if not isinstance(cells, StackedCells):
        yield None, box.position, cells, r_in, r_out
        return
    edges = [0.0, *box.snapshot_chi_edges, np.inf]
    for k, (rows, pos, c) in enumerate(zip(cells.rows, cells.positions, cells.cells,
                                           strict=True)):
        lo, hi = max(r_in, edges[k]), min(r_out, edges[k + 1])
        if lo < hi:
            yield rows, pos, c, lo, hi


# ------------------------------------------------------------------ one cone
def shell_margin(box: GalaxyBox, survey: SurveyModel) -> float:
    """Distance margin [Mpc/h] kept beyond the shell in true distance."""
    if survey.shell.margin_mpch is not None:
        return float(survey.shell.margin_mpch)
    speed = float(np.sqrt(np.einsum("ij,ij->i", box.velocity, box.velocity)).max()) \
        if survey.effects.rsd and len(box) else 0.0
    errors = survey.redshift_errors if survey.effects.redshift_errors else None
    return redshift_margin(speed, survey.shell.z_max, errors, survey.cosmology) + 1e-6


def _check_flux_inputs(box: GalaxyBox, survey: SurveyModel) -> bool:
    flux = survey.effects.flux_limit and survey.shell.m_lim is not None
    if flux and box.abs_mag is None:
        raise InputError(f"shell.m_lim = {survey.shell.m_lim}: a flux limit needs an absolute "
                         "magnitude column 'abs_mag' in the box catalogue; map one in the "
                         "column mapping, or remove m_lim / set effects.flux_limit = false")
    return flux


def _observe(ra: NDArray[np.float64], dec: NDArray[np.float64], chi: NDArray[np.float64],
             vlos: NDArray[np.float64], comp: NDArray[np.float64],
             true_mag: NDArray[np.float64] | None, survey: SurveyModel, flux: bool,
             rng: np.random.Generator) -> dict[str, NDArray[Any]]:
    """The target-list columns of galaxies at true distance ``chi`` [Mpc/h] moving with
    ``vlos`` [km/s]: redshifts (cosmological, of the light, measured), fluxes and the
    analyst's magnitudes; ``_ok`` marks the targets (z_obs > 0 and, with a flux limit,
    m < m_lim)."""
    cosmo, shell, fx = survey.cosmology, survey.shell, survey.effects
    z_cos = cosmo.redshift_at(chi)
    z_light = doppler_redshift(z_cos, vlos) if fx.rsd else z_cos.copy()
    z_obs = z_light
    if fx.redshift_errors:
        z_obs = add_redshift_errors(z_light, z_cos, survey.redshift_errors, rng)
    # a blueshift below z = 0 cannot fall in any survey shell
    ok = z_obs > 0.0
    out: dict[str, NDArray[Any]] = {
        "ra": ra, "dec": dec, "z_cos": z_cos, "z_obs": z_obs, "z_obs_true": z_obs,
        "chi_true": chi, "chi_obs": cosmo.comoving_distance(np.where(ok, z_obs, 1e-8)),
        "v_los": vlos, "completeness": comp}
    if true_mag is not None:
        if fx.physical_fluxes:
            # the flux follows the true distance and the galaxy's own Doppler shift; the
            # measurement error of z_obs never changes who is a target
            app_mag = apparent_magnitude(true_mag, z_cos, z_light, cosmo, shell)
            out["abs_mag"] = inferred_abs_mag(app_mag, z_obs, cosmo, shell)
        else:
            app_mag = observed_frame_magnitude(true_mag, z_obs, cosmo, shell)
            out["abs_mag"] = true_mag
        out["abs_mag_true"] = true_mag
        out["app_mag"] = app_mag
        if flux:
            ok &= app_mag < shell.m_lim
    out["_ok"] = ok
    return out


def fill_inputs(box: GalaxyBox, cells: BoxCells | StackedCells) -> list[BoxFillInputs]:
    """What the fill takes from each snapshot of the box (:func:`.targets.box_fill_inputs`),
    computed on the first cone that fills and kept with the prepared cells.

    Sorting 10⁷ magnitudes and a periodic KD-tree of 10⁷ positions take seconds, once per
    box instead of once per cone. The neighbour-distance sample is a property of the box,
    so its generator is fixed (:data:`FILL_NEIGHBOUR_SEED`, the snapshot index): every
    worker and every resumed run gets the same one.
    """
    cached = getattr(cells, "_fill_inputs_cache", None)
    if cached is None:
        cached = []
        for k in range(box.n_snapshots):
            part = box.snapshot_part(k)
            assert part.abs_mag is not None  # a fill needs a flux limit, so magnitudes
            cached.append(box_fill_inputs(part.abs_mag, part.position, float(box.box_size),
                                          np.random.default_rng([FILL_NEIGHBOUR_SEED, k])))
        cells._fill_inputs_cache = cached
    return cached


def _fill_table(box: GalaxyBox, survey: SurveyModel, cols: Mapping[str, NDArray[Any]],
                cells: BoxCells | StackedCells, rng: np.random.Generator) -> Table:
    """The faint targets the box lacks in this cone (:mod:`.targets`), as target rows."""
    host_r = cols["chi"][:, None] * radec_to_vec(cols["ra"], cols["dec"])
    host_z = survey.cosmology.redshift_at(cols["chi"])
    hosts, rs, mags = [], [], []
    # each snapshot fills its own hosts, from its own magnitudes and neighbour distances
    for k, inputs in enumerate(fill_inputs(box, cells)):
        mine = (np.flatnonzero(box.snapshot[cols["idx"]] == k) if box.snapshot is not None
                else np.arange(len(host_z)))
        ft = fill_targets(host_r[mine], host_z[mine], inputs, survey.luminosity_function,
                          survey.shell, survey.cosmology, rng)
        hosts.append(mine[ft.host])
        rs.append(ft.r)
        mags.append(ft.abs_mag)
    ft = FillTargets(np.concatenate(hosts), np.concatenate(rs), np.concatenate(mags))
    fp = survey.active_footprint
    r = ft.r
    if fp is not None:
        # hosts lie inside the survey, so offsets carry fill targets out across its edges
        # and none in: a target placed off the survey goes to the mirror point about its
        # host instead, which keeps the fill's density up to the edges
        ra, dec, _ = sky_coordinates(r)
        off = np.asarray(fp.completeness(ra, dec)) <= 0
        r = r.copy()
        r[off] = 2.0 * host_r[ft.host[off]] - r[off]
    ra, dec, chi = sky_coordinates(r)
    comp = (np.asarray(fp.completeness(ra, dec), dtype=np.float64) if fp is not None
            else np.ones(len(ra)))
    on_sky = comp > 0  # off on both sides of its host: a target left outside the survey
    host = ft.host[on_sky]
    rows = _observe(ra[on_sky], dec[on_sky], chi[on_sky], cols["vlos"][host], comp[on_sky],
                    ft.abs_mag[on_sky], survey, True, rng)
    ok = rows.pop("_ok")
    # the columns are fresh arrays (v[ok] copies): the table takes them as they are
    table = Table({k: v[ok] for k, v in rows.items()}, copy=False)
    host = host[ok]
    hidx = cols["idx"][host]
    for name, value in (("is_central", lambda: np.zeros(len(host), dtype=bool)),
                        ("halo_id", lambda: box.halo_id[hidx]),
                        ("halo_mass", lambda: box.halo_mass[hidx]),
                        ("snapshot", lambda: box.snapshot[hidx])):
        if getattr(box, name) is not None:
            table[name] = value()
    table["box_index"] = hidx.astype(np.int64)  # the host's (fill_target tells them apart)
    table["replica"] = cols["rep"][host]
    table["weight"] = np.ones(len(table))
    table["fill_target"] = np.ones(len(table), dtype=bool)
    return table


def build_cone(box: GalaxyBox, survey: SurveyModel, observer: ArrayLike, rotation: Any,
               rng: np.random.Generator | Mapping[str, np.random.Generator],
               *, cells: BoxCells | StackedCells | None = None,
               keep_targets: bool = False) -> tuple[Table, dict[str, Any]]:
    """Turn ``box`` into one light cone seen from ``observer``.

    Parameters
    ----------
    box : GalaxyBox
        Periodic box: positions [Mpc/h], velocities [km/s], optional abs_mag.
    survey : SurveyModel
        Footprint, shell, effects, fibres, correction, redshift errors, cosmology.
    observer : array_like (3,)
        Observer position in box coordinates [Mpc/h], inside [0, L)³.
    rotation : (3, 3) array, scipy Rotation or None
        Box frame → sky frame; r = R (x + n L − o).
    rng : numpy Generator or mapping stage → Generator
        A Generator is split into independent per-stage streams; a mapping (see
        :func:`cone_rngs`) is used as is.
    cells : BoxCells or StackedCells, optional
        The box sorted into cells (:func:`prepare_box`); built here when omitted. A box
        stacked from several snapshots gives each galaxy at true distance χ from the
        snapshot whose range holds χ (:mod:`conecheck.box.snapshots`), and the cone a
        ``snapshot`` column.
    keep_targets : bool
        Also return the pre-correction target list as ``info["targets"]``.

    Returns
    -------
    table : astropy Table
        One row per galaxy in the shell: ra, dec [deg], z_cos, z_obs, z_obs_true,
        chi_true, chi_obs [Mpc/h], v_los [km/s], completeness, weight, zflag, box_index,
        replica, and abs_mag (inferred from app_mag and z_obs), abs_mag_true, app_mag,
        is_central, halo_id, halo_mass when known.
    info : dict
        n_replicas, n_replicas_used, n_repeated (box galaxies seen twice), margin_mpch,
        fibres (emulator statistics), correction, n_targets, n_galaxies, timing_s, …
    """
    t0 = time.perf_counter()
    timing: dict[str, float] = {}
    L = float(box.box_size)
    o = check_observer(observer, L)
    rot = as_rotation_matrix(rotation)
    streams = _stage_rngs(rng)
    cosmo, shell, fx = survey.cosmology, survey.shell, survey.effects
    flux = _check_flux_inputs(box, survey)
    problem = correction_problem(survey.correction.name, "correction.name")
    if problem:
        raise InputError(problem)
    chi_min = float(cosmo.comoving_distance(shell.z_min))
    chi_max = float(cosmo.comoving_distance(shell.z_max))
    margin = shell_margin(box, survey)
    r_in, r_out = max(chi_min - margin, 0.0), chi_max + margin
    replicas = replica_offsets(o, L, r_in, r_out)
    repeats_possible = check_replication(len(replicas), r_out, L, survey.observers)
    fp = survey.active_footprint
    coverage = survey.coverage()
    if cells is None:
        cells = prepare_box(box)
    timing["setup"] = time.perf_counter() - t0

    # -- replicas → sky coordinates → footprint (chunked, bounded memory)
    t1 = time.perf_counter()
    parts: dict[str, list[NDArray[Any]]] = {k: [] for k in
                                            ("idx", "rep", "ra", "dec", "chi", "comp", "vlos")}
    for rows, pos, cells_k, lo, hi in _snapshot_slices(box, cells, r_in, r_out):
        for chunk in iter_shell_chunks(pos, cells_k, L, o, rot, replicas, lo, hi, coverage):
            ra, dec, chi = sky_coordinates(chunk.r)
            if fp is not None:
                keep, comp = footprint_keep(ra, dec, fp, streams["footprint"])
            else:
                keep, comp = np.ones(len(ra), dtype=bool), np.ones(len(ra))
            if rows is not None:
                # each snapshot holds its own range of true distance, half-open at hand-overs
                keep &= (chi >= lo) & ((chi < hi) | (hi == r_out))
            if not keep.any():
                continue
            idx = chunk.box_index[keep] if rows is None else rows[chunk.box_index[keep]]
            r = chunk.r[keep]
            v_sky = box.velocity[idx] @ rot.T
            parts["idx"].append(idx)
            parts["rep"].append(chunk.replica[keep])
            parts["ra"].append(ra[keep])
            parts["dec"].append(dec[keep])
            parts["chi"].append(chi[keep])
            parts["comp"].append(comp[keep])
            parts["vlos"].append(np.einsum("ij,ij->i", v_sky, r) / np.maximum(chi[keep], 1e-300))
    if not parts["idx"]:
        raise InputError(
            f"footprint/shell: no galaxy of the box falls inside the footprint within "
            f"{shell.z_min} < z < {shell.z_max} (chi {chi_min:.1f}-{chi_max:.1f} Mpc/h) for "
            f"the observer at {o.tolist()}; check the footprint and shell.z_min/z_max")
    cols = {k: np.concatenate(v) for k, v in parts.items()}
    del parts
    timing["replicate"] = time.perf_counter() - t1

    # -- redshifts, fluxes and the target list
    t1 = time.perf_counter()
    box_rows = _observe(cols["ra"], cols["dec"], cols["chi"], cols["vlos"], cols["comp"],
                        None if box.abs_mag is None else box.abs_mag[cols["idx"]],
                        survey, flux, streams["redshift_errors"])
    ok = box_rows.pop("_ok")
    n_in_footprint = len(ok)
    targets = Table({k: v[ok] for k, v in box_rows.items()}, copy=False)  # fresh arrays
    idx = cols["idx"][ok]
    for name in ("is_central", "halo_id", "halo_mass", "snapshot"):
        val = getattr(box, name)
        if val is not None:
            targets[name] = val[idx]
    targets["box_index"] = idx.astype(np.int64)
    targets["replica"] = cols["rep"][ok]
    targets["weight"] = np.ones(len(targets))
    n_fill = 0
    if survey.fills_targets:
        fill = _fill_table(box, survey, cols, cells, streams["fill"])
        n_fill = len(fill)
        targets["fill_target"] = np.zeros(len(targets), dtype=bool)
        targets = vstack([targets, fill], join_type="exact") if n_fill else targets
    del cols
    timing["redshifts"] = time.perf_counter() - t1

    # -- fibres (collisions, then the tiles' budget) and correction on the target list
    t1 = time.perf_counter()
    if fx.fibres:
        fres = assign_fibres(targets["ra"], targets["dec"], survey.fibres, streams["fibres"],
                             survey.overlap)
    else:
        fres = no_fibres(len(targets))
    tiling = survey.tiling()
    if tiling is not None:
        assigned, budget = assign_budget(targets["ra"], targets["dec"], fres.fibred,
                                         fres.second_pass, tiling, streams["tiles"])
        fres = FibreResult(assigned, fres.second_pass & assigned,
                           {**fres.stats, "budget": budget,
                            "no_fibre_fraction": float(np.mean(~assigned)) if len(assigned)
                            else 0.0})
    zflag = np.full(len(targets), ZFLAG_OWN_FIBRE, dtype=np.int16)
    zflag[fres.second_pass] = ZFLAG_SECOND_PASS
    zflag[~fres.fibred] = ZFLAG_COLLIDED
    targets["zflag"] = zflag
    timing["fibres"] = time.perf_counter() - t1
    t1 = time.perf_counter()
    corrected = CORRECTIONS[survey.correction.name](targets, fres.fibred,
                                                    streams["corrections"], cosmo)
    if fx.physical_fluxes and "app_mag" in corrected.colnames:
        # the analyst infers M from whatever redshift the correction assigned
        corrected["abs_mag"] = inferred_abs_mag(corrected["app_mag"], corrected["z_obs"],
                                                cosmo, shell)
    zc = np.asarray(corrected["z_obs"])
    keep = (zc >= shell.z_min) & (zc < shell.z_max)
    if "fill_target" in corrected.colnames:
        # fill targets collide, crowd tiles and lend redshifts; they are never in a sample
        keep &= ~np.asarray(corrected["fill_target"])
    cone = corrected[keep]
    if "fill_target" in cone.colnames:
        cone.remove_column("fill_target")
    timing["correction"] = time.perf_counter() - t1
    if len(cone) == 0:
        raise InputError(f"shell: the cone is empty after the flux limit and the cut "
                         f"{shell.z_min} <= z_obs < {shell.z_max}; check shell.m_lim, "
                         "shell.z_min/z_max and the footprint")

    _, counts = np.unique(np.asarray(cone["box_index"]), return_counts=True)
    n_repeated = int((counts > 1).sum())
    if n_repeated:
        log.debug("cone holds %d box galaxies more than once (periodic replicas)", n_repeated)
    with warnings.catch_warnings():  # gimbal lock (e.g. no rotation) is harmless here
        warnings.simplefilter("ignore", UserWarning)
        euler = Rotation.from_matrix(rot).as_euler("ZYZ", degrees=True).tolist()
    z_t = np.asarray(targets["z_obs"])
    in_shell = (z_t >= shell.z_min) & (z_t < shell.z_max)
    info: dict[str, Any] = {
        "observer_mpch": o.tolist(),
        "rotation_matrix": rot.tolist(),
        "euler_zyz_deg": euler,
        "chi_min": chi_min, "chi_max": chi_max, "margin_mpch": margin,
        "n_replicas": int(len(replicas)),
        "n_replicas_used": int(np.unique(np.asarray(cone["replica"])).size),
        "repeats_possible": bool(repeats_possible),
        "n_repeated": n_repeated,
        "n_in_footprint": int(n_in_footprint),
        "n_targets": int(len(targets)),
        # targets in the shell by their own redshift: what a target density is quoted for
        "n_targets_in_shell": int(np.count_nonzero(in_shell)),
        "n_fill_targets": n_fill,
        "n_fill_in_shell": int(np.count_nonzero(in_shell[len(targets) - n_fill:])),
        "n_galaxies": int(len(cone)),
        "sum_weight": float(np.sum(cone["weight"])),
        "fibres": fres.stats,
        "correction": survey.correction.name,
        "effects": asdict(fx),
        "timing_s": {**timing, "total": time.perf_counter() - t0},
    }
    if keep_targets:
        targets["fibred"] = fres.fibred
        info["targets"] = targets
    cone.meta.update({"NREPL": int(len(replicas)), "COLLFRAC": float(
        fres.stats.get("collided_fraction", 0.0)), "CORRECT": survey.correction.name})
    return cone, info


def build_all_cones(box: GalaxyBox, footprint: SkyFootprint | None, shell: SurveyShell,
                    observers: ObserverSettings, effects: EffectSwitches, fibres: FibreSettings,
                    correction: CorrectionSettings, redshift_errors: RedshiftErrorSettings,
                    cosmology: Cosmology, n_cones: int, seed: int,
                    keep_targets: bool = False) -> list[tuple[Table, dict[str, Any]]]:
    """Build ``n_cones`` cones from one box (the function ``conecheck cones`` calls).

    Cone i's observer, rotation and every stage's draws come from
    ``seeded_rng(seed, "cone-build", i, stage)`` (:func:`cone_rngs`), so any subset of cones
    can be rebuilt alone, in any order, with identical results.

    Returns
    -------
    list of (Table, dict)
        Each cone and its info (with ``cone_index`` and ``seed`` added).
    """
    if not isinstance(n_cones, int) or n_cones < 1:
        raise InputError(f"n_cones = {n_cones!r}: expected an integer >= 1")
    survey = SurveyModel(cosmology=cosmology, shell=shell, footprint=footprint, effects=effects,
                         fibres=fibres, correction=correction, redshift_errors=redshift_errors,
                         observers=observers)
    cells = prepare_box(box)
    out = []
    for i in range(n_cones):
        o, rot = cone_geometry(observers, box.box_size, n_cones, seed, i)
        table, info = build_cone(box, survey, o, rot, cone_rngs(seed, i), cells=cells,
                                 keep_targets=keep_targets)
        info["cone_index"] = i
        info["seed"] = int(seed)
        table.meta["CONEIDX"] = i
        out.append((table, info))
        log.info("cone %d/%d: %d galaxies, %d replicas, collided fraction %.3f", i + 1,
                 n_cones, info["n_galaxies"], info["n_replicas"],
                 info["fibres"].get("collided_fraction", 0.0))
    return out
