"""Task results as (arrays, JSON meta) pairs: an ``.npz`` file plus a JSON document.

The cache stores every finished task this way.  Arrays keep their exact bytes, dtype,
shape and memory order; everything else (numbers, strings, the shape of the nesting)
goes into a JSON document that names the arrays it refers to.  Nothing is pickled, so
reading a cache entry can never run code, and ``np.load`` is always called with
``allow_pickle=False``.

Supported values: ``dict`` with ``str`` keys, ``list``, ``tuple``, numpy arrays (not of
object dtype), numpy scalars, ``int``, ``float``, ``bool``, ``str``, ``None`` and
:class:`~conecheck.stats.base.Measurement`.  Each comes back with its own type.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ..stats.base import Measurement

#: Version of the JSON layout written by :func:`pack`; :func:`unpack` refuses others.
PAYLOAD_FORMAT = 1

# Every JSON object in an encoded tree is a tagged node {"t": tag, ...}; plain JSON
# scalars and lists stand for themselves.  Tagging every object (rather than only the
# special ones) means a user dict can never be mistaken for a node, whatever its keys.
_DICT, _TUPLE, _ARRAY, _SCALAR, _FLOAT, _MEAS = "dict", "tuple", "array", "npscalar", \
    "float", "measurement"

_MEASUREMENT_ARRAYS = ("bins", "value", "delete_one", "bin_edges")


class _Packer:
    """Walks a value, moving arrays into ``arrays`` under generated names."""

    def __init__(self, prefix: str = "") -> None:
        self.arrays: dict[str, np.ndarray] = {}
        self.prefix = prefix
        self.n_measurements = 0

    def _add(self, a: np.ndarray, where: str, name: str | None = None) -> str:
        if a.dtype.hasobject:
            raise TypeError(f"{where}: arrays of dtype {a.dtype} (Python objects) cannot be "
                            f"stored in the task cache; convert to a numeric, bool or string "
                            f"dtype")
        key = f"{self.prefix}{name if name is not None else 'a' + str(len(self.arrays))}"
        self.arrays[key] = a
        return key

    def encode(self, x: Any, where: str) -> Any:
        # bool before int (bool is an int), numpy types before Python ones (np.float64
        # is a float subclass and must keep its numpy type).
        if x is None or isinstance(x, (bool, str)):
            return x
        if isinstance(x, np.ndarray):
            return {"t": _ARRAY, "k": self._add(x, where)}
        if isinstance(x, np.generic):
            return {"t": _SCALAR, "k": self._add(np.asarray(x), where)}
        if isinstance(x, int):
            return x
        if isinstance(x, float):
            # JSON has no NaN/inf; repr/float.hex of a finite float round-trips exactly
            # through the json module, so only the non-finite ones need a tag.
            return x if math.isfinite(x) else {"t": _FLOAT, "hex": x.hex()}
        if isinstance(x, Measurement):
            return {"t": _MEAS, "v": self._measurement(x, where)}
        if isinstance(x, Mapping):
            out = {}
            for k, v in x.items():
                if not isinstance(k, str):
                    raise TypeError(f"{where}: dictionary keys must be str to be cached, got "
                                    f"{type(k).__name__} {k!r}")
                out[k] = self.encode(v, f"{where}[{k!r}]")
            return {"t": _DICT, "v": out}
        if isinstance(x, list):
            return [self.encode(v, f"{where}[{i}]") for i, v in enumerate(x)]
        if isinstance(x, tuple):
            return {"t": _TUPLE, "v": [self.encode(v, f"{where}[{i}]") for i, v in enumerate(x)]}
        raise TypeError(f"{where}: values of type {type(x).__module__}.{type(x).__qualname__} "
                        f"cannot be stored in the task cache (supported: dict, list, tuple, "
                        f"numpy arrays and scalars, int, float, bool, str, None, Measurement)")

    def _measurement(self, m: Measurement, where: str) -> dict[str, Any]:
        node: dict[str, Any] = {"name": m.name, "bin_label": m.bin_label,
                                "value_label": m.value_label}
        # A Measurement is a flat record; its arrays keep readable names under a
        # per-measurement prefix so an entry can be inspected with np.load by hand.
        base = f"m{self.n_measurements}."
        self.n_measurements += 1
        for attr in _MEASUREMENT_ARRAYS:
            a = getattr(m, attr)
            if a is None:
                node[attr] = None
            else:
                node[attr] = self._add(np.asarray(a), f"{where}.{attr}", base + attr)
        node["extra"] = self.encode(m.extra, f"{where}.extra")
        return node


def _decode(node: Any, arrays: Mapping[str, np.ndarray]) -> Any:
    if node is None or isinstance(node, (bool, str, int, float)):
        return node
    if isinstance(node, list):
        return [_decode(v, arrays) for v in node]
    tag = node["t"]
    if tag == _DICT:
        return {k: _decode(v, arrays) for k, v in node["v"].items()}
    if tag == _TUPLE:
        return tuple(_decode(v, arrays) for v in node["v"])
    if tag == _ARRAY:
        return arrays[node["k"]]
    if tag == _SCALAR:
        return arrays[node["k"]][()]
    if tag == _FLOAT:
        return float.fromhex(node["hex"])
    if tag == _MEAS:
        return _measurement_from_node(node["v"], arrays)
    raise ValueError(f"unknown node tag {tag!r} in a task payload")


def _measurement_from_node(node: Mapping[str, Any], arrays: Mapping[str, np.ndarray]
                           ) -> Measurement:
    a = {attr: (None if node[attr] is None else arrays[node[attr]])
         for attr in _MEASUREMENT_ARRAYS}
    return Measurement(name=node["name"], bins=a["bins"], value=a["value"],
                       delete_one=a["delete_one"], bin_edges=a["bin_edges"],
                       bin_label=node["bin_label"], value_label=node["value_label"],
                       extra=_decode(node["extra"], arrays))


def _load_all(arrays: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    # An NpzFile reads lazily and re-reads on every access; read each member once so
    # that shared references decode to one array and the file can be closed after.
    return {k: np.asarray(arrays[k]) for k in arrays}


def measurement_to_payload(m: Measurement) -> tuple[dict[str, np.ndarray], dict]:
    """Split a :class:`Measurement` into arrays and a JSON-friendly description.

    Returns
    -------
    arrays : dict of str to ndarray
        ``bins``, ``value`` and, when present, ``delete_one`` and ``bin_edges`` (plus any
        arrays held in ``extra``).
    meta : dict
        Everything else; ``json.dumps(meta)`` always works.
    """
    if not isinstance(m, Measurement):
        raise TypeError(f"expected a Measurement, got {type(m).__name__}")
    packer = _Packer()
    node: dict[str, Any] = {"name": m.name, "bin_label": m.bin_label,
                            "value_label": m.value_label}
    for attr in _MEASUREMENT_ARRAYS:
        a = getattr(m, attr)
        node[attr] = None if a is None else packer._add(np.asarray(a), f"{m.name}.{attr}",
                                                        attr)
    packer.prefix = "extra."
    node["extra"] = packer.encode(m.extra, f"{m.name}.extra")
    return packer.arrays, {"format": PAYLOAD_FORMAT, "measurement": node}


def measurement_from_payload(arrays: Mapping[str, np.ndarray], meta: Mapping[str, Any]
                             ) -> Measurement:
    """Inverse of :func:`measurement_to_payload` (bit-exact)."""
    _check_format(meta)
    return _measurement_from_node(meta["measurement"], _load_all(arrays))


def pack(obj: Any) -> tuple[dict[str, np.ndarray], dict]:
    """Split a nested result into arrays (for an ``.npz``) and JSON meta.

    Raises
    ------
    TypeError
        For a value of an unsupported type, a non-``str`` dict key or an object-dtype
        array; the message gives the path to the offending value.
    """
    packer = _Packer()
    root = packer.encode(obj, "result")
    return packer.arrays, {"format": PAYLOAD_FORMAT, "root": root}


def unpack(arrays: Mapping[str, np.ndarray], meta: Mapping[str, Any]) -> Any:
    """Inverse of :func:`pack`: rebuild the value bit for bit, with its types."""
    _check_format(meta)
    return _decode(meta["root"], _load_all(arrays))


def _check_format(meta: Mapping[str, Any]) -> None:
    if meta.get("format") != PAYLOAD_FORMAT:
        raise ValueError(f"task payload has format {meta.get('format')!r}; this version of "
                         f"conecheck reads format {PAYLOAD_FORMAT}")
