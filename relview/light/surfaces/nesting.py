"""Surfaces nested in others (pattern cells, a dial's face and ink) are read through the
registry of surface kinds, which lists the composite kinds themselves: the registry hands
its reader over here when it is imported, so pattern.py and clock_face.py read nested
tables without importing the registry (no import cycle)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

_reader: Callable[[Any], Any] | None = None


def set_reader(reader: Callable[[Any], Any]) -> None:
    """Install the reader of nested surface tables (relview.light.surfaces.registry)."""
    global _reader
    _reader = reader


def read_nested(table):
    """The surface a nested surface table describes (the registry's reader)."""
    if _reader is None:  # importing relview.light.surfaces installs it
        raise RuntimeError("relview.light.surfaces.registry is not loaded")
    return _reader(table)
