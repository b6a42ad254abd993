"""relview.probe against independent root finding, the renderer's own layers and textbook values."""

import numpy as np
import pytest
from conftest import camera_scene, moving_body
from scipy.optimize import brentq

import relview
from relview.kinematics.lorentz import C, lorentz_factor
from relview.scene.parts import Effects


def box(name, size, beta, pos, t=0.0, rotation=(0, 0, 0)):
    return moving_body(name, "box", beta, pos, size=size, time=t, rotation=rotation)


def test_emission_time_matches_scipy_root_of_the_retarded_condition():
    # The retarded condition |x_c - X(t)| = c (t_c - t) solved independently with scipy's
    # brentq (general-purpose root finder) for a corner of a moving, rotated box.
    beta = np.array([0.7, -0.2, 0.1])
    body = box("b", [1.0, 0.5, 0.3], beta, [0.5, 0.4, -0.2], t=2e-9, rotation=(10, 20, 30))
    scene = camera_scene([body], time=3e-9)
    corner = np.array([0.5, 0.25, 0.15])
    r = relview.probe(scene, "b", corner)
    # independent worldline: contracted rest-frame offset at equal S times, then drift
    R = body.rotation_matrix()
    p = R @ corner
    g = lorentz_factor(beta)
    b2 = beta @ beta
    offset = p - (1 - 1 / g) * (p @ beta) / b2 * beta
    x_at = lambda t: body.motion.position + offset + beta * C * (t - body.motion.time)  # noqa: E731
    xc = scene.camera.position
    tc = scene.camera.time
    f = lambda t: np.linalg.norm(xc - x_at(t)) - C * (tc - t)  # noqa: E731
    t_root = brentq(f, tc - 1e-6, tc, xtol=1e-22, rtol=1e-15)
    assert r.emit_time == pytest.approx(t_root, abs=1e-19)
    assert np.array(r.emit_position) == pytest.approx(x_at(t_root), abs=1e-9)


def test_head_on_approach_gives_doppler_three():
    # physics.md check value: an emitter approaching head-on at beta = 0.8 has D = 3.
    body = box("b", [0.2, 0.2, 0.2], [0.0, -0.8, 0.0], [0.0, 5.0, 0.0])
    scene = camera_scene([body], (0, -3, 0), (0, 0, 0))
    r = relview.probe(scene, "b", [0.0, -0.1, 0.0])
    assert r.doppler == pytest.approx(3.0, rel=1e-12)
    assert r.visible


def test_aberration_seen_by_a_moving_camera():
    # Einstein 1905 aberration: a source at 90 deg in S appears at 36.87 deg from the direction
    # of motion to a camera moving at 0.8c (physics.md check value).
    body = box("b", [0.2, 0.2, 0.2], [0, 0, 0], [0.0, 10.0, 0.0])
    scene = camera_scene([body], (0, 0, 0), (1, 1, 0), beta=(0.8, 0, 0))
    r = relview.probe(scene, "b", [0.0, -0.1, 0.0])
    assert np.degrees(np.arccos(r.direction[0])) == pytest.approx(36.8698976458, abs=1e-8)
    # D for a source at rest seen by a moving camera, light arriving at 90 deg in S:
    # D = gamma (1 - beta.n) with n perpendicular: gamma = 5/3 (Rybicki & Lightman eq. 4.11)
    assert r.doppler == pytest.approx(5 / 3, rel=1e-12)


def test_hidden_far_side_and_pixel_agree_with_the_rendered_layers():
    body = box("b", [1.0, 1.0, 1.0], [0.6, 0, 0], [0.6, 0, 0])
    scene = camera_scene([body], resolution=(160, 90))
    frame = relview.render(scene)
    near = relview.probe(scene, "b", [0.1, -0.5, 0.1])  # on the face towards the camera
    far = relview.probe(scene, "b", [0.1, 0.5, 0.1])  # on the far face
    assert near.visible and not far.visible
    x, y = near.pixel
    ix, iy = int(x), int(y)
    assert frame.layers["body"][iy, ix] == 0
    # the rendered hit at that pixel is within a pixel's footprint of the probed point
    rest = frame.layers["rest_position"][iy, ix]
    assert np.linalg.norm(rest - [0.1, -0.5, 0.1]) < 0.05
    assert frame.layers["doppler"][iy, ix] == pytest.approx(near.doppler, rel=0.02)


def test_effect_switches_change_the_probe_as_documented():
    body = box("b", [0.2, 0.2, 0.2], [0.9, 0, 0], [0.0, 0.0, 0.0])
    scene = camera_scene([body], time=0.0)
    no_delay = relview.probe(scene, "b", [0, 0, 0], effects=Effects(delay=False))
    assert no_delay.emit_time == 0.0  # light instantaneous: emission at the camera time
    assert np.array(no_delay.emit_position) == pytest.approx([0, 0, 0])
    galilean = relview.probe(
        scene, "b", [0.1, 0, 0], effects=Effects(contraction=False, delay=False)
    )
    assert galilean.emit_position[0] == pytest.approx(0.1)  # no contraction
    lorentz = relview.probe(scene, "b", [0.1, 0, 0], effects=Effects(delay=False))
    assert lorentz.emit_position[0] == pytest.approx(0.1 * np.sqrt(1 - 0.81))
