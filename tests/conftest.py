"""Helpers shared by several test modules: small scene builders and reference colorimetry.

pytest puts this directory on sys.path, so test modules import them with
``from conftest import ...``.
"""

from __future__ import annotations

import math
from functools import cache
from pathlib import Path

import numpy as np
import pytest

from relview.kinematics.uniform import UniformMotion
from relview.light.materials import Blackbody
from relview.scene.model import Scene
from relview.scene.parts import Body, Camera, RenderSettings

REPO = Path(__file__).resolve().parents[1]


# ------------------------------------------------------------------------- scene builders


def moving_body(
    name: str,
    shape: str,
    beta=(0.0, 0.0, 0.0),
    position=(0.0, 0.0, 0.0),
    *,
    temperature: float = 5000.0,
    time: float = 0.0,
    rotation=(0.0, 0.0, 0.0),
    size=None,
    **shape_keys,
) -> Body:
    """A blackbody-surfaced body in uniform motion (``size`` for boxes; ``radius`` etc.)."""
    return Body(
        name=name,
        shape=shape,
        surface=Blackbody(temperature),
        size=None if size is None else np.array(size, float),
        motion=UniformMotion(
            beta=np.array(beta, float), position=np.array(position, float), time=time
        ),
        rotation=np.array(rotation, float),
        **shape_keys,
    )


def camera_scene(
    bodies,
    position=(0.0, -3.0, 0.0),
    look_at=(0.0, 0.0, 0.0),
    *,
    fov=70.0,
    beta=(0.0, 0.0, 0.0),
    time: float = 0.0,
    resolution=(96, 54),
    effects=None,
    **camera_keys,
) -> Scene:
    """A Scene of ``bodies`` seen by a camera at ``position`` looking at ``look_at``."""
    cam = Camera(
        position=np.array(position, float),
        look_at=np.array(look_at, float),
        fov=fov,
        beta=np.array(beta, float),
        time=time,
        **camera_keys,
    )
    render = RenderSettings(resolution=resolution)
    if effects is not None:
        render = RenderSettings(resolution=resolution, effects=effects)
    return Scene(camera=cam, bodies=bodies, render=render)


#: a small resting blackbody ball, for scene dicts that need a body but do not look at it
DICT_BALL = {
    "name": "star",
    "shape": "sphere",
    "radius": 0.5,
    "detail": 3,
    "motion": {"position": [0.0, 40.0, 0.0]},
    "surface": {"blackbody": 5000.0},
}


def dict_scene(camera: dict, bodies=None, render=None, background=None) -> Scene:
    """A Scene read from a scene dict (the scene-file tables as Python data)."""
    data = {"camera": camera, "body": bodies or [DICT_BALL]}
    if render:
        data["render"] = render
    if background:
        data["background"] = background
    return Scene.from_dict(data)


def write_text(directory: Path, text: str, name: str = "scene.toml") -> Path:
    """Write ``text`` to directory/name (parents created) and return the path."""
    path = directory / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


# ------------------------------------------------------------------- reference colorimetry


@cache
def assert_scene_errors(path: Path, base: str, cases) -> None:
    """Each (text, key) of ``cases``: the scene file ``path`` holding ``base`` + text is
    refused with a SceneError that names the file and ``key``."""
    from relview.errors import SceneError
    from relview.scene.model import load_scene

    for bad, key in cases:
        path.write_text(base + bad)
        with pytest.raises(SceneError, match=key) as info:
            load_scene(path)
        assert path.name in str(info.value)


def _colour():
    import colour  # imported on first use: slow to import, and most test modules need none

    return colour


def cie_1931_cmfs():
    """CIE 1931 2 degree standard observer colour-matching functions (colour-science)."""
    return _colour().MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]


def xyz_colour_science_blackbody(t: float):
    """Absolute XYZ of a blackbody at t K computed by colour-science alone.

    colour.sd_blackbody gives W/(sr m^2 nm) (here with the exact SI radiation constants
    c1 = 2 pi h c^2, c2 = h c / k instead of its CIE 15 rounded defaults); sd_to_XYZ with
    method 'Integration', an illuminant of ones and k = 683 lm/W gives
    K_m * sum(L ybar) dlambda, the CIE 15 definition of absolute XYZ.
    """
    import scipy.constants as sc

    colour = _colour()
    shape = colour.SpectralShape(360, 830, 1)
    c1 = 2 * math.pi * sc.h * sc.c**2  # first radiation constant, W m^2 (SI exact h, c)
    c2 = sc.h * sc.c / sc.k  # second radiation constant, m K
    sd = colour.sd_blackbody(t, shape, c1=c1, c2=c2)
    # sd_to_XYZ returns its "Range100" scale: the plain k * sum(...) divided by 100.
    return 100.0 * colour.sd_to_XYZ(
        sd, cie_1931_cmfs(), colour.sd_ones(shape), k=683.0, method="Integration"
    )


def chromaticity(xyz) -> np.ndarray:
    """CIE 1931 (x, y) of (..., 3) XYZ: x = X/(X+Y+Z), y = Y/(X+Y+Z) (CIE 15:2004)."""
    xyz = np.asarray(xyz, float)
    return xyz[..., :2] / xyz.sum(axis=-1, keepdims=True)
