"""What the rest of conecheck reads of a footprint and of jackknife regions.

:class:`~conecheck.footprint.Footprint` and :class:`~conecheck.footprint.SkyRegions` are the
implementations; a user's own sky description works wherever one of these protocols is
expected if it offers the same members (structural typing, :pep:`544`).
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np
from numpy.typing import ArrayLike, NDArray


@runtime_checkable
class HealpixMap(Protocol):
    """A HEALPix completeness map: what the disc-fraction code reads."""

    @property
    def nside(self) -> int: ...

    @property
    def nest(self) -> bool: ...

    @property
    def values(self) -> NDArray[np.float64]: ...

    @property
    def occupied(self) -> NDArray[np.int64]: ...


@runtime_checkable
class SkyFootprint(HealpixMap, Protocol):
    """A survey footprint as cones, randoms and statistics use it: a HEALPix map with areas
    (deg² and sr), completeness look-ups and sampling (positions in degrees)."""

    @property
    def area_deg2(self) -> float: ...

    @property
    def area_sr(self) -> float: ...

    def completeness(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]: ...

    def sample(self, n: int, rng: np.random.Generator
               ) -> tuple[NDArray[np.float64], NDArray[np.float64]]: ...

    def disc_fraction(self, ra_deg: ArrayLike, dec_deg: ArrayLike, radius_deg: ArrayLike,
                      samples_per_radius: float = 10.0) -> NDArray[np.float64]: ...


@runtime_checkable
class JackknifeRegions(Protocol):
    """K sky regions of a footprint: what the cone jackknife reads."""

    @property
    def k(self) -> int: ...

    @property
    def areas_deg2(self) -> NDArray[np.float64]: ...

    def region_of(self, ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.int32]: ...


__all__ = ["HealpixMap", "JackknifeRegions", "SkyFootprint"]
