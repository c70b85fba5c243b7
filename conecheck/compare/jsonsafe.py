"""Conversion of numbers and arrays to JSON-safe Python values (NaN and ±inf → None)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray


def jsonable(obj: Any) -> Any:
    """Recursively turn numpy scalars/arrays into lists of floats/ints; NaN and ±inf → None."""
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        return f if math.isfinite(f) else None
    return obj


def as_float_array(values: Any) -> NDArray[np.float64]:
    """Inverse of :func:`jsonable` for numbers: (nested) lists with None → floats with NaN."""
    if values is None:
        return np.array([], dtype=np.float64)
    return np.asarray(_none_to_nan(values), dtype=np.float64)


def _none_to_nan(values: Any) -> Any:
    if values is None:
        return math.nan
    if isinstance(values, (list, tuple)):
        return [_none_to_nan(v) for v in values]
    return values


def as_float(value: Any) -> float:
    """A JSON number or None as a float (None → NaN)."""
    if value is None:
        return math.nan
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan
