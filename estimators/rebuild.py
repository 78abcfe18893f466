"""Rebuild result types from their JSON form: the inverse of each type's `to_dict`.

Every result type is a frozen dataclass whose `to_dict` writes its fields under their own
names, tuples as lists and undefined numbers as null. `rebuild` reads that form back by the
field types: nested result types through their own `from_dict`, tuples (of fixed length or
``tuple[X, ...]``) from lists, mappings key by key, and ``X | None`` as None or X. A type
whose JSON form renames or regroups its fields writes its own `from_dict` and uses
`rebuild` for the rest. The `rebuildable` decorator gives a type the generic `from_dict`.

So reports and comparisons rebuild the results from results.json alone, without the data.
"""

from __future__ import annotations

import dataclasses
import functools
import sys
import types
import typing
from collections.abc import Mapping
from typing import Any, TypeVar, Union

__all__ = ["rebuild", "rebuildable", "value_of"]

T = TypeVar("T")


@functools.cache
def _hints(cls: type) -> dict[str, Any]:
    """Field types of `cls`, resolved once (string annotations are evaluated)."""
    module = sys.modules[cls.__module__]
    return typing.get_type_hints(cls, vars(module))


def value_of(kind: Any, value: Any) -> Any:
    """Read JSON `value` as type `kind` (a field's type hint).

    Parameters
    ----------
    kind : type or typing form
        The field's type: a result type, ``float``, ``int``, ``str``, ``bool``, ``Any``,
        ``tuple[...]``, ``dict[...]``/``Mapping[...]``, or a union with None.
    value : Any
        The JSON value (None, number, string, list or mapping).

    Returns
    -------
    Any
        The value in the field's type (None stays None).
    """
    if value is None:
        return None
    origin = typing.get_origin(kind)
    if origin in (Union, types.UnionType):
        options = [a for a in typing.get_args(kind) if a is not type(None)]
        return value_of(options[0], value) if len(options) == 1 else value
    if kind is float:
        return float(value)
    if kind is int and not isinstance(value, bool):
        return int(value)
    if dataclasses.is_dataclass(kind):
        reader = getattr(kind, "from_dict", None)
        return reader(value) if reader is not None else rebuild(kind, value)
    if origin is tuple:
        args = typing.get_args(kind)
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(value_of(args[0], v) for v in value)
        return tuple(value_of(a, v) for a, v in zip(args, value, strict=True))
    if origin in (dict, Mapping, typing.Mapping):
        args = typing.get_args(kind) or (Any, Any)
        return {k: value_of(args[1], v) for k, v in value.items()}
    if kind is Any and isinstance(value, list):
        return tuple(value_of(Any, v) for v in value)
    return value


def rebuild(cls: type[T], data: Mapping[str, Any], **given: Any) -> T:
    """Build result type `cls` from its JSON form `data`.

    Parameters
    ----------
    cls : type
        A frozen dataclass result type.
    data : mapping
        Its `to_dict` form; fields missing from it take their defaults.
    **given
        Fields already built by the caller (they win over `data`).

    Returns
    -------
    cls
        The rebuilt result.
    """
    hints = _hints(cls)
    kwargs: dict[str, Any] = {}
    for field in dataclasses.fields(cls):  # type: ignore[arg-type]
        if not field.init:
            continue
        if field.name in given:
            kwargs[field.name] = given[field.name]
        elif field.name in data:
            kwargs[field.name] = value_of(hints[field.name], data[field.name])
    return cls(**kwargs)


def rebuildable(cls: type[T]) -> type[T]:
    """Give result type `cls` a classmethod ``from_dict(data)`` that calls `rebuild`."""

    def from_dict(klass: type[T], data: Mapping[str, Any]) -> T:
        """Rebuild the result from its JSON form (`to_dict`)."""
        return rebuild(klass, data)

    cls.from_dict = classmethod(from_dict)  # type: ignore[attr-defined]
    return cls
