"""The registry of motion kinds: ``kind = "..."`` in a scene file -> the reader that
builds the motion from its table.

Each kind's schema sits beside its class (``from_table``, reading through the scene
reader's validated table, so every message names file, line, key and value). A new
kind is one class implementing :class:`relview.kinematics.worldline.RigidKinematics`
plus one line here (or a :func:`register_motion` call from a plug-in module).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from relview.kinematics.hyperbolic import HyperbolicMotion
from relview.kinematics.orbit import OrbitMotion
from relview.kinematics.path import PathMotion
from relview.kinematics.spin import RollingMotion, SpinMotion
from relview.kinematics.uniform import UniformMotion

#: reader(table) -> motion; ``table`` is a relview.scene.table.Table
MotionReader = Callable[[Any], Any]

#: motion kind -> reader of its scene-file table
MOTION_KINDS: dict[str, MotionReader] = {
    "uniform": UniformMotion.from_table,
    "hyperbolic": HyperbolicMotion.from_table,
    "orbit": OrbitMotion.from_table,
    "path": PathMotion.from_table,
    "spin": SpinMotion.from_table,
    "rolling": RollingMotion.from_table,
}


def register_motion(kind: str, reader: MotionReader) -> None:
    """Make ``[body.motion] kind = <kind>`` build its motion with ``reader(table)``."""
    MOTION_KINDS[kind] = reader
