"""Finding the statistics: conecheck's own modules and those of installed packages.

Built-in statistics are the modules of this package that define ``STATISTIC`` (a
:class:`~conecheck.stats.statistic.Statistic` instance); adding a file is enough.

Users' own statistics come from installed packages through the entry-point group
:data:`ENTRY_POINT_GROUP`. In the package's ``pyproject.toml``::

    [project.entry-points."conecheck.statistics"]
    my_ratio = "my_package.my_ratio:STATISTIC"

The entry's name must equal the statistic's ``name``; the object may be a Statistic
instance, a Statistic subclass (instantiated without arguments) or a module with
``STATISTIC``. Because entry points are package metadata, every process that imports
conecheck — dask workers included — finds the same statistics. A statistic that fails to
load is left out and its problem is kept in :data:`LOAD_PROBLEMS` (``conecheck check``
prints it); a third-party statistic cannot replace a built-in one of the same name.
"""

from __future__ import annotations

import importlib
import pkgutil
from collections.abc import Callable, Iterator, Mapping
from importlib.metadata import entry_points
from types import ModuleType
from typing import Any

from ..errors import InputError
from .statistic import Statistic

#: Entry-point group of third-party statistics.
ENTRY_POINT_GROUP = "conecheck.statistics"
#: Modules of this package that are infrastructure, not statistics.
_NOT_STATISTICS = {"base", "statistic", "registry", "settings"}

#: Problems met while loading statistics ("<where>: <what>"), for ``conecheck check``.
LOAD_PROBLEMS: list[str] = []
#: Statistic name -> where it came from ("conecheck" or the distribution's name).
ORIGINS: dict[str, str] = {}


def _as_statistic(obj: Any, where: str) -> Statistic:
    if isinstance(obj, ModuleType):
        obj = getattr(obj, "STATISTIC", None)
    if isinstance(obj, type) and issubclass(obj, Statistic):
        obj = obj()
    if not isinstance(obj, Statistic):
        raise TypeError(f"{where}: expected a conecheck.stats.Statistic instance or subclass, "
                        f"got {type(obj).__name__}")
    if not obj.name or not obj.name.isidentifier():
        raise TypeError(f"{where}: the statistic's name must be an identifier, got "
                        f"{obj.name!r}")
    for attr in ("settings_type", "display"):
        if not hasattr(obj, attr):
            raise TypeError(f"{where}: statistic {obj.name!r} has no {attr}")
    return obj


def _builtin() -> dict[str, Statistic]:
    out: dict[str, Statistic] = {}
    for info in pkgutil.iter_modules(_package_path()):
        if info.name.startswith("_") or info.name in _NOT_STATISTICS:
            continue
        module = importlib.import_module(f"{__package__}.{info.name}")
        if hasattr(module, "STATISTIC"):
            stat = _as_statistic(module, f"{__package__}.{info.name}")
            out[stat.name] = stat
            ORIGINS[stat.name] = "conecheck"
    return out


def _package_path() -> list[str]:
    return list(importlib.import_module(__package__).__path__)


def _third_party(known: dict[str, Statistic]) -> dict[str, Statistic]:
    out: dict[str, Statistic] = {}
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        dist = getattr(ep.dist, "name", None) or "an installed package"
        where = f"entry point {ep.name!r} of {dist} ({ep.value})"
        try:
            stat = _as_statistic(ep.load(), where)
        except Exception as exc:  # a broken plug-in must not stop the others
            LOAD_PROBLEMS.append(f"{where}: {type(exc).__name__}: {exc}")
            continue
        if stat.name != ep.name:
            LOAD_PROBLEMS.append(f"{where}: the entry's name differs from the statistic's "
                                 f"name {stat.name!r}")
        elif stat.name in known or stat.name in out:
            LOAD_PROBLEMS.append(f"{where}: a statistic named {stat.name!r} is already "
                                 f"registered by {ORIGINS.get(stat.name, 'conecheck')}")
        else:
            out[stat.name] = stat
            ORIGINS[stat.name] = dist
    return out


def _load() -> dict[str, Statistic]:
    found = _builtin()
    found.update(_third_party(found))
    order = sorted(found, key=lambda n: (found[n].display.order, n))
    return {n: found[n] for n in order}


class _Registry(Mapping[str, Any]):
    """A read-only mapping filled on first use.

    Loading waits for the first look-up so that a plug-in may import ``conecheck.stats``
    (its base class and samples) while conecheck itself is still being imported.
    """

    def __init__(self, make: Callable[[dict[str, Statistic]], dict[str, Any]]) -> None:
        self._make = make
        self._data: dict[str, Any] | None = None

    def _get(self) -> dict[str, Any]:
        if self._data is None:
            self._data = self._make(_statistics())
        return self._data

    def __getitem__(self, key: str) -> Any:
        return self._get()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._get())

    def __len__(self) -> int:
        return len(self._get())

    def __repr__(self) -> str:
        return repr(self._get())


_LOADED: dict[str, Statistic] = {}


def _statistics() -> dict[str, Statistic]:
    if not _LOADED:
        _LOADED.update(_load())
    return _LOADED


#: Statistic name -> Statistic, in display order.
STATISTICS: Mapping[str, Statistic] = _Registry(dict)
#: Statistic name -> its settings dataclass.
SETTINGS_TYPES: Mapping[str, type] = _Registry(
    lambda stats: {n: s.settings_type for n, s in stats.items()})


def statistic(name: str) -> Statistic:
    """The registered statistic ``name``, or an error listing the known ones."""
    try:
        return STATISTICS[name]
    except KeyError:
        hint = ("; problems loading statistics: " + "; ".join(LOAD_PROBLEMS)
                if LOAD_PROBLEMS else "")
        raise InputError(f"statistics: unknown statistic {name!r}; expected one of "
                         f"{', '.join(STATISTICS)}{hint}") from None


def make_settings(name: str, values: dict[str, Any] | None = None) -> Any:
    """Settings of statistic ``name`` from a config mapping (unknown keys are an error)."""
    return statistic(name).make_settings(values)
