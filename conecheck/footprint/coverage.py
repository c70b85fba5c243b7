"""Coverage versus completeness: where the survey is, and how counts treat its gaps.

A completeness map says two things that a survey analysis keeps apart. *Coverage* — is
this direction inside the survey? — decides which spheres and cylinders a count statistic
may place (the VPF, the counts' edge treatment). *Completeness* — what fraction of the
targets here has a redshift? — thins the galaxies. Reading completeness as coverage
makes a uniformly 92 % complete survey look as if no sphere fitted inside it; ignoring it
compares thinned counts with an unthinned box. The rules of
:class:`~conecheck.cone.settings.CompletenessSettings` live here, used alike by the run,
the API and the effect ladder:

* :func:`covered_sky` — the 0/1 map of where count statistics' centres and cells may lie;
* :func:`mean_completeness` — the area-weighted completeness of the covered sky;
* :func:`box_dilution` — the fraction of box galaxies kept for count statistics;
* :func:`count_weights` — which cone galaxies count, and with what weight.

For a Poisson field the ``dilute`` treatment is exact: a Poisson process thinned at
random with probability c is Poisson with density c n, so both sides of the comparison
see P₀(R) = exp(−c n V) (Peebles 1980, The Large-Scale Structure of the Universe, §36).
With completeness varying across the sky it is an approximation (the box is thinned by
the mean); ``weight`` and ``threshold`` are the alternatives an analysis would use.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..cone.settings import CompletenessSettings
from .maps import Footprint


def _lowest_covered(settings: CompletenessSettings) -> tuple[float, bool]:
    """(limit, inclusive): completeness a covered pixel must exceed (or reach)."""
    if settings.treatment == "threshold":
        return max(settings.threshold, np.nextafter(settings.coverage_min, 1.0)), True
    return settings.coverage_min, False


def is_covered(completeness: ArrayLike, settings: CompletenessSettings) -> NDArray[np.bool_]:
    """True where a completeness value lies inside the survey for count statistics."""
    c = np.asarray(completeness, dtype=np.float64)
    limit, inclusive = _lowest_covered(settings)
    return c >= limit if inclusive else c > limit


def covered_sky(footprint: Footprint, settings: CompletenessSettings) -> Footprint:
    """The footprint's coverage: 1 where :func:`is_covered`, 0 elsewhere (cached).

    Equal to ``footprint`` itself when every observed pixel is covered at completeness 1,
    so a complete survey gets exactly the numbers it had before coverage existed.
    """
    key = (settings.treatment, settings.coverage_min, settings.threshold)
    cache = footprint.__dict__.setdefault("_coverage_cache", {})
    if key not in cache:
        vals = footprint.values
        cov = is_covered(vals, settings).astype(np.float64)
        if np.array_equal(cov, vals):
            cache[key] = footprint
        else:
            cache[key] = Footprint.from_map(cov, nest=footprint.nest,
                                            source=f"coverage of {footprint.source}")
    return cache[key]


def mean_completeness(footprint: Footprint, settings: CompletenessSettings) -> float:
    """Mean completeness over the covered pixels (all pixels have equal area)."""
    vals = footprint.values
    cov = is_covered(vals, settings)
    if not cov.any():
        return 1.0
    return float(vals[cov].mean())


def box_dilution(footprint: Footprint, settings: CompletenessSettings) -> float:
    """Fraction of box galaxies the count statistics keep: the covered sky's mean
    completeness under ``dilute``, 1 otherwise."""
    if settings.treatment != "dilute":
        return 1.0
    return mean_completeness(footprint, settings)


def count_weights(completeness: ArrayLike, weight: ArrayLike,
                  settings: CompletenessSettings
                  ) -> tuple[NDArray[np.bool_], NDArray[np.float64]]:
    """Which cone galaxies the count statistics use, and their weights.

    Parameters
    ----------
    completeness : array_like
        Completeness at each galaxy's position (the cone's ``completeness`` column).
    weight : array_like
        The galaxies' weights after the collision correction.

    Returns
    -------
    keep : bool array
        Galaxies on covered sky.
    weights : float array
        Their weights: divided by the completeness under ``weight``, unchanged otherwise.
    """
    c = np.asarray(completeness, dtype=np.float64)
    w = np.asarray(weight, dtype=np.float64)
    keep = is_covered(c, settings)
    if settings.treatment == "weight":
        w = w / np.where(keep, c, 1.0)
    return keep, w[keep]
