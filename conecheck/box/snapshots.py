"""Several snapshots of one simulation stacked into an evolving light cone.

A deep shell, or an HOD that changes with redshift, needs galaxies that evolve across the
cone. Given snapshots at redshifts z_0 < z_1 < …, a cone takes each galaxy at true comoving
distance χ from the snapshot whose range holds χ, with that snapshot's positions,
velocities (so its RSD) and magnitudes. The hand-over from snapshot k to k + 1 lies at the
midpoint in χ of their redshifts, χ_k = ½ [χ(z_k) + χ(z_{k+1})], unless the configuration
gives an upper redshift (``box.snapshots[k].z_max``).

The box side of the comparison measures every snapshot on its own and combines them with
weights set by the cut (:func:`snapshot_weights`): the number density by the fraction of the
cut's comoving volume in each snapshot's range (what N/V of a cone averages), every other
statistic by the fraction of the cut's expected galaxies there, n_k V_k / Σ n_j V_j — the
weight each snapshot carries in the cone's estimate, to first order. Their jackknife
delete-one vectors combine with the same weights region by region (the snapshots of one
simulation share its regions and are strongly correlated), and so does the rest of the
:class:`~conecheck.stats.base.Measurement` (:func:`~conecheck.stats.base.combine_measurements`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

from ..catalog import GalaxyBox
from ..cosmology import Cosmology
from ..errors import InputError


def snapshot_chi_edges(redshifts: Sequence[float], z_max: Sequence[float | None],
                       cosmology: Cosmology) -> tuple[float, ...]:
    """Comoving distances [Mpc/h] where each snapshot hands over to the next.

    ``z_max[k]`` is snapshot k's upper redshift, or None for the midpoint in χ between
    snapshots k and k + 1; the last snapshot's is unused (it reaches to the end of the
    shell).
    """
    chi = cosmology.comoving_distance(np.asarray(redshifts, dtype=np.float64))
    edges = []
    for k in range(len(redshifts) - 1):
        given = z_max[k] if k < len(z_max) else None
        edges.append(float(cosmology.comoving_distance(given)) if given is not None
                     else 0.5 * float(chi[k] + chi[k + 1]))
    if any(b <= a for a, b in zip(edges, edges[1:], strict=False)):
        raise InputError(f"box.snapshots: the snapshots' ranges overlap (hand-over distances "
                         f"{[round(e, 2) for e in edges]} Mpc/h must increase); check the "
                         "z_max values")
    return tuple(edges)


def stack_snapshots(boxes: Sequence[GalaxyBox], redshifts: Sequence[float],
                    chi_edges: Sequence[float]) -> GalaxyBox:
    """One box holding every snapshot's galaxies, each labelled with its snapshot.

    A single snapshot comes back unchanged (a plain box), so a one-entry snapshot list runs
    exactly like a single box.
    """
    if len(boxes) == 1:
        return boxes[0]
    sizes = {float(b.box_size) for b in boxes}
    if len(sizes) > 1:
        raise InputError(f"box.snapshots: the snapshots' box sizes differ ({sorted(sizes)} "
                         "Mpc/h); expected snapshots of one simulation")

    def joined(name: str) -> NDArray | None:
        parts = [getattr(b, name) for b in boxes]
        if any(p is None for p in parts):
            return None
        return np.concatenate(parts)

    label = np.concatenate([np.full(len(b), k, dtype=np.int16) for k, b in enumerate(boxes)])
    return GalaxyBox(np.concatenate([b.position for b in boxes]),
                     np.concatenate([b.velocity for b in boxes]), boxes[0].box_size,
                     float(redshifts[0]), joined("abs_mag"), joined("is_central"),
                     joined("halo_id"), joined("halo_mass"),
                     {"snapshots": [dict(b.meta) for b in boxes]}, None, label,
                     tuple(float(z) for z in redshifts), tuple(float(e) for e in chi_edges))


def snapshot_ranges(box: GalaxyBox) -> list[tuple[float, float]]:
    """(χ_lo, χ_hi) [Mpc/h] of every snapshot of ``box`` (0 and ∞ at the ends)."""
    edges = [0.0, *box.snapshot_chi_edges, np.inf]
    return [(edges[k], edges[k + 1]) for k in range(box.n_snapshots)]


def snapshot_weights(box: GalaxyBox, densities: Sequence[float], chi_min: float,
                     chi_max: float) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Weights of each snapshot for a cut spanning χ_min–χ_max [Mpc/h].

    Returns (volume weights, galaxy weights): the fractions of the cut's comoving volume
    and of its expected galaxies (``densities`` [(h/Mpc)³] per snapshot) in each
    snapshot's range. A snapshot outside the cut gets weight 0.
    """
    vol = np.array([max(min(hi, chi_max) ** 3 - max(lo, chi_min) ** 3, 0.0)
                    if min(hi, chi_max) > max(lo, chi_min) else 0.0
                    for lo, hi in snapshot_ranges(box)])
    if not vol.sum() > 0:
        raise InputError(f"box.snapshots: no snapshot covers {chi_min:.1f}-{chi_max:.1f} "
                         "Mpc/h")
    gal = vol * np.asarray(densities, dtype=np.float64)
    return vol / vol.sum(), gal / gal.sum() if gal.sum() > 0 else vol / vol.sum()
