"""Separation binning shared by the pair and neighbour counters, with input checks.

r_p bins are given by their edges (any increasing sequence: log, linear or custom);
π bins are ``n_pi = π_max / Δπ`` slabs of |π| of width Δπ starting at 0, so bin ``p``
holds pairs with ``p Δπ ≤ |π| < (p + 1) Δπ``.  Each slab therefore covers *two* slabs
of signed π (above and below), which matters for analytic pair volumes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError


@dataclass(frozen=True)
class RpPiBins:
    """Validated (r_p, π) binning.

    Attributes
    ----------
    rp_edges : ndarray, shape (n_rp + 1,)
        r_p bin edges [Mpc/h], strictly increasing, ≥ 0.
    pi_max : float
        Largest |π| counted [Mpc/h] (exclusive).
    dpi : float
        Width of the |π| bins [Mpc/h].
    """

    rp_edges: NDArray[np.float64]
    pi_max: float
    dpi: float

    @property
    def n_rp(self) -> int:
        return int(self.rp_edges.size - 1)

    @property
    def n_pi(self) -> int:
        return int(round(self.pi_max / self.dpi))

    @property
    def pi_edges(self) -> NDArray[np.float64]:
        """|π| bin edges [Mpc/h], shape (n_pi + 1,)."""
        return np.arange(self.n_pi + 1, dtype=np.float64) * self.dpi

    @property
    def rp_max(self) -> float:
        return float(self.rp_edges[-1])

    @property
    def r_max(self) -> float:
        """Largest 3-d separation a counted pair can have [Mpc/h]."""
        return float(np.hypot(self.rp_max, self.pi_max))

    @property
    def rp_centres(self) -> NDArray[np.float64]:
        """Geometric centres of the r_p bins (arithmetic when the first edge is 0)."""
        e = self.rp_edges
        if e[0] > 0:
            return np.sqrt(e[:-1] * e[1:])
        return 0.5 * (e[:-1] + e[1:])

    def cylinder_volumes(self) -> NDArray[np.float64]:
        """Volume of each (r_p, |π|) bin [(Mpc/h)³], shape (n_rp, n_pi).

        π (r₂² − r₁²) × 2Δπ: the factor 2 because a |π| bin holds both signs of π.
        """
        e2 = self.rp_edges**2
        area = np.pi * (e2[1:] - e2[:-1])
        return np.outer(area, np.full(self.n_pi, 2.0 * self.dpi))


@dataclass(frozen=True)
class SMuBins:
    """Validated (s, |μ|) binning: s bins by their edges, ``n_mu`` equal bins of |μ| in [0, 1].

    Attributes
    ----------
    s_edges : ndarray, shape (n_s + 1,)
        Bin edges of the 3-d separation s [Mpc/h], strictly increasing, ≥ 0.
    n_mu : int
        Number of |μ| bins; bin ``p`` holds p/n_mu ≤ |μ| < (p + 1)/n_mu (|μ| = 1 in the last).
    """

    s_edges: NDArray[np.float64]
    n_mu: int

    @property
    def n_s(self) -> int:
        return int(self.s_edges.size - 1)

    @property
    def s_max(self) -> float:
        return float(self.s_edges[-1])

    @property
    def mu_edges(self) -> NDArray[np.float64]:
        """|μ| bin edges, shape (n_mu + 1,)."""
        return np.linspace(0.0, 1.0, self.n_mu + 1)

    @property
    def s_centres(self) -> NDArray[np.float64]:
        """Volume-weighted centres ¾ (s₂⁴ − s₁⁴)/(s₂³ − s₁³) of the s bins [Mpc/h]."""
        e = self.s_edges
        return 0.75 * (e[1:] ** 4 - e[:-1] ** 4) / (e[1:] ** 3 - e[:-1] ** 3)

    def shell_volumes(self) -> NDArray[np.float64]:
        """Volume of each (s, |μ|) bin [(Mpc/h)³], shape (n_s, n_mu):
        (4π/3)(s₂³ − s₁³) Δμ (a |μ| bin holds both signs of μ)."""
        e = self.s_edges
        shell = 4.0 / 3.0 * np.pi * (e[1:] ** 3 - e[:-1] ** 3)
        return np.outer(shell, np.full(self.n_mu, 1.0 / self.n_mu))


def make_smu_bins(s_edges: ArrayLike, n_mu: int, key: str = "") -> SMuBins:
    """Validate an (s, |μ|) binning (``key`` prefixes the messages, e.g. a config key)."""
    where = f"{key}." if key else ""
    e = check_rp_edges(s_edges, f"{where}s_edges")
    if not (isinstance(n_mu, (int, np.integer)) and not isinstance(n_mu, bool) and n_mu >= 1):
        raise InputError(f"{where}n_mu: expected a positive integer number of μ bins in "
                         f"[0, 1], got {n_mu!r}")
    return SMuBins(s_edges=e, n_mu=int(n_mu))


def check_rp_edges(rp_edges: ArrayLike, name: str = "rp_edges") -> NDArray[np.float64]:
    """Validate r_p (or radius) edges: finite, ≥ 0, strictly increasing, at least two."""
    try:
        e = np.asarray(rp_edges, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: expected a sequence of numbers in Mpc/h, got {rp_edges!r}") \
            from exc
    if e.size < 2:
        raise InputError(f"{name}: need at least two bin edges, got {e.size}")
    if not np.all(np.isfinite(e)):
        raise InputError(f"{name}: bin edges must be finite, got {e.tolist()}")
    if e[0] < 0:
        raise InputError(f"{name}: bin edges must be ≥ 0 Mpc/h, got first edge {e[0]}")
    if np.any(np.diff(e) <= 0):
        raise InputError(f"{name}: bin edges must be strictly increasing, got {e.tolist()}")
    return e


def make_bins(rp_edges: ArrayLike, pi_max: float, dpi: float) -> RpPiBins:
    """Validate and bundle an (r_p, π) binning.

    Parameters
    ----------
    rp_edges : array_like
        r_p bin edges [Mpc/h].
    pi_max : float
        Largest |π| [Mpc/h]; must be a whole multiple of ``dpi``.
    dpi : float
        |π| bin width [Mpc/h].
    """
    e = check_rp_edges(rp_edges)
    try:
        pi_max = float(pi_max)
        dpi = float(dpi)
    except (TypeError, ValueError) as exc:
        raise InputError(f"pi_max and dpi must be numbers in Mpc/h, got {pi_max!r}, {dpi!r}") \
            from exc
    if not (np.isfinite(pi_max) and pi_max > 0):
        raise InputError(f"pi_max: expected a positive number of Mpc/h, got {pi_max}")
    if not (np.isfinite(dpi) and dpi > 0):
        raise InputError(f"dpi: expected a positive number of Mpc/h, got {dpi}")
    ratio = pi_max / dpi
    if abs(ratio - round(ratio)) > 1e-9 * max(1.0, ratio) or round(ratio) < 1:
        raise InputError(f"pi_max = {pi_max} Mpc/h is not a whole multiple of dpi = {dpi} Mpc/h "
                         f"(ratio {ratio:.6g}); choose pi_max = n × dpi")
    return RpPiBins(rp_edges=e, pi_max=pi_max, dpi=dpi)


def check_box_extent(extent: float, box_size: float, what: str) -> None:
    """Refuse separations that reach half a periodic box (minimum image breaks there)."""
    if not (np.isfinite(box_size) and box_size > 0):
        raise InputError(f"box_size: expected a positive number of Mpc/h, got {box_size}")
    if extent >= 0.5 * box_size:
        raise InputError(f"{what} = {extent:g} Mpc/h must be smaller than half the box side "
                         f"L/2 = {0.5 * box_size:g} Mpc/h for minimum-image pair counting")


#: Largest bin look-up table (entries); beyond it the kernels scan the edges instead.
MAX_LUT = 1 << 16


@dataclass(frozen=True)
class Rp2Lookup:
    """Branch-free r_p binning from the bit pattern of r_p² (no log, sqrt or search).

    The IEEE-754 exponent and top ``m`` mantissa bits of r² (``bits >> shift`` with
    ``shift = 52 − m``) index cells narrower than any bin, so each cell holds at most one
    edge.  With ``c = clip((bits >> shift) − base, 0, n_cells − 1)`` the bin is
    ``lut[c] + (r² ≥ nxt[c])``: ``lut`` is the bin of the cell's lower bound (−1 below the
    first edge) and ``nxt`` the edge inside the cell (+∞ if none).  One extra entry at
    index ``n_cells`` (the *dummy* cell) sends rejected candidates to the overflow bin
    ``n_rp``, so the kernels can bin every candidate without a branch.  ``scan`` marks
    edges too close for a table of at most :data:`MAX_LUT` cells; the kernels then search
    the edges instead.
    """

    lut: NDArray[np.int64]
    nxt: NDArray[np.float64]
    shift: int
    base: int
    scan: bool

    @property
    def dummy(self) -> int:
        return int(self.lut.size - 1)


def rp2_lookup(edges2: NDArray[np.float64]) -> Rp2Lookup:
    """Build the :class:`Rp2Lookup` of squared bin edges ``edges2`` [(Mpc/h)²]."""
    n = edges2.size - 1
    v_low = edges2[0] if edges2[0] > 0 else edges2[1] / 2.0
    pos = edges2[edges2 > 0]
    with np.errstate(over="ignore", divide="ignore"):
        gaps = np.diff(pos) / pos[:-1]
        need = 0.0 if gaps.size == 0 else float(np.ceil(np.log2(1.0 / gaps.min()))) + 1
    m = int(max(0.0, need)) if np.isfinite(need) and need <= 40 else 41
    while m <= 40:
        shift = 52 - m
        base = int(np.float64(v_low).view(np.int64)) >> shift
        top = int(np.float64(edges2[-1]).view(np.int64)) >> shift
        n_cells = top - base + 1
        if n_cells > MAX_LUT:
            break
        cells = (pos.view(np.int64) >> shift) - base
        inside = cells >= 0
        if np.unique(cells[inside]).size == int(inside.sum()):
            lower = ((np.arange(n_cells, dtype=np.int64) + base) << shift).view(np.float64)
            lut = np.searchsorted(edges2, lower, side="right") - 1
            lut = np.minimum(lut, n - 1)
            nxt = np.full(n_cells, np.inf)
            # an edge on a cell's lower bound is already counted by lut
            strict = inside & (pos > lower[np.maximum(cells, 0)])
            nxt[cells[strict]] = pos[strict]
            return Rp2Lookup(lut=np.append(lut, n).astype(np.int64), nxt=np.append(nxt, np.inf),
                             shift=shift, base=base, scan=False)
        m += 1
    return Rp2Lookup(lut=np.array([0, n], dtype=np.int64), nxt=np.array([np.inf, np.inf]),
                     shift=63, base=0, scan=True)
