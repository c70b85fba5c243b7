"""The one TOML reader and settings builder: run configurations, HOD files, region files
and statistic settings all go through it.

:func:`build_section` turns a TOML table into a frozen settings dataclass:

* unknown keys are rejected, naming the key path and the allowed keys;
* every value is checked against the field's type hint (``float`` accepts integers);
* the documented defaults fill what is absent;
* every problem is collected (with its key path) before the caller raises one
  :class:`~conecheck.errors.InputError`.

Settings classes validate their own values in ``__post_init__`` and raise ``InputError``
whose ``problems`` name each field; :func:`build_section` prefixes them with the section's
key path.
"""

from __future__ import annotations

import math
import re
import sys
import types
import typing
from collections.abc import Mapping
from dataclasses import fields
from pathlib import Path
from typing import Any, Literal

from .errors import InputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def read_toml(path: str | Path, what: str = "TOML file") -> dict[str, Any]:
    """The tables of a TOML file; InputError naming the file when it is missing, a
    directory or not valid TOML."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: {what} not found" if not path.exists()
                         else f"{path}: expected a {what}, found a directory")
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None


def parse_toml(text: str) -> dict[str, Any]:
    """The tables of TOML text (shipped templates)."""
    return tomllib.loads(text)


def type_name(hint: Any) -> str:
    if hint is type(None):
        return "nothing"
    origin = typing.get_origin(hint)
    if origin is Literal:
        return "one of " + ", ".join(repr(a) for a in typing.get_args(hint))
    if origin in (typing.Union, types.UnionType):
        return " or ".join(type_name(a) for a in typing.get_args(hint)
                           if a is not type(None))
    if origin in (tuple, list):
        return "a list"
    if origin is dict:
        return "a table of strings"
    return {float: "a number", int: "an integer", bool: "true or false",
            str: "a string"}.get(hint, getattr(hint, "__name__", str(hint)))


def convert(value: Any, hint: Any, key: str) -> Any:
    """``value`` checked against ``hint`` (raises ValueError with a message)."""
    origin = typing.get_origin(hint)
    args = typing.get_args(hint)
    if hint is Any:
        return value
    if origin in (typing.Union, types.UnionType):
        if value is None and type(None) in args:
            return None
        for a in args:
            if a is type(None):
                continue
            try:
                return convert(value, a, key)
            except InputError:
                raise  # a specific problem of this alternative, not a mismatch
            except ValueError:
                continue
        raise ValueError(f"{key} = {value!r}: expected {type_name(hint)}")
    if origin is Literal:
        if value not in args:
            raise ValueError(f"{key} = {value!r}: expected {type_name(hint)}")
        return value
    if origin is tuple:
        if not isinstance(value, (list, tuple)):
            raise ValueError(f"{key} = {value!r}: expected a list")
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(convert(v, args[0], f"{key}[{i}]") for i, v in enumerate(value))
        if len(args) != len(value):
            raise ValueError(f"{key} = {value!r}: expected a list of {len(args)} values")
        pairs = enumerate(zip(value, args, strict=True))
        return tuple(convert(v, a, f"{key}[{i}]") for i, (v, a) in pairs)
    if origin is dict:
        if not isinstance(value, Mapping) or not all(isinstance(v, str) for v in value.values()):
            raise ValueError(f"{key} = {value!r}: expected a table of strings")
        return dict(value)
    if hint is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValueError(f"{key} = {value!r}: expected a number")
        if not math.isfinite(value):
            raise ValueError(f"{key} = {value!r}: expected a finite number")
        return float(value)
    if hint is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ValueError(f"{key} = {value!r}: expected an integer")
        return value
    if hint is bool:
        if not isinstance(value, bool):
            raise ValueError(f"{key} = {value!r}: expected true or false")
        return value
    if hint is str:
        if not isinstance(value, str):
            raise ValueError(f"{key} = {value!r}: expected a string")
        return value
    return value


def prefix(path: str, problem: str) -> str:
    """``problem`` (from a settings class) with the section's key path in front."""
    if problem.startswith(path.split(".")[0]):  # already carries its key path
        return problem
    if re.match(r"^[a-z_]+(\[\d+\])? ?[=:.]", problem):  # starts with a key: "rp_min = -1"
        return join_key(path, problem)
    return f"{path}: {problem}"


def join_key(path: str, key: str) -> str:
    """``path.key`` for a TOML key path, ``path: key`` for a described place such as
    ``"hod.toml: [[threshold]] #2"``."""
    return f"{path}.{key}" if re.fullmatch(r"[\w.\[\]-]+", path) else f"{path}: {key}"


def build_section(cls: type, table: Any, path: str, problems: list[str],
                  skip: tuple[str, ...] = (), extra: Mapping[str, Any] | None = None) -> Any:
    """Build dataclass ``cls`` from a TOML table, appending problems (with key paths).

    Returns the instance, or None when a problem prevented building it.
    """
    if table is None:
        table = {}
    if not isinstance(table, Mapping):
        problems.append(f"{path}: expected a table, got {table!r}")
        return None
    hints = typing.get_type_hints(cls)
    names = [f.name for f in fields(cls) if f.init and not f.name.startswith("_")]
    allowed = [n for n in names if n not in (extra or {})] + list(skip)
    kwargs: dict[str, Any] = dict(extra or {})
    ok = True
    for key, value in table.items():
        if key in skip:
            continue
        if key not in allowed:
            problems.append(f"{join_key(path, key)}: unknown key (allowed: "
                            f"{', '.join(sorted(allowed))})")
            ok = False
            continue
        try:
            kwargs[key] = convert(value, hints[key], join_key(path, key))
        except InputError:
            raise
        except ValueError as exc:
            problems.append(str(exc))
            ok = False
    if not ok:
        return None
    try:
        return cls(**kwargs)
    except InputError as exc:
        problems.extend(prefix(path, p) for p in exc.problems)
    except (TypeError, ValueError) as exc:
        problems.append(f"{path}: {exc}")
    return None


def build_or_raise(cls: type, table: Any, path: str) -> Any:
    """:func:`build_section` for a table read on its own: raises one InputError listing
    every problem instead of collecting them."""
    problems: list[str] = []
    out = build_section(cls, table, path, problems)
    if problems or out is None:
        problems = problems or [f"{path}: could not be read"]
        raise InputError("; ".join(problems), problems)
    return out


__all__ = ["build_or_raise", "build_section", "convert", "join_key", "parse_toml", "prefix",
           "read_toml", "type_name"]
