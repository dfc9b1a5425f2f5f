"""Typed records and their JSON documents: one rule for every report.

A report record is a dataclass with one field per key of its JSON document,
in the document's order. :func:`record_dict` makes the document and
:func:`record_from_dict` reads it back; :func:`optional`, :func:`present_with`
and :func:`nested` declare the fields whose keys are written only in some
cases or that hold records of their own. The repair, impact and other reports
use these rules, so their documents cannot drift from their fields.
"""

from __future__ import annotations

import dataclasses
from dataclasses import field
from typing import Any, TypeVar

__all__ = ["optional", "present_with", "nested", "record_dict", "record_from_dict"]

#: the record class read by record_from_dict
_R = TypeVar("_R")


def optional(**kwargs: Any) -> Any:  # Any, as dataclasses.field: the default of a field of any type
    """A field whose key is written only when its value is not None (None means "absent")."""
    return field(default=None, metadata={"optional": True, **kwargs.pop("metadata", {})}, **kwargs)


def present_with(anchor: str) -> Any:
    """A field whose key is written exactly when field ``anchor`` is not None (its own value may be None)."""
    return field(default=None, metadata={"present_with": anchor})


def nested(record: type, many: bool = False, is_optional: bool = False) -> Any:
    """A field holding a record (``many``: a list of records) written as its own dict."""
    meta = {"record": record, "many": many}
    if is_optional:
        return field(default=None, metadata={**meta, "optional": True})
    return field(metadata=meta)


def _written(record, f) -> bool:
    if f.metadata.get("optional") and getattr(record, f.name) is None:
        return False
    anchor = f.metadata.get("present_with")
    return anchor is None or getattr(record, anchor) is not None


def _plain(value):
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return record_dict(value)
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    return value


def record_dict(record: object) -> dict[str, Any]:
    """The JSON document of a report record: its fields in order, absent optional keys left out.

    Lists and dicts are copied (changing the document does not change the
    record); nested records become dicts.

    Examples
    --------
    >>> from dataclasses import dataclass
    >>> @dataclass(kw_only=True)
    ... class R:
    ...     a: int
    ...     b: int | None = optional()
    >>> record_dict(R(a=1)), record_dict(R(a=1, b=2))
    ({'a': 1}, {'a': 1, 'b': 2})
    """
    return {f.name: _plain(getattr(record, f.name)) for f in dataclasses.fields(record) if _written(record, f)}


def record_from_dict(cls: type[_R], data: dict, what: str | None = None) -> _R:
    """The record of class ``cls`` from its JSON document (the inverse of :func:`record_dict`).

    Raises
    ------
    ValueError
        A key the record does not have, or a key it always writes missing.

    Examples
    --------
    >>> from dataclasses import dataclass
    >>> @dataclass(kw_only=True)
    ... class R:
    ...     a: int
    ...     b: int | None = optional()
    >>> record_from_dict(R, {"a": 1})
    R(a=1, b=None)
    >>> record_from_dict(R, {"a": 1, "c": 3})
    Traceback (most recent call last):
    ...
    ValueError: R: unknown key 'c'
    """
    what = what or cls.__name__
    fields = {f.name: f for f in dataclasses.fields(cls)}
    unknown = [k for k in data if k not in fields]
    if unknown:
        raise ValueError(f"{what}: unknown key {unknown[0]!r}")
    kwargs = {}
    for name, f in fields.items():
        if name not in data:
            if f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
                raise ValueError(f"{what}: key {name!r} is missing")
            continue
        value = data[name]
        record = f.metadata.get("record")
        if record is not None and value is not None:
            if f.metadata.get("many"):
                value = [record_from_dict(record, v, f"{what}.{name}") for v in value]
            else:
                value = record_from_dict(record, value, f"{what}.{name}")
        kwargs[name] = value
    return cls(**kwargs)


# ------------------------------------------------------------------ the repair's report
