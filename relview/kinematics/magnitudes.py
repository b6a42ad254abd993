"""How large a scene time or position may be: the bound float64 can still resolve.

The renderer solves every exposure relative to its exposure event E (times as t - t_E,
positions as x - x_E; relview.geometry.trace, relview.geometry.lightcone,
RigidKinematics.shifted), so moving a whole scene in time or space changes nothing:
differences of nearby float64 numbers are exact (Sterbenz's lemma; Goldberg 1991,
"What every computer scientist should know about floating-point arithmetic", theorem 11).
What a large value still costs is its own resolution as written: float64 spaces numbers
near |v| by ulp(v) = 2^(floor(log2 |v|) - 52).

Rule: a time or position is refused once float64 can no longer hold consecutive whole
seconds (metres), i.e. from |v| >= 2^53 (about 9.0e15 s = 285 million years, or
9.0e15 m = 0.95 light-year), where ulp(v) exceeds 1. Beyond it a value is not even the
number written to the nearest unit, and c t approaches ranges where the squares of
light-travel distances overflow. Below it the magnitude alone changes no picture
(tested: tests/test_invariance.py); the offsets between a scene's times should still be
large against ulp of those times (1.2e-7 s at 1e9 s, i.e. 36 m of light travel).
"""

from __future__ import annotations

import numpy as np

from relview.errors import UserError

#: Largest |time| (s) and |coordinate| (m) accepted: 2^53, where float64 stops holding
#: every whole number (IEEE 754 binary64 has a 53-bit significand).
MAX_RESOLVED = 2.0**53


def refuse_unresolvable(table, key: str, values, unit: str) -> None:
    """Raise the table's error at ``key`` when any of ``values`` (s or m) is too large for
    float64 to resolve to one ``unit`` (module docstring). ``table`` is a
    relview.scene.table.Table (duck-typed: this layer may not import it)."""
    worst = float(np.max(np.abs(np.asarray(values, float)))) if np.size(values) else 0.0
    if worst >= MAX_RESOLVED:
        what, one = ("time", "second") if unit == "s" else ("position", "metre")
        value = table.data.get(key)
        raise table.error(
            key,
            f"{key} = {table.show(value)} {unit} is too large to compute with: beyond "
            f"{MAX_RESOLVED:.4g} {unit} float64 cannot resolve one {one} (its spacing there is "
            f"{np.spacing(worst):.3g} {unit}); the picture depends only on differences, so "
            f"subtract the same amount from every {what} in the scene",
            value,
        )


def read_time(table, key: str = "time", default: float = 0.0) -> float:
    """A scene time (s) the renderer can resolve."""
    value = table.number(key, default, unit="s")
    refuse_unresolvable(table, key, value, "s")
    return value


def read_position(table, key: str = "position", default=(0.0, 0.0, 0.0)) -> np.ndarray:
    """A scene position [x, y, z] (m) the renderer can resolve."""
    value = table.vector(key, 3, default, unit="m")
    if value is not None:
        refuse_unresolvable(table, key, value, "m")
    return value


def check_time(time_s: float, source: str) -> None:
    """The same bound for an exposure time given outside a scene file (API, --time)."""
    if not abs(float(time_s)) < MAX_RESOLVED:
        raise UserError(
            f"{source} = {time_s!r} s is too large to compute with: beyond "
            f"{MAX_RESOLVED:.4g} s float64 cannot resolve one second; the picture "
            "depends only on differences, so shift every time in the scene instead"
        )
