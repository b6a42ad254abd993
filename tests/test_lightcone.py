"""Light-cone snapshots of bodies in any motion (relview.geometry.lightcone).

The exact boosted ray caster for uniform motion (relview.geometry.trace; physics.md "Uniform
motion, exact method") is the reference the snapshot must converge to; the retarded
events of single points come from relview.kinematics.motion, itself checked against closed forms
and scipy in tests/test_motion.py.
"""

import copy
import gc
import math
from types import SimpleNamespace

import numpy as np
import pytest
import trimesh
from conftest import REPO

from relview.geometry import lightcone
from relview.geometry.lightcone import _adaptive, _vertex_clock, snapshot, snapshot_groups
from relview.geometry.trace import Tracer, uniform_groups
from relview.kinematics.hyperbolic import HyperbolicMotion
from relview.kinematics.lorentz import C
from relview.kinematics.spin import RollingMotion
from relview.kinematics.uniform import UniformMotion
from relview.scene.parts import Body, Effects


def box_mesh():
    m = trimesh.creation.box([1.0, 0.4, 0.3])
    return np.asarray(m.vertices, float), np.asarray(m.faces, np.int64)


def rays_covering(camera_event, targets, n=41):
    """A rectangular fan of unit directions from the camera covering the points ``targets``."""
    to = targets - camera_event[1:]
    to /= np.linalg.norm(to, axis=1)[:, None]
    fwd = to.mean(axis=0)
    fwd /= np.linalg.norm(fwd)
    right = np.cross(fwd, [0.0, 0.0, 1.0])
    right /= np.linalg.norm(right)
    up = np.cross(right, fwd)
    x = (to @ right) / (to @ fwd)
    y = (to @ up) / (to @ fwd)
    a, b = np.meshgrid(
        np.linspace(x.min() * 1.1, x.max() * 1.1, n), np.linspace(y.min() * 1.1, y.max() * 1.1, n)
    )
    d = fwd + a.reshape(-1, 1) * right + b.reshape(-1, 1) * up
    return d / np.linalg.norm(d, axis=1)[:, None]


def cast(groups, camera_event, d, effects):
    origin = np.broadcast_to(camera_event, (len(d), 4))
    return Tracer(groups).cast(np.ascontiguousarray(origin), d, effects)


@pytest.mark.parametrize("effects", [Effects(), Effects(delay=False), Effects(contraction=False)])
def test_snapshot_converges_to_exact_uniform_method(effects):
    verts, faces = box_mesh()
    motion = UniformMotion(
        beta=np.array([0.8, 0.2, 0.0]), position=np.array([0.0, 0.0, 0.0]), time=0.0
    )
    body = Body(
        name="box", shape="mesh", surface=None, motion=motion, rotation=np.array([0.0, 0.0, 25.0])
    )
    rot = body.rotation_matrix()
    meshes = [(verts @ rot.T, faces)]
    cam = np.array([0.0, 0.5, -2.5, 0.2])
    exact_groups = uniform_groups([body], meshes, effects)
    corners = motion.retarded(meshes[0][0], cam, effects.delay, effects.contraction)[0][:, 1:]
    d = rays_covering(cam, corners)
    ref = cast(exact_groups, cam, d, effects)
    assert ref.hit.sum() > 300
    scene = SimpleNamespace(bodies=[body])
    previous = np.inf
    for tol in (1e-2, 1e-3, 1e-4):
        (group,) = snapshot_groups(scene, meshes, [0], cam, effects, tolerance=tol)
        assert group.snapshot.error <= tol
        hits = cast([group], cam, d, effects)
        both = hits.hit & ref.hit
        assert both.sum() >= 0.99 * ref.hit.sum()
        # what the tolerance controls: the hit against the exact retarded position of the
        # same body point, seen from the camera (relview.kinematics.motion closed form for uniform motion)
        p = hits.rest_position[both] @ rot.T
        exact, _ = motion.retarded(p, cam, effects.delay, effects.contraction)
        pointwise = np.linalg.norm(exact[:, 1:] - hits.emit_event[both, 1:], axis=1) / hits.l[both]
        assert pointwise.max() <= tol
        # against the exact caster: depth errors grow as 1/cos(incidence) near grazing rays,
        # so bound the 99th percentile and require the maximum to shrink with the tolerance
        dl = np.abs(hits.l[both] - ref.l[both]) / ref.l[both]
        drest = (
            np.linalg.norm(hits.rest_position[both] - ref.rest_position[both], axis=1) / ref.l[both]
        )
        assert np.quantile(dl, 0.99) <= 4 * tol and np.quantile(drest, 0.99) <= 4 * tol
        worst = max(dl.max(), drest.max())
        assert worst < previous or worst < 1e-12
        dbeta = np.linalg.norm(hits.beta_emit[both] - ref.beta_emit[both], axis=1)
        assert dbeta.max() < 1e-12  # uniform motion: every vertex has the same velocity
        previous = worst


def test_snapshot_vertices_are_retarded_points_and_bary_maps_to_parent_face():
    verts, faces = box_mesh()
    motion = RollingMotion(
        radius=0.5, beta=np.array([0.6, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
    )
    cam = np.array([1.0, 0.3, -3.0, 0.4])
    snap = snapshot(motion, verts, faces, cam, Effects(), segments=3)
    ev, beta = motion.retarded(snap.body_coords, cam)
    np.testing.assert_array_equal(snap.vertices, ev[:, 1:])
    np.testing.assert_array_equal(snap.beta, beta)
    # each snapshot vertex's (u, v) in its original face reproduces its rest position
    f = faces[snap.parent_face]
    for corner in range(3):
        v_idx = snap.faces[:, corner]
        u, v = snap.bary[v_idx, 0], snap.bary[v_idx, 1]
        p = (
            (1 - u - v)[:, None] * verts[f[:, 0]]
            + u[:, None] * verts[f[:, 1]]
            + v[:, None] * verts[f[:, 2]]
        )
        np.testing.assert_allclose(p, snap.body_coords[v_idx], atol=1e-15)
    assert_watertight(snap)
    # the adaptive (red-green) mesh too, and its vertices are retarded points as well
    adaptive = snapshot(motion, verts, faces, cam, Effects(), tolerance=1e-3)
    assert adaptive.error <= 1e-3 and len(adaptive.faces) > len(faces)
    assert_watertight(adaptive)
    ev, beta = motion.retarded(adaptive.body_coords, cam)
    np.testing.assert_array_equal(adaptive.vertices, ev[:, 1:])
    f = faces[adaptive.parent_face]
    u, v = adaptive.bary[adaptive.faces[:, 0], 0], adaptive.bary[adaptive.faces[:, 0], 1]
    p = (
        (1 - u - v)[:, None] * verts[f[:, 0]]
        + u[:, None] * verts[f[:, 1]]
        + v[:, None] * verts[f[:, 2]]
    )
    np.testing.assert_allclose(p, adaptive.body_coords[adaptive.faces[:, 0]], atol=1e-15)


def assert_watertight(snap):
    """Shared edges split identically: every edge of the closed snapshot bounds two faces,
    once in each direction (consistent orientation)."""
    _, canon = np.unique(snap.vertices, axis=0, return_inverse=True)
    tri = canon.reshape(-1)[snap.faces]
    directed = np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [2, 0]]])
    assert len(np.unique(directed, axis=0)) == len(directed)  # no edge twice the same way
    _, counts = np.unique(np.sort(directed, axis=1), axis=0, return_counts=True)
    assert np.all(counts == 2)


def test_rolling_wheel_contact_point_seen_at_rest():
    # A wheel (cylinder, axle along y) rolling along x: the hit at the contact point's
    # retarded image has beta ~ 0 (rolling without slipping; relview.kinematics.motion tests check
    # the exact point), up to the snapshot's interpolation tolerance.
    wheel = trimesh.creation.cylinder(radius=0.5, height=0.2, sections=32)
    wheel.apply_transform(trimesh.transformations.rotation_matrix(np.pi / 2, [1, 0, 0]))
    verts, faces = np.asarray(wheel.vertices, float), np.asarray(wheel.faces, np.int64)
    motion = RollingMotion(
        radius=0.5, beta=np.array([0.7, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
    )
    contact = motion.contact_point() + np.array([0.0, -0.0999, 0.0])  # on the near face
    x0, _ = motion.state(contact[None], 0.0)  # touching the ground at t = 0
    d = np.array([0.2, 0.95, -0.25])
    d /= np.linalg.norm(d)
    cam = np.concatenate([[4.0], x0[0] - 4.0 * d])  # its light from t = 0 arrives here
    ev, beta = motion.retarded(contact[None], cam)
    assert ev[0, 0] == pytest.approx(0.0, abs=1e-12) and np.linalg.norm(beta) < 1e-14
    body = Body(name="wheel", shape="mesh", surface=None, motion=motion)
    tol = 2e-3
    (group,) = snapshot_groups(
        SimpleNamespace(bodies=[body]), [(verts, faces)], [0], cam, Effects(), tolerance=tol
    )
    hits = cast([group], cam, d[None], Effects())
    assert hits.hit[0]
    np.testing.assert_allclose(hits.beta_emit[0], beta[0], atol=2 * tol)
    np.testing.assert_allclose(hits.rest_position[0], contact, atol=2 * tol * hits.l[0])
    assert hits.emit_event[0, 0] == pytest.approx(ev[0, 0], abs=2 * tol * hits.l[0])


def test_body_too_large_for_its_motion_is_a_scene_error():
    # A 3 m box on an orbit of radius 1 m at beta = 0.9: its outer points would exceed c
    # (relview.kinematics.motion OrbitMotion.outward_limit, 0.144 m here).
    from relview.errors import SceneError
    from relview.kinematics.orbit import OrbitMotion

    verts, faces = box_mesh()
    body = Body(
        name="crate",
        shape="mesh",
        surface=None,
        motion=OrbitMotion(center=np.zeros(3), radius=1.0, beta=0.9),
    )
    with pytest.raises(SceneError, match=r'body "crate".*cannot follow this orbit'):
        snapshot_groups(
            SimpleNamespace(bodies=[body]), [(verts * 3, faces)], [0], np.zeros(4), Effects()
        )


def test_rolling_wheel_snapshot_error_within_tolerance():
    # Any motion: every hit lies within the tolerance (as seen from the camera) of the exact
    # retarded position of the body point it reports, and its velocity within the
    # tolerance of that point's exact velocity (relview.kinematics.motion, checked against scipy).
    wheel = trimesh.creation.cylinder(radius=0.5, height=0.2, sections=24)
    wheel.apply_transform(trimesh.transformations.rotation_matrix(np.pi / 2, [1, 0, 0]))
    verts, faces = np.asarray(wheel.vertices, float), np.asarray(wheel.faces, np.int64)
    motion = RollingMotion(
        radius=0.5, beta=np.array([0.8, 0.0, 0.0]), position=np.array([0.0, 0.0, 0.5])
    )
    cam = np.array([3.0, 1.0, -3.0, 1.2])
    body = Body(name="wheel", shape="mesh", surface=None, motion=motion)
    for tol in (1e-2, 1e-3):
        (group,) = snapshot_groups(
            SimpleNamespace(bodies=[body]), [(verts, faces)], [0], cam, Effects(), tolerance=tol
        )
        d = rays_covering(cam, group.vertices, n=61)
        hits = cast([group], cam, d, Effects())
        assert hits.hit.sum() > 800
        exact, beta = motion.retarded(hits.rest_position[hits.hit], cam)
        miss = (
            np.linalg.norm(exact[:, 1:] - hits.emit_event[hits.hit, 1:], axis=1) / hits.l[hits.hit]
        )
        assert (
            miss.max() <= 1.5 * tol
        )  # edges are tested at midpoints; interiors may exceed a little
        assert np.linalg.norm(beta - hits.beta_emit[hits.hit], axis=1).max() <= 1.5 * tol


def hyperbolic_ball():
    """A 0.5 m icosphere (1 280 faces) accelerating along x at c^2/a = 4 m, seen from 3 m
    as it passes at about 0.8c, and the camera event."""
    ball = trimesh.creation.icosphere(subdivisions=3, radius=0.5)
    verts, faces = np.asarray(ball.vertices, float), np.asarray(ball.faces, np.int64)
    motion = HyperbolicMotion(acceleration=np.array([C * C / 4.0, 0.0, 0.0]), time=-2.0e-8)
    return verts, faces, motion, np.array([0.0, 3.0, -3.0, 0.3])


def test_unrefined_snapshot_keeps_the_rest_mesh_and_equals_the_refinement():
    # When every edge of the rest mesh passes the tolerance, the snapshot is the rest
    # mesh's faces on the light cone (shared vertices, no per-face copies): the same
    # triangles, events, velocities, clocks and measured error as the red-green
    # refinement gives when it stops after its first round.
    verts, faces, motion, cam = hyperbolic_ball()
    snap = snapshot(motion, verts, faces, cam, Effects(), tolerance=2e-2)
    assert snap.bary is None and np.array_equal(snap.faces, faces)
    pts, tri, parent, bary, vid, (distinct, ev_d, beta_d), err = _adaptive(
        motion, verts, faces, cam, Effects(), 2e-2, 10**6
    )
    assert len(tri) == len(faces) and snap.error == err
    np.testing.assert_array_equal(snap.vertices[snap.faces], ev_d[vid][tri][..., 1:])
    np.testing.assert_array_equal(snap.beta[snap.faces], beta_d[vid][tri])
    np.testing.assert_array_equal(snap.body_coords[snap.faces], pts[tri])
    np.testing.assert_array_equal(
        snap.clock[snap.faces],
        _vertex_clock(motion, distinct, ev_d, Effects())[vid][tri],
    )
    # a tolerance below the measured error refines, through the per-face path
    finer = snapshot(motion, verts, faces, cam, Effects(), tolerance=err / 3)
    assert finer.bary is not None and len(finer.faces) > len(faces)


def test_mesh_topology_follows_its_faces_array():
    # The per-mesh topology (edges, hierarchy) is kept while the faces array lives, is not
    # reused for an array edited in place, and goes with the array.
    verts, faces, motion, cam = hyperbolic_ball()
    faces = faces.copy()
    first = snapshot(motion, verts, faces, cam, Effects(), tolerance=2e-2)
    assert id(faces) in lightcone._MESH_TOPOLOGY
    faces[:] = faces[:, ::-1]  # every face turned over, in place
    turned = snapshot(motion, verts, faces, cam, Effects(), tolerance=2e-2)
    np.testing.assert_array_equal(turned.faces, first.faces[:, ::-1])
    key = id(faces)
    del faces, first, turned
    gc.collect()
    assert key not in lightcone._MESH_TOPOLOGY


def test_hyperbolic_snapshot_within_tolerance_over_successive_exposures():
    # Exposures at successive times (an animation): the hierarchy over the unrefined
    # snapshot is refitted from the first exposure's (bvh.refit_bvh), and every exposure
    # casts the same hits as a freshly built hierarchy; each hit lies within the
    # tolerance (as seen from the camera) of the exact retarded position of the body point
    # it reports, and its velocity within the tolerance of that point's exact velocity
    # (the closed form, checked against the generic solver and scipy in test_motion.py).
    verts, faces, motion, cam = hyperbolic_ball()
    body = Body(name="ball", shape="mesh", surface=None, motion=motion)
    scene = SimpleNamespace(bodies=[body])
    tol = 3e-4  # measured errors 0.9e-4 to 1.0e-4: no refinement
    first = None
    for k in range(4):
        event = cam + np.array([0.25 * k, 0.0, 0.0, 0.0])
        (group,) = snapshot_groups(scene, [(verts, faces)], [0], event, Effects(), tolerance=tol)
        assert group.snapshot.bary is None and group.snapshot.error <= tol
        assert group.bvh is not None
        first = first or group.bvh
        assert group.bvh.node_left is first.node_left  # the same topology, refitted
        d = rays_covering(event, group.vertices, n=61)
        hits = cast([group], event, d, Effects())
        fresh = copy.copy(group)
        fresh.bvh = None  # the tracer builds its own
        again = cast([fresh], event, d, Effects())
        assert hits.hit.sum() > 800
        np.testing.assert_array_equal(hits.hit, again.hit)
        np.testing.assert_allclose(hits.l, again.l, rtol=1e-13)
        np.testing.assert_allclose(hits.rest_position, again.rest_position, atol=1e-12)
        exact, beta = motion.retarded(hits.rest_position[hits.hit], event)
        miss = np.linalg.norm(exact[:, 1:] - hits.emit_event[hits.hit, 1:], axis=1)
        assert (miss / hits.l[hits.hit]).max() <= 1.5 * tol  # as the rolling wheel's
        assert np.linalg.norm(beta - hits.beta_emit[hits.hit], axis=1).max() <= 1.5 * tol


def test_rendered_pixels_match_exact_probes_of_the_points_they_show():
    # End to end through the scene loader and renderer: for every pixel showing a rolling
    # wheel, the exact probe (relview.kinematics.motion retarded solve, aberration of a moving camera)
    # of the body point that pixel reports must land on that pixel's centre within the
    # snapshot tolerance (a quarter pixel), and its exact Doppler factor (physics.md) must
    # match the rendered one within the velocity tolerance times |d ln D / d beta_emit|
    # <= gamma^2 beta + 1/(1 - beta) <= gamma^2 (1 + 2 beta) ~ 24.6 for the fastest rim
    # point (2v/(1+v^2) = 0.94 at v = 0.7).
    import relview
    from relview.geometry.lightcone import PIXEL_FRACTION, pixel_tolerance
    from relview.probes import probe_many
    from relview.scene.model import scene_from_dict

    scene = scene_from_dict(
        {
            "render": {"resolution": [160, 90]},
            "camera": {
                "position": [0.0, -4.0, 0.5],
                "look_at": [0.0, 0.0, 0.5],
                "time": 1.2e-8,
                "beta": [0.0, 0.3, 0.0],
            },
            "body": [
                {
                    "name": "wheel",
                    "shape": "cylinder",
                    "radius": 0.5,
                    "height": 0.2,
                    "rotation": [90.0, 0.0, 0.0],
                    "motion": {
                        "kind": "rolling",
                        "radius": 0.5,
                        "beta": [0.7, 0.0, 0.0],
                        "position": [0.0, 0.0, 0.5],
                    },
                    "surface": {"blackbody": 5800.0},
                }
            ],
        }
    )
    frame = relview.render(scene)
    shown = np.argwhere(frame.layers["body"] == 0)
    assert len(shown) > 300
    rest = frame.layers["rest_position"][shown[:, 0], shown[:, 1]]
    probes = probe_many(scene, "wheel", rest)
    pixel = np.array([p.pixel for p in probes])
    centre = shown[:, ::-1] + 0.5  # x right, y down, centres at half-integers
    assert np.linalg.norm(pixel - centre, axis=1).max() <= PIXEL_FRACTION
    exact_d = np.array([p.doppler for p in probes])
    rendered_d = frame.layers["doppler"][shown[:, 0], shown[:, 1]]
    assert exact_d.min() < 0.8 and exact_d.max() > 1.2  # a real spread of Doppler factors
    rel = np.abs(rendered_d / exact_d - 1)
    assert rel.max() <= 24.6 * pixel_tolerance(scene)
    assert np.median(rel) <= pixel_tolerance(scene)


def test_snapshot_tolerance_follows_the_resolution_rendered(monkeypatch):
    # render(scene, resolution=...) at another size than the scene file's (the Python
    # API, layer maps) holds snapshots to a fraction of the pixel actually rendered, the
    # pixel_tolerance definition (PIXEL_FRACTION x fov / width), not the file's pixel.
    import relview
    from relview.geometry import lightcone
    from relview.scene.model import load_scene

    scene = load_scene(REPO / "scenes" / "rolling-wheel.toml")
    seen = []
    build = lightcone.snapshot_groups

    def spy(*args, **kwargs):
        seen.append(args[5] if len(args) > 5 else kwargs.get("tolerance"))
        return build(*args, **kwargs)

    monkeypatch.setattr(lightcone, "snapshot_groups", spy)
    file_width = scene.render.resolution[0]
    for width in (file_width // 20, file_width // 10):
        seen.clear()
        relview.render(scene, resolution=(width, width * 9 // 16), samples=1)
        expected = lightcone.PIXEL_FRACTION * math.radians(scene.camera.fov) / width
        assert seen and all(t == pytest.approx(expected, rel=1e-12) for t in seen)
        assert expected != pytest.approx(lightcone.pixel_tolerance(scene), rel=1e-3)
