"""Where bodies are seen at an exposure, and a camera aimed and zoomed on what is seen.

Light reaching the camera left each body earlier, so the body is photographed at its
retarded (emission) position, metres to hundreds of metres behind where it is at the
camera's time, and the camera's own motion turns every direction (aberration). A view
set up on the bodies' positions "now" can miss them. This module works on the picture's
terms: the apparent directions of a body's rest-frame mesh vertices at the exposure
(the emission event of each vertex on the camera's past light cone, from the body's
motion, ``RigidKinematics.retarded``; then aberrated into the camera frame), and from
them

* the pixel box a body covers, or the angle by which it misses the frame;
* an aim: the view direction towards the centre of the bodies' apparent extent;
* a fit: the field of view that holds the named bodies, with a margin.

The scene keys ``[camera] aim_at``, ``fit`` and ``margin`` (docs/scene-format.md) are
applied per exposure by :func:`resolve_camera`, which the renderer calls with the
exposure event it has computed (so this module needs nothing from the renderer).
:func:`sightings` adds what a rendered frame records of each body (pixels of the body
layer, Doppler range) for ``relview check``.

Vertices only: the outline of a curved retarded image between vertices is not sampled,
which the margin covers (a sphere at detail 5 has a vertex every 2 degrees of its rim).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from relview.geometry import camera as cam_mod
from relview.geometry import shapes
from relview.kinematics.lorentz import C, aberrate_to_camera, doppler_along
from relview.scene.model import Scene
from relview.scene.parts import Camera, Effects

#: Most vertices of one body used for its apparent extent (an even subsample beyond it):
#: enough for the outline, cheap for an 80k-vertex mesh.
MAX_VERTICES = 4096
#: Default margin of a fit: the bodies fill the central 1/(1 + margin) of the frame.
DEFAULT_MARGIN = 0.15
#: A body covering fewer pixels than this is reported as too small to read (common
#: practice: a speck of a few pixels shows neither shape nor colour).
MIN_PIXELS = 16
#: Widest pinhole field a fit chooses (the projection's limit, 180 degrees, is a plane).
PINHOLE_FIT_LIMIT = 170.0
#: Points along the frame's border used to measure how far a body misses the frame.
BORDER_POINTS = 256


@dataclass
class Apparent:
    """A body's vertices as photographed at one exposure."""

    body: str
    directions: np.ndarray  # (N, 3) unit, camera rest frame, scene axes
    doppler: np.ndarray  # (N,) D of each vertex (hidden ones too)
    distance: np.ndarray  # (N,) m, camera to emission position (scene frame)


@dataclass
class Sighting:
    """Where one body is seen at an exposure (``relview check``)."""

    body: str
    box: tuple[float, float, float, float] | None  # x0, y0, x1, y1 px of its vertices (unclipped)
    in_frame: bool  # some of the body's apparent extent lies inside the image
    miss_deg: float  # angle from the frame's edge to the nearest vertex; 0 when in frame
    miss_side: str  # "left", "right", "above", "below", "behind" or ""
    pixels: int | None  # pixels of the body layer showing it (None without a frame)
    doppler: tuple[float, float]  # D range over its visible pixels (else over its vertices)
    distance_m: tuple[float, float]  # nearest and farthest emission position, m

    def describe(self) -> str:
        d0, d1 = self.doppler
        dop = f"D {d0:.3g}..{d1:.3g}"
        far = f"emitted {self.distance_m[0]:.4g}..{self.distance_m[1]:.4g} m away"
        if self.in_frame and self.box is not None:
            x0, y0, x1, y1 = self.box
            seen = f"pixels x {x0:.0f}..{x1:.0f}, y {y0:.0f}..{y1:.0f}"
            if self.pixels is not None:
                seen += f" ({self.pixels} px visible)"
            return f"{self.body}: seen at {seen}, {dop}, {far}"
        side = f" ({self.miss_side})" if self.miss_side else ""
        return f"{self.body}: outside the frame by {self.miss_deg:.3g} deg{side}, {dop}, {far}"


def _vertices(vertices: np.ndarray) -> np.ndarray:
    v = np.asarray(vertices, float)
    if len(v) > MAX_VERTICES:
        v = v[np.linspace(0, len(v) - 1, MAX_VERTICES).astype(int)]
    return v


def mesh_vertices(scene: Scene, meshes=None) -> list[np.ndarray]:
    """Each body's rest-frame vertices (body rotation applied), subsampled for framing."""
    if meshes is not None:
        return [_vertices(m[0]) for m in meshes]
    return [_vertices(shapes.mesh_data(b).vertices) for b in scene.bodies]


def apparent(
    scene: Scene,
    body_index: int,
    vertices: np.ndarray,
    event: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
) -> Apparent:
    """Apparent directions and Doppler factors of a body's rest-frame ``vertices`` seen
    from the exposure ``event`` (ct, x) m by a camera moving with ``beta_cam``."""
    body = scene.bodies[body_index]
    event = np.asarray(event, float)
    # solved in coordinates centred on the exposure event, as the renderer does
    motion = body.motion.shifted(event[0] / C, event[1:])
    emit, beta_e = motion.retarded(
        vertices, np.zeros(4), delay=effects.delay, contraction=effects.contraction
    )
    ok = np.all(np.isfinite(emit), axis=1)
    sep = emit[ok, 1:]
    dist = np.linalg.norm(sep, axis=1)
    d_s = sep / np.maximum(dist, 1e-300)[:, None]
    beta_cam = np.asarray(beta_cam, float)
    d_cam = aberrate_to_camera(d_s, beta_cam) if effects.aberration and np.any(beta_cam) else d_s
    dop = doppler_along(beta_e[ok], d_s, beta_cam, relativistic=effects.contraction)
    return Apparent(body.name, d_cam, dop, dist)


def centre_direction(directions: np.ndarray, up: np.ndarray) -> np.ndarray:
    """The direction towards the centre of the directions' angular box (gnomonic
    coordinates about their mean direction, refined twice)."""
    mean = directions.mean(axis=0)
    if np.linalg.norm(mean) < 1e-9:  # spread all round the camera: no centre to aim at
        return directions[0]
    aim = mean / np.linalg.norm(mean)
    for _ in range(2):
        r, u, f = Camera(position=np.zeros(3), direction=aim, up=up).basis()
        along = directions @ f
        if np.any(along <= 1e-6):
            break  # some of it lies beside or behind: the mean is the best centre
        x, y = directions @ r / along, directions @ u / along
        aim = f + 0.5 * (x.min() + x.max()) * r + 0.5 * (y.min() + y.max()) * u
        aim = aim / np.linalg.norm(aim)
    return aim


def _inside(camera: Camera, width: int, height: int, directions: np.ndarray, margin: float) -> bool:
    px, valid = cam_mod.directions_to_pixels(camera, width, height, directions)
    if not np.all(valid):
        return False
    half_w, half_h = width / 2.0 / (1.0 + margin), height / 2.0 / (1.0 + margin)
    return bool(
        np.all(np.abs(px[:, 0] - width / 2.0) <= half_w)
        and np.all(np.abs(px[:, 1] - height / 2.0) <= half_h)
    )


def holds(camera: Camera, width: int, height: int, directions: np.ndarray) -> bool:
    """Whether every one of ``directions`` (camera frame) falls inside the image."""
    return len(directions) > 0 and _inside(camera, width, height, directions, 0.0)


def fitted_fov(
    camera: Camera, width: int, height: int, directions: np.ndarray, margin: float
) -> float:
    """The narrowest horizontal field of view (degrees) whose image holds every one of
    ``directions`` (camera frame) inside the central 1/(1 + margin) of each image axis.

    Found by bisection on the field of view with the projection itself, so it holds for
    every registered projection whose image scale shrinks as the field widens."""
    rule = cam_mod.PROJECTIONS[camera.projection]
    if rule.fov_fixed is not None:
        return float(rule.fov_fixed)
    high = float(rule.fov_max) if rule.fov_max_inclusive else PINHOLE_FIT_LIMIT
    if not _inside(dataclasses.replace(camera, fov=high), width, height, directions, margin):
        return high
    low = 1e-6
    for _ in range(50):
        mid = 0.5 * (low + high)
        if _inside(dataclasses.replace(camera, fov=mid), width, height, directions, margin):
            high = mid
        else:
            low = mid
    return high


def resolve_camera(
    scene: Scene,
    event: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    meshes=None,
    resolution=None,
) -> Camera:
    """The scene's camera with ``aim_at`` and ``fit`` applied at the exposure ``event``.

    Without those keys the scene's own camera object is returned unchanged. ``aim_at``
    turns the view towards the centre of the named bodies' apparent extent; ``fit`` sets
    the field of view that holds the named bodies with ``margin``. ``meshes``: the
    render context's (vertices, faces) per body, to avoid rebuilding them."""
    cam = scene.camera
    aim_names, fit_names = tuple(cam.aim_at), tuple(cam.fit)
    if not aim_names and not fit_names:
        return cam
    width, height = resolution or scene.render.resolution
    verts = mesh_vertices(scene, meshes)

    def directions(names):
        found = [
            apparent(
                scene, scene.body_index(n), verts[scene.body_index(n)], event, beta_cam, effects
            ).directions
            for n in names
        ]
        found = [d for d in found if len(d)]
        return np.concatenate(found) if found else np.zeros((0, 3))

    out = cam
    if aim_names:
        d = directions(aim_names)
        if len(d):
            out = dataclasses.replace(
                out, direction=centre_direction(d, np.asarray(cam.up, float)), look_at=None
            )
    if fit_names:
        d = directions(fit_names)
        if len(d):
            out = dataclasses.replace(out, fov=fitted_fov(out, width, height, d, cam.margin))
    return out


def _border_directions(camera: Camera, width: int, height: int) -> np.ndarray:
    """Camera-frame directions of points along the image's border."""
    n = BORDER_POINTS // 4
    xs, ys = np.linspace(0.0, width, n), np.linspace(0.0, height, n)
    pts = np.concatenate(
        [
            np.stack([xs, np.zeros(n)], 1),
            np.stack([xs, np.full(n, height)], 1),
            np.stack([np.zeros(n), ys], 1),
            np.stack([np.full(n, width), ys], 1),
        ]
    )
    d, valid = cam_mod.scene_directions(camera, width, height, pts, None)
    return d[valid]


def _miss(
    camera: Camera,
    width: int,
    height: int,
    directions: np.ndarray,
    px: np.ndarray,
    valid: np.ndarray,
) -> tuple[float, str]:
    """Angle (degrees) from the frame's border to the nearest of ``directions``, and on
    which side of the frame that vertex lies."""
    border = _border_directions(camera, width, height)
    if len(border) == 0 or len(directions) == 0:
        return 0.0, ""
    cosines = np.clip(directions @ border.T, -1.0, 1.0)
    nearest = np.unravel_index(np.argmax(cosines), cosines.shape)[0]
    angle = math.degrees(math.acos(cosines.max()))
    if not valid[nearest]:
        return angle, "behind"
    x, y = px[nearest]
    side = "left" if x < 0 else "right" if x > width else ""
    vertical = "above" if y < 0 else "below" if y > height else ""
    return angle, " and ".join(s for s in (side, vertical) if s)


def sightings(
    scene: Scene,
    event: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    camera: Camera | None = None,
    frame=None,
    meshes=None,
    resolution=None,
) -> list[Sighting]:
    """Where each body is seen at the exposure ``event`` through ``camera`` (default: the
    scene's, resolved). With a rendered ``frame`` (same camera and resolution) the pixel
    count and the Doppler range come from its body and doppler layers, i.e. from what is
    visible; without one the Doppler range is that of all vertices, hidden ones included.
    """
    width, height = resolution or scene.render.resolution
    verts = mesh_vertices(scene, meshes)
    if camera is None:
        camera = resolve_camera(scene, event, beta_cam, effects, meshes, (width, height))
    out = []
    for i, body in enumerate(scene.bodies):
        seen = apparent(scene, i, verts[i], event, beta_cam, effects)
        px, valid = cam_mod.directions_to_pixels(camera, width, height, seen.directions)
        box, in_frame = None, False
        if np.any(valid):
            p = px[valid]
            box = (
                float(p[:, 0].min()),
                float(p[:, 1].min()),
                float(p[:, 0].max()),
                float(p[:, 1].max()),
            )
            in_frame = box[0] < width and box[2] > 0 and box[1] < height and box[3] > 0
        pixels = None
        dop = seen.doppler
        if frame is not None:
            mask = frame.layers["body"] == i
            pixels = int(mask.sum())
            in_frame = in_frame or pixels > 0  # e.g. an image that wraps round a panorama
            if pixels:
                dop = frame.layers["doppler"][mask]
        miss, side = (
            (0.0, "") if in_frame else _miss(camera, width, height, seen.directions, px, valid)
        )
        dop = dop[np.isfinite(dop)] if len(dop) else dop
        d_range = (float(dop.min()), float(dop.max())) if len(dop) else (math.nan, math.nan)
        dist = (
            (float(seen.distance.min()), float(seen.distance.max()))
            if len(seen.distance)
            else (math.nan, math.nan)
        )
        out.append(Sighting(body.name, box, in_frame, miss, side, pixels, d_range, dist))
    return out


def sighting_warnings(found: list[Sighting], min_pixels: int = MIN_PIXELS) -> list[str]:
    """Warnings for bodies outside the frame, hidden, or covering fewer than
    ``min_pixels`` pixels."""
    out = []
    for s in found:
        if not s.in_frame:
            out.append(
                f"body {s.body!r} is outside the frame (by {s.miss_deg:.3g} deg"
                f"{', ' + s.miss_side if s.miss_side else ''}): aim at it with "
                f'[camera] aim_at = "{s.body}" or widen fov'
            )
        elif s.pixels == 0:
            out.append(
                f"body {s.body!r} is in the frame but no pixel shows it (hidden behind "
                "another body, or smaller than a pixel)"
            )
        elif s.pixels is not None and s.pixels < min_pixels:
            out.append(
                f"body {s.body!r} covers only {s.pixels} pixel(s): zoom in with "
                f'[camera] fit = ["{s.body}"] or raise the resolution'
            )
    return out
