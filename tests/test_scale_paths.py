"""The paths that keep a frame fast at scale: clock readings of many bodies in one pass
(relview.kinematics.clocks.body_readings), bodies sharing a surface shaded in one call
(relview.renderer.shade), and light-cone snapshots that solve each distinct point once
(relview.geometry.lightcone)."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import trimesh

from relview.framing import resolve_camera
from relview.geometry import camera as cam_mod
from relview.geometry.lightcone import _vertex_clock, snapshot
from relview.kinematics.clocks import body_readings
from relview.kinematics.lorentz import C
from relview.kinematics.spin import RollingMotion
from relview.kinematics.uniform import UniformMotion
from relview.renderer import RenderContext, camera_state, render, shade
from relview.scene.model import scene_from_dict
from relview.scene.parts import Clock, Effects


def test_readings_of_many_bodies_in_one_pass_follow_time_dilation():
    # A clock moving at beta reads R + (t - T) / gamma at scene time t when set to R at T
    # (time dilation, Einstein 1905, section 4). Hits of four bodies interleaved, sky
    # rows (-1) NaN; the clock coordinate handed in is the proper time c tau at the
    # reference time c t of each hit.
    betas = [0.0, 0.6, 0.8, 0.99]
    bodies = [
        SimpleNamespace(
            motion=UniformMotion(beta=[b, 0.0, 0.0], time=0.25 * k),
            clock=Clock(reading=10.0 * k - 3.0, time=0.5 + k),
        )
        for k, b in enumerate(betas)
    ]
    rng = np.random.default_rng(1)
    index = rng.integers(-1, len(bodies), 400)
    t = rng.uniform(-5.0, 5.0, 400)  # s
    value = np.full(400, 7.0)  # anything on the sky rows
    expected = np.full(400, np.nan)
    for k, body in enumerate(bodies):
        rows = index == k
        gamma = 1.0 / math.sqrt(1.0 - betas[k] ** 2)
        value[rows] = body.motion.proper_time(C * t[rows])
        expected[rows] = body.clock.reading + (t[rows] - body.clock.time) / gamma
    got = body_readings(bodies, index, value)
    assert np.all(np.isnan(got[index < 0]))
    np.testing.assert_allclose(got[index >= 0], expected[index >= 0], rtol=0, atol=1e-12)
    assert np.all(np.isnan(body_readings(bodies, index, None)))


def _three_bodies():
    # two balls with equal surfaces (separate objects, the same key) and a third with
    # another temperature, each with its own velocity (a demo-style scene of our own)
    def ball(name, x, beta, kelvin):
        return {
            "name": name,
            "shape": "sphere",
            "radius": 0.25,
            "motion": {"kind": "uniform", "beta": [beta, 0.0, 0.0], "position": [x, 4.0, 0.0]},
            "surface": {"blackbody": kelvin},
        }

    cam = {"position": [0.0, 0.0, 0.0], "look_at": [0.0, 1.0, 0.0], "time": 0.0, "fov": 70.0}
    return scene_from_dict(
        {
            "camera": cam,
            "render": {"resolution": [48, 27]},
            "body": [
                ball("a", 1.0, 0.5, 4000.0),
                ball("b", -0.6, -0.3, 4000.0),
                ball("c", 0.4, 0.2, 6500.0),
            ],
        }
    )


def test_bodies_sharing_a_surface_shade_as_each_body_alone():
    scene = _three_bodies()
    assert scene.bodies[0].surface is not scene.bodies[1].surface
    assert scene.bodies[0].surface.key() == scene.bodies[1].surface.key()
    context = RenderContext(scene)
    event, beta = camera_state(scene, 0.0)
    tracer = context.tracer(event)
    cam = resolve_camera(scene, event, beta, scene.render.effects, context.meshes, (48, 27))
    d, _ = cam_mod.scene_directions(cam, 48, 27, context.pixel_centres(48, 27), beta)
    hits = tracer.cast(event, d, scene.render.effects, beta_cam=beta)
    assert set(np.unique(hits.body)) == {-1, 0, 1, 2}  # every body seen
    out = shade(scene, context, hits, hits.doppler, scene.render.effects)
    for k, body in enumerate(scene.bodies):
        rows = hits.body == k
        alone = body.surface.observed_xyz(hits.doppler[rows], None, None, scene.render.effects)
        np.testing.assert_array_equal(out[rows], alone)
        assert np.all(alone > 0)
    assert np.all(out[hits.body < 0] == 0)
    assert render(scene).layers["xyz"].shape == (27, 48, 3)


class _CountingMotion:
    """A motion that records every point handed to its retarded and reference-time solves
    (and otherwise is the wrapped motion)."""

    def __init__(self, inner):
        self.inner, self.retarded_points, self.reference_points = inner, [], []

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def retarded(self, points, *args, **kwargs):
        self.retarded_points.append(np.array(points, float))
        return self.inner.retarded(points, *args, **kwargs)

    def _reference_time(self, points, *args, **kwargs):
        self.reference_points.append(np.array(points, float))
        return self.inner._reference_time(points, *args, **kwargs)


def test_snapshot_solves_each_distinct_point_once():
    # A cube rolling at 0.6c, refined over several rounds: faces keep their own corner
    # copies (per-face barycentrics), but no point is solved twice, neither across rounds
    # nor for its clock, and the copies carry exactly what solving each would give.
    verts, faces = box_mesh_for_scale()
    motion = _CountingMotion(
        RollingMotion(
            radius=0.5, beta=np.array([0.6, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
        )
    )
    cam = np.array([1.0, 0.3, -3.0, 0.4])
    snap = snapshot(motion, verts, faces, cam, Effects(), tolerance=1e-3)
    assert len(snap.faces) > 4 * len(faces)  # refined
    distinct = np.unique(snap.body_coords, axis=0)
    solved = np.concatenate(motion.retarded_points)
    assert len(np.unique(solved, axis=0)) == len(solved)  # each point once
    # every distinct snapshot point is among them (the rest: midpoints that passed)
    assert len(np.unique(np.concatenate([solved, distinct]), axis=0)) == len(solved)
    assert len(np.concatenate(motion.reference_points)) == len(distinct)  # clocks once each
    ev, beta = motion.inner.retarded(snap.body_coords, cam)
    np.testing.assert_array_equal(snap.emit_event, ev)
    np.testing.assert_array_equal(snap.beta, beta)
    np.testing.assert_array_equal(
        snap.clock, _vertex_clock(motion.inner, snap.body_coords, ev, Effects())
    )


def box_mesh_for_scale():
    """A 1 m cube (12 triangles, 8 shared vertices)."""
    box = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
    return np.asarray(box.vertices, float), np.asarray(box.faces, np.int64)
