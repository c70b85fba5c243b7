"""Units in files: how conecheck writes h-scaled units and how it reads the user's.

The trade writes lengths in Mpc/h, densities in (h/Mpc)³ and masses in Msun/h, with
h = H0 / (100 km/s/Mpc). FITS and astropy know no such h: the unit string "Mpc/h" parses
as megaparsec per *hour*. conecheck writes these strings all the same (common practice, and
what other tools expect to read) and, on reading, takes "per hour" on a length or a mass
for what it always means in a catalogue, "per h". A column whose unit is a plain length,
speed or mass is converted to conecheck's units (with the configuration's h where needed);
any other unit is refused with the column named. A column without a unit is taken as given.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
from astropy.cosmology import units as cu
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

#: The h-scaled unit strings conecheck writes, and the astropy units they are written as.
H_SCALED = {"Mpc/h": u.Unit("Mpc / h"), "(h/Mpc)^3": u.Unit("h3 / Mpc3"),
            "Msun/h": u.Unit("solMass / h")}

_HOUR = u.Unit("h")


def written_unit(label: str) -> u.UnitBase | None:
    """The unit to attach to a column labelled ``"name [unit]"`` (None when unitless)."""
    if not label.endswith("]") or "[" not in label:
        return None
    text = label[label.rindex("[") + 1:-1].strip()
    if text in H_SCALED:
        return H_SCALED[text]
    try:
        return u.Unit(text, parse_strict="raise")
    except ValueError:
        return None


#: conecheck's unit of each kind of column (lengths and masses per h, see the module text).
_TARGET = {"length": u.Mpc, "speed": u.km / u.s, "mass": u.solMass}


def _factor(unit: u.UnitBase, kind: str, h: float | None) -> float:
    """Factor from ``unit`` to conecheck's unit of ``kind``.

    Raises UnitsError for a unit of another kind and LookupError when a plain length or
    mass needs ``h``.
    """
    target = _TARGET[kind]
    if kind == "speed":
        return float(unit.to(target))
    for h_unit in (_HOUR, cu.littleh):  # "X / h": the file's h, as written by the trade
        try:
            return float((unit * h_unit).to(target))
        except u.UnitsError:
            continue
    plain = float(unit.to(target))  # a physical length or mass: X = X·h in X/h units
    if h is None:
        raise LookupError(kind)
    return plain * h


def to_pipeline_units(values: ArrayLike, unit: u.UnitBase | str | None, kind: str,
                      column: str, source: str, h: float | None = None
                      ) -> NDArray[np.float64]:
    """``values`` in conecheck's units: Mpc/h (length), km/s (speed), Msun/h (mass).

    Parameters
    ----------
    values : array
        The column's numbers.
    unit : astropy unit, str or None
        The column's unit as the file states it (None: taken as already in conecheck's).
    kind : {"length", "speed", "mass"}
        What the column holds.
    column, source : str
        Column and file, for the error message.
    h : float, optional
        H0 / (100 km/s/Mpc) of the configuration; needed for plain Mpc or Msun columns.

    Raises
    ------
    InputError
        A unit of another kind, or a plain (not h-scaled) unit without ``h``.
    """
    arr = np.asarray(values, dtype=np.float64)
    if unit is None or (isinstance(unit, str) and not unit.strip()):
        return arr
    try:
        unit = u.Unit(unit, parse_strict="raise") if isinstance(unit, str) else unit
    except ValueError:
        raise InputError(f"{source}: column '{column}' has the unit {unit!r}, which is not a "
                         f"unit; expected {_EXPECTED[kind]}") from None
    try:
        f = _factor(unit, kind, h)
    except u.UnitsError:
        raise InputError(f"{source}: column '{column}' is in {unit}; expected "
                         f"{_EXPECTED[kind]}") from None
    except LookupError:
        raise InputError(f"{source}: column '{column}' is in {unit} (no h); converting it "
                         f"needs the Hubble parameter h: give the column in "
                         f"{_EXPECTED[kind]} or read it through a run configuration "
                         f"(cosmology.h)") from None
    return arr if f == 1.0 else arr * f


_EXPECTED = {"length": "Mpc/h (or another length unit)", "speed": "km/s (or another speed)",
             "mass": "Msun/h (or another mass unit)"}

__all__ = ["H_SCALED", "to_pipeline_units", "written_unit"]
