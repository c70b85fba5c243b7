"""Weighted pair counts in (r_p, |π|) bins with all jackknife delete-one counts in one pass.

Conventions
-----------
* **Auto counts** (one point set) count each *unordered* pair once: DD = Σ_{i<j} w_i w_j.
  Their normalisation (the weighted number of distinct pairs) is
  ((Σw)² − Σw²) / 2, which is N(N − 1)/2 for unit weights.
* **Cross counts** (two point sets) count every pair (i from set 1, j from set 2) once:
  DR = Σ_i Σ_j w_i w_j, normalised by Σw₁ Σw₂.  Passing the same points twice therefore
  gives ordered pairs *and* self-pairs at zero separation — use an auto count instead.
* **Jackknife**: with ``n_regions = K`` every pair adds its weight to ``total`` and to
  ``touch[k]`` for each distinct region k of its two points, so the count with region k
  deleted is ``total − touch[k]`` (pairs with neither point in k).  The delete-one
  normalisations are recomputed from per-region Σw and Σw².
* Separations: periodic box, LOS along one axis, minimum image; cone (observer at the
  origin), LOS at the pair midpoint: s = r₁ − r₂, l = (r₁ + r₂)/2, π = |s·l|/|l|,
  r_p² = |s|² − π².
* Bins are closed below and open above: e_b ≤ r_p < e_{b+1}, pΔπ ≤ |π| < (p+1)Δπ;
  pairs outside [e_0, e_n) or with |π| ≥ π_max are not counted.
* Sums are bit-identical for any number of numba threads up to :data:`MIN_CHUNKS` (fixed
  work split, fixed reduction order).  Memory: the points, plus per-chunk accumulators of
  (K + 1) × (n_rp + 1) × n_pi numbers.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numba
import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError
from ..periodic import wrap_columns
from . import _kernels
from .binning import RpPiBins, SMuBins, check_box_extent, make_bins, rp2_lookup
from .grid import box_grid, cone_grid, cone_refine, neighbour_offsets, sort_into_grid
from .points import Points, check_points, region_sums
from .sky_grid import SKY_REFINE, sky_grid, sort_into_sky_grid

#: Number of private accumulators of a pair count (bit-identical sums up to this many threads).
MIN_CHUNKS = 32
#: Partner points a box cell holds at least, on average, when r_p,max-wide cells would hold
#: fewer (:func:`count_rppi_box`). Chosen by timing uniform boxes of 2·10⁴ to 2·10⁶ points
#: (densities 10⁻⁴ to 10⁻² h³/Mpc³, r_p ≤ 20 or 30, π_max = 40 Mpc/h) over cell widths of
#: r_p,max/2 to 4 r_p,max: the fastest width holds 58–330 points, and 80 is within 10 % of
#: it on each auto count and within 12 % on two sparse-against-dense cross counts
#: (benchmarks/RESULTS.md: the sixth-pass notes hold the sweep; bench_pairs times this rule
#: against the former fixed r_p,max / 2 cells and Corrfunc).
BOX_CELL_POINTS = 80.0
#: Cone counts with r_p,max at most this fraction of π_max use sky columns
#: (:mod:`.sky_grid`) rather than cubic cells. Timed in caps of 2·10⁵ to 1.7·10⁶ points
#: (π_max = 40 Mpc/h): auto counts take 0.4–0.6 of the cubic time in columns at r_p,max =
#: 2.45 and 5, 0.6–0.9 at 10 and 0.9–1.2 at 20 Mpc/h; data–random counts 0.5–0.9 at 2.45
#: and 5, 0.7–1.1 at 10 (benchmarks/RESULTS.md, twelfth pass).
SKY_RP_OVER_PI = 0.25


@dataclass
class PairCounts:
    """Weighted pair counts in (r_p, |π|) bins, with jackknife pieces.

    Attributes
    ----------
    total : ndarray, shape (n_rp, n_pi)
        Σ w_i w_j over the pairs in each bin.
    touch : ndarray, shape (K, n_rp, n_pi) or None
        Weight of the pairs with at least one point in region k.
    rp_edges, pi_edges : ndarray
        Bin edges of the two separations: r_p and |π| [Mpc/h] (the |π| bins start at 0),
        or, for (s, μ) counts, s [Mpc/h] and |μ| in [0, 1].
    is_auto : bool
        Auto count (unordered distinct pairs of one set) or cross count.
    sum_w1, sum_w2, sum_w1_sq, sum_w2_sq : float
        Σw and Σw² of each set (set 2 equals set 1 for an auto count).
    region_sum_w1, region_sum_w2, region_sum_w1_sq, region_sum_w2_sq : ndarray, shape (K,)
        The same sums per jackknife region.
    norm : float
        Weighted number of pairs the counts are normalised by (see the module notes).
    norm_delete_one : ndarray, shape (K,)
        ``norm`` recomputed with region k removed.
    n_subsets : int
        Number of disjoint subsets summed (1, or M for a split-random RR).
    """

    total: NDArray[np.float64]
    touch: NDArray[np.float64] | None
    rp_edges: NDArray[np.float64]
    pi_edges: NDArray[np.float64]
    is_auto: bool
    sum_w1: float
    sum_w2: float
    sum_w1_sq: float
    sum_w2_sq: float
    region_sum_w1: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    region_sum_w2: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    region_sum_w1_sq: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    region_sum_w2_sq: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    norm: float = 0.0
    norm_delete_one: NDArray[np.float64] = field(default_factory=lambda: np.zeros(0))
    n_subsets: int = 1

    @property
    def n_regions(self) -> int:
        return 0 if self.touch is None else int(self.touch.shape[0])

    def delete_one(self, k: int) -> NDArray[np.float64]:
        """Counts with jackknife region ``k`` removed, shape (n_rp, n_pi)."""
        if self.touch is None:
            raise ValueError("these pair counts carry no jackknife regions")
        return self.total - self.touch[k]

    def delete_one_all(self) -> NDArray[np.float64]:
        """All delete-one counts, shape (K, n_rp, n_pi)."""
        if self.touch is None:
            raise ValueError("these pair counts carry no jackknife regions")
        return self.total[None] - self.touch

    def normalised(self) -> NDArray[np.float64]:
        """``total / norm`` (the fraction of weighted pairs in each bin)."""
        return self.total / self.norm

    def normalised_delete_one(self) -> NDArray[np.float64]:
        """Delete-one counts over their delete-one normalisations, shape (K, n_rp, n_pi)."""
        return self.delete_one_all() / self.norm_delete_one[:, None, None]

    def __add__(self, other: PairCounts) -> PairCounts:
        """Sum of counts over disjoint subsets (as for a split-random RR)."""
        if (self.is_auto != other.is_auto or self.total.shape != other.total.shape
                or self.n_regions != other.n_regions
                or not np.array_equal(self.rp_edges, other.rp_edges)
                or not np.array_equal(self.pi_edges, other.pi_edges)):
            raise ValueError("can only add pair counts of the same kind, binning and regions")
        touch = None if self.touch is None else self.touch + other.touch
        return PairCounts(
            total=self.total + other.total, touch=touch, rp_edges=self.rp_edges,
            pi_edges=self.pi_edges, is_auto=self.is_auto,
            sum_w1=self.sum_w1 + other.sum_w1, sum_w2=self.sum_w2 + other.sum_w2,
            sum_w1_sq=self.sum_w1_sq + other.sum_w1_sq,
            sum_w2_sq=self.sum_w2_sq + other.sum_w2_sq,
            region_sum_w1=self.region_sum_w1 + other.region_sum_w1,
            region_sum_w2=self.region_sum_w2 + other.region_sum_w2,
            region_sum_w1_sq=self.region_sum_w1_sq + other.region_sum_w1_sq,
            region_sum_w2_sq=self.region_sum_w2_sq + other.region_sum_w2_sq,
            norm=self.norm + other.norm,
            norm_delete_one=self.norm_delete_one + other.norm_delete_one,
            n_subsets=self.n_subsets + other.n_subsets)


def join_separations(small: PairCounts, large: PairCounts) -> PairCounts:
    """Counts of ``small``'s first-separation bins followed by ``large``'s, on ``small``'s
    normalisation.

    The two counts may come from different point sets (for example all randoms below a
    scale and disjoint random subsets above it): each bin of ``large`` is rescaled so that
    its count over ``small``'s normalisation, and every delete-one count over ``small``'s
    delete-one normalisation, equal what ``large`` gives on its own normalisation.  The
    result's ``normalised()`` and ``normalised_delete_one()`` are therefore each part's, bin
    by bin; its sums of weights are ``small``'s, its ``n_subsets`` ``large``'s.

    Parameters
    ----------
    small, large : PairCounts
        Counts of the same kind (auto or cross), |π| or |μ| bins and jackknife regions,
        with ``large``'s first edge equal to ``small``'s last [Mpc/h].
    """
    if (small.is_auto != large.is_auto or small.n_regions != large.n_regions
            or not np.array_equal(small.pi_edges, large.pi_edges)
            or small.rp_edges[-1] != large.rp_edges[0]):
        raise ValueError("can only join pair counts of the same kind, second-axis bins and "
                         "regions whose separations meet at one edge")
    scale = small.norm / large.norm
    total = np.concatenate([small.total, large.total * scale])
    touch = None
    if small.touch is not None:
        # rescale each delete-one count by its own normalisation ratio, then back to touch
        kept = large.delete_one_all() * (small.norm_delete_one
                                         / large.norm_delete_one)[:, None, None]
        touch = np.concatenate([small.touch, (large.total * scale)[None] - kept], axis=1)
    return dataclasses.replace(small, total=total, touch=touch,
                               rp_edges=np.concatenate([small.rp_edges, large.rp_edges[1:]]),
                               n_subsets=large.n_subsets)


def join_disjoint_auto(auto1: PairCounts, cross: PairCounts, auto2: PairCounts) -> PairCounts:
    """The auto count of the union of two disjoint point sets, from each set's auto count
    and their cross count: every distinct pair of the union lies in exactly one of the
    three, so the sums add (with weights 1 the sums are whole numbers below 2⁵³, and the
    union's counts equal a count of the union bit for bit).

    Parameters
    ----------
    auto1, auto2 : PairCounts
        Auto counts of set 1 and of set 2.
    cross : PairCounts
        Their cross count (either order), same bins and jackknife regions.
    """
    parts = (auto1, cross, auto2)
    if (not auto1.is_auto or not auto2.is_auto or cross.is_auto
            or any(p.total.shape != auto1.total.shape or p.n_regions != auto1.n_regions
                   or not np.array_equal(p.rp_edges, auto1.rp_edges)
                   or not np.array_equal(p.pi_edges, auto1.pi_edges) for p in parts)):
        raise ValueError("join_disjoint_auto needs two auto counts and a cross count of the "
                         "same bins and regions")
    s = auto1.sum_w1 + auto2.sum_w1
    sq = auto1.sum_w1_sq + auto2.sum_w1_sq
    r = auto1.region_sum_w1 + auto2.region_sum_w1
    rq = auto1.region_sum_w1_sq + auto2.region_sum_w1_sq
    touch = None if auto1.touch is None else auto1.touch + cross.touch + auto2.touch
    return PairCounts(total=auto1.total + cross.total + auto2.total, touch=touch,
                      rp_edges=auto1.rp_edges, pi_edges=auto1.pi_edges, is_auto=True,
                      sum_w1=s, sum_w2=s, sum_w1_sq=sq, sum_w2_sq=sq,
                      region_sum_w1=r, region_sum_w2=r, region_sum_w1_sq=rq,
                      region_sum_w2_sq=rq, norm=0.5 * (s * s - sq),
                      norm_delete_one=0.5 * ((s - r) ** 2 - (sq - rq)))


def _assemble(total: NDArray[np.float64], touch: NDArray[np.float64],
              bins: RpPiBins | SMuBins, p1: Points, p2: Points | None, n_regions: int
              ) -> PairCounts:
    auto = p2 is None
    q = p1 if auto else p2
    s1, s1q = float(p1.w.sum()), float((p1.w**2).sum())
    s2, s2q = float(q.w.sum()), float((q.w**2).sum())
    r1, r1q = region_sums(p1, n_regions)
    r2, r2q = region_sums(q, n_regions)
    if auto:
        norm = 0.5 * (s1 * s1 - s1q)
        norm_k = 0.5 * ((s1 - r1) ** 2 - (s1q - r1q))
    else:
        norm = s1 * s2
        norm_k = (s1 - r1) * (s2 - r2)
    first, second = ((bins.s_edges.copy(), bins.mu_edges) if isinstance(bins, SMuBins)
                     else (bins.rp_edges.copy(), bins.pi_edges))
    return PairCounts(total=total, touch=touch if n_regions > 0 else None,
                      rp_edges=first, pi_edges=second, is_auto=auto,
                      sum_w1=s1, sum_w2=s2, sum_w1_sq=s1q, sum_w2_sq=s2q,
                      region_sum_w1=r1, region_sum_w2=r2, region_sum_w1_sq=r1q,
                      region_sum_w2_sq=r2q, norm=norm, norm_delete_one=norm_k)


def _n_chunks(n_tasks: int) -> int:
    return max(1, min(max(MIN_CHUNKS, numba.get_num_threads()), n_tasks))


def _lookup_args(bins: RpPiBins) -> tuple:
    lk = rp2_lookup(bins.rp_edges**2)
    return lk.lut, lk.nxt, lk.shift, lk.base, lk.scan


def _max_cell(start: NDArray[np.int64]) -> int:
    return max(1, int(np.diff(start).max())) if start.size > 1 else 1


def _check_axis(los_axis: int) -> int:
    if los_axis not in (0, 1, 2):
        raise InputError(f"los_axis: expected 0, 1 or 2 (x, y or z), got {los_axis!r}")
    return int(los_axis)


def _sorted_box(grid: Any, p1: Points, p2: Points | None, box_size: float, los_axis: int
                ) -> tuple[Any, Any, NDArray[np.int64]]:
    """Both point sets in the box frame, sorted into ``grid`` by cell and LOS coordinate,
    and the non-empty cells of set 1 (the tasks)."""
    a = to_box_frame(p1.pos, box_size, los_axis)
    g1 = sort_into_grid(grid, a, p1.w, p1.reg, chi_key=False)
    if p2 is None:
        g2 = g1
    else:
        b = to_box_frame(p2.pos, box_size, los_axis)
        g2 = sort_into_grid(grid, b, p2.w, p2.reg, chi_key=False)
    return g1, g2, np.flatnonzero(np.diff(g1.start)).astype(np.int64)


def _sorted_cone(grid: Any, p1: Points, p2: Points | None
                 ) -> tuple[Any, Any, NDArray[np.int64]]:
    """Both point sets sorted into ``grid`` by cell and distance χ [Mpc/h] from the
    observer, and the non-empty cells of set 1 (the tasks)."""
    g1 = sort_into_grid(grid, p1.pos, p1.w, p1.reg, chi_key=True)
    if p2 is None:
        g2 = g1
    else:
        g2 = sort_into_grid(grid, p2.pos, p2.w, p2.reg, chi_key=True)
    return g1, g2, np.flatnonzero(np.diff(g1.start)).astype(np.int64)


def to_box_frame(pos: NDArray[np.float64], box_size: float, los_axis: int) -> NDArray[np.float64]:
    """Wrap into [0, L) and permute the axes so the line of sight is the third one."""
    return wrap_columns(pos, box_size, [a for a in range(3) if a != los_axis] + [los_axis])


def count_rppi_box(pos1: ArrayLike, w1: ArrayLike | None = None, reg1: ArrayLike | None = None,
                   pos2: ArrayLike | None = None, w2: ArrayLike | None = None,
                   reg2: ArrayLike | None = None, *, box_size: float, los_axis: int = 2,
                   rp_edges: ArrayLike, pi_max: float, dpi: float = 1.0, n_regions: int = 0,
                   refine: int = 1, cell_points: float = BOX_CELL_POINTS) -> PairCounts:
    """Pair counts in (r_p, |π|) bins in a periodic box.

    Parameters
    ----------
    pos1 : array_like, shape (N1, 3)
        Positions [Mpc/h] (redshift space along ``los_axis``); wrapped into [0, L).
    w1 : array_like, shape (N1,), optional
        Weights (default 1).
    reg1 : array_like of int, shape (N1,), optional
        Jackknife regions in [0, n_regions); needed when ``n_regions > 0``.
    pos2, w2, reg2 : optional
        Second point set for a cross count; ``None`` for an auto count.
    box_size : float
        Box side L [Mpc/h].
    los_axis : int
        Line-of-sight axis (0, 1, 2).
    rp_edges : array_like
        r_p bin edges [Mpc/h], increasing; the largest must be < L/2.
    pi_max : float
        Largest |π| [Mpc/h] (< L/2), a whole multiple of ``dpi``.
    dpi : float
        |π| bin width [Mpc/h].
    n_regions : int
        Number of jackknife regions (0: none).
    refine : int
        Cells per r_p,max across the LOS, at most (speed only).
    cell_points : float
        Cells are widened until they hold this many points of the partner set on average
        (speed only; 0 keeps r_p,max / ``refine``).

    Returns
    -------
    PairCounts
    """
    p1 = check_points(pos1, w1, reg1, n_regions, "points (set 1)")
    p2 = None if pos2 is None else check_points(pos2, w2, reg2, n_regions, "points (set 2)")
    bins, grid, los_axis = _box_setup(rp_edges, pi_max, dpi, box_size, los_axis, refine,
                                      (p1 if p2 is None else p2).n, cell_points)
    g1, g2, tasks = _sorted_box(grid, p1, p2, grid.box_size, los_axis)
    return _count_sorted_box(g1, g2, tasks, grid, bins, p1, p2, int(n_regions))


def _box_setup(rp_edges: ArrayLike, pi_max: float, dpi: float, box_size: float, los_axis: int,
               refine: int, n_partner: int, cell_points: float
               ) -> tuple[RpPiBins, Any, int]:
    """Checked bins, the box's cell grid and the line-of-sight axis of a box count whose
    partner set (set 2, or the one set of an auto count) holds ``n_partner`` points."""
    bins = make_bins(rp_edges, pi_max, dpi)
    box_size = float(box_size)
    check_box_extent(bins.rp_max, box_size, "largest r_p edge")
    check_box_extent(bins.pi_max, box_size, "pi_max")
    # cells r_p,max / refine across the LOS, widened until they hold cell_points partner
    # points on average: in a sparse box a cell visit costs more than the candidates it saves
    if not (np.isfinite(cell_points) and cell_points >= 0):
        raise InputError(f"cell_points: expected a number >= 0, got {cell_points!r}")
    column = cell_points * box_size**3 / (max(int(n_partner), 1) * bins.pi_max)
    grid = box_grid(box_size, bins.rp_max, bins.pi_max, refine=max(1, int(refine)),
                    min_side=float(np.sqrt(column)))
    return bins, grid, _check_axis(los_axis)


def _count_sorted_box(g1: Any, g2: Any, tasks: NDArray[np.int64], grid: Any, bins: RpPiBins,
                      p1: Points, p2: Points | None, n_regions: int) -> PairCounts:
    """The box kernel on point sets already sorted into ``grid`` (``p2`` None: auto)."""
    offsets = neighbour_offsets(grid, bins.rp_max, bins.pi_max, "cylinder", half=p2 is None)
    total, touch = _kernels.rppi_box(
        g1.x, g1.y, g1.z, g1.w, g1.reg, g1.start, g2.x, g2.y, g2.z, g2.w, g2.reg, g2.start,
        tasks, offsets, grid.dims, grid.box_size, bins.rp_edges**2, bins.pi_max, bins.dpi,
        bins.n_pi, n_regions, p2 is None, _n_chunks(tasks.size),
        *_lookup_args(bins), _max_cell(g2.start))
    return _assemble(total, touch, bins, p1, p2, n_regions)


def count_rppi_box_shared(shared: ArrayLike, only_first: ArrayLike, only_second: ArrayLike, *,
                          box_size: float, los_axis: int = 2, rp_edges: ArrayLike,
                          pi_max: float, dpi: float = 1.0, refine: int = 1
                          ) -> tuple[PairCounts, PairCounts]:
    """Auto counts in (r_p, |π|) bins of two boxes that share most of their points (unit
    weights, no jackknife): the first box holds ``shared`` and ``only_first``, the second
    ``shared`` and ``only_second``.

    The shared points' pairs are counted once and the shared set is sorted into the grid
    once; each box's count joins that auto count, its own points' cross count with the
    shared set and their auto count (:func:`join_disjoint_auto`), and equals
    :func:`count_rppi_box` of the box bit for bit.

    Parameters
    ----------
    shared, only_first, only_second : array_like, shape (N, 3)
        Positions [Mpc/h] (redshift space along ``los_axis``), three disjoint sets.
    box_size, los_axis, rp_edges, pi_max, dpi, refine
        As for :func:`count_rppi_box` (L, r_p edges, π_max and Δπ in Mpc/h).
    """
    ps = check_points(shared, None, None, 0, "shared points")
    # one grid for every count: sized for the shared set, the partner of all but the
    # small own-point auto counts
    bins, grid, los_axis = _box_setup(rp_edges, pi_max, dpi, box_size, los_axis, refine, ps.n,
                                      BOX_CELL_POINTS)
    gs, _, tasks_s = _sorted_box(grid, ps, None, grid.box_size, los_axis)
    auto_shared = _count_sorted_box(gs, gs, tasks_s, grid, bins, ps, None, 0)
    out = []
    for name, only in (("first", only_first), ("second", only_second)):
        po = check_points(only, None, None, 0, f"points of the {name} box only")
        go, _, tasks_o = _sorted_box(grid, po, None, grid.box_size, los_axis)
        # the own points first: the kernel loops over set 1's cells, the fewer the better
        cross = _count_sorted_box(go, gs, tasks_o, grid, bins, po, ps, 0)
        auto_own = _count_sorted_box(go, go, tasks_o, grid, bins, po, None, 0)
        out.append(join_disjoint_auto(auto_shared, cross, auto_own))
    return out[0], out[1]


def count_rppi_cone(pos1: ArrayLike, w1: ArrayLike | None = None, reg1: ArrayLike | None = None,
                    pos2: ArrayLike | None = None, w2: ArrayLike | None = None,
                    reg2: ArrayLike | None = None, *, rp_edges: ArrayLike, pi_max: float,
                    dpi: float = 1.0, n_regions: int = 0, refine: float | None = None,
                    los: str = "midpoint", cells: str = "auto") -> PairCounts:
    """Pair counts in (r_p, |π|) bins on a light cone, line of sight at the pair midpoint
    (or along the first point's direction).

    Parameters
    ----------
    pos1 : array_like, shape (N1, 3)
        Cartesian positions [Mpc/h] with the observer at the origin (e.g. ``ConeSample.xyz``).
    w1, reg1, pos2, w2, reg2, rp_edges, pi_max, dpi, n_regions
        As in :func:`count_rppi_box`.
    refine : float or None
        Speed only. Cubic cells: cells per r_max = √(r_p,max² + π_max²), an integer;
        ``None`` chooses it from the points' density
        (:func:`~conecheck.pairs.grid.cone_refine`). Sky columns: cells across per r_p,max
        (:mod:`~conecheck.pairs.sky_grid`); ``None`` is
        :data:`~conecheck.pairs.sky_grid.SKY_REFINE`.
    los : {"midpoint", "first"}
        Line of sight of a pair: through its midpoint (clustering), or through the point of
        set 1 (a cross count around lenses: projected along each lens's radial direction).
    cells : {"auto", "cubic", "sky"}
        Speed only, the counts are the same: cubic cells, or columns in angle and distance
        for a thin cylinder (midpoint line of sight only). ``"auto"`` takes the columns
        when r_p,max ≤ :data:`SKY_RP_OVER_PI` π_max and no point sits at the observer.

    Returns
    -------
    PairCounts
    """
    bins = make_bins(rp_edges, pi_max, dpi)
    if los not in ("midpoint", "first"):
        raise InputError(f"los: expected 'midpoint' or 'first', got {los!r}")
    if cells not in ("auto", "cubic", "sky"):
        raise InputError(f"cells: expected 'auto', 'cubic' or 'sky', got {cells!r}")
    if cells == "sky" and los != "midpoint":
        raise InputError("cells = 'sky' counts with the midpoint line of sight only")
    p1 = check_points(pos1, w1, reg1, n_regions, "points (set 1)")
    p2 = None if pos2 is None else check_points(pos2, w2, reg2, n_regions, "points (set 2)")
    if los == "first" and p2 is None:
        raise InputError("los = 'first' is for cross counts (a second point set)")
    n2 = p1.n if p2 is None else p2.n
    if p1.n == 0 or n2 == 0:
        shape = (bins.n_rp, bins.n_pi)
        return _assemble(np.zeros(shape), np.zeros((int(n_regions),) + shape), bins, p1, p2,
                         int(n_regions))
    sets = [p1.pos] if p2 is None else [p1.pos, p2.pos]
    if cells != "cubic" and los == "midpoint":
        at_observer = min(float(np.einsum("ij,ij->i", p, p).min()) for p in sets) == 0.0
        if cells == "sky" and at_observer:
            raise InputError("cells = 'sky' needs every point away from the observer (χ > 0)")
        if cells == "sky" or (not at_observer and bins.rp_max <= SKY_RP_OVER_PI * bins.pi_max):
            return _count_rppi_sky(p1, p2, bins, int(n_regions),
                                   SKY_REFINE if refine is None else float(refine))
    if refine is None:
        refine = cone_refine(sets, bins.r_max)
    grid = cone_grid(sets, bins.r_max, refine=max(1, int(refine)))
    offsets = neighbour_offsets(grid, bins.r_max, bins.r_max, "sphere", half=p2 is None)
    g1, g2, tasks = _sorted_cone(grid, p1, p2)
    total, touch = _kernels.rppi_cone(
        g1.x, g1.y, g1.z, g1.los, g1.w, g1.reg, g1.start,
        g2.x, g2.y, g2.z, g2.los, g2.w, g2.reg, g2.start,
        tasks, offsets, grid.dims, grid.origin, grid.cell, bins.rp_edges**2, bins.pi_max,
        bins.dpi, bins.n_pi, int(n_regions), p2 is None, _n_chunks(tasks.size),
        *_lookup_args(bins), _max_cell(g2.start), los == "first")
    return _assemble(total, touch, bins, p1, p2, int(n_regions))


def _count_rppi_sky(p1: Points, p2: Points | None, bins: RpPiBins, n_regions: int,
                    refine: float) -> PairCounts:
    """:func:`count_rppi_cone` with the points in sky columns (midpoint line of sight)."""
    if not refine > 0:
        raise InputError(f"refine: expected a positive number of cells, got {refine!r}")
    sets = [p1.pos] if p2 is None else [p1.pos, p2.pos]
    grid, angles = sky_grid(sets, bins.rp_max, bins.pi_max, refine)
    g1 = sort_into_sky_grid(grid, p1.pos, angles[0], p1.w, p1.reg)
    g2 = g1 if p2 is None else sort_into_sky_grid(grid, p2.pos, angles[1], p2.w, p2.reg)
    tasks = np.flatnonzero(np.diff(g1.start)).astype(np.int64)
    total, touch = _kernels.rppi_cone_sky(
        g1.x, g1.y, g1.z, g1.los, g1.w, g1.reg, g1.start,
        g2.x, g2.y, g2.z, g2.los, g2.w, g2.reg, g2.start, tasks,
        grid.chi_edges, grid.lat0, grid.lon0, grid.dlat, grid.dlon, grid.n_lat, grid.n_lon,
        grid.offset, grid.periodic, bins.rp_edges**2, bins.pi_max, bins.dpi, bins.n_pi,
        n_regions, p2 is None, _n_chunks(tasks.size), *_lookup_args(bins))
    return _assemble(total, touch, bins, p1, p2, n_regions)


def count_smu_box(pos1: ArrayLike, w1: ArrayLike | None = None, reg1: ArrayLike | None = None,
                  pos2: ArrayLike | None = None, w2: ArrayLike | None = None,
                  reg2: ArrayLike | None = None, *, box_size: float, los_axis: int = 2,
                  bins: SMuBins, n_regions: int = 0, refine: int = 2) -> PairCounts:
    """Pair counts in (s, |μ|) bins in a periodic box, μ = |Δ_LOS|/s along ``los_axis``.

    Parameters as in :func:`count_rppi_box`, with ``bins`` (:func:`.binning.make_smu_bins`;
    the largest s must be < L/2). The counts' ``rp_edges`` and ``pi_edges`` hold the s and
    |μ| edges.
    """
    box_size = float(box_size)
    check_box_extent(bins.s_max, box_size, "largest s edge")
    los_axis = _check_axis(los_axis)
    p1 = check_points(pos1, w1, reg1, n_regions, "points (set 1)")
    p2 = None if pos2 is None else check_points(pos2, w2, reg2, n_regions, "points (set 2)")
    grid = box_grid(box_size, bins.s_max, bins.s_max, refine=max(1, int(refine)))
    offsets = neighbour_offsets(grid, bins.s_max, bins.s_max, "sphere", half=p2 is None)
    g1, g2, tasks = _sorted_box(grid, p1, p2, box_size, los_axis)
    total, touch = _kernels.smu_box(
        g1.x, g1.y, g1.z, g1.w, g1.reg, g1.start, g2.x, g2.y, g2.z, g2.w, g2.reg, g2.start,
        tasks, offsets, grid.dims, box_size, bins.s_edges**2, bins.n_mu, int(n_regions),
        p2 is None, _n_chunks(tasks.size))
    return _assemble(total, touch, bins, p1, p2, int(n_regions))


def count_smu_cone(pos1: ArrayLike, w1: ArrayLike | None = None, reg1: ArrayLike | None = None,
                   pos2: ArrayLike | None = None, w2: ArrayLike | None = None,
                   reg2: ArrayLike | None = None, *, bins: SMuBins, n_regions: int = 0,
                   refine: int = 1) -> PairCounts:
    """Pair counts in (s, |μ|) bins on a light cone, line of sight at the pair midpoint.

    Parameters as in :func:`count_rppi_cone`, with ``bins``; μ = |s·l|/(|s||l|) with
    l = r₁ + r₂ (Corrfunc's ``DDsmu_mocks`` convention).
    """
    p1 = check_points(pos1, w1, reg1, n_regions, "points (set 1)")
    p2 = None if pos2 is None else check_points(pos2, w2, reg2, n_regions, "points (set 2)")
    n2 = p1.n if p2 is None else p2.n
    if p1.n == 0 or n2 == 0:
        shape = (bins.n_s, bins.n_mu)
        return _assemble(np.zeros(shape), np.zeros((int(n_regions),) + shape), bins, p1, p2,
                         int(n_regions))
    sets = [p1.pos] if p2 is None else [p1.pos, p2.pos]
    grid = cone_grid(sets, bins.s_max, refine=max(1, int(refine)))
    offsets = neighbour_offsets(grid, bins.s_max, bins.s_max, "sphere", half=p2 is None)
    g1, g2, tasks = _sorted_cone(grid, p1, p2)
    total, touch = _kernels.smu_cone(
        g1.x, g1.y, g1.z, g1.los, g1.w, g1.reg, g1.start,
        g2.x, g2.y, g2.z, g2.los, g2.w, g2.reg, g2.start,
        tasks, offsets, grid.dims, bins.s_edges**2, bins.n_mu, int(n_regions), p2 is None,
        _n_chunks(tasks.size))
    return _assemble(total, touch, bins, p1, p2, int(n_regions))
