"""HOD occupation models: Zheng et al. 2007 thresholds, decorated with assembly bias.

Occupation per luminosity threshold (Zheng et al. 2007, ApJ 667, 760, eqs. 2–3)::

    <N_cen>(M) = ½ [1 + erf((log10 M − log10 M_min) / σ_logM)]
    <N_sat>(M) = ((M − M_0) / M_1)^α   for M > M_0, else 0

Convention: as in Zheng et al. 2007, <N_sat> is **not** multiplied by <N_cen> (so a halo may
host satellites without a central above the threshold).  Setting
``satellites_need_central = true`` multiplies it by <N_cen>, the variant used by several later
papers.  Centrals are Bernoulli and satellites Poisson draws (see :mod:`.populate`).

A model holds one parameter set per luminosity threshold M_r − 5 log10 h < ``mag_max``; the
sets must be *nested*: at every mass a brighter threshold has no more centrals and no more
satellites than a fainter one (checked on a mass grid, see :meth:`HODModel.check_nested`).

Assembly bias ("decorated HOD", Hearin et al. 2016, MNRAS 460, 2552, §2): at fixed mass the
halos are split at the median of a secondary property (medians in narrow log-mass bins);
the fraction P above the split ("type 1") get <N> + δN₁ and the rest <N> + δN₂ with
δN₂ = −δN₁ P/(1−P), so the mean at fixed mass is unchanged.  δN₁ = A · δN_max with
A = ``a_cen`` or ``a_sat`` in [−1, 1] and the largest shift that keeps every occupation
physical (centrals in [0, 1], satellites ≥ 0):

    centrals,   A > 0: δN_max = min(1 − N, N (1−P)/P);   A < 0: δN_max = min(N, (1−N)(1−P)/P)
    satellites, A > 0: δN_max = N (1−P)/P;               A < 0: δN_max = N

A > 0 puts more galaxies in halos with *above*-median secondary property.  The perturbed
occupation is a non-decreasing function of N for |A| ≤ 1, so nested thresholds stay nested.

TOML schema (a file, or the same keys as a dict)::

    concentration = "mass_power_law"  # c(M) relation when the halos carry none
    satellites_need_central = false  # multiply <N_sat> by <N_cen>?
    bright_tail_mag = 0.5            # e-folding width [mag] of the brightest magnitude bin

    [[threshold]]                    # one table per luminosity threshold
    mag_max = -20.0                  # sample: abs_mag < mag_max  (M_r − 5 log10 h)
    log_mmin = 12.10                 # log10(M_min / (Msun/h))
    sigma_logm = 0.25
    log_m0 = 11.80
    log_m1 = 13.30
    alpha = 1.05

    [assembly_bias]                  # optional
    a_cen = 0.0
    a_sat = 0.0
    secondary = "secondary"          # halo column split at its median
    mass_bin_dex = 0.1               # width of the log-mass bins for the medians
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import erf

from ..errors import InputError
from ..loader import build_section, convert, read_toml

#: Concentration–mass relations known by name.
CONCENTRATION_RELATIONS = ("mass_power_law",)
#: Log-mass grid [log10 Msun/h] on which nesting is checked and the minimum mass is found.
_LOG_M_CHECK = np.arange(9.0, 16.5 + 1e-9, 0.01)
#: Tolerance of the nesting check, in occupation number.
_NEST_TOL = 1e-3


@dataclass(frozen=True)
class ZhengParams:
    """Five-parameter occupation of Zheng et al. 2007 (masses as log10 of Msun/h)."""

    log_mmin: float
    sigma_logm: float
    log_m0: float
    log_m1: float
    alpha: float

    def __post_init__(self) -> None:
        problems = []
        for name in ("log_mmin", "sigma_logm", "log_m0", "log_m1", "alpha"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                problems.append(f"{name} = {v!r}: expected a finite number")
        if problems:
            raise InputError("; ".join(problems), problems)
        if self.sigma_logm <= 0:
            problems.append(f"sigma_logm = {self.sigma_logm!r}: must be > 0 (width in dex)")
        if self.alpha < 0:
            problems.append(f"alpha = {self.alpha!r}: must be >= 0 (satellite power-law slope)")
        for name in ("log_mmin", "log_m0", "log_m1"):
            v = getattr(self, name)
            if not 8.0 <= v <= 17.0:
                problems.append(f"{name} = {v!r}: expected log10(M / (Msun/h)) between 8 and 17 "
                                "(give the logarithm, not the mass)")
        if problems:
            raise InputError("; ".join(problems), problems)

    def mean_central(self, mass: ArrayLike, *, log_mass: NDArray[np.float64] | None = None
                     ) -> NDArray[np.float64]:
        """<N_cen>(M), mass in Msun/h; ``log_mass``, log10 of the same masses, spares the
        logarithm when the caller has it already."""
        logm = np.log10(np.asarray(mass, dtype=float)) if log_mass is None else log_mass
        return 0.5 * (1.0 + erf((logm - self.log_mmin) / self.sigma_logm))

    def mean_satellite(self, mass: ArrayLike) -> NDArray[np.float64]:
        """<N_sat>(M) without central modulation, mass in Msun/h."""
        mass = np.asarray(mass, dtype=float)
        excess = np.maximum(mass - 10.0**self.log_m0, 0.0) / 10.0**self.log_m1
        # the power only above M_0, where most halos are not; zero below
        out = np.zeros_like(excess)
        above = excess > 0
        out[above] = excess[above] ** self.alpha
        return out


@dataclass(frozen=True)
class HODThreshold:
    """One luminosity-threshold sample: galaxies with abs_mag < ``mag_max`` (M − 5 log10 h)."""

    mag_max: float
    params: ZhengParams


@dataclass(frozen=True)
class AssemblyBias:
    """Hearin et al. 2016 decoration strengths and the secondary halo property."""

    a_cen: float = 0.0
    a_sat: float = 0.0
    secondary: str = "secondary"
    mass_bin_dex: float = 0.1

    def __post_init__(self) -> None:
        problems = []
        for name in ("a_cen", "a_sat"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and -1.0 <= v <= 1.0):
                problems.append(f"{name} = {v!r}: must lie in [-1, 1]")
        if not (isinstance(self.mass_bin_dex, (int, float)) and 0.0 < self.mass_bin_dex <= 1.0):
            problems.append(f"mass_bin_dex = {self.mass_bin_dex!r}: expected 0 < width <= 1 dex")
        if not isinstance(self.secondary, str) or not self.secondary:
            problems.append(f"secondary = {self.secondary!r}: expected a halo column name")
        if problems:
            raise InputError("; ".join(problems), problems)

    @property
    def active(self) -> bool:
        """True when either strength is non-zero."""
        return self.a_cen != 0.0 or self.a_sat != 0.0


@dataclass(frozen=True)
class HODModel:
    """Nested luminosity-threshold HOD with optional assembly bias.

    Thresholds are stored faintest first (largest ``mag_max`` first), whatever the input order.
    """

    thresholds: tuple[HODThreshold, ...]
    assembly_bias: AssemblyBias = field(default_factory=AssemblyBias)
    concentration: str = "mass_power_law"
    satellites_need_central: bool = False
    bright_tail_mag: float = 0.5

    def __post_init__(self) -> None:
        ths = tuple(sorted(self.thresholds, key=lambda t: -t.mag_max))
        object.__setattr__(self, "thresholds", ths)
        problems = []
        if not ths:
            problems.append("no [[threshold]] given: need at least one luminosity threshold")
        mags = [t.mag_max for t in ths]
        if len(set(mags)) != len(mags):
            problems.append(f"threshold mag_max values repeat: {mags}")
        if not all(-30.0 < m < -5.0 for m in mags):
            problems.append(f"mag_max values {mags}: expected absolute magnitudes "
                            "M - 5 log10 h between -30 and -5")
        if self.concentration not in CONCENTRATION_RELATIONS:
            problems.append(f"concentration = {self.concentration!r}: expected one of "
                            f"{', '.join(CONCENTRATION_RELATIONS)}")
        if not (isinstance(self.bright_tail_mag, (int, float)) and 0 < self.bright_tail_mag <= 5):
            problems.append(f"bright_tail_mag = {self.bright_tail_mag!r}: expected 0 < w <= 5 mag")
        if problems:
            raise InputError("; ".join(problems), problems)
        self.check_nested()

    @property
    def mag_limits(self) -> NDArray[np.float64]:
        """Threshold magnitudes, faintest first."""
        return np.array([t.mag_max for t in self.thresholds])

    def raw_occupations(self, mass: ArrayLike, memo: dict | None = None
                        ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Undecorated (<N_cen>, <N_sat>) per threshold, each of shape (K, N), faintest first.

        ``memo``, a dict kept for one mass array [Msun/h] only, holds log10 M and each
        threshold's mean occupations by their parameters, so that models sharing some
        (the ± models of an HOD derivative) compute them once.
        """
        mass = np.asarray(mass, dtype=float)
        memo = {} if memo is None else memo
        if "log_mass" not in memo:
            memo["log_mass"] = np.log10(mass)
        cen_rows, sat_rows = [], []
        for t in self.thresholds:
            p = t.params
            key_c, key_s = ("cen", p.log_mmin, p.sigma_logm), ("sat", p.log_m0, p.log_m1, p.alpha)
            if key_c not in memo:
                memo[key_c] = p.mean_central(mass, log_mass=memo["log_mass"])
            if key_s not in memo:
                memo[key_s] = p.mean_satellite(mass)
            cen_rows.append(memo[key_c])
            sat_rows.append(memo[key_s])
        cen, sat = np.stack(cen_rows), np.stack(sat_rows)
        if self.satellites_need_central:
            sat = sat * cen
        return cen, sat

    def mean_occupations(self, mass: ArrayLike, memo: dict | None = None
                         ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """(<N_cen>, <N_sat>) per threshold, shape (K, N), clipped to be exactly nested
        (``memo``: see :meth:`raw_occupations`).

        The clip only removes round-off-sized crossings that :meth:`check_nested` tolerates.
        """
        cen, sat = self.raw_occupations(mass, memo)
        if cen.shape[0] == 1:  # one threshold (a sample's own model): nothing to clip
            return cen, sat
        return np.minimum.accumulate(cen, axis=0), np.minimum.accumulate(sat, axis=0)

    def check_nested(self) -> None:
        """Raise InputError when a brighter threshold out-occupies a fainter one somewhere."""
        mass = 10.0**_LOG_M_CHECK
        cen, sat = self.raw_occupations(mass)
        problems = []
        for j in range(1, len(self.thresholds)):
            for kind, n in (("centrals", cen), ("satellites", sat)):
                excess = n[j] - n[j - 1] * (1.0 + _NEST_TOL) - _NEST_TOL
                if np.any(excess > 0):
                    i = int(np.argmax(excess))
                    bright, faint = self.thresholds[j].mag_max, self.thresholds[j - 1].mag_max
                    problems.append(
                        f"thresholds not nested: [[threshold]] mag_max = {bright} has more "
                        f"{kind} (<N> = {n[j, i]:.4g}) than the fainter mag_max = {faint} "
                        f"(<N> = {n[j - 1, i]:.4g}) at log10 M = {_LOG_M_CHECK[i]:.2f}; a "
                        "brighter sample must be a subset of a fainter one")
        if problems:
            raise InputError("; ".join(problems), problems)

    def minimum_mass(self, tolerance: float = 1e-3) -> float:
        """Smallest mass [Msun/h] where the faintest threshold's <N_cen> + <N_sat> ≥ tolerance.

        Decoration can raise an occupation at most twofold (|A| ≤ 1, P ≈ ½), so halos below
        this mass hold a negligible share of the galaxies.
        """
        cen, sat = self.raw_occupations(10.0**_LOG_M_CHECK)
        ok = np.flatnonzero(cen[0] + sat[0] >= tolerance)
        if ok.size == 0:
            raise InputError(f"HOD gives <N> < {tolerance} in every halo up to 10^16.5 Msun/h: "
                             "it would produce no galaxies")
        return float(10.0 ** _LOG_M_CHECK[max(ok[0] - 1, 0)])

    def to_dict(self) -> dict[str, Any]:
        """The TOML-schema dict of this model (round-trips through :func:`load_hod`)."""
        out: dict[str, Any] = {
            "concentration": self.concentration,
            "satellites_need_central": self.satellites_need_central,
            "bright_tail_mag": self.bright_tail_mag,
            "threshold": [{"mag_max": t.mag_max, **asdict(t.params)} for t in self.thresholds],
        }
        ab = self.assembly_bias
        if ab != AssemblyBias():
            out["assembly_bias"] = asdict(ab)
        return out


# ---------------------------------------------------------------- decoration
def split_by_secondary(mass: NDArray[np.float64], secondary: NDArray[np.float64],
                       bin_dex: float) -> tuple[NDArray[np.bool_], NDArray[np.float64]]:
    """Type-1 flag (secondary above the median of its log-mass bin) and P per halo.

    Within a bin of n halos the ⌈n/2⌉ with the largest secondary values are type 1, so the
    type-1 fraction P = ⌈n/2⌉/n is exact for the bin (ties keep catalogue order).

    Returns
    -------
    upper : bool array
        True for type-1 halos.
    p_upper : float array
        The type-1 fraction P of each halo's mass bin.
    """
    mass = np.asarray(mass, dtype=float)
    sec = np.asarray(secondary, dtype=float)
    bins = np.floor(np.log10(mass) / bin_dex).astype(np.int64)
    order = np.lexsort((sec, bins))
    sorted_bins = bins[order]
    starts = np.flatnonzero(np.r_[True, sorted_bins[1:] != sorted_bins[:-1]])
    counts = np.diff(np.r_[starts, len(order)])
    group = np.repeat(np.arange(len(starts)), counts)
    rank = np.arange(len(order)) - starts[group]
    n_upper = (counts + 1) // 2
    upper = np.empty(len(order), dtype=bool)
    upper[order] = rank >= (counts - n_upper)[group]
    p_upper = np.empty(len(order))
    p_upper[order] = (n_upper / counts)[group]
    return upper, p_upper


def decorate(n_mean: NDArray[np.float64], upper: NDArray[np.bool_], p_upper: NDArray[np.float64],
             strength: float, bounded: bool) -> NDArray[np.float64]:
    """Hearin et al. 2016 perturbed occupation, conserving the mean at fixed mass.

    Parameters
    ----------
    n_mean : array (..., N)
        Undecorated mean occupation (any leading axes, e.g. thresholds).
    upper, p_upper : arrays (N,)
        From :func:`split_by_secondary`.
    strength : float
        A in [−1, 1].
    bounded : bool
        True for centrals (occupation ≤ 1), False for satellites.
    """
    if strength == 0.0:
        return n_mean
    p = np.asarray(p_upper, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(p < 1.0, (1.0 - p) / p, 0.0)
    n = n_mean
    if strength > 0:
        dmax = np.minimum(1.0 - n, n * ratio) if bounded else n * ratio
    else:
        dmax = np.minimum(n, (1.0 - n) * ratio) if bounded else n
    d1 = strength * dmax
    with np.errstate(divide="ignore", invalid="ignore"):
        d2 = np.where(ratio > 0, -d1 / np.where(ratio > 0, ratio, 1.0), 0.0)
    out = n + np.where(upper, d1, d2)
    return np.clip(out, 0.0, 1.0) if bounded else np.maximum(out, 0.0)


# ------------------------------------------------------------------- loading
_TOP_KEYS = {"concentration", "satellites_need_central", "bright_tail_mag", "threshold",
             "assembly_bias"}
_THRESHOLD_KEYS = {"mag_max", "log_mmin", "sigma_logm", "log_m0", "log_m1", "alpha"}
_AB_KEYS = {"a_cen", "a_sat", "secondary", "mass_bin_dex"}


def _unknown(keys: Any, allowed: set[str], where: str) -> list[str]:
    return [f"{where}: unknown key '{k}'; expected one of {', '.join(sorted(allowed))}"
            for k in keys if k not in allowed]


def load_hod(source: str | os.PathLike[str] | Mapping[str, Any]) -> HODModel:
    """Build an :class:`HODModel` from a TOML file or a dict with the same schema.

    Raises
    ------
    InputError
        Unreadable file, unknown or missing keys, bad values (σ_logM ≤ 0, α < 0, …),
        or thresholds that are not nested; the message names the file and key.
    """
    if isinstance(source, Mapping):
        data, where = dict(source), "HOD parameters"
    else:
        where = str(source)
        data = read_toml(source, "HOD parameter file")
    problems = _unknown(data, _TOP_KEYS, where)
    raw_th = data.get("threshold")
    if not isinstance(raw_th, list) or not raw_th:
        problems.append(f"{where}: missing [[threshold]] tables (one per luminosity threshold "
                        f"with keys {', '.join(sorted(_THRESHOLD_KEYS))})")
        raw_th = []
    thresholds = []
    for i, th in enumerate(raw_th):
        tw = f"{where}: [[threshold]] #{i + 1}"
        if not isinstance(th, Mapping):
            problems.append(f"{tw}: expected a table")
            continue
        tw += f" (mag_max = {th.get('mag_max')})"
        problems += _unknown(th, _THRESHOLD_KEYS, tw)
        missing = sorted(_THRESHOLD_KEYS - set(th))
        if missing:
            problems.append(f"{tw}: missing key(s) {', '.join(missing)}")
            continue
        found: list[str] = []
        params = build_section(ZhengParams, {k: th[k] for k in _THRESHOLD_KEYS - {"mag_max"}},
                               tw, found)
        try:
            mag = convert(th["mag_max"], float, f"{tw}: mag_max")
        except ValueError as exc:
            found.append(str(exc))
        problems += found
        if not found:
            thresholds.append(HODThreshold(mag, params))
    ab_raw = data.get("assembly_bias", {})
    ab = AssemblyBias()
    if not isinstance(ab_raw, Mapping):
        problems.append(f"{where}: [assembly_bias] must be a table")
    else:
        problems += _unknown(ab_raw, _AB_KEYS, f"{where}: [assembly_bias]")
        ab = build_section(AssemblyBias, {k: v for k, v in ab_raw.items() if k in _AB_KEYS},
                           f"{where}: [assembly_bias]", problems) or ab
    if problems:
        raise InputError("; ".join(problems), problems)
    kwargs = {k: data[k] for k in ("concentration", "satellites_need_central", "bright_tail_mag")
              if k in data}
    try:
        return HODModel(tuple(thresholds), ab, **kwargs)
    except InputError as exc:
        raise InputError("; ".join(f"{where}: {p}" for p in exc.problems),
                         [f"{where}: {p}" for p in exc.problems]) from None


#: Illustrative nested parameters (invented: plausible Zheng et al. 2007 shapes for
#: luminosity thresholds, not a published fit).  Number densities come out
#: near 5e-3, 2.5e-3 and 1e-3 (h/Mpc)³ at z ≈ 0.2 for the three brighter thresholds.  The
#: faintest (M < −19.5) lies half a magnitude below the demo's faintest sample, so that
#: inferred magnitudes can scatter galaxies into that sample as well as out of it.
DEFAULT_HOD: dict[str, Any] = {
    "concentration": "mass_power_law",
    "satellites_need_central": False,
    "bright_tail_mag": 0.5,
    "threshold": [
        {"mag_max": -19.5, "log_mmin": 11.85, "sigma_logm": 0.25, "log_m0": 11.55,
         "log_m1": 13.05, "alpha": 1.05},
        {"mag_max": -20.0, "log_mmin": 12.10, "sigma_logm": 0.25, "log_m0": 11.80,
         "log_m1": 13.30, "alpha": 1.05},
        {"mag_max": -20.5, "log_mmin": 12.40, "sigma_logm": 0.28, "log_m0": 12.10,
         "log_m1": 13.60, "alpha": 1.08},
        {"mag_max": -21.0, "log_mmin": 12.75, "sigma_logm": 0.32, "log_m0": 12.40,
         "log_m1": 13.95, "alpha": 1.12},
    ],
}


def default_hod_path() -> Path:
    """Path of the packaged example HOD file, conecheck/data/hod_default.toml."""
    return Path(__file__).resolve().parent.parent / "data" / "hod_default.toml"


def default_hod_model() -> HODModel:
    """The built-in illustrative HOD (same as conecheck/data/hod_default.toml)."""
    return load_hod(DEFAULT_HOD)
