"""The one random-number scheme of conecheck: a stream per (run seed, names).

Every random draw of a run — the synthetic box, the randoms of a cut, the box's and a cone's
random spheres, each stage of a cone's construction — comes from :func:`seeded_rng` with
the run seed and the names of what draws (``("cone-build", 3, "fibres")``,
``("randoms", "bright", "primary")``, …), never from execution order. So any back end and
any number of workers gives the same numbers, and changing one sample or cut leaves every
other stream as it was.

Boxes compared with each other — the HOD derivatives' boxes with a parameter moved by ± its
step — draw instead from :func:`keyed_uniforms`: a number per (stream, object identity), the
same for an object in every box that holds it whatever else the box holds, so the boxes
differ only where the parameter acts (common random numbers).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from .errors import InputError


def seeded_rng(run_seed: int, *key_parts: int | str) -> np.random.Generator:
    """The random generator of one named stream, fixed by the run seed and the names alone.

    Parameters
    ----------
    run_seed : int
        The run's seed (config), a non-negative integer.
    *key_parts : int or str
        What identifies the task's stream, e.g. ``("cone", 3, "bright", "primary")``.

    Notes
    -----
    The key parts are encoded as JSON (type-tagged, so ``1`` and ``"1"`` differ) and
    hashed with SHA-256 — not Python's ``hash()``, which is salted per process — and
    the digest becomes the ``spawn_key`` of a :class:`numpy.random.SeedSequence` rooted
    at the run seed.  Streams of different keys are therefore independent in the
    sense SeedSequence guarantees, and identical in every process.
    """
    if isinstance(run_seed, (bool, np.bool_)) or not isinstance(run_seed, (int, np.integer)) \
            or run_seed < 0:
        raise InputError(f"seed: expected a non-negative integer, got {run_seed!r}")
    parts = []
    for p in key_parts:
        if isinstance(p, (bool, np.bool_)) or not isinstance(p, (int, np.integer, str)):
            raise TypeError(f"seeded_rng key parts must be int or str, got "
                            f"{type(p).__name__} {p!r}")
        parts.append(["s", p] if isinstance(p, str) else ["i", str(int(p))])
    digest = hashlib.sha256(json.dumps(parts, separators=(",", ":")).encode()).digest()
    words = tuple(int.from_bytes(digest[i:i + 4], "little") for i in range(0, 32, 4))
    return np.random.default_rng(np.random.SeedSequence(int(run_seed), spawn_key=words))


#: 2⁶⁴/φ, the increment of the splitmix64 sequence (Steele, Lea & Flood 2014, OOPSLA '14,
#: "Fast splittable pseudorandom number generators").
_GOLDEN = 0x9E3779B97F4A7C15
_MASK64 = (1 << 64) - 1


def _mix64(x: np.ndarray) -> np.ndarray:
    """splitmix64's output function (Steele, Lea & Flood 2014), elementwise on uint64
    (numpy's uint64 arithmetic wraps modulo 2⁶⁴, as the function needs)."""
    x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return x ^ (x >> np.uint64(31))


def stream_key(run_seed: int, *key_parts: int | str) -> int:
    """A 64-bit key for :func:`keyed_uniforms`, fixed by the run seed and the names alone
    (drawn from :func:`seeded_rng` of the same arguments)."""
    return int(seeded_rng(run_seed, *key_parts).integers(0, 1 << 63, dtype=np.int64)) * 2 \
        + 1


def keyed_uniforms(key: int, ids: np.ndarray, field: int) -> np.ndarray:
    """Uniform numbers in [0, 1), one per identity in ``ids``, as a function of (key,
    field, id) alone (counter-based random numbers, Salmon et al. 2011, SC '11).

    Parameters
    ----------
    key : int
        The stream (:func:`stream_key`).
    ids : ndarray of uint64
        Identities of the objects that draw (e.g. a galaxy's halo and rank).
    field : int
        Which quantity of the object is drawn (a separate sequence per field).

    Notes
    -----
    The numbers are the outputs of a splitmix64 sequence whose start is the mixed (key,
    field), taken at the positions ``ids``: distinct ids of one field give distinct
    positions of one sequence, which passes BigCrush (Steele et al. 2014); the top 53 bits
    become the double.
    """
    start = np.uint64(int(_mix64(np.array([(key ^ (field * _GOLDEN)) & _MASK64],
                                          dtype=np.uint64))[0]))
    x = start + np.asarray(ids, dtype=np.uint64) * np.uint64(_GOLDEN)
    return (_mix64(x) >> np.uint64(11)).astype(np.float64) * (1.0 / (1 << 53))


__all__ = ["keyed_uniforms", "seeded_rng", "stream_key"]
