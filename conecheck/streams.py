"""The one random-number scheme of conecheck: a stream per (run seed, names).

Every random draw of a run — the synthetic box, the randoms of a cut, the box's and a cone's
random spheres, each stage of a cone's construction — comes from :func:`seeded_rng` with
the run seed and the names of what draws (``("cone-build", 3, "fibres")``,
``("randoms", "bright", "primary")``, …), never from execution order. So any back end and
any number of workers gives the same numbers, and changing one sample or cut leaves every
other stream as it was.
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


__all__ = ["seeded_rng"]
