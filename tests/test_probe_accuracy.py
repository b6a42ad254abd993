"""Probe answers that must not depend on cancellation or on the scene's pixel size."""

from __future__ import annotations

from fractions import Fraction

import pytest
from conftest import dict_scene

import relview
from relview.kinematics.lorentz import C


def test_a_fast_receding_point_is_seen_where_the_exact_light_cone_puts_it():
    # Camera at the origin at t = 0; a point at x = 10 km at t = 0 receding along +x at
    # beta = 1 - 1e-12. Its light leaves at x_e = x0 - beta c tau with c tau = x_e (it
    # travels back to the origin), so x_e = x0 / (1 + beta): rearranged by hand from
    # |x_c - x(t_e)| = c (t_c - t_e), evaluated in exact rational arithmetic (fractions).
    # The root (b.w + sqrt(...)) / (1 - b^2) cancels here and gave x_e = 5000.397 m.
    beta = 1.0 - 1e-12
    camera = {"position": [0.0, 0.0, 0.0], "look_at": [1.0, 0.0, 0.0], "fov": 60.0}
    dot = {
        "name": "dot",
        "shape": "sphere",
        "radius": 0.01,
        "motion": {"beta": [beta, 0.0, 0.0], "position": [10_000.0, 0.0, 0.0]},
        "surface": {"blackbody": 5000.0},
    }
    r = relview.probe(dict_scene(camera, [dot]), "dot", [0.0, 0.0, 0.0])
    exact_x = Fraction(10_000) / (1 + Fraction(beta))  # beta exactly as the float holds it
    assert r.emit_position[0] == pytest.approx(float(exact_x), rel=1e-13)
    assert r.light_delay == pytest.approx(float(exact_x / Fraction(C)), rel=1e-13)


def _spinning_ball(resolution):
    """A 5 m ball 100 m ahead of the camera spinning at 2e7 rad/s (rim at 0.33 c; not
    inertial, so it is traced as a light-cone snapshot), seen at 90 degrees."""
    camera = {"position": [0.0, 0.0, 0.0], "look_at": [0.0, 1.0, 0.0], "fov": 90.0}
    ball = {
        "name": "ball",
        "shape": "sphere",
        "radius": 5.0,
        "detail": 1,
        "motion": {
            "kind": "spin",
            "angular_velocity": 2e7,
            "axis": [0.0, 0.0, 1.0],
            "base": {"position": [0.0, 100.0, 0.0]},
        },
        "surface": {"blackbody": 5000.0},
    }
    return dict_scene(camera, [ball], {"resolution": list(resolution)})


@pytest.mark.parametrize("resolution", [(60, 40), (960, 640)])
def test_a_point_inside_a_moving_body_is_hidden_at_any_render_resolution(resolution):
    # At 60 x 40 the scene's snapshot tolerance is a quarter pixel, 6.5e-3 rad, which at
    # 100 m allowed about 1.3 m of slack: points a metre inside the ball came out visible.
    scene = _spinning_ball(resolution)
    for depth in (0.3, 0.5, 1.0):  # m inside the ball, behind its near surface (-y side)
        assert not relview.probe(scene, "ball", [0.0, -5.0 + depth, 0.0]).visible, depth
    # the mesh vertex nearest the camera lies on the visible surface
    assert relview.probe(scene, "ball", [0.0, -5.0, 0.0]).visible
    # and the far side is hidden
    assert not relview.probe(scene, "ball", [0.0, 5.0, 0.0]).visible
