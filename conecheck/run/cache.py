"""On-disk cache of finished tasks, keyed by a hash of everything a task depends on.

A task's key is the SHA-256 of a canonical JSON rendering of its kind, its inputs and
the code version, so changing any setting, any input value (floats compared bit for
bit) or upgrading conecheck gives a new key and the task is recomputed; an unchanged
task is read back instead.  An entry is two files::

    <root>/<key[:2]>/<key>.npz    arrays of the result (see :mod:`.serialize`)
    <root>/<key[:2]>/<key>.json   the rest of the result, the checksum of the .npz,
                                  kind, a readable label, the creation time and the
                                  checksum of this record itself

Both files are covered by one integrity scheme: the record's ``entry_sha256`` hashes the
record's own content (the key, the code version, the result's non-array part and the
``.npz`` checksum), so an edited number in either file is detected and the task rerun.

The ``.npz`` is written first and the ``.json`` last, each atomically, so an entry
whose ``.json`` exists is complete; a run killed mid-write leaves at most an orphan
``.npz`` that the next write of that key replaces.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import logging
import os
from collections.abc import Mapping
from datetime import datetime, timezone
from pathlib import Path, PurePath
from typing import Any

import numpy as np

from ..atomic import atomic_path, write_text_atomic
from ..version import __version__
from .serialize import pack, unpack

log = logging.getLogger("conecheck.run")

#: Bump when the meaning of cached results changes without a version change.
CACHE_FORMAT = 3

_KEY_CHARS = 24
_CHUNK = 1 << 20


def code_version() -> str:
    """The code identity folded into every key: version, cache format and source content.

    The content hash covers every ``.py`` file of the installed package, so an editable or
    development install never serves results computed by different code under the same
    version number.
    """
    return f"{__version__}+cache{CACHE_FORMAT}+src{_source_digest()[:16]}"


@functools.lru_cache(maxsize=1)
def _source_digest() -> str:
    package = Path(__file__).resolve().parents[1]
    h = hashlib.sha256()
    for path in sorted(package.rglob("*.py")):
        h.update(path.relative_to(package).as_posix().encode())
        h.update(b"\0")
        h.update(path.read_bytes())
    return h.hexdigest()


# --------------------------------------------------------------------------- keys
def _canonical(x: Any, where: str) -> Any:
    """A JSON tree that identifies ``x`` exactly; every node is a tagged list."""
    if x is None:
        return ["none"]
    if isinstance(x, (bool, np.bool_)):
        return ["bool", bool(x)]
    if isinstance(x, (int, np.integer)):
        # Text, so integers beyond 2**53 survive any JSON reader unchanged.
        return ["int", str(int(x))]
    if isinstance(x, (float, np.float16, np.float32, np.float64)):
        # float.hex is exact; np.float32(0.1) and 0.1 are different numbers and hash
        # differently, while np.float64(0.1) and 0.1 are the same number.
        return ["float", float(x).hex()]
    if isinstance(x, (complex, np.complex64, np.complex128)):
        return ["complex", float(x.real).hex(), float(x.imag).hex()]
    if isinstance(x, str):
        return ["str", x]
    if isinstance(x, bytes):
        return ["bytes", hashlib.sha256(x).hexdigest()]
    if isinstance(x, PurePath):
        return ["path", os.fspath(x)]
    if isinstance(x, (np.ndarray, np.generic)):
        a = np.asarray(x)
        if a.dtype.hasobject:
            raise TypeError(f"{where}: object arrays cannot be hashed into a cache key")
        # C order, so a Fortran-ordered copy of the same values hashes the same.
        data = np.ascontiguousarray(a).tobytes()
        return ["array", a.dtype.str, list(a.shape), hashlib.sha256(data).hexdigest()]
    # before the dataclass rule: a class that names its identity (e.g. a catalogue
    # without its free-form provenance) is keyed by that
    token = getattr(x, "cache_token", None)
    if callable(token):
        cls = type(x)
        return ["token", f"{cls.__module__}.{cls.__qualname__}",
                _canonical(token(), f"{where}.cache_token()")]
    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        # Fields read directly (what dataclasses.asdict gives, without deep-copying
        # large arrays); the class name keeps two record types with equal fields apart.
        cls = type(x)
        fields = {f.name: getattr(x, f.name) for f in dataclasses.fields(x)}
        return ["dataclass", f"{cls.__module__}.{cls.__qualname__}",
                _canonical(fields, where)]
    if isinstance(x, Mapping):
        items = [(_canonical(k, f"{where} key"), _canonical(v, f"{where}[{k!r}]"))
                 for k, v in x.items()]
        items.sort(key=lambda kv: json.dumps(kv[0], separators=(",", ":")))
        return ["map", [list(kv) for kv in items]]
    if isinstance(x, (list, tuple)):
        # A list and a tuple of the same values are the same setting.
        return ["seq", [_canonical(v, f"{where}[{i}]") for i, v in enumerate(x)]]
    if isinstance(x, (set, frozenset)):
        parts = [_canonical(v, f"{where} item") for v in x]
        return ["set", sorted(parts, key=lambda p: json.dumps(p, separators=(",", ":")))]
    raise TypeError(f"{where}: cannot hash a {type(x).__module__}.{type(x).__qualname__} "
                    f"into a cache key; pass plain values, arrays or dataclasses, or give "
                    f"the class a cache_token() method")


def task_key(kind: str, inputs: Mapping[str, Any]) -> str:
    """Hex key (24 characters of a SHA-256) identifying a task by what it depends on.

    Parameters
    ----------
    kind : str
        Task type (``randoms``, ``cone``, ``box``, …).
    inputs : mapping
        Everything the result depends on: settings, seeds, input fingerprints.  Values
        may be numbers (floats compared exactly), strings, paths, None, numpy scalars
        and arrays (dtype, shape and bytes), lists, tuples, dicts, dataclasses, and
        objects with a ``cache_token()`` method.  A path is hashed by name only; use
        :func:`file_fingerprint` to key on a file's content.
    """
    doc = _canonical({"kind": kind, "inputs": inputs, "code_version": code_version()},
                     "task inputs")
    text = json.dumps(doc, separators=(",", ":"), ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()[:_KEY_CHARS]


def spec_key(spec: Any) -> str:
    """Cache key of a task spec (:mod:`conecheck.run.specs`): the hash of all its fields,
    its type and the code version."""
    if not dataclasses.is_dataclass(spec) or isinstance(spec, type):
        raise TypeError(f"spec_key expects a spec dataclass, got {type(spec).__name__}")
    cls = type(spec)
    return task_key(cls.__qualname__, {f.name: getattr(spec, f.name)
                                        for f in dataclasses.fields(spec)})


def content_digest(obj: Any) -> str:
    """SHA-256 hex digest of an in-memory input's content (a box, a footprint, regions,
    halos), through its ``cache_token()`` or its fields; what a spec holds for it."""
    doc = _canonical(obj, type(obj).__name__)
    text = json.dumps(doc, separators=(",", ":"), ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def file_fingerprint(path: str | os.PathLike[str]) -> str:
    """SHA-256 hex digest of a file's bytes, for keying a task on an input file."""
    return _sha256_file(Path(path))


def _sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while chunk := f.read(_CHUNK):
            h.update(chunk)
    return h.hexdigest()


def _record_digest(doc: Mapping[str, Any]) -> str:
    """SHA-256 of a cache record's content, every field but the digest itself."""
    body = {k: v for k, v in doc.items() if k != "entry_sha256"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------- store
class TaskCache:
    """Finished task results on disk.

    Parameters
    ----------
    root : path
        Cache directory (created on first write).
    enabled : bool
        False ignores existing entries (every :meth:`get` misses, as for a fresh run)
        but still writes new results, so a later run can resume from them.

    Attributes
    ----------
    stats : dict
        Counts of ``hits``, ``misses``, ``corrupt`` entries removed, and ``writes``.
    """

    def __init__(self, root: Path | str, enabled: bool = True) -> None:
        self.root = Path(root)
        self.enabled = bool(enabled)
        self.stats = {"hits": 0, "misses": 0, "corrupt": 0, "writes": 0}

    def _paths(self, key: str) -> tuple[Path, Path]:
        if not key or not all(c in "0123456789abcdef" for c in key):
            raise ValueError(f"cache key must be lowercase hex, got {key!r}")
        d = self.root / key[:2]
        return d / f"{key}.npz", d / f"{key}.json"

    def __contains__(self, key: str) -> bool:
        return self.enabled and self._paths(key)[1].is_file()

    def get(self, key: str, label: str = "", default: Any = None) -> Any:
        """The cached result of ``key``, or ``default`` when absent, disabled or unreadable.

        An entry that fails its checksum or cannot be decoded is logged (WARNING) with
        its label (``label`` is used when the entry's own record is unreadable),
        deleted and reported as absent so that the task is recomputed.  Pass a sentinel
        ``default`` to tell a cached ``None`` from a miss.
        """
        if not self.enabled:
            self.stats["misses"] += 1
            return default
        npz, meta_path = self._paths(key)
        try:
            text = meta_path.read_text(encoding="utf-8")
        except FileNotFoundError:
            self.stats["misses"] += 1
            return default
        except OSError as exc:
            self._corrupt(key, label, f"cannot read {meta_path.name}: {exc}")
            return default
        try:
            doc = json.loads(text)
            label = doc.get("label") or label
            if doc.get("key") != key:
                raise ValueError(f"it records key {doc.get('key')!r}")
            if not npz.is_file():
                raise ValueError(f"{npz.name} is missing")
            digest = _sha256_file(npz)
            if digest != doc["npz_sha256"]:
                raise ValueError(f"checksum of {npz.name} does not match (file changed or "
                                 f"truncated)")
            if _record_digest(doc) != doc["entry_sha256"]:
                raise ValueError(f"checksum of {meta_path.name} does not match (edited)")
            with np.load(npz, allow_pickle=False) as z:
                arrays = {k: z[k] for k in z.files}
            value = unpack(arrays, doc["meta"])
        except Exception as exc:  # any damage means "recompute", never a crash
            self._corrupt(key, label, f"{type(exc).__name__}: {exc}")
            return default
        self.stats["hits"] += 1
        return value

    def _corrupt(self, key: str, label: str, reason: str) -> None:
        log.warning("cache entry %s (%s) is unreadable and was removed; it will be "
                    "recomputed: %s", key, label or "unknown task", reason)
        self.stats["corrupt"] += 1
        self.stats["misses"] += 1
        self.remove(key)

    def put(self, key: str, obj: Any, label: str = "", kind: str = "") -> None:
        """Store ``obj`` under ``key`` (see :func:`.serialize.pack` for what it may hold)."""
        arrays, meta = pack(obj)
        npz, meta_path = self._paths(key)
        with atomic_path(npz) as tmp:
            with open(tmp, "wb") as f:
                np.savez(f, **arrays)
            digest = _sha256_file(tmp)
        doc = {"key": key, "kind": kind, "label": label,
               "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
               "code_version": code_version(), "npz_sha256": digest, "meta": meta}
        doc["entry_sha256"] = _record_digest(doc)
        # Last, and atomically: the entry exists from this rename on.
        write_text_atomic(meta_path, json.dumps(doc, indent=1, allow_nan=False) + "\n")
        self.stats["writes"] += 1

    def prune_other_code(self) -> tuple[int, int]:
        """Delete entries written by other code (another version or source); (entries, bytes).

        Their keys can never be asked for again by this code, so they only take space.
        Unreadable records are left for :meth:`get`.
        """
        current = code_version()
        n = size = 0
        for meta_path in self.root.glob("??/*.json"):
            try:
                doc = json.loads(meta_path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                continue
            if not isinstance(doc, dict) or doc.get("code_version") == current:
                continue
            npz = meta_path.with_suffix(".npz")
            for p in (meta_path, npz):
                try:
                    size += p.stat().st_size
                    p.unlink()
                except OSError:
                    pass
            n += 1
        return n, size

    def remove(self, key: str) -> None:
        """Delete an entry (JSON first, so a half-removed entry reads as absent)."""
        npz, meta_path = self._paths(key)
        for p in (meta_path, npz):
            try:
                p.unlink()
            except FileNotFoundError:
                pass
            except OSError as exc:
                log.warning("could not remove cache file %s: %s", p, exc)
