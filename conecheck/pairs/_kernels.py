"""Numba kernels of the pair and neighbour counters.

Layout shared by every kernel: points sorted by cell (see :mod:`.grid`), one slice of
contiguous float64 arrays per cell, sorted inside the cell by the LOS coordinate.  The
outer loop runs over cells in parallel; for each point the neighbour cell's candidates
are the contiguous window with |Δ_LOS| < π_max, found by two moving pointers.

Pair counts, per point and neighbour cell, run in passes over that window:

1. a branch-free loop (SIMD-vectorised by LLVM) computing each candidate's separations,
   whether it passes every cut, its π bin and its r_p look-up cell from the bit pattern of
   r_p² (see :class:`.binning.Rp2Lookup`); the cone kernel's division and square root
   vectorise because it is compiled with numpy's error model (no ZeroDivisionError check);
2. a compaction of the accepted candidates by a conditional increment (no branch to
   mispredict);
3. a scalar loop binning the accepted candidates and adding their weights into the
   histogram (histogram updates cannot be vectorised), compiled once per binning mode
   (look-up cells or a scan of the edges, each with or without jackknife tags:
   :data:`BIN_LOOKUP`) so that no test of the mode is left inside it. With jackknife tags
   a window whose cell lies inside one region (:func:`cell_regions`) adds each pair without
   reading its partner's region.

Before a window is scanned, a cheap geometric test skips what cannot hold a pair: on a
cone, a cell pair and then each point against the neighbour cell (:func:`_can_pair`, a
bound that holds wherever the line of sight points); in a box, each point whose distance
across the LOS from the neighbour cell's rectangle exceeds r_p,max. In the cone's sky
columns (:func:`rppi_cone_sky`) the columns within the angular reach of a point's column
are found first, and each point's candidates from all of them are binned in one pass.

Indices in the hot loops are cast to unsigned integers: numba then skips its
negative-index wrap-around, which otherwise costs as much as the arithmetic.

Pair-count kernels accumulate into ``n_chunks`` private accumulators (chunk ``c`` owns
tasks ``c, c + n_chunks, …``); the chunk split depends only on the data, so the sums come
out bit-identical whatever the number of threads.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange, types
from numba.extending import intrinsic

from ..periodic import wrap_coordinate


@intrinsic
def _f2i(typingctx, x):
    """Reinterpret the bits of a float64 as an int64 (no conversion)."""
    sig = types.int64(types.float64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], context.get_value_type(types.int64))

    return sig, codegen


@numba.njit(cache=True, inline="always")
def _wrap(i, n):
    """Cell index modulo n and the number of box lengths crossed (``i % n``, ``i // n``),
    by steps of n: a neighbour cell lies within a grid length or two, and two integer
    divisions per axis and cell visit made the box counts in cylinders of 10⁶ galaxies
    (about 2 points per cell) 10 % slower."""
    k = i
    w = 0
    while k < 0:
        k += n
        w -= 1
    while k >= n:
        k -= n
        w += 1
    return k, w


@numba.njit(cache=True, inline="always")
def _cell_ijk(cell, ny, nz):
    """Grid indices (i, j, k) of a flat cell index (x slowest, z fastest)."""
    return cell // (ny * nz), (cell // nz) % ny, cell % nz


@numba.njit(cache=True, inline="always")
def _rp_bin(rp2, edges2, n_rp):
    """Bin by a linear scan from the top (most pairs lie in the outer bins)."""
    k = n_rp - 1
    while rp2 < edges2[k]:
        k -= 1
    return k


#: Binning modes of the third pass, each compiled on its own (``numba.literally``): with
#: the look-up cells, with a scan of the edges (``Rp2Lookup.scan``), and each of them with
#: jackknife tags. Tested inside the pair loop, the mode is not hoisted out of it by the
#: compiler, and the box kernel ran 30 % slower (benchmarks/RESULTS.md, bench_pairs); a
#: scan branch left inside the tagged loop cost cone DR counts about 10 %.
BIN_LOOKUP, BIN_SCAN, BIN_TOUCH, BIN_TOUCH_SCAN = 0, 1, 2, 3


@numba.njit(cache=True, inline="always")
def _bin_mode(with_touch, scan):
    """The binning mode of a count (see :data:`BIN_LOOKUP`)."""
    if with_touch:
        return BIN_TOUCH_SCAN if scan else BIN_TOUCH
    return BIN_SCAN if scan else BIN_LOOKUP


@numba.njit(cache=True, inline="always")
def _add_tagged(touch, own, other, idx, ww, ri, rj, nb):
    """Add a pair of weight ``ww`` (regions ``ri``, ``rj``) to histogram cell ``idx`` of its
    first point's region (offset ``own``) and, when ``rj`` differs, of its second point's
    in the second half (offset ``other``): the layout of :func:`_reduce`."""
    touch[own + idx] += ww
    if rj != ri:
        touch[other + np.uint64(rj * nb) + idx] += ww


@numba.njit(cache=True, inline="always")
def _bin_window(m, j0, wi, ri, w2, g2, jbuf, cbuf, fbuf, pbuf, lut, nxt, scan, edges2, n_rp,
                n_pi, nb, tot, touch, mode, rcell):
    """Pass 3: bin the ``m`` accepted candidates ``j0 + jbuf[:m]`` of one point (weight
    ``wi``, jackknife region ``ri``) and add their weights to the histogram."""
    if mode == BIN_LOOKUP:
        for a in range(m):
            q = np.uint64(jbuf[a])
            c = np.uint64(cbuf[q])
            k = lut[c] + (fbuf[q] >= nxt[c])
            tot[np.uint64(k * n_pi + pbuf[q])] += wi * w2[np.uint64(j0) + q]
    elif mode == BIN_SCAN:
        for a in range(m):
            q = np.uint64(jbuf[a])
            k = _rp_bin(fbuf[q], edges2, n_rp)
            tot[np.uint64(k * n_pi + pbuf[q])] += wi * w2[np.uint64(j0) + q]
    elif mode == BIN_TOUCH_SCAN:
        # jackknife tags, edges scanned (layout of :func:`_reduce`): every pair goes into its
        # first point's region, and into its second point's as well when that differs
        own = np.uint64(ri * nb)
        other = np.uint64(touch.size // 2)
        for a in range(m):
            q = np.uint64(jbuf[a])
            idx = np.uint64(_rp_bin(fbuf[q], edges2, n_rp) * n_pi + pbuf[q])
            j = np.uint64(j0) + q
            _add_tagged(touch, own, other, idx, wi * w2[j], ri, np.int64(g2[j]), nb)
    else:
        # jackknife tags with the look-up cells, as above; ``rcell`` is the one region of
        # every candidate of the window (its cell lies inside one region, the usual case),
        # or −1 when the cell straddles regions and each candidate's is read
        own = np.uint64(ri * nb)
        other = np.uint64(touch.size // 2)
        if rcell < 0:
            for a in range(m):
                q = np.uint64(jbuf[a])
                c = np.uint64(cbuf[q])
                idx = np.uint64((lut[c] + (fbuf[q] >= nxt[c])) * n_pi + pbuf[q])
                j = np.uint64(j0) + q
                _add_tagged(touch, own, other, idx, wi * w2[j], ri, np.int64(g2[j]), nb)
        elif rcell == ri:
            for a in range(m):
                q = np.uint64(jbuf[a])
                c = np.uint64(cbuf[q])
                k = lut[c] + (fbuf[q] >= nxt[c])
                touch[own + np.uint64(k * n_pi + pbuf[q])] += wi * w2[np.uint64(j0) + q]
        else:
            cross = other + np.uint64(rcell * nb)
            for a in range(m):
                q = np.uint64(jbuf[a])
                c = np.uint64(cbuf[q])
                k = lut[c] + (fbuf[q] >= nxt[c])
                idx = np.uint64(k * n_pi + pbuf[q])
                ww = wi * w2[np.uint64(j0) + q]
                touch[own + idx] += ww
                touch[cross + idx] += ww


@numba.njit(cache=True)
def cell_regions(reg, start):
    """The jackknife region shared by every point of each cell (points sorted by cell,
    cell c holding ``start[c]:start[c + 1]``), or −1 for a cell that is empty or straddles
    regions."""
    n = start.size - 1
    out = np.full(n, -1, dtype=np.int64)
    for c in range(n):
        s = start[c]
        e = start[c + 1]
        if e == s:
            continue
        r = np.int64(reg[s])
        uniform = True
        for i in range(s + 1, e):
            if np.int64(reg[i]) != r:
                uniform = False
                break
        if uniform:
            out[c] = r
    return out


@numba.njit(cache=True)
def _block_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2,
               sx, sy, sz, same, edges2, pi_max, inv_dpi, n_pi,
               lut, nxt, shift, base, scan, fbuf, cbuf, pbuf, jbuf, tot, touch, mode, rcell,
               bx0, bx1, by0, by1, reach2):
    """All pairs between one cell of set 1 and one (shifted) cell of set 2, periodic box.

    A point of set 1 farther across the LOS than √``reach2`` from the second cell's
    rectangle [bx0, bx1] × [by0, by1] has no partner there and is skipped. ``mode`` is a
    compile-time binning mode (:data:`BIN_LOOKUP`).
    """
    numba.literally(mode)
    n_rp = edges2.size - 1
    rpmin2 = edges2[0]
    rpmax2 = edges2[n_rp]
    dummy = lut.size - 1
    last = lut.size - 2
    nb = (n_rp + 1) * n_pi
    jlo = s2
    jhi = s2
    for i in range(s1, e1):
        zi = z1[i] - sz
        while jlo < e2 and z2[jlo] <= zi - pi_max:
            jlo += 1
        if jhi < jlo:
            jhi = jlo
        while jhi < e2 and z2[jhi] < zi + pi_max:
            jhi += 1
        j0 = jlo
        if same and j0 <= i:
            j0 = i + 1
        nwin = jhi - j0
        if nwin <= 0:
            continue
        xi = x1[i] - sx
        yi = y1[i] - sy
        gx = max(bx0 - xi, xi - bx1, 0.0)
        gy = max(by0 - yi, yi - by1, 0.0)
        if gx * gx + gy * gy >= reach2:
            continue
        for q in range(nwin):
            j = np.uint64(j0 + q)
            dx = x2[j] - xi
            dy = y2[j] - yi
            rp2 = dx * dx + dy * dy
            c = min(max((_f2i(rp2) >> shift) - base, 0), last)
            cbuf[q] = c if (rp2 < rpmax2) & (rp2 >= rpmin2) else dummy
            pbuf[q] = min(np.int64(abs(z2[j] - zi) * inv_dpi), n_pi - 1)
            fbuf[q] = rp2
        m = 0
        for q in range(nwin):
            jbuf[m] = q
            m += cbuf[q] != dummy
        _bin_window(m, j0, w1[i], np.int64(g1[i]), w2, g2, jbuf, cbuf, fbuf, pbuf, lut, nxt,
                    scan, edges2, n_rp, n_pi, nb, tot, touch, mode, rcell)


@numba.njit(cache=True, inline="always")
def _touch_size(n_regions, nb):
    """Length of one chunk's jackknife accumulator (see :func:`_reduce`)."""
    return 2 * n_regions * nb if n_regions > 0 else 1


@numba.njit(cache=True, inline="always")
def _add_pair(tot, touch, idx, ww, ri, rj, nb, with_touch):
    """Add one pair of weight ``ww`` to histogram cell ``idx`` (layout of :func:`_reduce`)."""
    if with_touch:
        _add_tagged(touch, np.uint64(ri * nb), np.uint64(touch.size // 2), idx, ww, ri, rj, nb)
    else:
        tot[idx] += ww


@numba.njit(cache=True)
def _reduce(tot, touch, n_regions, n_rp, n_pi):
    """Sum the chunk accumulators and drop the overflow row.

    With jackknife regions a pair is added once by its first point's region (``touch[c,
    r·nb + …]``, the first half) and once more, in the second half, by its second point's
    region when that differs: one histogram update for most pairs instead of three (the
    total and each region the pair touches). Here ``total`` is the sum over the first half
    and ``touch[k]`` the first half plus the second of region k. With this layout and the
    one-region cells of :func:`_bin_window`, a cone DR count with 25 regions takes about
    1.2 times the time of the same count without regions, against 1.4 times before
    (benchmarks/RESULTS.md).
    """
    n_chunks = tot.shape[0]
    nb = (n_rp + 1) * n_pi
    n = n_rp * n_pi
    total = np.zeros((n_rp, n_pi))
    tch = np.zeros((n_regions, n_rp, n_pi))
    other = n_regions * nb
    for c in range(n_chunks):
        if n_regions == 0:
            total += tot[c, :n].reshape(n_rp, n_pi)
        for r in range(n_regions):
            own = touch[c, r * nb: r * nb + n].reshape(n_rp, n_pi)
            total += own
            tch[r] += own
            tch[r] += touch[c, other + r * nb: other + r * nb + n].reshape(n_rp, n_pi)
    return total, tch


@numba.njit(parallel=True, cache=True)
def rppi_box(x1, y1, z1, w1, g1, start1, x2, y2, z2, w2, g2, start2, tasks, offsets,
             dims, box_size, edges2, pi_max, dpi, n_pi, n_regions, auto, n_chunks,
             lut, nxt, shift, base, scan, max_cell):
    """Weighted (r_p, |π|) pair counts in a periodic box, LOS along z.

    Returns ``(total[n_rp, n_pi], touch[n_regions, n_rp, n_pi])``.
    """
    n_rp = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    inv_dpi = 1.0 / dpi
    with_touch = n_regions > 0
    mode = _bin_mode(with_touch, scan)
    nb = (n_rp + 1) * n_pi
    rpmax2 = edges2[n_rp]
    # cell sides across the LOS; the tolerance covers a point that floor() put one
    # rounding step outside its cell
    cx = box_size / nx
    cy = box_size / ny
    tol = 1e-9 * box_size
    tot = np.zeros((n_chunks, nb))
    touch = np.zeros((n_chunks, _touch_size(n_regions, nb)))
    # the one region of each cell of set 2, if it has one (see _bin_window); read only
    # with jackknife tags
    cells2 = cell_regions(g2, start2) if with_touch else np.empty(0, dtype=np.int64)
    for c in prange(n_chunks):
        tot_c = tot[c]
        touch_c = touch[c]
        fbuf = np.empty(max_cell)
        cbuf = np.empty(max_cell, dtype=np.int64)
        pbuf = np.empty(max_cell, dtype=np.int64)
        jbuf = np.empty(max_cell, dtype=np.int64)
        for t in range(c, tasks.size, n_chunks):
            cell = tasks[t]
            ix, iy, iz = _cell_ijk(cell, ny, nz)
            s1 = start1[cell]
            e1 = start1[cell + 1]
            for o in range(offsets.shape[0]):
                kx, wx = _wrap(ix + offsets[o, 0], nx)
                ky, wy = _wrap(iy + offsets[o, 1], ny)
                kz, wz = _wrap(iz + offsets[o, 2], nz)
                cell2 = (kx * ny + ky) * nz + kz
                s2 = start2[cell2]
                e2 = start2[cell2 + 1]
                if s2 == e2:
                    continue
                same = auto and o == 0
                rc = cells2[cell2] if with_touch else np.int64(-1)
                sx, sy, sz = wx * box_size, wy * box_size, wz * box_size
                bx0, bx1 = kx * cx - tol, (kx + 1) * cx + tol
                by0, by1 = ky * cy - tol, (ky + 1) * cy + tol
                # one call per binning mode, each with a literal mode (see BIN_LOOKUP); a
                # literal argument of this kernel instead made cone counts 1.4-1.5x slower
                if mode == BIN_TOUCH:
                    _block_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2, sx, sy,
                               sz, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                               base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c, BIN_TOUCH,
                               rc, bx0, bx1, by0, by1, rpmax2)
                elif mode == BIN_TOUCH_SCAN:
                    _block_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2, sx, sy,
                               sz, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                               base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c,
                               BIN_TOUCH_SCAN, rc, bx0, bx1, by0, by1, rpmax2)
                elif mode == BIN_SCAN:
                    _block_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2, sx, sy,
                               sz, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                               base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c, BIN_SCAN,
                               rc, bx0, bx1, by0, by1, rpmax2)
                else:
                    _block_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2, sx, sy,
                               sz, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                               base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c, BIN_LOOKUP,
                               rc, bx0, bx1, by0, by1, rpmax2)
    return _reduce(tot, touch, n_regions, n_rp, n_pi)


@numba.njit(cache=True, inline="always", error_model="numpy")
def _can_pair(ax, ay, az, dx, dy, dz, ex, ey, ez, lx, ly, lz, first_los, rp_max, pi_max,
              s_max):
    """Whether two axis-aligned boxes can hold a pair with r_p < ``rp_max`` and
    |π| < ``pi_max`` (observer at the origin).

    The first box has centre a, the second a + d. A pair's separation s lies in the box
    d ± e and its line of sight l (r₁ + r₂, or r₁ for ``first_los``) in the box m ± λ,
    m = 2a + d (or a), where e and λ are sums of the boxes' half-sides. With u = m/|m|
    and α the largest angle between l and u (sin α ≤ |λ|/|m|), turning the axis by α
    moves a point at distance |s| by at most |s| sin α: r_p ≥ d_⊥ cos α − |s| sin α and
    |π| ≥ d_∥ cos α − |s| sin α, where d_⊥ and d_∥ are lower bounds on the separation
    box's distance from, and along, the u axis (its centre's minus the box's support in
    that direction). A pair also needs |s| < ``s_max``. The test is conservative (the
    kernels' own cuts decide); a 10⁻⁹ relative margin covers rounding.
    """
    if first_los:
        mx, my, mz = ax, ay, az
    else:
        mx, my, mz = 2.0 * ax + dx, 2.0 * ay + dy, 2.0 * az + dz
    rho2 = lx * lx + ly * ly + lz * lz
    m2 = mx * mx + my * my + mz * mz
    if rho2 >= m2:
        return True
    sin_a = np.sqrt(rho2 / m2)
    cos_a = np.sqrt(1.0 - sin_a * sin_a)
    inv_m = 1.0 / np.sqrt(m2)
    ux, uy, uz = mx * inv_m, my * inv_m, mz * inv_m
    par = dx * ux + dy * uy + dz * uz
    px, py, pz = dx - par * ux, dy - par * uy, dz - par * uz
    perp = np.sqrt(px * px + py * py + pz * pz)
    slack = s_max * sin_a + 1e-9 * (s_max + np.sqrt(m2))
    d_par = abs(par) - (ex * abs(ux) + ey * abs(uy) + ez * abs(uz))
    if d_par * cos_a - slack >= pi_max:
        return False
    if perp > 0.0:
        d_perp = perp - (ex * abs(px) + ey * abs(py) + ez * abs(pz)) / perp
        if d_perp * cos_a - slack >= rp_max:
            return False
    return True


@numba.njit(cache=True, inline="always", error_model="numpy")
def _cone_candidate(s2v, sl, l2, smax2, pimax2, rpmax2, rpmin2, shift, base, last, dummy,
                    inv_dpi, n_pi):
    """One cone candidate from |s|², s·l and |l|² (l its line of sight): its r_p look-up
    cell, or ``dummy`` when a cut rejects it, its π bin and r_p²."""
    pi2 = sl * sl / l2
    rp2 = s2v - pi2
    c = min(max((_f2i(rp2) >> shift) - base, 0), last)
    ok = (s2v < smax2) & (pi2 < pimax2) & (rp2 < rpmax2) & (rp2 >= rpmin2)
    return (c if ok else dummy), min(np.int64(np.sqrt(pi2) * inv_dpi), n_pi - 1), rp2


@numba.njit(cache=True, error_model="numpy")
def _block_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2, e2, same,
                edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift, base, scan,
                fbuf, cbuf, pbuf, jbuf, tot, touch, mode, rcell, first_los, window,
                bx, by, bz, hx, hy, hz, qx, qy, qz, rp_max, s_max):
    """All pairs between two cells of a cone (observer at the origin); ``mode`` is a
    compile-time binning mode (:data:`BIN_LOOKUP`)."""
    numba.literally(mode)
    n_rp = edges2.size - 1
    rpmin2 = edges2[0]
    rpmax2 = edges2[n_rp]
    pimax2 = pi_max * pi_max
    smax2 = rpmax2 + pimax2
    dummy = lut.size - 1
    last = lut.size - 2
    nb = (n_rp + 1) * n_pi
    jlo = s2
    jhi = s2
    for i in range(s1, e1):
        ci = c1[i]
        while jlo < e2 and c2[jlo] <= ci - window:
            jlo += 1
        if jhi < jlo:
            jhi = jlo
        while jhi < e2 and c2[jhi] < ci + window:
            jhi += 1
        j0 = jlo
        if same and j0 <= i:
            j0 = i + 1
        nwin = jhi - j0
        if nwin <= 0:
            continue
        xi = x1[i]
        yi = y1[i]
        zi = z1[i]
        if not _can_pair(xi, yi, zi, bx - xi, by - yi, bz - zi, hx, hy, hz, qx, qy, qz,
                         first_los, rp_max, pi_max, s_max):
            continue
        ci2 = ci * ci
        for q in range(nwin):
            j = np.uint64(j0 + q)
            cj = c2[j]
            dx = x2[j] - xi
            dy = y2[j] - yi
            dz = z2[j] - zi
            s2v = dx * dx + dy * dy + dz * dz
            if first_los:
                sl = dx * xi + dy * yi + dz * zi
                l2 = ci2
            else:
                sl = cj * cj - ci2
                l2 = 2.0 * (ci2 + cj * cj) - s2v
            cbuf[q], pbuf[q], fbuf[q] = _cone_candidate(s2v, sl, l2, smax2, pimax2, rpmax2,
                                                        rpmin2, shift, base, last, dummy,
                                                        inv_dpi, n_pi)
        m = 0
        for q in range(nwin):
            jbuf[m] = q
            m += cbuf[q] != dummy
        if m == 0:
            continue
        _bin_window(m, j0, w1[i], np.int64(g1[i]), w2, g2, jbuf, cbuf, fbuf, pbuf, lut, nxt,
                    scan, edges2, n_rp, n_pi, nb, tot, touch, mode, rcell)


@numba.njit(parallel=True, cache=True)
def rppi_cone(x1, y1, z1, c1, w1, g1, start1, x2, y2, z2, c2, w2, g2, start2, tasks,
              offsets, dims, origin, side, edges2, pi_max, dpi, n_pi, n_regions, auto,
              n_chunks, lut, nxt, shift, base, scan, max_cell, first_los):
    """Weighted (r_p, |π|) pair counts on a cone (observer at origin; midpoint LOS, or the
    first point's with ``first_los``).

    Cell pairs that :func:`_can_pair` rules out are skipped, so the candidates of a
    point hug its (r_p, π) cylinder wherever the line of sight points, on fine cells.
    """
    rp_max = np.sqrt(edges2[edges2.size - 1])
    s_max = np.sqrt(edges2[edges2.size - 1] + pi_max * pi_max)
    window = s_max if first_los else pi_max
    # half-sides of the LOS box of a cell pair (r₁ + r₂, or r₁) and of a point-cell pair
    f = 0.5 if first_los else 1.0
    lx, ly, lz = f * side[0], f * side[1], f * side[2]
    g = 0.0 if first_los else 0.5
    qx, qy, qz = g * side[0], g * side[1], g * side[2]
    n_rp = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    inv_dpi = 1.0 / dpi
    with_touch = n_regions > 0
    mode = _bin_mode(with_touch, scan)
    nb = (n_rp + 1) * n_pi
    tot = np.zeros((n_chunks, nb))
    touch = np.zeros((n_chunks, _touch_size(n_regions, nb)))
    # the one region of each cell of set 2, if it has one (see _bin_window); read only
    # with jackknife tags
    cells2 = cell_regions(g2, start2) if with_touch else np.empty(0, dtype=np.int64)
    for c in prange(n_chunks):
        tot_c = tot[c]
        touch_c = touch[c]
        fbuf = np.empty(max_cell)
        cbuf = np.empty(max_cell, dtype=np.int64)
        pbuf = np.empty(max_cell, dtype=np.int64)
        jbuf = np.empty(max_cell, dtype=np.int64)
        for t in range(c, tasks.size, n_chunks):
            cell = tasks[t]
            ix, iy, iz = _cell_ijk(cell, ny, nz)
            s1 = start1[cell]
            e1 = start1[cell + 1]
            ax = origin[0] + (ix + 0.5) * side[0]
            ay = origin[1] + (iy + 0.5) * side[1]
            az = origin[2] + (iz + 0.5) * side[2]
            for o in range(offsets.shape[0]):
                kx = ix + offsets[o, 0]
                ky = iy + offsets[o, 1]
                kz = iz + offsets[o, 2]
                if kx < 0 or kx >= nx or ky < 0 or ky >= ny or kz < 0 or kz >= nz:
                    continue
                cell2 = (kx * ny + ky) * nz + kz
                s2 = start2[cell2]
                e2 = start2[cell2 + 1]
                if s2 == e2:
                    continue
                if not _can_pair(ax, ay, az, offsets[o, 0] * side[0], offsets[o, 1] * side[1],
                                 offsets[o, 2] * side[2], side[0], side[1], side[2],
                                 lx, ly, lz, first_los, rp_max, pi_max, s_max):
                    continue
                same = auto and o == 0
                rc = cells2[cell2] if with_touch else np.int64(-1)
                bx = origin[0] + (kx + 0.5) * side[0]
                by = origin[1] + (ky + 0.5) * side[1]
                bz = origin[2] + (kz + 0.5) * side[2]
                hx, hy, hz = 0.5 * side[0], 0.5 * side[1], 0.5 * side[2]
                # one call per binning mode, each with a literal mode (see BIN_LOOKUP); a
                # literal argument of this kernel instead made cone counts 1.4-1.5x slower
                if mode == BIN_TOUCH:
                    _block_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2,
                                e2, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                                base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c, BIN_TOUCH,
                                rc, first_los, window, bx, by, bz, hx, hy, hz, qx, qy, qz, rp_max,
                                s_max)
                elif mode == BIN_TOUCH_SCAN:
                    _block_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2,
                                e2, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                                base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c,
                                BIN_TOUCH_SCAN, rc, first_los, window, bx, by, bz, hx, hy, hz,
                                qx, qy, qz, rp_max, s_max)
                elif mode == BIN_SCAN:
                    _block_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2,
                                e2, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                                base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c, BIN_SCAN,
                                rc, first_los, window, bx, by, bz, hx, hy, hz, qx, qy, qz, rp_max,
                                s_max)
                else:
                    _block_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2,
                                e2, same, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                                base, scan, fbuf, cbuf, pbuf, jbuf, tot_c, touch_c,
                                BIN_LOOKUP, rc, first_los, window, bx, by, bz, hx, hy, hz, qx, qy,
                                qz, rp_max, s_max)
    return _reduce(tot, touch, n_regions, n_rp, n_pi)


@numba.njit(parallel=True, cache=True)
def neighbours_box_kernel(cx, cy, cz, cidx, cself, cstart, tasks, x2, y2, z2, w2, idx2,
                          start2, offsets, dims, box_size, edges2, h, sphere, out):
    """Per-centre weighted neighbour counts in r_p (or |s|) shells, periodic box.

    ``out[i, b]`` += weight of points with ``edges[b] ≤ r < edges[b+1]``, where r is r_p
    with |Δz| < h (cylinders, annuli) or |s| (``sphere``). The centres are sorted into
    the points' grid (by cell, then z; ``cidx`` their original index, ``cself`` the index
    among the points of each one's own point, or −1, which is skipped); each cell of
    centres meets each neighbour cell once, with a moving z window, and only writes the
    rows of its own centres, so cells run in parallel without sharing a row.
    """
    n_b = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    lo2 = edges2[0]
    hi2 = edges2[n_b]
    zmax = np.sqrt(hi2) if sphere else h
    for t in prange(tasks.size):
        cell = tasks[t]
        ix, iy, iz = _cell_ijk(cell, ny, nz)
        s1 = cstart[cell]
        e1 = cstart[cell + 1]
        for o in range(offsets.shape[0]):
            kx, wx = _wrap(ix + offsets[o, 0], nx)
            ky, wy = _wrap(iy + offsets[o, 1], ny)
            kz, wz = _wrap(iz + offsets[o, 2], nz)
            cell2 = (kx * ny + ky) * nz + kz
            s2 = start2[cell2]
            e2 = start2[cell2 + 1]
            if s2 == e2:
                continue
            sx = wx * box_size
            sy = wy * box_size
            sz = wz * box_size
            jlo = s2
            for i in range(s1, e1):
                zi = cz[i] - sz
                while jlo < e2 and z2[jlo] <= zi - zmax:
                    jlo += 1
                xi = cx[i] - sx
                yi = cy[i] - sy
                me = cself[i]
                row = cidx[i]
                for j in range(jlo, e2):
                    dz = z2[j] - zi
                    if dz >= zmax:
                        break
                    if idx2[j] == me:
                        continue
                    dx = x2[j] - xi
                    dy = y2[j] - yi
                    r2 = dx * dx + dy * dy
                    if sphere:
                        r2 += dz * dz
                    if r2 >= hi2 or r2 < lo2:
                        continue
                    out[row, _rp_bin(r2, edges2, n_b)] += w2[j]


@numba.njit(parallel=True, cache=True)
def nearest_box_kernel(px, py, pz, cx, cy, cz, cstart, dims, box_size, r2_max, best):
    """Smallest squared distance from each centre to the points, periodic box.

    The few centres (wrapped into [0, L)) are sorted into a grid of ``dims`` cells no
    smaller than r_max, ``cstart`` their cell offsets; the many points are streamed
    unsorted, each visiting the 27 centre cells around its own. The points are split into
    ``best.shape[0]`` fixed chunks run in parallel, chunk k lowering only ``best[k, :]``
    (initialised to r2_max), so the minimum over chunks does not depend on the threads.
    """
    nx, ny, nz = dims[0], dims[1], dims[2]
    cell_x = box_size / nx
    cell_y = box_size / ny
    cell_z = box_size / nz
    n = px.size
    n_chunks = best.shape[0]
    for k in prange(n_chunks):
        for i in range(k * n // n_chunks, (k + 1) * n // n_chunks):
            x = wrap_coordinate(px[i], box_size)
            y = wrap_coordinate(py[i], box_size)
            z = wrap_coordinate(pz[i], box_size)
            ix = min(int(x / cell_x), nx - 1)
            iy = min(int(y / cell_y), ny - 1)
            iz = min(int(z / cell_z), nz - 1)
            for ox in range(-1, 2):
                kx, wx = _wrap(ix + ox, nx)
                for oy in range(-1, 2):
                    ky, wy = _wrap(iy + oy, ny)
                    for oz in range(-1, 2):
                        kz, wz = _wrap(iz + oz, nz)
                        cell = (kx * ny + ky) * nz + kz
                        s = cstart[cell]
                        e = cstart[cell + 1]
                        if s == e:
                            continue
                        # the centres of cell k lie wx box lengths away: compare their
                        # image with the point, or equally the point shifted back
                        xi = x - wx * box_size
                        yi = y - wy * box_size
                        zi = z - wz * box_size
                        for j in range(s, e):
                            dx = cx[j] - xi
                            dy = cy[j] - yi
                            dz = cz[j] - zi
                            r2 = dx * dx + dy * dy + dz * dz
                            if r2 < best[k, j]:
                                best[k, j] = r2


@numba.njit(parallel=True, cache=True)
def neighbours_cone_kernel(cx, cy, cz, self_idx, x2, y2, z2, c2, w2, idx2, start2, offsets,
                           dims, origin, cell, edges2, h, sphere, out):
    """Per-centre weighted neighbour counts on a cone (midpoint LOS for cylinders).

    Same meaning as :func:`neighbours_box_kernel`; for ``sphere`` the χ window is |s|.
    """
    n_b = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    lo2 = edges2[0]
    hi2 = edges2[n_b]
    h2 = h * h
    smax2 = hi2 if sphere else hi2 + h2
    cwin = np.sqrt(hi2) if sphere else h
    for i in prange(cx.size):
        xi = cx[i]
        yi = cy[i]
        zi = cz[i]
        ci2 = xi * xi + yi * yi + zi * zi
        ci = np.sqrt(ci2)
        ix = min(max(int((xi - origin[0]) / cell[0]), 0), nx - 1)
        iy = min(max(int((yi - origin[1]) / cell[1]), 0), ny - 1)
        iz = min(max(int((zi - origin[2]) / cell[2]), 0), nz - 1)
        me = self_idx[i]
        for o in range(offsets.shape[0]):
            kx = ix + offsets[o, 0]
            ky = iy + offsets[o, 1]
            kz = iz + offsets[o, 2]
            if kx < 0 or kx >= nx or ky < 0 or ky >= ny or kz < 0 or kz >= nz:
                continue
            cell2 = (kx * ny + ky) * nz + kz
            s2 = start2[cell2]
            e2 = start2[cell2 + 1]
            if s2 == e2:
                continue
            j0 = s2 + np.searchsorted(c2[s2:e2], ci - cwin, side="right")
            for j in range(j0, e2):
                cj = c2[j]
                if cj - ci >= cwin:
                    break
                if idx2[j] == me:
                    continue
                dx = x2[j] - xi
                dy = y2[j] - yi
                dz = z2[j] - zi
                s2v = dx * dx + dy * dy + dz * dz
                if s2v >= smax2:
                    continue
                if sphere:
                    r2 = s2v
                else:
                    sl = cj * cj - ci2
                    l2 = 2.0 * (ci2 + cj * cj) - s2v
                    if sl * sl >= h2 * l2:
                        continue
                    r2 = s2v - sl * sl / l2
                if r2 >= hi2 or r2 < lo2:
                    continue
                out[i, _rp_bin(r2, edges2, n_b)] += w2[j]


@numba.njit(cache=True)
def _block_smu_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2, sx, sy, sz, same,
                   edges2, n_mu, tot, touch, with_touch):
    """All pairs of two (shifted) cells in (s, |μ|) bins, periodic box, LOS along z."""
    n_s = edges2.size - 1
    smin2 = edges2[0]
    smax2 = edges2[n_s]
    smax = np.sqrt(smax2)
    nb = (n_s + 1) * n_mu
    jlo = s2
    for i in range(s1, e1):
        zi = z1[i] - sz
        while jlo < e2 and z2[jlo] <= zi - smax:
            jlo += 1
        j0 = jlo
        if same and j0 <= i:
            j0 = i + 1
        xi = x1[i] - sx
        yi = y1[i] - sy
        wi = w1[i]
        ri = np.int64(g1[i])
        for j in range(j0, e2):
            dz = z2[j] - zi
            if dz >= smax:
                break
            dx = x2[j] - xi
            dy = y2[j] - yi
            ss = dx * dx + dy * dy + dz * dz
            if ss >= smax2 or ss < smin2 or ss == 0.0:
                continue
            k = _rp_bin(ss, edges2, n_s)
            p = min(np.int64(abs(dz) / np.sqrt(ss) * n_mu), n_mu - 1)
            _add_pair(tot, touch, np.uint64(k * n_mu + p), wi * w2[j], ri, np.int64(g2[j]),
                      nb, with_touch)


@numba.njit(parallel=True, cache=True)
def smu_box(x1, y1, z1, w1, g1, start1, x2, y2, z2, w2, g2, start2, tasks, offsets, dims,
            box_size, edges2, n_mu, n_regions, auto, n_chunks):
    """Weighted (s, |μ|) pair counts in a periodic box, LOS along z, μ = |Δz|/s.

    Returns ``(total[n_s, n_mu], touch[n_regions, n_s, n_mu])`` with the chunked,
    thread-count-independent sums of :func:`rppi_box`.
    """
    n_s = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    with_touch = n_regions > 0
    nb = (n_s + 1) * n_mu
    tot = np.zeros((n_chunks, nb))
    touch = np.zeros((n_chunks, _touch_size(n_regions, nb)))
    for c in prange(n_chunks):
        tot_c = tot[c]
        touch_c = touch[c]
        for t in range(c, tasks.size, n_chunks):
            cell = tasks[t]
            ix, iy, iz = _cell_ijk(cell, ny, nz)
            s1 = start1[cell]
            e1 = start1[cell + 1]
            for o in range(offsets.shape[0]):
                kx, wx = _wrap(ix + offsets[o, 0], nx)
                ky, wy = _wrap(iy + offsets[o, 1], ny)
                kz, wz = _wrap(iz + offsets[o, 2], nz)
                cell2 = (kx * ny + ky) * nz + kz
                s2 = start2[cell2]
                e2 = start2[cell2 + 1]
                if s2 == e2:
                    continue
                same = auto and o == 0
                _block_smu_box(x1, y1, z1, w1, g1, s1, e1, x2, y2, z2, w2, g2, s2, e2,
                               wx * box_size, wy * box_size, wz * box_size, same, edges2,
                               n_mu, tot_c, touch_c, with_touch)
    return _reduce(tot, touch, n_regions, n_s, n_mu)


@numba.njit(cache=True)
def _block_smu_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2, e2, same,
                    edges2, n_mu, tot, touch, with_touch):
    """All pairs of two cone cells in (s, |μ|) bins, LOS at the pair midpoint.

    With l = r₁ + r₂: s·l = χ₂² − χ₁² and |l|² = 2χ₁² + 2χ₂² − s², so μ² = (s·l)²/(s²|l|²).
    """
    n_s = edges2.size - 1
    smin2 = edges2[0]
    smax2 = edges2[n_s]
    smax = np.sqrt(smax2)
    nb = (n_s + 1) * n_mu
    jlo = s2
    for i in range(s1, e1):
        ci = c1[i]
        while jlo < e2 and c2[jlo] <= ci - smax:
            jlo += 1
        j0 = jlo
        if same and j0 <= i:
            j0 = i + 1
        xi = x1[i]
        yi = y1[i]
        zi = z1[i]
        ci2 = ci * ci
        wi = w1[i]
        ri = np.int64(g1[i])
        for j in range(j0, e2):
            cj = c2[j]
            if cj - ci >= smax:
                break
            dx = x2[j] - xi
            dy = y2[j] - yi
            dz = z2[j] - zi
            ss = dx * dx + dy * dy + dz * dz
            if ss >= smax2 or ss < smin2 or ss == 0.0:
                continue
            sl = cj * cj - ci2
            l2 = 2.0 * (ci2 + cj * cj) - ss
            mu = np.sqrt(min(sl * sl / (ss * l2), 1.0))
            k = _rp_bin(ss, edges2, n_s)
            p = min(np.int64(mu * n_mu), n_mu - 1)
            _add_pair(tot, touch, np.uint64(k * n_mu + p), wi * w2[j], ri, np.int64(g2[j]),
                      nb, with_touch)


@numba.njit(parallel=True, cache=True)
def smu_cone(x1, y1, z1, c1, w1, g1, start1, x2, y2, z2, c2, w2, g2, start2, tasks, offsets,
             dims, edges2, n_mu, n_regions, auto, n_chunks):
    """Weighted (s, |μ|) pair counts on a cone (midpoint LOS, observer at the origin)."""
    n_s = edges2.size - 1
    nx, ny, nz = dims[0], dims[1], dims[2]
    with_touch = n_regions > 0
    nb = (n_s + 1) * n_mu
    tot = np.zeros((n_chunks, nb))
    touch = np.zeros((n_chunks, _touch_size(n_regions, nb)))
    for c in prange(n_chunks):
        tot_c = tot[c]
        touch_c = touch[c]
        for t in range(c, tasks.size, n_chunks):
            cell = tasks[t]
            ix, iy, iz = _cell_ijk(cell, ny, nz)
            s1 = start1[cell]
            e1 = start1[cell + 1]
            for o in range(offsets.shape[0]):
                kx = ix + offsets[o, 0]
                ky = iy + offsets[o, 1]
                kz = iz + offsets[o, 2]
                if kx < 0 or kx >= nx or ky < 0 or ky >= ny or kz < 0 or kz >= nz:
                    continue
                cell2 = (kx * ny + ky) * nz + kz
                s2 = start2[cell2]
                e2 = start2[cell2 + 1]
                if s2 == e2:
                    continue
                same = auto and o == 0
                _block_smu_cone(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, s2,
                                e2, same, edges2, n_mu, tot_c, touch_c, with_touch)
    return _reduce(tot, touch, n_regions, n_s, n_mu)


@numba.njit(cache=True, inline="always")
def _sky_reach(lo_a, lo_b, rp_max, pi_max, s_max):
    """Largest angle [rad] between a point at χ ≥ ``lo_a`` and one at χ ≥ ``lo_b`` that can
    pair (r_p < ``rp_max``, |π| < ``pi_max``), with a 10⁻⁹ margin for rounding (the
    kernels' own cuts decide); see :mod:`.sky_grid`."""
    # a partner lies within π_max in χ, so each point is at least the other's floor − π_max
    a = max(lo_a, lo_b - pi_max)
    b = max(lo_b, lo_a - pi_max)
    if a <= 0.0 or b <= 0.0 or a * a + b * b <= s_max * s_max:
        return np.pi
    sin_t = rp_max * 0.5 * (1.0 / a + 1.0 / b)
    if sin_t >= 1.0:
        return 0.5 * np.pi + 1e-9
    return np.arcsin(sin_t) * (1.0 + 1e-9) + 1e-12


@numba.njit(cache=True, inline="always")
def _lon_reach(theta, gap, cc):
    """Largest longitude difference [rad] of two points at angle ≤ ``theta`` whose latitudes
    differ by at least ``gap`` and whose cosines multiply to at least ``cc``, or π (every
    longitude): sin²(θ/2) = sin²(Δφ/2) + cos φ₁ cos φ₂ sin²(Δλ/2)."""
    if theta >= np.pi:
        return np.pi
    sh = np.sin(0.5 * theta)
    sg = np.sin(0.5 * gap)
    rhs = sh * sh - sg * sg
    if cc <= 0.0 or rhs >= cc:
        return np.pi
    return 2.0 * np.arcsin(np.sqrt(rhs / cc)) * (1.0 + 1e-9) + 1e-12


@numba.njit(cache=True, error_model="numpy")
def _block_sky(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, bs, be, n_b, jlo, jhi,
               same_cell, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift, base, scan, fbuf,
               cbuf, pbuf, jbuf, wbuf, gbuf, tot, touch, mode, rcell):
    """All pairs between one sky column of set 1 (points ``s1:e1``) and its ``n_b``
    neighbour columns of set 2 (``bs[k]:be[k]``; ``same_cell`` is the index k of the column
    itself in an auto count, or −1). Each point's candidates from every column go into one
    buffer, so the compaction and binning passes run once per point rather than once per
    point and column; ``mode`` is a compile-time binning mode (:data:`BIN_LOOKUP`)."""
    numba.literally(mode)
    n_rp = edges2.size - 1
    rpmin2 = edges2[0]
    rpmax2 = edges2[n_rp]
    pimax2 = pi_max * pi_max
    smax2 = rpmax2 + pimax2
    dummy = lut.size - 1
    last = lut.size - 2
    nb = (n_rp + 1) * n_pi
    for k in range(n_b):
        jlo[k] = bs[k]
        jhi[k] = bs[k]
    for i in range(s1, e1):
        ci = c1[i]
        ci2 = ci * ci
        xi = x1[i]
        yi = y1[i]
        zi = z1[i]
        n = 0
        for k in range(n_b):
            e2 = be[k]
            lo = jlo[k]
            while lo < e2 and c2[lo] <= ci - pi_max:
                lo += 1
            jlo[k] = lo
            hi = max(jhi[k], lo)
            while hi < e2 and c2[hi] < ci + pi_max:
                hi += 1
            jhi[k] = hi
            j0 = lo
            if k == same_cell and j0 <= i:
                j0 = i + 1
            for j in range(j0, hi):
                ju = np.uint64(j)
                q = np.uint64(n + j - j0)
                cj = c2[ju]
                dx = x2[ju] - xi
                dy = y2[ju] - yi
                dz = z2[ju] - zi
                s2v = dx * dx + dy * dy + dz * dz
                sl = cj * cj - ci2
                l2 = 2.0 * (ci2 + cj * cj) - s2v
                cbuf[q], pbuf[q], fbuf[q] = _cone_candidate(s2v, sl, l2, smax2, pimax2, rpmax2,
                                                            rpmin2, shift, base, last, dummy,
                                                            inv_dpi, n_pi)
                wbuf[q] = w2[ju]
                gbuf[q] = g2[ju]
            n += max(hi - j0, 0)
        m = 0
        for q in range(n):
            jbuf[m] = q
            m += cbuf[q] != dummy
        if m == 0:
            continue
        _bin_window(m, 0, w1[i], np.int64(g1[i]), wbuf, gbuf, jbuf, cbuf, fbuf, pbuf, lut,
                    nxt, scan, edges2, n_rp, n_pi, nb, tot, touch, mode, rcell)


@numba.njit(parallel=True, cache=True)
def rppi_cone_sky(x1, y1, z1, c1, w1, g1, start1, x2, y2, z2, c2, w2, g2, start2, tasks,
                  chi_edges, lat0, lon0, dlat, dlon, n_lat, n_lon, offset, periodic,
                  edges2, pi_max, dpi, n_pi, n_regions, auto, n_chunks, lut, nxt, shift, base,
                  scan):
    """Weighted (r_p, |π|) pair counts on a cone, midpoint line of sight, with the points in
    sky columns (:mod:`.sky_grid`): for each column of set 1, the columns of set 2 in the
    shells within π_max and within the angular reach of :func:`_sky_reach`.

    Same conventions, outputs and bit-identical chunked sums as :func:`rppi_cone`.
    """
    rp_max = np.sqrt(edges2[edges2.size - 1])
    s_max = np.sqrt(edges2[edges2.size - 1] + pi_max * pi_max)
    n_rp = edges2.size - 1
    n_shells = lat0.size
    inv_dpi = 1.0 / dpi
    with_touch = n_regions > 0
    mode = _bin_mode(with_touch, scan)
    nb = (n_rp + 1) * n_pi
    tot = np.zeros((n_chunks, nb))
    touch = np.zeros((n_chunks, _touch_size(n_regions, nb)))
    cells2 = cell_regions(g2, start2) if with_touch else np.empty(0, dtype=np.int64)
    half_pi = 0.5 * np.pi
    for c in prange(n_chunks):
        tot_c = tot[c]
        touch_c = touch[c]
        cap_b = 64
        bs = np.empty(cap_b, dtype=np.int64)
        be = np.empty(cap_b, dtype=np.int64)
        jlo = np.empty(cap_b, dtype=np.int64)
        jhi = np.empty(cap_b, dtype=np.int64)
        cap = 256
        fbuf = np.empty(cap)
        cbuf = np.empty(cap, dtype=np.int64)
        pbuf = np.empty(cap, dtype=np.int64)
        jbuf = np.empty(cap, dtype=np.int64)
        wbuf = np.empty(cap)
        gbuf = np.empty(cap, dtype=g2.dtype)
        for t in range(c, tasks.size, n_chunks):
            cell = tasks[t]
            a = np.searchsorted(offset, cell, side="right") - 1
            local = cell - offset[a]
            ia = local // n_lon[a]
            ja = local - ia * n_lon[a]
            phi0 = lat0[a] + ia * dlat[a]
            phi1 = phi0 + dlat[a]
            lam0 = lon0[a] + ja * dlon[a]
            lam1 = lam0 + dlon[a]
            top_a = max(abs(phi0), abs(phi1))
            cos_a = np.cos(top_a) if top_a < half_pi else 0.0
            n_b = 0
            n_cand = 0
            same_cell = -1
            rc = -2
            for b in range(n_shells):
                gap_chi = max(chi_edges[b] - chi_edges[a + 1], chi_edges[a] - chi_edges[b + 1])
                if gap_chi >= pi_max:
                    continue
                theta = _sky_reach(chi_edges[a], chi_edges[b], rp_max, pi_max, s_max)
                ib0 = max(np.int64(np.floor((phi0 - theta - lat0[b]) / dlat[b])), 0)
                ib1 = min(np.int64(np.floor((phi1 + theta - lat0[b]) / dlat[b])), n_lat[b] - 1)
                for ib in range(ib0, ib1 + 1):
                    psi0 = lat0[b] + ib * dlat[b]
                    psi1 = psi0 + dlat[b]
                    gap = max(psi0 - phi1, phi0 - psi1, 0.0)
                    if gap > theta:
                        continue
                    top_b = max(abs(psi0), abs(psi1))
                    cos_b = np.cos(top_b) if top_b < half_pi else 0.0
                    dlam = _lon_reach(theta, gap, cos_a * cos_b)
                    if dlam >= np.pi:
                        jb0 = 0
                        jb1 = n_lon[b] - 1
                    else:
                        jb0 = np.int64(np.floor((lam0 - dlam - lon0[b]) / dlon[b]))
                        jb1 = np.int64(np.floor((lam1 + dlam - lon0[b]) / dlon[b]))
                        if periodic:
                            if jb1 - jb0 + 1 >= n_lon[b]:
                                jb0 = 0
                                jb1 = n_lon[b] - 1
                        else:
                            jb0 = max(jb0, 0)
                            jb1 = min(jb1, n_lon[b] - 1)
                    row = offset[b] + ib * n_lon[b]
                    for jj in range(jb0, jb1 + 1):
                        cell2 = row + (jj % n_lon[b] if periodic else jj)
                        if auto and cell2 < cell:
                            continue
                        s2 = start2[cell2]
                        e2 = start2[cell2 + 1]
                        if s2 == e2:
                            continue
                        if n_b == cap_b:
                            cap_b *= 2
                            bs = _grown(bs, cap_b)
                            be = _grown(be, cap_b)
                            jlo = np.empty(cap_b, dtype=np.int64)
                            jhi = np.empty(cap_b, dtype=np.int64)
                        if auto and cell2 == cell:
                            same_cell = n_b
                        bs[n_b] = s2
                        be[n_b] = e2
                        n_b += 1
                        n_cand += e2 - s2
                        # one region for every candidate when all the columns share it
                        r2 = cells2[cell2] if with_touch else np.int64(-1)
                        rc = r2 if rc == -2 else (rc if rc == r2 else -1)
            if n_b == 0:
                continue
            if n_cand > cap:
                while cap < n_cand:
                    cap *= 2
                fbuf = np.empty(cap)
                cbuf = np.empty(cap, dtype=np.int64)
                pbuf = np.empty(cap, dtype=np.int64)
                jbuf = np.empty(cap, dtype=np.int64)
                wbuf = np.empty(cap)
                gbuf = np.empty(cap, dtype=g2.dtype)
            s1 = start1[cell]
            e1 = start1[cell + 1]
            if mode == BIN_TOUCH:
                _block_sky(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, bs, be, n_b,
                           jlo, jhi, same_cell, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                           base, scan, fbuf, cbuf, pbuf, jbuf, wbuf, gbuf, tot_c, touch_c,
                           BIN_TOUCH, rc)
            elif mode == BIN_TOUCH_SCAN:
                _block_sky(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, bs, be, n_b,
                           jlo, jhi, same_cell, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                           base, scan, fbuf, cbuf, pbuf, jbuf, wbuf, gbuf, tot_c, touch_c,
                           BIN_TOUCH_SCAN, rc)
            elif mode == BIN_SCAN:
                _block_sky(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, bs, be, n_b,
                           jlo, jhi, same_cell, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                           base, scan, fbuf, cbuf, pbuf, jbuf, wbuf, gbuf, tot_c, touch_c,
                           BIN_SCAN, rc)
            else:
                _block_sky(x1, y1, z1, c1, w1, g1, s1, e1, x2, y2, z2, c2, w2, g2, bs, be, n_b,
                           jlo, jhi, same_cell, edges2, pi_max, inv_dpi, n_pi, lut, nxt, shift,
                           base, scan, fbuf, cbuf, pbuf, jbuf, wbuf, gbuf, tot_c, touch_c,
                           BIN_LOOKUP, rc)
    return _reduce(tot, touch, n_regions, n_rp, n_pi)


@numba.njit(cache=True)
def _grown(a, n):
    """``a`` copied into a longer array of length ``n``."""
    out = np.empty(n, dtype=a.dtype)
    out[:a.size] = a
    return out
