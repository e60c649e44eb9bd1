"""SQLite rows -> frozen records: each field is read from the column of the same name."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any, TypeVar

if TYPE_CHECKING:
    import sqlite3

    from _typeshed import DataclassInstance

    R = TypeVar("R", bound=DataclassInstance)
else:
    R = TypeVar("R")


def columns(cls: type[DataclassInstance]) -> str:
    """The record's field names as a SELECT column list, in field order."""
    return ", ".join(f.name for f in dataclasses.fields(cls))


def from_row(cls: type[R], row: sqlite3.Row, **converted: Any) -> R:
    """A ``cls`` record from ``row``; ``converted`` gives the fields that need a type other than
    SQLite's (``Path``, an enum), already converted.
    """
    values = {
        f.name: converted[f.name] if f.name in converted else row[f.name]
        for f in dataclasses.fields(cls)
    }
    return cls(**values)
