"""The parts of a scene: plain dataclasses for camera, bodies, render settings, sky.

Everything here is in scene-file units (metres, seconds, beta = v/c) except where a
name says otherwise. Reading and validating TOML lives in :mod:`relview.scene.reader`,
the assembled :class:`relview.scene.model.Scene` in :mod:`relview.scene.model`; this
module depends on numpy only, so every layer can use these types.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np


@dataclass
class Effects:
    """Switches for each effect; every one is on by default (docs/scene-format.md)."""

    delay: bool = True  # light-travel time; off: light is instantaneous
    contraction: bool = True  # Lorentz kinematics; off: Galilean
    aberration: bool = True  # aberration of the camera's own motion
    doppler: bool = True  # colour shift
    beaming: bool = True  # brightness change with D


@dataclass
class RenderSettings:
    resolution: tuple[int, int] = (960, 540)  # width, height in pixels
    samples: int = 1  # rays per pixel, jittered when > 1
    exposure: float | str = "auto"  # "auto" or the luminance (cd/m2) that maps to white
    effects: Effects = field(default_factory=Effects)
    seed: int = 0  # jitter seed, so renders are reproducible
    shutter: float = 0.0  # s, exposure duration (0: an ideal instant shutter)
    shutter_samples: int = 8  # exposure events per pixel sample across an open shutter
    tone: str = "none"  # display curve for 8/16-bit images: "none" (clip) or "reinhard"
    # automatic exposure meters the lit non-lamp pixels of: "frame" (all, sky included),
    # "bodies" (those that see a body) or "body" (those of metering_body); see
    # relview.imaging.exposure and docs/colour.md
    metering: str = "frame"
    metering_body: str = ""  # the body metered when metering = "body"


@dataclass
class Clock:
    """The setting of a clock carried by a body's reference point (or the camera): it
    reads ``reading`` seconds at the reference point's event at scene time ``time`` s and
    then advances with that point's proper time (relview.kinematics.clocks)."""

    reading: float = 0.0  # s
    time: float = 0.0  # s, scene time of the setting event


@dataclass
class Camera:
    position: np.ndarray  # (3,) m, scene frame, at the exposure event
    look_at: np.ndarray | None = None  # (3,) m
    direction: np.ndarray | None = None  # (3,) unit, alternative to look_at
    up: np.ndarray = field(default_factory=lambda: np.array([0.0, 0.0, 1.0]))
    fov: float = 60.0  # degrees, horizontal (pinhole, fisheye)
    time: float = 0.0  # s, scene-frame time of the exposure
    beta: np.ndarray = field(default_factory=lambda: np.zeros(3))  # velocity / c
    projection: str = "pinhole"  # pinhole | panorama | fisheye
    # Optional worldline of the camera (any motion kind, relview.kinematics.kinds); when given,
    # position and beta follow it and `position` holds its place at `time`.
    motion: Any = None
    # Framing on what is seen (relview.framing, applied per exposure): the view turns
    # towards the apparent centre of the bodies named in aim_at, and the field of view
    # fits those named in fit with a margin (fraction of the half-frame left free).
    aim_at: tuple[str, ...] = ()
    fit: tuple[str, ...] = ()
    margin: float = 0.15
    clock: Clock = field(default_factory=Clock)  # the camera's own clock setting

    def forward(self) -> np.ndarray:
        if self.direction is not None:
            f = np.asarray(self.direction, float)
        else:
            f = np.asarray(self.look_at, float) - np.asarray(self.position, float)
        return f / np.linalg.norm(f)

    def basis(self) -> np.ndarray:
        """(3, 3) rows: right, up, forward (unit, right-handed image axes), scene axes."""
        f = self.forward()
        r = np.cross(f, np.asarray(self.up, float))
        n = np.linalg.norm(r)
        if n < 1e-12:  # looking straight along 'up': pick any perpendicular
            r = np.cross(f, [1.0, 0.0, 0.0] if abs(f[0]) < 0.9 else [0.0, 1.0, 0.0])
            n = np.linalg.norm(r)
        r = r / n
        u = np.cross(r, f)
        return np.stack([r, u, f])


@dataclass
class Body:
    name: str
    shape: str  # box | sphere | cylinder | plane | mesh
    motion: Any  # any motion kind (relview.kinematics.kinds)
    surface: Any  # a surface from relview.light.materials
    size: np.ndarray | None = None  # (3,) m box, (2,) m plane
    radius: float | None = None  # m, sphere and cylinder
    height: float | None = None  # m, cylinder (along rest-frame z)
    file: Path | None = None  # mesh file, resolved relative to the scene file
    scale: float = 1.0  # mesh scale factor
    rotation: np.ndarray = field(default_factory=lambda: np.zeros(3))  # degrees about x, y, z
    detail: int | None = None  # tessellation level of curved primitives
    source_key: str = ""  # where in the scene file this body came from, for messages
    center: bool = True  # mesh: shift the file's bounding-box centre onto the body origin
    clock: Clock = field(default_factory=Clock)  # the body's clock setting (proper_time layer)

    def rotation_matrix(self) -> np.ndarray:
        """Rest-frame orientation: body axes -> rest-frame axes (x, then y, then z turns)."""
        ax, ay, az = np.radians(np.asarray(self.rotation, float))
        cx, sx, cy, sy, cz, sz = (
            np.cos(ax),
            np.sin(ax),
            np.cos(ay),
            np.sin(ay),
            np.cos(az),
            np.sin(az),
        )
        rx = np.array([[1, 0, 0], [0, cx, -sx], [0, sx, cx]])
        ry = np.array([[cy, 0, sy], [0, 1, 0], [-sy, 0, cy]])
        rz = np.array([[cz, -sz, 0], [sz, cz, 0], [0, 0, 1]])
        return rz @ ry @ rx


@dataclass
class Background:
    kind: str = "black"  # black | stars | graticule | cmb
    count: int = 3000  # stars: how many
    seed: int = 1  # stars: generator seed
    temperature: tuple[float, float] = (3000.0, 12000.0)  # K, star temperature range
    luminance: float = 1.0  # cd/m2 of the sky pattern at rest (graticule), or star scale
    spacing: float = 15.0  # degrees between graticule lines
    width: float = 0.4  # degrees, graticule line width
    # cmb: velocity / c, in the scene frame, of the frame the sky is at rest in (the
    # microwave background's rest frame; zero: at rest in the scene frame)
    frame_beta: np.ndarray = field(default_factory=lambda: np.zeros(3))
    # cmb, instead of frame_beta: the camera's velocity / c relative to that frame (scene
    # axes); the frame then follows the camera's own velocity at each exposure
    camera_velocity: np.ndarray | None = None


@dataclass
class Animation:
    start: float = 0.0  # s
    end: float = 0.0  # s
    frames: int = 1
    fps: float = 24.0


@dataclass
class Lamp:
    """A light source of the scene (docs/scene-format.md, ``[[lamp]]``).

    Either a point or sphere lamp on a worldline (``power`` in W, isotropic in its rest
    frame; ``motion`` any motion kind) or, when ``direction`` is given, a distant lamp: a
    plane wave of ``irradiance`` W/m2 arriving from ``direction`` as seen in the inertial
    frame moving with ``frame_beta``.
    """

    name: str
    spectrum: Any  # a relview.light.lamps.LampSpectrum
    power: float = 0.0  # W, radiant power (point and sphere lamps)
    radius: float = 0.0  # m; 0: a point lamp; > 0: a glowing sphere (soft shadows)
    motion: Any = None  # the lamp's worldline (any motion kind), point and sphere lamps
    direction: np.ndarray | None = None  # (3,) unit, towards a distant lamp, in its frame
    irradiance: float = 0.0  # W/m2 on a plate facing a distant lamp, in its frame
    frame_beta: np.ndarray = field(default_factory=lambda: np.zeros(3))  # distant lamp frame
    shadow_samples: int = 16  # shadow rays per shaded point towards a sphere lamp
    seed: int = 0  # seed of those rays' points on the sphere

    @property
    def distant(self) -> bool:
        return self.direction is not None
