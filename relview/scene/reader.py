"""Read and validate scene files (TOML) into :class:`relview.scene.model.Scene`.

Every key is described in docs/scene-format.md. The policy, in short:

* Nothing in a scene file is evaluated as code: it is parsed with the standard
  library's ``tomllib`` and every value is checked against the key's type and range.
* Any mistake raises :class:`relview.errors.SceneError` (or ``MeshError`` for mesh
  files) naming the file, the line when it can be found, the key as the user wrote
  it, and the offending value. Unknown keys are errors, with the nearest valid key
  suggested.
* Paths (mesh, spectrum, texture files) are relative to the scene file.

The generic validated table is :mod:`relview.scene.table`; motion kinds read their own
keys through it (:mod:`relview.kinematics.kinds`), as do surface kinds.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from relview.errors import MeshError, SceneError
from relview.geometry.camera import PROJECTIONS as projection_registry
from relview.geometry.shapes import MAX_COORDINATE, MAX_DETAIL, SHAPES, load_mesh_file
from relview.kinematics.lorentz import C
from relview.kinematics.magnitudes import read_time, refuse_unresolvable
from relview.kinematics.uniform import UniformMotion
from relview.light.lamps import SPECTRUM_KEYS as LAMP_SPECTRUM_KEYS
from relview.light.lamps import LampSpectrum, SphereGlow, sphere_radiance
from relview.light.sky import CMB_TEMPERATURE_K
from relview.light.surfaces import MAX_TEMPERATURE, read_surface
from relview.scene.parts import (
    Animation,
    Background,
    Body,
    Camera,
    Clock,
    Effects,
    Lamp,
    RenderSettings,
)
from relview.scene.table import Table, _Document, _type_name, show

#: newest scene-file ``format`` this version reads
SUPPORTED_FORMAT = 1

PROJECTIONS = tuple(projection_registry)  # names of the registered camera projections
BACKGROUND_KINDS = ("black", "stars", "graticule", "cmb")

#: tessellation levels accepted for ``body.detail`` (see relview.geometry.shapes)
DETAIL_RANGE = (0, MAX_DETAIL)

# Upper limits of counts that size arrays or loops, so an extra digit is an error
# message instead of running out of memory (all stars are held at once, about 200
# bytes each; every sample and frame is a list entry before any work).
#: most rays per pixel, ``render.samples``
MAX_SAMPLES = 65536
#: most stars in ``background.count`` (about 200 MB of star arrays)
MAX_STARS = 1_000_000
#: most frames in ``animation.frames`` (11.6 hours at 24 frames/s)
MAX_FRAMES = 1_000_000


# ============================================================================ motions


def _parse_motion(body: Table) -> Any:
    given = body.data.get("motion")
    if given is not None and not isinstance(given, Mapping) and hasattr(given, "kind"):
        return given  # a ready-made motion object (Scene.from_dict in scripts)
    # no table: at rest at the scene origin
    return body.motion("motion", None, section="body.motion") or UniformMotion()


# ============================================================================ surfaces


def _is_surface_object(value: Any) -> bool:
    """A ready-made relview.light.surfaces surface (Scene.from_dict in scripts)."""
    return hasattr(value, "observed_xyz") and hasattr(value, "key")


def _parse_surface(body: Table) -> Any:
    if _is_surface_object(body.data.get("surface")):
        return body.data["surface"]
    # each surface kind reads its own keys (relview.light.surfaces.SURFACE_KINDS)
    return read_surface(body.table("surface", section="body.surface"))


# ============================================================================ sections


def _parse_meta(root: Table) -> tuple[str, int]:
    meta = root.table("scene", None, section="scene")
    if meta is None:
        return "", SUPPORTED_FORMAT
    # Read the format first: a newer file may use keys this version does not know.
    fmt = meta.integer("format", SUPPORTED_FORMAT, low=1)
    if fmt > SUPPORTED_FORMAT:
        raise meta.error(
            "format",
            f"format = {fmt} is newer than this version of relview supports "
            f"(up to {SUPPORTED_FORMAT}); upgrade relview to read this file",
            fmt,
        )
    meta.check_keys(("title", "format"))
    return meta.string("title", ""), fmt


def _parse_render(root: Table) -> RenderSettings:
    t = root.table("render", None, section="render")
    if t is None:
        return RenderSettings()
    t.check_keys(
        (
            "resolution",
            "samples",
            "exposure",
            "seed",
            "effects",
            "shutter",
            "shutter_samples",
            "tone",
            "metering",
            "metering_body",
        )
    )
    defaults = RenderSettings()
    exposure: float | str = "auto"
    if t.has("exposure"):
        if isinstance(t.data["exposure"], str):
            exposure = t.string("exposure", choices=("auto",))
        else:
            exposure = t.number("exposure", positive=True, unit="cd/m2")
    effects = Effects()
    e = t.table("effects", None, section="render.effects")
    if e is not None:
        names = ("delay", "contraction", "aberration", "doppler", "beaming")
        e.check_keys(names)
        effects = Effects(**{n: e.boolean(n, True) for n in names})
    return RenderSettings(
        resolution=t.int_vector("resolution", 2, defaults.resolution, low=1),
        samples=t.integer("samples", defaults.samples, low=1, high=MAX_SAMPLES),
        exposure=exposure,
        effects=effects,
        seed=t.integer("seed", defaults.seed, low=0, high=2**63 - 1),
        shutter=t.number("shutter", 0.0, nonnegative=True, unit="s"),
        shutter_samples=t.integer("shutter_samples", defaults.shutter_samples, low=1, high=4096),
        tone=t.string("tone", "none", choices=("none", "reinhard")),
        **_parse_metering(t, root),
    )


#: what automatic exposure meters (render.metering; relview.imaging.exposure)
METERING_CHOICES = ("frame", "bodies", "body")


def _parse_metering(t: Table, root: Table) -> dict[str, str]:
    """render.metering and render.metering_body (the name of a [[body]] of this file)."""
    metering = t.string("metering", "frame", choices=METERING_CHOICES)
    if metering != "body":
        if t.has("metering_body"):
            value = t.data["metering_body"]
            raise t.error(
                "metering_body",
                f"metering_body = {show(value)} goes with metering = "
                f'"body", not metering = {show(metering)}',
                value,
            )
        return {"metering": metering, "metering_body": ""}
    if not t.has("metering_body"):
        raise t.error(
            "metering",
            'metering = "body" needs metering_body = "NAME", the name of the [[body]] to meter',
            metering,
        )
    # the names as the [[body]] tables give them (validated again with the bodies)
    raw = root.data.get("body")
    raw = raw if isinstance(raw, list) else []
    names = [b.get("name", f"body{i + 1}") for i, b in enumerate(raw) if isinstance(b, Mapping)]
    if not names:
        value = t.data["metering_body"]
        raise t.error(
            "metering_body",
            f"metering_body = {show(value)}: the scene has no [[body]] to meter",
            value,
        )
    return {
        "metering": metering,
        "metering_body": t.string("metering_body", choices=[str(n) for n in names]),
    }


def _unit(v: np.ndarray) -> np.ndarray:
    """v / |v| for a nonzero finite vector, without overflow for huge entries."""
    v = v / np.abs(v).max()
    return v / np.linalg.norm(v)


def _parse_camera(root: Table) -> Camera:
    t = root.table("camera", section="camera")
    t.check_keys(
        (
            "position",
            "look_at",
            "direction",
            "up",
            "fov",
            "time",
            "beta",
            "projection",
            "motion",
            "aim_at",
            "fit",
            "margin",
            "clock",
        )
    )
    time = read_time(t)  # refuses times float64 cannot resolve (relview.kinematics.magnitudes)
    motion = None
    if t.has("motion"):
        # The camera rides any motion kind; its place and velocity follow the worldline.
        for clash in ("position", "beta"):
            if t.has(clash):
                raise t.error(
                    clash,
                    f"{clash} = {show(t.data[clash])} cannot be given with "
                    "[camera.motion], which sets the camera's worldline; remove it",
                    t.data[clash],
                )
        motion = t.motion("motion", section="camera.motion")
        position = np.asarray(motion.state(np.zeros((1, 3)), C * time)[0][0], float)
    else:
        position = t.vector("position", 3, unit="m")
        refuse_unresolvable(t, "position", position, "m")
    aim_at, fit, margin = _framing_keys(t)
    if t.has("look_at") == t.has("direction") and not (aim_at and not t.has("look_at")):
        both = t.has("look_at")
        raise t.error(
            "direction" if both else None,
            "give exactly one of look_at, direction and aim_at"
            + (
                f", not both (look_at = {show(t.data['look_at'])}, direction = {show(t.data['direction'])})"
                if both
                else " (neither is given)"
            ),
        )
    look_at = direction = None
    if aim_at:
        # a provisional view direction; relview.framing turns it onto the bodies' apparent
        # centre at each exposure, once the bodies are read (_aim_provisionally)
        for clash in ("look_at", "direction"):
            if t.has(clash):
                raise t.error(
                    clash,
                    f"give exactly one of look_at, direction and aim_at, "
                    f"not both {clash} = {show(t.data[clash])} and aim_at = "
                    f"{show(t.data['aim_at'])}",
                    t.data[clash],
                )
        up_given = _unit(t.vector("up", 3, (0.0, 0.0, 1.0), nonzero=True))
        direction = forward = _unit(
            np.cross(up_given, [0.0, 1.0, 0.0] if abs(up_given[1]) < 0.9 else [1.0, 0.0, 0.0])
        )
    elif t.has("look_at"):
        look_at = t.vector("look_at", 3, unit="m")
        # Compare in units of the larger coordinate, so huge values cannot overflow.
        size = max(1.0, float(np.abs(position).max()), float(np.abs(look_at).max()))
        forward = look_at / size - position / size
        if np.linalg.norm(forward) <= 1e-12:
            raise t.error(
                "look_at",
                f"look_at = {show(t.data['look_at'])} equals the camera position; the view direction is undefined",
                t.data["look_at"],
            )
    else:
        direction = t.vector("direction", 3, nonzero=True)
        forward = direction
        direction = _unit(direction)
    up = t.vector("up", 3, (0.0, 0.0, 1.0), nonzero=True)
    sine = np.linalg.norm(np.cross(_unit(forward), _unit(up)))
    if sine < 1e-6:
        raise t.error(
            "up",
            f"up = {show(t.data.get('up', [0.0, 0.0, 1.0]))} is parallel to the view direction "
            f"{show(np.round(_unit(forward), 6))}; the image's vertical is "
            "undefined: give an up vector across the view",
            t.data.get("up"),
        )
    projection = t.string("projection", "pinhole", choices=PROJECTIONS)
    rule = projection_registry[projection]  # each projection's own field-of-view rule
    if rule.fov_fixed is not None:
        if t.has("fov"):
            raise t.error(
                "fov",
                f"fov = {show(t.data['fov'])} does not apply to the {projection} projection "
                f"(it always shows {'the full sphere' if rule.fov_fixed >= 360 else f'{rule.fov_fixed:g} degrees'}); remove it",
                t.data["fov"],
            )
        fov = rule.fov_fixed
    else:
        fov = t.number(
            "fov",
            rule.fov_default,
            low=0.0,
            high=rule.fov_max,
            low_open=True,
            high_open=not rule.fov_max_inclusive,
            unit="degrees",
        )
    return Camera(
        position=position,
        look_at=look_at,
        direction=direction,
        up=up,
        fov=fov,
        time=time,
        beta=np.zeros(3) if motion is not None else t.beta("beta"),
        projection=projection,
        motion=motion,
        aim_at=aim_at,
        fit=fit,
        margin=margin,
        clock=_parse_clock(t, "camera.clock"),
    )


def _parse_clock(t: Table, section: str) -> Clock:
    """``[body.clock]`` / ``[camera.clock]``: the clock reads ``reading`` s at the reference
    point's event at scene time ``time`` s (relview.kinematics.clocks)."""
    c = t.table("clock", None, section=section)
    if c is None:
        return Clock()
    c.check_keys(("reading", "time"))
    return Clock(reading=read_time(c, "reading"), time=read_time(c, "time"))


def _body_names(t: Table, key: str) -> tuple[str, ...]:
    """A body name or a non-empty list of them (``[camera] aim_at``, ``fit``)."""
    if not t.has(key):
        return ()
    value = t.data[key]
    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not names or not all(isinstance(n, str) and n for n in names):
        raise t.error(
            key,
            f"{key} = {show(value)} must be a body name or a non-empty list of body names",
            value,
        )
    return tuple(names)


def _framing_keys(t: Table) -> tuple[tuple[str, ...], tuple[str, ...], float]:
    """``aim_at``, ``fit`` and ``margin`` of ``[camera]`` (applied by relview.framing)."""
    aim_at, fit = _body_names(t, "aim_at"), _body_names(t, "fit")
    if fit and t.has("fov"):
        raise t.error(
            "fov",
            f"fov = {show(t.data['fov'])} cannot be given with fit = "
            f"{show(t.data['fit'])}, which chooses the field of view; remove one",
            t.data["fov"],
        )
    if fit and t.data.get("projection") == "panorama":
        raise t.error(
            "fit",
            f"fit = {show(t.data['fit'])} does not apply to the panorama "
            "projection (it always shows the full sphere); remove it",
            t.data["fit"],
        )
    if t.has("margin") and not fit:
        raise t.error(
            "margin",
            f"margin = {show(t.data['margin'])} applies only with fit; "
            "give fit = [body names] or remove it",
            t.data["margin"],
        )
    margin = t.number("margin", 0.15, nonnegative=True, high=10.0)
    return aim_at, fit, margin


def _check_framing_names(root: Table, camera: Camera, bodies: list) -> None:
    """Every body named by ``[camera] aim_at`` and ``fit`` exists; an aimed camera starts
    looking at the first named body's origin at the exposure time."""
    names = [b.name for b in bodies]
    t = root.table("camera", section="camera")
    for key in ("aim_at", "fit"):
        for name in getattr(camera, key):
            if name not in names:
                raise t.error(
                    key,
                    f'{key} names body "{name}", which the scene does not have'
                    f"; bodies: {', '.join(names) or '(none)'}",
                    t.data[key],
                )
    if camera.aim_at:
        body = bodies[names.index(camera.aim_at[0])]
        origin = np.asarray(body.motion.state(np.zeros((1, 3)), C * camera.time)[0][0], float)
        towards = origin - np.asarray(camera.position, float)
        if np.all(np.isfinite(towards)) and np.linalg.norm(towards) > 1e-9 * max(
            1.0, float(np.abs(origin).max())
        ):
            camera.direction = _unit(towards)


_SHAPE_KEYS = {
    "box": ("size",),
    "sphere": ("radius", "detail"),
    "cylinder": ("radius", "height", "detail"),
    "plane": ("size",),
    "mesh": ("file", "scale", "center"),
}
_BODY_COMMON = ("name", "shape", "rotation", "motion", "surface", "clock")


def _parse_body(t: Table, index: int, seen: dict[str, int]) -> Body:
    name = t.string("name", f"body{index + 1}")
    if not name.strip():
        raise t.error("name", f"body name must not be empty: name = {show(name)}", name)
    t.context = f'body "{name}"' if "name" in t.data else f"body #{index + 1}"
    if name in seen:
        raise t.error(
            "name", f'duplicate body name "{name}" (already used by body #{seen[name] + 1})', name
        )
    seen[name] = index

    all_shape_keys = sorted({k for v in _SHAPE_KEYS.values() for k in v})
    t.check_keys(_BODY_COMMON + tuple(all_shape_keys))
    shape = t.string("shape", choices=SHAPES)
    own = _SHAPE_KEYS[shape]
    t.check_keys(
        _BODY_COMMON + own,
        not_here={
            k: f'does not apply to shape "{shape}" (keys for {shape}: {", ".join(own)})'
            for k in all_shape_keys
            if k not in own
        },
    )

    body = Body(name=name, shape=shape, motion=None, surface=None, source_key=t.key_label())
    body.rotation = t.vector("rotation", 3, (0.0, 0.0, 0.0), unit="degrees")
    if shape == "box":
        body.size = t.vector("size", 3, positive=True, unit="m")
    elif shape == "plane":
        body.size = t.vector("size", 2, positive=True, unit="m")
    elif shape in ("sphere", "cylinder"):
        body.radius = t.number("radius", positive=True, unit="m")
        if shape == "cylinder":
            body.height = t.number("height", positive=True, unit="m")
        body.detail = t.integer("detail", None, low=DETAIL_RANGE[0], high=DETAIL_RANGE[1])
    else:
        body.scale = t.number("scale", 1.0, positive=True)
        body.center = t.boolean("center", True)
        body.file = t.path_value("file", what="mesh file")
        _check_mesh(t, body)
    for key in ("size", "radius", "height"):
        value = getattr(body, key, None)
        if value is not None and np.max(value) > MAX_COORDINATE:
            raise t.error(
                key,
                f"{key} = {show(t.data[key])} m is too large to compute with; the largest "
                f"usable size is {MAX_COORDINATE:.0e} m",
                t.data[key],
            )

    body.motion = _parse_motion(t)
    body.surface = _parse_surface(t)
    body.clock = _parse_clock(t, "body.clock")
    return body


def _check_mesh(t: Table, body: Body) -> None:
    """Read the mesh now, so a bad file is reported by `relview check` too."""
    try:
        load_mesh_file(body.file, scale=body.scale, center=body.center)
    except MeshError as exc:
        raise t.error(
            "file",
            f"{exc.message}: file = {show(t.data['file'])} ({body.file})",
            t.data["file"],
            cls=MeshError,
        ) from exc


def _parse_bodies(root: Table) -> list[Body]:
    seen: dict[str, int] = {}
    return [_parse_body(t, i, seen) for i, t in enumerate(root.array_of_tables("body", "bodies"))]


def _parse_background(root: Table) -> Background:
    t = root.table("background", None, section="background")
    if t is None:
        return Background()
    defaults = Background()
    keys_for = {
        "black": ("kind",),
        "stars": ("kind", "count", "seed", "temperature", "luminance"),
        "graticule": ("kind", "spacing", "width", "temperature", "luminance"),
        "cmb": ("kind", "temperature", "frame_beta", "camera_speed", "camera_direction"),
    }
    all_keys = sorted({k for v in keys_for.values() for k in v})
    t.check_keys(all_keys)
    kind = t.string("kind", "black", choices=BACKGROUND_KINDS)
    t.check_keys(
        keys_for[kind],
        not_here={
            k: f'does not apply to background kind "{kind}"'
            for k in all_keys
            if k not in keys_for[kind]
        },
    )
    if kind == "black":
        return Background(kind="black")
    if kind == "cmb":
        return _parse_microwave_sky(t)
    if kind == "stars":
        temperature = t.vector("temperature", 2, defaults.temperature, positive=True, unit="K")
        if temperature[1] > MAX_TEMPERATURE:
            raise t.error(
                "temperature",
                f"temperature = {show(t.data['temperature'])}: out of range; must be "
                f"<= {MAX_TEMPERATURE:.0e} K",
                t.data["temperature"],
            )
        if temperature[0] > temperature[1]:
            raise t.error(
                "temperature",
                f"temperature = {show(t.data['temperature'])} must be [min, max] with min <= max",
                t.data["temperature"],
            )
        return Background(
            kind="stars",
            count=t.integer("count", defaults.count, low=0, high=MAX_STARS),
            seed=t.integer("seed", defaults.seed, low=0, high=2**63 - 1),
            temperature=(float(temperature[0]), float(temperature[1])),
            luminance=t.number("luminance", defaults.luminance, positive=True),
        )
    spacing = t.number(
        "spacing", defaults.spacing, low=0.0, high=90.0, low_open=True, unit="degrees"
    )
    width = t.number("width", defaults.width, positive=True, unit="degrees")
    if width >= spacing:
        raise t.error(
            "width", f"width = {show(width)} must be smaller than spacing = {show(spacing)}", width
        )
    line_t = t.number("temperature", 6500.0, positive=True, high=MAX_TEMPERATURE, unit="K")
    return Background(
        kind="graticule",
        spacing=spacing,
        width=width,
        temperature=(line_t, line_t),  # one colour: min = max
        luminance=t.number("luminance", defaults.luminance, positive=True, unit="cd/m2"),
    )


def _parse_microwave_sky(t: Table) -> Background:
    """``kind = "cmb"``: a blackbody sky at ``temperature`` (K; default the measured
    2.7255 K, Fixsen 2009, ApJ 707, 916) at rest in a frame that moves with ``frame_beta``
    in the scene frame, or in which the camera moves at ``camera_speed`` (km/s) along
    ``camera_direction`` (scene axes) at the exposure."""
    temperature = t.number(
        "temperature", CMB_TEMPERATURE_K, positive=True, high=MAX_TEMPERATURE, unit="K"
    )
    if t.has("frame_beta") and (t.has("camera_speed") or t.has("camera_direction")):
        raise t.error(
            "frame_beta",
            "give the sky's frame either as frame_beta (its velocity / c "
            "in the scene frame) or as camera_speed and camera_direction, not both",
            t.data["frame_beta"],
        )
    frame_beta = t.beta("frame_beta")
    camera_velocity = None
    if t.has("camera_speed") or t.has("camera_direction"):
        speed = t.number("camera_speed", unit="km/s", nonnegative=True)
        if speed * 1e3 >= C:
            raise t.error(
                "camera_speed",
                f"camera_speed = {show(speed)} km/s is at or above c ({C / 1e3:.9g} km/s)",
                speed,
            )
        direction = t.vector("camera_direction", 3, nonzero=True)
        camera_velocity = speed * 1e3 / C * direction / np.linalg.norm(direction)
    return Background(
        kind="cmb",
        temperature=(temperature, temperature),
        frame_beta=frame_beta,
        camera_velocity=camera_velocity,
    )


#: most shadow rays per shaded point towards one sphere lamp
MAX_SHADOW_SAMPLES = 4096


def _parse_lamp(t: Table, index: int, seen: dict[str, int]) -> Lamp:
    """One ``[[lamp]]``: a point or sphere lamp on a worldline (``power``), or a distant
    lamp (``direction`` with ``irradiance``); its spectrum as relview.light.lamps reads it."""
    name = t.string("name", f"lamp{index + 1}")
    t.context = f'lamp "{name}"'
    if name in seen:
        raise t.error(
            "name", f'duplicate lamp name "{name}" (already used by lamp #{seen[name] + 1})', name
        )
    seen[name] = index
    distant_keys = ("direction", "irradiance", "frame_beta")
    point_keys = ("power", "radius", "motion", "shadow_samples", "seed")
    t.check_keys(("name",) + LAMP_SPECTRUM_KEYS + distant_keys + point_keys)
    lamp_spectrum = LampSpectrum.from_table(t)
    if t.has("direction"):
        for key in point_keys:
            if t.has(key):
                raise t.error(
                    key,
                    f"{key} = {show(t.data[key])} does not apply to a distant lamp "
                    "(one with a direction); give power, radius and motion only to "
                    "point and sphere lamps",
                    t.data[key],
                )
        return Lamp(
            name=name,
            spectrum=lamp_spectrum,
            direction=_unit(t.vector("direction", 3, nonzero=True)),
            irradiance=t.number("irradiance", positive=True, unit="W/m2"),
            frame_beta=t.beta("frame_beta"),
        )
    for key in distant_keys:
        if t.has(key):
            raise t.error(
                key,
                f"{key} = {show(t.data[key])} applies only to a distant lamp; give "
                "direction too, or power (and motion) for a lamp on a worldline",
                t.data[key],
            )
    radius = t.number("radius", 0.0, nonnegative=True, high=MAX_COORDINATE, unit="m")
    motion = t.motion("motion", None, section="lamp.motion") or UniformMotion()
    with t.errors_at("motion"):
        motion.validate(radius)
    return Lamp(
        name=name,
        spectrum=lamp_spectrum,
        power=t.number("power", positive=True, unit="W"),
        radius=radius,
        motion=motion,
        shadow_samples=t.integer("shadow_samples", 16, low=1, high=MAX_SHADOW_SAMPLES),
        seed=t.integer("seed", 0, low=0, high=2**63 - 1),
    )


def sphere_lamp_bodies(lamps: list[Lamp], first_index: int) -> list[Body]:
    """A body per sphere lamp (radius > 0), for the scene's body list after the scene's
    own bodies (from ``first_index`` on): a sphere of the lamp's radius on its worldline
    whose surface glows with the radiance that gives the lamp's power
    (relview.light.lamps.SphereGlow), so the camera and mirrors see the lamp. Each lamp
    records its body's index as ``glow_body``: its own shadow rays pass that body."""
    bodies = []
    for lamp in lamps:
        if lamp.distant or lamp.radius <= 0.0:
            continue
        lamp.glow_body = first_index + len(bodies)
        bodies.append(
            Body(
                name=f"(lamp {lamp.name})",
                shape="sphere",
                radius=lamp.radius,
                motion=lamp.motion,
                source_key=f'[[lamp]] "{lamp.name}"',
                surface=SphereGlow(lamp.spectrum, sphere_radiance(lamp.power, lamp.radius)),
            )
        )
    return bodies


def _parse_lamps(root: Table) -> list[Lamp]:
    seen: dict[str, int] = {}
    return [_parse_lamp(t, i, seen) for i, t in enumerate(root.array_of_tables("lamp", "lamps"))]


def _parse_animation(root: Table) -> Animation | None:
    t = root.table("animation", None, section="animation")
    if t is None:
        return None
    t.check_keys(("start", "end", "frames", "fps"))
    start = t.number("start", 0.0, unit="s")
    end = t.number("end", start, unit="s")
    if end < start:
        raise t.error(
            "end", f"end = {show(t.data['end'])} s is before start = {show(start)} s", t.data["end"]
        )
    return Animation(
        start=start,
        end=end,
        frames=t.integer("frames", 1, low=1, high=MAX_FRAMES),
        fps=t.number("fps", 24.0, positive=True, unit="frames/s"),
    )


# ============================================================================ entry points


def _hash(raw: bytes, referenced: list[Path]) -> str:
    h = hashlib.sha256(raw)
    for path in referenced:
        h.update(b"\0" + str(path.name).encode() + b"\0")
        h.update(path.read_bytes())
    return h.hexdigest()


def _build(data: Any, doc: _Document, raw: bytes | None, source_path: Path | None) -> dict:
    """The validated fields of a :class:`relview.scene.model.Scene`."""
    if not isinstance(data, Mapping):
        raise SceneError(f"a scene is a table of sections, got {_type_name(data)}", file=doc.source)
    root = Table(data, doc, (), "")
    title, fmt = _parse_meta(root)
    root.check_keys(("scene", "render", "camera", "body", "background", "animation", "lamp"))
    render = _parse_render(root)
    camera = _parse_camera(root)
    bodies = _parse_bodies(root)
    _check_framing_names(root, camera, bodies)
    background = _parse_background(root)
    animation = _parse_animation(root)
    lamps = _parse_lamps(root)
    bodies = bodies + sphere_lamp_bodies(lamps, len(bodies))
    if raw is None:
        raw = json.dumps(data, sort_keys=True, default=show).encode()
    return dict(
        camera=camera,
        bodies=bodies,
        render=render,
        background=background,
        animation=animation,
        title=title,
        format=fmt,
        source_path=source_path,
        source_hash=_hash(raw, doc.referenced),
        lamps=lamps,
    )


def fields_from_dict(data: Mapping, base_dir: str | Path = ".", source: str = "<dict>") -> dict:
    """Validate the structure a scene file holds (nested dicts/lists) into Scene fields.

    ``base_dir``: directory that relative file paths are resolved against.
    ``source``: the name used in error messages.
    """
    if _nesting_depth(data) > MAX_NESTING:
        raise _nesting_error(source)
    return _build(data, _Document(source, Path(base_dir), None), None, None)


_TOML_POS_RE = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")

#: Largest scene file read (bytes). A hand-written scene is a few kB (the largest demo
#: in scenes/ is 4 kB); 8 MiB still holds a generated ``path`` motion of about 100,000
#: keyframes, and reading a file that size costs tens of MB (tomllib and the line index),
#: not the GBs an unbounded file could (docs/errors.md, "Limits").
MAX_SCENE_BYTES = 8 * 2**20
#: Deepest nesting of arrays and inline tables in a scene file. The schema's deepest
#: value is a list of 3-vectors inside a body's motion (5 levels); tomllib parses
#: nesting recursively and fails with RecursionError at a few hundred levels.
MAX_NESTING = 32


def _read_limited(path: Path, source: str) -> bytes:
    """The bytes of the scene file, refusing one above MAX_SCENE_BYTES before reading it."""
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_SCENE_BYTES + 1)  # also bounds a device or a growing file
    except FileNotFoundError:
        if path.is_symlink():
            raise SceneError(
                f"scene file is a symbolic link to a missing file ({os.readlink(path)})",
                file=source,
                value=source,
            ) from None
        raise SceneError("scene file does not exist", file=source, value=source) from None
    except IsADirectoryError:
        raise SceneError("is a directory, not a scene file", file=source, value=source) from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise SceneError(
                "scene file path is a loop of symbolic links", file=source, value=source
            ) from None
        raise SceneError(
            f"cannot read scene file: {exc.strerror}", file=source, value=source
        ) from None
    if len(raw) > MAX_SCENE_BYTES:
        raise SceneError(
            f"the scene file is larger than {MAX_SCENE_BYTES // 2**20} MiB, the most a scene "
            "file may hold; keep large data (meshes, spectra) in files that the scene names",
            file=source,
            value=source,
        )
    return raw


def _too_deep_line(text: str) -> int | None:
    """The line where arrays and inline tables first nest deeper than MAX_NESTING."""
    depth, line, quote = 0, 1, None
    for ch in re.finditer(r"""\\.|["'\[\]{}\n#]""", text):
        c = ch.group()
        if c == "\n":
            line += 1
            if quote == "#":
                quote = None
        elif quote:
            if c == quote:
                quote = None
        elif c in "\"'#":
            quote = c
        elif c in "[{":
            depth += 1
            if depth > MAX_NESTING:
                return line
        elif c in "]}":
            depth -= 1
    return None


def _nesting_depth(data: Any) -> int:
    """Deepest nesting of lists and tables in ``data`` (iterative: no recursion limit)."""
    deepest, stack = 0, [(data, 0)]
    while stack:
        value, depth = stack.pop()
        deepest = max(deepest, depth)
        if depth > MAX_NESTING:
            break
        if isinstance(value, Mapping):
            stack.extend((v, depth + 1) for v in value.values())
        elif isinstance(value, (list, tuple)):
            stack.extend((v, depth + 1) for v in value)
    return deepest


def _nesting_error(source: str, line: int | None = None) -> SceneError:
    return SceneError(
        f"arrays or inline tables are nested more than {MAX_NESTING} levels deep; "
        "no scene key needs that many",
        file=source,
        line=line,
    )


def read_scene_file(path: str | Path) -> dict:
    """Read and validate the scene in a TOML file -> the fields of its Scene."""
    path = Path(path)
    source = str(path)
    raw = _read_limited(path, source)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise SceneError(
            f"not UTF-8 text (byte 0x{raw[exc.start]:02x}); scene files are TOML, which is UTF-8",
            file=source,
            line=line,
        ) from None
    text = text.removeprefix("\ufeff")
    try:
        data = tomllib.loads(text)
    except RecursionError:  # tomllib parses nested values recursively
        raise _nesting_error(source, _too_deep_line(text)) from None
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = _TOML_POS_RE.search(msg)
        line = column = None
        if m:
            line, column = int(m.group(1)), int(m.group(2))
            msg = msg[: m.start()]
        elif msg.endswith("(at end of document)"):
            line = max(1, len(text.splitlines()))
            msg = msg[: -len("(at end of document)")].rstrip() + " at the end of the file"
        snippet = ""
        if line is not None and 1 <= line <= len(text.splitlines()):
            snippet = f": {text.splitlines()[line - 1].strip()!r}"
        raise SceneError(
            f"TOML syntax error: {msg}{snippet}", file=source, line=line, column=column
        ) from None
    if _nesting_depth(data) > MAX_NESTING:
        raise _nesting_error(source, _too_deep_line(text))
    if not data:
        what = "is empty" if not text.strip() else "holds only comments"
        raise SceneError(
            f"the scene file {what}; a scene needs at least a [camera] table", file=source
        )
    doc = _Document(source, path.parent, text)
    return _build(data, doc, raw, path)
