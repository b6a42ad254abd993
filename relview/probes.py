"""Where, when and how a chosen body point is seen: the numbers behind a picture.

For a point p given in a body's rest frame (body axes, metres), find the emission
event whose light reaches the camera at its exposure event, the direction the camera
sees it in (camera rest frame), its pixel, whether another surface hides it, and its
Doppler factor.

The emission events come from the body's motion (``retarded``, one interface for every
kind; a closed form for inertial motion, relview.kinematics.solvers.inertial_light_delay).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from relview import framing, illumination
from relview.geometry import camera as cam_mod
from relview.geometry.lightcone import DEFAULT_TOLERANCE, pixel_tolerance
from relview.kinematics.clocks import (
    camera_reading,
    clock_coordinate,
    reading_from_coordinate,
    reference_times,
    tick_rates,
)
from relview.kinematics.lorentz import C, aberrate_to_camera
from relview.kinematics.magnitudes import check_time
from relview.renderer import RenderContext, camera_state, doppler_along
from relview.scene.model import Scene
from relview.scene.parts import Effects


@dataclass
class ProbeResult:
    body: str
    point: tuple[float, float, float]  # m, body rest frame
    emit_time: float  # s, scene frame
    emit_position: tuple[float, float, float]  # m, scene frame
    direction: tuple[float, float, float]  # unit, camera rest frame, scene axes
    pixel: tuple[float, float]  # x right, y down from the top-left corner
    in_view: bool  # the projection has an image of this direction (pixel may be off-image)
    visible: bool  # nothing hides it
    doppler: float  # D = nu_observed / nu_emitted
    light_delay: float  # s, camera time minus emission time
    beta_emit: tuple[float, float, float]  # velocity / c of the point at emission
    # the body's clock (relview.kinematics.clocks): its reading carried by the light
    # (the reference point's proper time at the emission's rest-frame instant), s
    proper_time: float = float("nan")
    # how fast the camera sees that reading advance, per second of its own proper time
    # (the Doppler factor for an inertial body)
    tick_rate: float = float("nan")
    # the clock's reading at the point's event at the exposure's scene time (one instant
    # of the scene frame: the reading the Lorentz transformation gives), s
    computed_proper_time: float = float("nan")
    camera_proper_time: float = float("nan")  # the camera's own clock at the exposure, s
    # each lamp's light at the emission event (relview.illumination.LampSighting): its
    # lamp event, incident direction in the point's rest frame, D_in, and whether it is lit
    lamps: list = field(default_factory=list)

    def __getitem__(self, key):  # dict-style access as well as attributes
        return getattr(self, key)

    def to_dict(self) -> dict:
        return asdict(self)


#: Visibility tolerance of a probe (rad as seen from the camera, and beta): the light-cone
#: snapshots that may hide the point are refined to at least this, whatever the scene's
#: pixel size (a body 100 m away is then placed to 2 cm; a quarter pixel of a 60-pixel,
#: 90 degree view would allow 1.3 m).
PROBE_TOLERANCE = DEFAULT_TOLERANCE


def retarded_events(
    scene: Scene,
    body_index: int,
    points_rest: np.ndarray,
    camera_event: np.ndarray,
    effects: Effects,
    reference=None,
):
    """Emission events (N, 4) and velocities (N, 3) of body points given in body axes.

    With ``reference`` = (t s, x m), the camera event's scene time and place, the motion is
    solved in coordinates centred there (RigidKinematics.shifted) and the events come back
    relative to ``camera_event``."""
    body = scene.bodies[body_index]
    p = np.atleast_2d(points_rest) @ body.rotation_matrix().T
    motion, cam = body.motion, np.asarray(camera_event, float)
    if reference is not None:
        motion = motion.shifted(reference[0], reference[1])
        cam = cam - np.concatenate([[C * reference[0]], reference[1]])
    return motion.retarded(p, cam, delay=effects.delay, contraction=effects.contraction)


def clock_data(
    scene: Scene,
    body_index: int,
    points_rest: np.ndarray,
    emit_ct: np.ndarray,
    propagation: np.ndarray,
    beta_cam: np.ndarray,
    effects: Effects,
    reference,
):
    """The body clock as the camera sees it (relview.kinematics.clocks), for body points
    (N, 3) in body axes whose light left at scene times ``emit_ct`` (N,) ct m relative to
    the exposure event ``reference`` = (t s, x m), along unit ``propagation`` directions
    (emitter -> camera, S): (reading carried by the light s, tick rate per second of
    camera proper time, reading at the point's event at the exposure's scene time s)."""
    body = scene.bodies[body_index]
    p = np.atleast_2d(points_rest) @ body.rotation_matrix().T
    motion = body.motion.shifted(reference[0], reference[1])  # times relative to the exposure
    relativistic = effects.contraction
    s_emit = reference_times(motion, p, emit_ct, relativistic)
    seen = reading_from_coordinate(
        body.motion, body.clock, clock_coordinate(motion, s_emit, relativistic)[0], relativistic
    )
    rate = tick_rates(motion, p, s_emit, propagation, beta_cam, relativistic, effects.delay)
    s_now = reference_times(motion, p, np.zeros(len(p)), relativistic)
    computed = reading_from_coordinate(
        body.motion, body.clock, clock_coordinate(motion, s_now, relativistic)[0], relativistic
    )
    return seen, rate, computed


def probe_many(
    scene: Scene,
    body,
    points,
    time: float | None = None,
    effects: Effects | None = None,
    context=None,
) -> list[ProbeResult]:
    """Probe several points (N, 3) of one body at one exposure (see :func:`probe`)."""
    effects = effects or scene.render.effects
    bi = body if isinstance(body, (int, np.integer)) else scene.body_index(body)
    pts = np.atleast_2d(np.asarray(points, float))
    t = scene.camera.time if time is None else time
    check_time(t, "time" if time is not None else "[camera] time")
    event, beta_cam = camera_state(scene, t)
    reference = (t, event[1:])  # solve relative to the exposure event
    relative, beta_e = retarded_events(scene, bi, pts, event, effects, reference)
    emit = relative + event
    sep = relative[:, 1:]
    dist = np.linalg.norm(sep, axis=-1)
    d_s = sep / np.maximum(dist, 1e-300)[:, None]
    d_cam = aberrate_to_camera(d_s, beta_cam) if effects.aberration and np.any(beta_cam) else d_s
    w, h = scene.render.resolution
    px, in_view = cam_mod.directions_to_pixels(
        framing.resolve_camera(scene, event, beta_cam, effects), w, h, d_cam
    )  # as rendered
    # visibility: cast the same backward ray and compare the first hit with the point
    if context is None or context.effects != effects:
        context = RenderContext(scene, effects)
    # light-cone snapshots refined to the probe's own tolerance, not the scene's pixel size
    tolerance = min(PROBE_TOLERANCE, pixel_tolerance(scene))
    tracer = context.tracer(event, reference, tolerance=tolerance)
    hits = tracer.cast(np.broadcast_to(event, (len(pts), 4)), d_s, effects, reference=reference)
    # visible when the first surface on that ray is not nearer than the point itself; a
    # light-cone snapshot places surfaces only to its measured angular error
    snap_error = max(
        (g.snapshot.error for g in tracer.groups if hasattr(g, "snapshot")), default=0.0
    )
    tol = np.maximum(1e-6, 2.0 * snap_error) * np.maximum(dist, 1e-3)
    visible = hits.l >= dist - tol
    dop = doppler_along(beta_e, d_s, beta_cam, effects)  # of the point, not of what hides it
    seen_clock, rate, computed = clock_data(
        scene, bi, pts, relative[:, 0], -d_s, beta_cam, effects, reference
    )
    cam_clock = camera_reading(scene.camera, t, effects.contraction)
    # shadow rays start at the point's own emission event: bodies on non-inertial
    # worldlines must occlude where they were when the lamp's light passed them, on that
    # event's past light cone, not on the camera's (the renderer's RetardedOccluders; one
    # event per cast, so its snapshots sit on exactly that event's light cone)
    occluders = tracer
    if scene.lamps and context.other:
        occluders = illumination.RetardedOccluders(
            scene,
            context.meshes,
            context.other,
            context.uniform_groups,
            tracer,
            event,
            tolerance,
        )
    lamps = [
        illumination.lamp_sightings(scene.lamps, occluders, emit[i], beta_e[i], effects, reference)
        for i in range(len(pts))
    ]
    out = []
    name = scene.bodies[bi].name
    for i in range(len(pts)):
        out.append(
            ProbeResult(
                body=name,
                point=tuple(map(float, pts[i])),
                emit_time=float(emit[i, 0] / C),
                emit_position=tuple(map(float, emit[i, 1:])),
                direction=tuple(map(float, d_cam[i])),
                pixel=(float(px[i, 0]), float(px[i, 1])),
                in_view=bool(in_view[i]),
                visible=bool(visible[i]),
                doppler=float(dop[i]),
                light_delay=float(-relative[i, 0] / C),
                beta_emit=tuple(map(float, beta_e[i])),
                proper_time=float(seen_clock[i]),
                tick_rate=float(rate[i]),
                computed_proper_time=float(computed[i]),
                camera_proper_time=cam_clock,
                lamps=lamps[i],
            )
        )
    return out


def probe(
    scene: Scene, body, point, time: float | None = None, effects: Effects | None = None
) -> ProbeResult:
    """Apparent data of one rest-frame point of ``body`` (name or index) at the exposure.

    Returns emit_time (s), emit_position (m, S), direction (unit, camera rest frame),
    pixel (x right, y down, centres at half-integers; may lie off the image),
    visible (not hidden behind any body) and doppler (D), plus light_delay and
    beta_emit. Attribute or item access both work.
    """
    return probe_many(scene, body, [point], time, effects)[0]
