"""Fibre-collision corrections behind one interface.

A correction is a function ``(table, fibred, rng, cosmology) -> table`` registered by
name in :data:`CORRECTIONS`.  ``table`` is the target list after the emulator, with
columns ra, dec [deg], z_obs, chi_obs [Mpc/h], weight and zflag; ``fibred`` marks
targets that got a fibre on either pass.  The returned table carries the same columns
with corrected ``weight``, ``zflag``, ``z_obs`` and ``chi_obs``; the observed redshift
each galaxy would have had with its own fibre stays in ``z_obs_true``.

``zflag`` codes (integers, kept in every output):

==== ======================= ==================================================
code name                    meaning
==== ======================= ==================================================
0    ZFLAG_OWN_FIBRE         redshift from its own fibre, first pass (or no
                             fibre emulation)
1    ZFLAG_SECOND_PASS       redshift from a fibre on the second (overlap) pass
2    ZFLAG_NEAREST_REDSHIFT  collided; redshift of the nearest fibred neighbour
3    ZFLAG_COLLIDED          collided, no redshift (only in pre-correction tables)
==== ======================= ==================================================

Further published corrections plug in with :func:`register_correction`.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from astropy.table import Table
from numpy.typing import NDArray

from ..cosmology import Cosmology
from ..pairs import nearest_on_sphere
from ..sphere import radec_to_vec

ZFLAG_OWN_FIBRE = 0
ZFLAG_SECOND_PASS = 1
ZFLAG_NEAREST_REDSHIFT = 2
ZFLAG_COLLIDED = 3
#: Code → short description, for manifests and reports.
ZFLAG_MEANING = {
    ZFLAG_OWN_FIBRE: "own fibre (first pass) or no fibre emulation",
    ZFLAG_SECOND_PASS: "own fibre on the second (tile-overlap) pass",
    ZFLAG_NEAREST_REDSHIFT: "collided; redshift of the nearest fibred angular neighbour",
    ZFLAG_COLLIDED: "collided; no redshift",
}

Correction = Callable[[Table, NDArray[np.bool_], np.random.Generator, Cosmology], Table]
#: Registry of corrections: name → function.
CORRECTIONS: dict[str, Correction] = {}


def correction_problem(name: object, key: str = "name") -> str | None:
    """Why ``name`` is not a fibre-collision correction (None when it is): the one rule
    every settings section and the cone builder use."""
    if isinstance(name, str) and name in CORRECTIONS:
        return None
    return f"{key} = {name!r}: expected one of {', '.join(sorted(CORRECTIONS))}"


def register_correction(name: str) -> Callable[[Correction], Correction]:
    """Decorator adding a correction to :data:`CORRECTIONS` under ``name``."""
    def deco(func: Correction) -> Correction:
        CORRECTIONS[name] = func
        return func
    return deco


def nearest_fibred(table: Table, fibred: NDArray[np.bool_]
                   ) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """For each collided row, the row index of its nearest fibred neighbour on the sky.

    Returns the indices (into ``table``) and the separations [arcsec], one per row
    where ``fibred`` is False, in row order.
    """
    xyz = radec_to_vec(table["ra"], table["dec"])
    fib = np.flatnonzero(fibred)
    lost = np.flatnonzero(~fibred)
    if lost.size == 0 or fib.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    chord, j = nearest_on_sphere(xyz[lost], xyz[fib])
    sep = np.degrees(2.0 * np.arcsin(np.clip(chord / 2.0, 0.0, 1.0))) * 3600.0
    return fib[j], sep


@register_correction("none")
def correct_none(table: Table, fibred: NDArray[np.bool_], rng: np.random.Generator,
                 cosmology: Cosmology) -> Table:
    """Drop every collided target (no correction)."""
    return table[fibred]


@register_correction("nearest_redshift")
def correct_nearest_redshift(table: Table, fibred: NDArray[np.bool_],
                             rng: np.random.Generator, cosmology: Cosmology) -> Table:
    """A collided target takes the observed redshift of its nearest fibred neighbour.

    chi_obs is recomputed from the borrowed redshift; zflag becomes 2 and
    ``nn_sep_arcsec`` records the separation (0 for fibred galaxies).
    """
    out = table.copy()
    nn, sep = nearest_fibred(table, fibred)
    lost = np.flatnonzero(~fibred)
    out["nn_sep_arcsec"] = np.zeros(len(out))
    if nn.size == 0:
        return out[fibred] if lost.size else out
    z_new = np.asarray(out["z_obs"])[nn]
    out["z_obs"][lost] = z_new
    out["chi_obs"][lost] = cosmology.comoving_distance(np.maximum(z_new, 0.0))
    out["zflag"][lost] = ZFLAG_NEAREST_REDSHIFT
    out["nn_sep_arcsec"][lost] = sep
    return out


@register_correction("nearest_upweight")
def correct_nearest_upweight(table: Table, fibred: NDArray[np.bool_],
                             rng: np.random.Generator, cosmology: Cosmology) -> Table:
    """Drop each collided target and add its weight to its nearest fibred neighbour."""
    weight = np.asarray(table["weight"], dtype=np.float64).copy()
    nn, _ = nearest_fibred(table, fibred)
    if nn.size:
        np.add.at(weight, nn, weight[~fibred])
    out = table[fibred]
    out["weight"] = weight[fibred]
    return out
