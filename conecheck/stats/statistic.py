"""What a statistic is to the rest of conecheck: one class, in one module, that owns it all.

A statistic module under ``conecheck/stats/`` (or in a user's installed package, see
:mod:`.registry`) defines a subclass of :class:`Statistic` and exposes one instance as the
module attribute ``STATISTIC``. The class owns

* its **settings**: a frozen dataclass (``settings_type``) whose field names are the keys of
  ``[statistics.<name>]`` and whose numpy-style docstring feeds the generated configuration
  reference; it validates itself and names the key in every error;
* its **bins and labels** (:meth:`Statistic.n_bins`, the Measurement it returns);
* what it **needs** besides the galaxies: randoms (``needs_randoms``) and work shared by
  every cone of a sample and cut
  (:meth:`Statistic.prepare_cone`, stored through :meth:`Statistic.pack_shared` and
  :meth:`Statistic.unpack_shared`);
* its **box and cone measurements** with jackknife delete-one vectors (a statistic with
  ``needs_matter`` also receives the matter tracer, :class:`~.base.MatterSample`, as
  ``matter=``, and says through :meth:`Statistic.matter_reach` how far around the galaxies
  it needs it);
* its **display**: names, symbol, order and the hints the report's panels follow
  (:class:`Display`);
* its **cost** for the pre-flight estimate (:meth:`Statistic.cost`).

The configuration, the run stages, the cache keys, the comparison and the report find a
statistic through the registry and never name it.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields, is_dataclass
from typing import Any, ClassVar

import numpy as np

from ..loader import build_or_raise
from .base import BoxSample, ConeGeometry, ConeSample, Measurement


@dataclass(frozen=True)
class Display:
    """How the report names and draws a statistic.

    Attributes
    ----------
    title : str
        Readable name with its symbol, e.g. ``projected correlation w_p(r_p)``.
    short : str
        Short name for table rows, e.g. ``w_p(r_p)``.
    symbol : str
        The symbol alone, for narrow columns and fitted combinations, e.g. ``w_p``.
    order : int
        Position among the statistics on every page and table (smaller first).
    scale_by_bins : bool
        Draw bin^scale_power × value on the value pages (flattens a power law such as
        w_p(r_p)).
    scale_power : int
        Power of the bin in that product (2 for s²ξ_ℓ(s)).
    scaled_label : str
        Axis label of the scaled value (with units), used when ``scale_by_bins``.
    """

    title: str
    short: str
    symbol: str
    order: int = 100
    scale_by_bins: bool = False
    scale_power: int = 1
    scaled_label: str = ""


@dataclass(frozen=True)
class Cost:
    """Order-of-magnitude work of one statistic for the pre-flight estimate.

    Attributes
    ----------
    cone_volume : float
        Search volume per cone galaxy [(Mpc/h)³] (pairs examined ≈ n × V per galaxy, all
        random multiples included).
    box_volume : float
        Search volume per box galaxy [(Mpc/h)³], line-of-sight repeats included.
    centre_volume : float
        Search volume of the statistic's own centres per catalogue [(Mpc/h)³ × centres]
        (e.g. random spheres), independent of the number of galaxies.
    task_bytes : float
        Extra memory a cone task holds for this statistic [bytes].
    matter_volume, box_matter_volume : float
        Search volume per cone and per box galaxy among the matter particles
        [(Mpc/h)³] (pairs examined ≈ particle density × V per galaxy).
    """

    cone_volume: float = 0.0
    box_volume: float = 0.0
    centre_volume: float = 0.0
    task_bytes: float = 0.0
    matter_volume: float = 0.0
    box_matter_volume: float = 0.0


class Statistic:
    """Base of every statistic (see the module notes).

    Subclasses set the class attributes and implement :meth:`measure_box` and
    :meth:`measure_cone`; the other methods have defaults that suit a statistic measured
    from the galaxies alone.
    """

    #: Key of the statistic in ``statistics.measure``, results.json and the report.
    name: ClassVar[str] = ""
    #: Frozen settings dataclass of ``[statistics.<name>]``.
    settings_type: ClassVar[type]
    display: ClassVar[Display]
    #: The cone estimator needs a random catalogue of the sample and cut.
    needs_randoms: ClassVar[bool] = False
    #: The box estimator depends on which box axis is the line of sight.
    los_dependent: ClassVar[bool] = True
    #: The estimators need a matter tracer (:class:`~.base.MatterSample`), passed to
    #: :meth:`measure_box` and :meth:`measure_cone` as ``matter=``.
    needs_matter: ClassVar[bool] = False
    #: The statistic counts galaxies in cells around centres (cylinders, spheres), so an
    #: incomplete survey thins what it measures: the run applies ``survey.completeness``
    #: (:mod:`conecheck.footprint.coverage`) to its box and cone samples, and its inside
    #: tests read :attr:`ConeGeometry.covered`.
    counts_in_cells: ClassVar[bool] = False
    #: With ``counts_in_cells``: galaxy weights (1/completeness) can enter the counts.
    #: False for a statistic, like the VPF, that only asks whether a cell is empty.
    weighted_counts: ClassVar[bool] = True

    # ------------------------------------------------------------------ settings
    def defaults(self) -> Any:
        """Settings with every default."""
        return self.settings_type()

    def settings_or_default(self, settings: Any) -> Any:
        return self.defaults() if settings is None else settings

    def make_settings(self, values: Mapping[str, Any] | None = None) -> Any:
        """Settings from a ``[statistics.<name>]`` table (unknown keys are an error)."""
        return build_or_raise(self.settings_type, dict(values or {}),
                              f"statistics.{self.name}")

    def n_bins(self, settings: Any = None) -> int:
        """Length of the data vector with ``settings``."""
        raise NotImplementedError

    def matter_reach(self, settings: Any = None) -> tuple[float, float]:
        """Largest separation across and along a galaxy's line of sight [Mpc/h] at which
        the statistic uses matter (how far around the galaxies a cone must carry it)."""
        return 0.0, 0.0

    def random_cell_volume(self, settings: Any = None) -> float | None:
        """Volume [(Mpc/h)³] around a galaxy of the smallest bin whose data–random count the
        cone estimator uses (how many randoms it needs: :func:`conecheck.cone.randoms.
        auto_multiple`); None for a statistic that counts no pairs with randoms."""
        return None

    # ------------------------------------------------------------------ shared work
    def prepare_cone(self, randoms: ConeSample | None, geometry: ConeGeometry,
                     settings: Any = None, *, n_data: int | None = None,
                     rng: np.random.Generator | None = None) -> Any:
        """Work shared by all cones of one sample and cut (none by default)."""
        return None

    def pack_shared(self, shared: Any) -> dict[str, Any]:
        """The shared work as a mapping of arrays and numbers (what the cache stores)."""
        if is_dataclass(shared):
            return {f.name: getattr(shared, f.name) for f in fields(shared)}
        if isinstance(shared, Mapping):
            return dict(shared)
        raise TypeError(f"{self.name}: pack_shared cannot store a {type(shared).__name__}; "
                        "override pack_shared and unpack_shared")

    def unpack_shared(self, payload: Mapping[str, Any]) -> Any:
        """Inverse of :meth:`pack_shared`."""
        return dict(payload)

    # ------------------------------------------------------------------ estimators
    def measure_box(self, sample: BoxSample, settings: Any = None,
                    rng: np.random.Generator | None = None, *, jackknife: bool | None = None
                    ) -> Measurement:
        """The statistic of a periodic box sample."""
        raise NotImplementedError

    def measure_box_pair(self, common: BoxSample, only_first: BoxSample,
                         only_second: BoxSample, settings: Any = None,
                         rng: np.random.Generator | None = None
                         ) -> tuple[Measurement, Measurement] | None:
        """The statistic of two boxes that share the galaxies ``common`` (the first box
        holds ``only_first`` besides, the second ``only_second``), without jackknife, each
        equal to :meth:`measure_box` of its box; None (the default) when the statistic has
        no cheaper way than measuring each box whole. A statistic that sums over pairs
        overrides it to count the shared galaxies' pairs once (the HOD derivatives' ± boxes
        share most of their galaxies)."""
        return None

    def measure_cone(self, sample: ConeSample, randoms: ConeSample | None,
                     geometry: ConeGeometry, settings: Any = None,
                     rng: np.random.Generator | None = None, shared: Any = None, *,
                     jackknife: bool | None = None) -> Measurement:
        """The statistic of a cone sample."""
        raise NotImplementedError

    # ------------------------------------------------------------------ cost
    def cost(self, settings: Any, randoms_multiple: float) -> Cost:
        """Work estimate for the pre-flight check (none by default)."""
        return Cost()

    def __repr__(self) -> str:
        return f"<statistic {self.name!r} ({type(self).__module__})>"
