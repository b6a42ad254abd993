"""Clocks: proper time along every motion kind, the readings a camera records and how
fast it sees them advance (relview.kinematics.clocks, probes, the proper_time layer)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from relview.errors import SceneError
from relview.geometry.lightcone import pixel_tolerance
from relview.kinematics.lorentz import C
from relview.probes import probe, probe_many
from relview.renderer import render
from relview.scene.model import scene_from_dict


def _scene(motion, *, camera=None, clock=None, resolution=(64, 36), effects=None, size=0.8):
    cam = {"position": [0.0, 0.0, 0.0], "look_at": [0.0, 1.0, 0.0], "time": 0.0, "fov": 60.0}
    cam.update(camera or {})
    body = {
        "name": "clock",
        "shape": "box",
        "size": [size] * 3,
        "motion": motion,
        "surface": {"blackbody": 5000.0},
    }
    if clock is not None:
        body["clock"] = clock
    render_table = {"resolution": list(resolution)}
    if effects:
        render_table["effects"] = effects
    return scene_from_dict({"camera": cam, "body": [body], "render": render_table})


def _doppler_head_on(beta):
    """Relativistic Doppler factor for a source approaching head-on at beta (Einstein 1905,
    section 7: nu'/nu = sqrt((1 + beta)/(1 - beta)))."""
    return math.sqrt((1.0 + beta) / (1.0 - beta))


# ----------------------------------------------------------------- inertial clocks


@pytest.mark.parametrize("beta, expected", [(0.8, 3.0), (0.9, math.sqrt(19.0))])
def test_head_on_approach_runs_fast_by_the_doppler_factor(beta, expected):
    # Einstein 1905, section 7: D = sqrt((1 + b)/(1 - b)) = 3 at 0.8c, sqrt(19) = 4.36 at
    # 0.9c (not the 10x sometimes quoted)
    assert _doppler_head_on(beta) == pytest.approx(expected, rel=1e-15)
    scene = _scene({"kind": "uniform", "beta": [0.0, -beta, 0.0], "position": [0.0, 300.0, 0.0]})
    times = np.array([0.0, 2e-7])
    res = [probe(scene, "clock", [0.0, 0.0, 0.0], time=t) for t in times]
    for r in res:
        assert r.tick_rate == pytest.approx(expected, rel=1e-12)
    seen = (res[1].proper_time - res[0].proper_time) / (times[1] - times[0])
    assert seen == pytest.approx(expected, rel=1e-9)
    # the camera's own clock runs at one second per second, the computed clock at 1/gamma
    assert res[1].camera_proper_time - res[0].camera_proper_time == pytest.approx(2e-7, rel=1e-12)
    computed = (res[1].computed_proper_time - res[0].computed_proper_time) / (times[1] - times[0])
    assert computed == pytest.approx(math.sqrt(1.0 - beta * beta), rel=1e-9)


def test_receding_clock_runs_slow_by_one_third():
    # Einstein 1905, section 7: D = sqrt((1 - b)/(1 + b)) = 1/3 at 0.8c receding
    scene = _scene({"kind": "uniform", "beta": [0.0, 0.8, 0.0], "position": [0.0, 3.0, 0.0]})
    times = np.array([1e-7, 3e-7])
    res = [probe(scene, "clock", [0.0, 0.0, 0.0], time=t) for t in times]
    assert res[0].tick_rate == pytest.approx(1.0 / 3.0, rel=1e-12)
    seen = (res[1].proper_time - res[0].proper_time) / (times[1] - times[0])
    assert seen == pytest.approx(1.0 / 3.0, rel=1e-9)


def test_clock_seen_at_right_angles_runs_slow_by_gamma():
    # Einstein 1905, section 7: nu' = nu gamma (1 - b cos phi), phi measured in the
    # camera's frame; light reaching the camera at right angles to the motion (phi = 90
    # deg, emitted abeam) gives D = 1/gamma = 0.6 at 0.8c
    d = 30.0
    scene = _scene({"kind": "uniform", "beta": [0.8, 0.0, 0.0], "position": [0.0, d, 0.0]})
    t = d / C  # light emitted at t = 0 from x = 0 arrives now, at right angles
    r = probe(scene, "clock", [0.0, 0.0, 0.0], time=t)
    assert r.emit_time == pytest.approx(0.0, abs=1e-18)
    assert r.tick_rate == pytest.approx(0.6, rel=1e-12)
    assert r.doppler == pytest.approx(0.6, rel=1e-12)
    dt = 1e-12
    a = probe(scene, "clock", [0.0, 0.0, 0.0], time=t - dt).proper_time
    b = probe(scene, "clock", [0.0, 0.0, 0.0], time=t + dt).proper_time
    assert (b - a) / (2 * dt) == pytest.approx(0.6, rel=1e-6)


def test_clock_setting_and_camera_clock():
    # the settable reading: the clock reads `reading` at the reference point's event at
    # scene time `time`; the camera's clock likewise (scene-file keys of our own)
    scene = _scene(
        {"kind": "uniform", "beta": [0.0, -0.6, 0.0], "position": [0.0, 50.0, 0.0]},
        clock={"reading": 5.0, "time": 1e-8},
        camera={"time": 1e-8, "clock": {"reading": -2.0, "time": 0.0}},
    )
    r = probe(scene, "clock", [0.0, 0.0, 0.0])
    assert r.computed_proper_time == 5.0
    assert r.camera_proper_time == pytest.approx(-2.0 + 1e-8, rel=1e-15)
    # 0.6c: gamma = 1.25, so the light left (delay) earlier, 0.8 delay of proper time before
    assert r.proper_time == pytest.approx(5.0 - 0.8 * r.light_delay, abs=1e-20)


def test_clock_keys_are_checked():
    with pytest.raises(SceneError, match="readng"):
        _scene({"kind": "uniform"}, clock={"readng": 1.0})
    with pytest.raises(SceneError, match="reading"):
        _scene({"kind": "uniform"}, clock={"reading": "noon"})


def test_galilean_clocks_keep_scene_time():
    # contraction off (Galilean kinematics): no time dilation, the clock advances with
    # scene time; the seen rate is the classical Doppler factor 1/(1 - b) = 5 (common
    # practice: the pre-relativistic moving-source formula)
    scene = _scene(
        {"kind": "uniform", "beta": [0.0, -0.8, 0.0], "position": [0.0, 300.0, 0.0]},
        effects={"contraction": False},
    )
    r = probe(scene, "clock", [0.0, 0.0, 0.0], time=1e-7)
    assert r.proper_time == pytest.approx(r.emit_time, rel=1e-12)
    assert r.tick_rate == pytest.approx(5.0, rel=1e-12)


# ----------------------------------------------------------------- accelerated clocks


def test_hyperbolic_proper_time_and_seen_reading():
    # Rindler 2006, section 3.8: a body at rest at t = 0 with proper acceleration a has
    # proper time tau = (c/a) asinh(a t / c) and x = (c^2/a)(sqrt(1 + (a t/c)^2) - 1)
    acc = 1e16  # m/s^2: c^2/a = 9 m
    scene = _scene(
        {"kind": "hyperbolic", "acceleration": [acc, 0.0, 0.0], "position": [0.0, 6.0, 0.0]}
    )
    length = C * C / acc
    for t in (-1e-8, 1e-8, 4e-8):  # the camera inside the past horizon, ct > -c^2/a
        r = probe(scene, "clock", [0.0, 0.0, 0.0], time=t)
        assert r.computed_proper_time == pytest.approx(
            C / acc * math.asinh(acc * t / C), rel=1e-12, abs=1e-22
        )

        # our own retarded solve with scipy's brentq: the camera at rest at the origin
        def light_cone(te, tc=t):
            x = length * (math.sqrt(1.0 + (acc * te / C) ** 2) - 1.0)
            return C * (tc - te) - math.hypot(x, 6.0)

        def solve(tc):
            step = 1e-8  # widen the bracket until the light cone is crossed
            while light_cone(tc - step, tc) <= 0.0:
                step *= 2.0
            return brentq(lambda s: light_cone(s, tc), tc - step, tc, xtol=1e-26, rtol=1e-15)

        te = solve(t)
        assert r.emit_time == pytest.approx(te, rel=1e-12, abs=1e-22)
        assert r.proper_time == pytest.approx(
            C / acc * math.asinh(acc * te / C), rel=1e-10, abs=1e-21
        )
        # the seen tick rate against the derivative of that reading (central difference)
        h = 1e-12

        def seen(tc):
            return C / acc * math.asinh(acc * solve(tc) / C)

        assert r.tick_rate == pytest.approx((seen(t + h) - seen(t - h)) / (2 * h), rel=1e-5)


def test_circular_orbit_proper_time_and_transverse_rate():
    # an orbiting clock: tau = t / gamma (Einstein 1905, section 4: a clock moved along a
    # closed curve at constant speed falls behind by the dilation factor); seen from the centre every photon arrives at right angles to the motion, so
    # the seen rate is 1/gamma too (Einstein 1905, section 7 at phi = 90 deg)
    beta = 0.6
    radius = 30.0
    scene = _scene(
        {"kind": "orbit", "center": [0.0, 0.0, 0.0], "radius": radius, "beta": beta}, size=0.01
    )
    gamma = 1.0 / math.sqrt(1.0 - beta * beta)
    for t in (0.0, 1e-7, 3.3e-7):
        r = probe(scene, "clock", [0.0, 0.0, 0.0], time=t)
        assert r.computed_proper_time == pytest.approx(t / gamma, rel=1e-12, abs=1e-22)
        assert r.proper_time == pytest.approx((t - radius / C) / gamma, rel=1e-12)
        assert r.tick_rate == pytest.approx(1.0 / gamma, rel=1e-12)


# ----------------------------------------------------------------- the layer, every kind

KINDS = {
    "uniform": {"kind": "uniform", "beta": [0.6, 0.0, 0.0], "position": [2.0, 6.0, 0.0]},
    "hyperbolic": {
        "kind": "hyperbolic",
        "acceleration": [1e16, 0.0, 0.0],
        "position": [0.0, 6.0, 0.0],
    },
    "orbit": {"kind": "orbit", "center": [0.0, 6.0, 0.0], "radius": 2.0, "beta": 0.5},
    "path": {
        "kind": "path",
        "times": [-3e-8, 0.0, 3e-8],
        "positions": [[-2.0, 6.0, 0.0], [0.0, 6.5, 0.0], [2.0, 6.0, 0.0]],
    },
    "spin": {
        "kind": "spin",
        "angular_velocity": 5e7,
        "base": {"kind": "uniform", "beta": [0.3, 0.0, 0.0], "position": [0.0, 6.0, 0.0]},
    },
    "rolling": {
        "kind": "rolling",
        "radius": 0.5,
        "beta": [0.5, 0.0, 0.0],
        "position": [0.0, 6.0, 0.0],
    },
}


@pytest.mark.parametrize("kind", list(KINDS))
def test_proper_time_layer_matches_the_exact_probe(kind):
    # each pixel's reading against the exact retarded solve of the body point it reports
    # (relview.probes); a light-cone snapshot places points to its tolerance (rad seen
    # from the camera), i.e. their light to tolerance x light delay (docs/motion.md)
    scene = _scene(KINDS[kind], camera={"time": 1e-9}, clock={"reading": 2.0, "time": -1e-9})
    frame = render(scene)
    body = frame.layers["body"]
    layer = frame.layers["proper_time"]
    assert np.all(np.isnan(layer[body < 0]))
    seen = body >= 0
    assert seen.sum() > 30
    res = probe_many(scene, "clock", frame.layers["rest_position"][seen])
    exact = np.array([r.proper_time for r in res])
    delay = np.array([r.light_delay for r in res])
    err = np.abs(layer[seen] - exact)
    if kind == "uniform":  # the exact rest-frame cast
        assert err.max() <= 1e-15 * np.abs(exact).max()
    else:
        assert np.all(err <= 1.5 * pixel_tolerance(scene) * delay)
    assert np.all(np.isfinite(layer[seen]))


# ----------------------------------------------------------------- the clock face


def _decode_digits(face, reading, n_cells):
    """Read the seven-segment display of a ClockFace back by sampling each segment's
    middle (segment layout a-g, common practice for numeric displays)."""
    from relview.light.surfaces.clock_face import _SEGMENTS

    pitch, width = 0.21, 0.16
    left = -0.5 * (n_cells * pitch - (pitch - width))
    mids = [
        (0.5, 1.95),
        (0.95, 1.5),
        (0.95, 0.5),
        (0.5, 0.05),
        (0.05, 0.5),
        (0.05, 1.5),
        (0.5, 1.0),
    ]
    shown = []
    for cell in range(n_cells):
        pts = []
        for x, y in mids:
            a = left + cell * pitch + x * width
            b = -0.62 + y * 0.16
            pts.append([0.0, a * face.radius, b * face.radius])
        lit = face.ink_mask(np.array(pts), np.full(7, reading))
        if cell == 0:
            shown.append("-" if lit[6] and not lit[0] else "")
            continue
        match = [d for d in range(10) if np.array_equal(_SEGMENTS[d], lit)]
        shown.append(str(match[0]) if match else "?")
    return "".join(shown)


def test_clock_face_hand_and_digits():
    from relview.light.materials import ClockFace

    face = ClockFace(period=1e-7, phase=0.0, radius=1.0, axes=(1, 2), unit=1e-9, digits=3)
    up, right = np.array([[0.0, 0.0, 0.5]]), np.array([[0.0, 0.5, 0.0]])
    # the hand turns clockwise from axis j (here z) towards axis i (y): a quarter period
    # later it points along +y
    assert face.ink_mask(up, [0.0])[0] and not face.ink_mask(right, [0.0])[0]
    assert face.ink_mask(right, [2.5e-8])[0] and not face.ink_mask(up, [2.5e-8])[0]
    assert _decode_digits(face, 47.3e-9, 4) == "047"
    assert _decode_digits(face, 912e-9, 4) == "912"
    assert _decode_digits(face, -5.5e-9, 4) == "-006"  # floor: whole units elapsed


def test_clock_face_keys_are_checked():
    motion = {"kind": "uniform"}
    scene = scene_from_dict(
        {
            "camera": {"position": [0, 0, 0], "look_at": [0, 1, 0]},
            "body": [
                {
                    "name": "c",
                    "shape": "box",
                    "size": [1, 1, 1],
                    "motion": motion,
                    "surface": {"clock_face": {"period": 2e-8}},
                }
            ],
        }
    )
    assert scene.bodies[0].surface.period == 2e-8
    for bad, key in (
        ({"period": -1.0}, "period"),
        ({"axes": [1, 1]}, "axes"),
        ({"hand": 1.0}, "hand"),
    ):
        with pytest.raises(SceneError, match=key):
            scene_from_dict(
                {
                    "camera": {"position": [0, 0, 0], "look_at": [0, 1, 0]},
                    "body": [
                        {
                            "name": "c",
                            "shape": "box",
                            "size": [1, 1, 1],
                            "surface": {"clock_face": bad},
                        }
                    ],
                }
            )


def test_rendered_clock_face_runs_three_times_fast_head_on():
    # a clock face approaching head-on at 0.8c: the readings its pixels carry advance
    # 3 s per camera second (Einstein 1905, section 7), and the dial drawn is the one
    # those readings give (ink where the face's own mask puts it, darker than the face)
    from relview.light.materials import ClockFace

    motion = {"kind": "uniform", "beta": [0.0, -0.8, 0.0], "position": [0.0, 40.0, 0.0]}
    scene = scene_from_dict(
        {
            "camera": {"position": [0, 0, 0], "look_at": [0, 1, 0], "fov": 0.5},
            "body": [
                {
                    "name": "c",
                    "shape": "box",
                    "size": [1.0, 0.05, 1.0],
                    "motion": motion,
                    "surface": {
                        "clock_face": {
                            "period": 4e-8,
                            "radius": 0.5,
                            "axes": [0, 2],
                            "face": {"blackbody": 5000.0},
                            "ink": {"blackbody": 5000.0, "scale": 0.01},
                        }
                    },
                }
            ],
            "render": {"resolution": [64, 64], "exposure": 1e9},
        }
    )
    frames = [render(scene, time=t) for t in (0.0, 1e-8)]
    means = []
    for f in frames:
        seen = f.layers["body"] == 0
        assert seen.sum() > 500
        means.append(np.mean(f.layers["proper_time"][seen]))
        face = scene.bodies[0].surface
        assert isinstance(face, ClockFace)
        ink = face.ink_mask(f.layers["rest_position"][seen], f.layers["proper_time"][seen])
        y = f.layers["xyz"][seen][:, 1]
        assert 0.05 < ink.mean() < 0.6
        assert y[ink].max() < 0.05 * y[~ink].min()
    # the two means are over different pixel sets (the face grows as it nears): points
    # 0.5 m off the axis at ~190 m have paths longer by r^2 / 2d = 0.7 mm, 2e-12 s, so
    # the means agree with 3 to about 1e-4
    assert (means[1] - means[0]) / 1e-8 == pytest.approx(3.0, rel=2e-4)


# ----------------------------------------------------------------- the clock sheet, the demo


def test_clock_sheet_of_the_demo_prints_computed_and_seen_readings():
    import re
    from pathlib import Path

    from relview.figures.sheets import clock_text, render_panels
    from relview.scene.model import load_scene

    scene = load_scene(Path(__file__).parent.parent / "scenes" / "clock-crossing.toml")
    sheet = render_panels(
        scene, None, "clock-computed,clock-photograph", resolution=(96, 54), framing="scene"
    )
    for panel in sheet.panels:  # both clocks in view in both panels
        body = panel.frame.layers["body"]
        assert (body == 0).sum() > 20 and (body == 1).sum() > 20
    computed = clock_text(sheet, sheet.panel("clock-computed"))
    seen = clock_text(sheet, sheet.panel("clock-photograph"))
    # one instant of the scene frame: both clocks read t / gamma = 100 ns / 1.25 = 80 ns
    # (Einstein 1905, section 4), the camera's own clock 100 ns
    assert "inbound clock 80 ns" in computed and "outbound clock 80 ns" in computed
    assert "camera clock 100 ns" in computed and "camera clock 100 ns" in seen
    # photographed: each runs at its Doppler factor 1 / (gamma (1 - beta.n)), n from where
    # the light left the origin to the camera (Einstein 1905, section 7): near 2 and 1/2
    for name, beta in (("inbound", -0.6), ("outbound", 0.6)):
        r = probe(scene, name, (0.0, 0.0, 0.0))
        n = -np.asarray(r.emit_position) / np.linalg.norm(r.emit_position)
        expected = 1.0 / (1.25 * (1.0 - beta * n[0]))
        rate = float(re.search(rf"{name} clock [-\d.e]+ ns, seen to run x([\d.]+)", seen)[1])
        assert rate == pytest.approx(expected, rel=1e-3)  # printed to 4 digits
    assert 1.9 < float(re.search(r"inbound.*x([\d.]+)", seen)[1]) < 2.0


def test_camera_on_an_orbit_keeps_its_proper_time():
    # the camera's own clock on any worldline: on a circular orbit tau = t / gamma
    # (Einstein 1905, section 4)
    scene = scene_from_dict(
        {
            "camera": {
                "look_at": [0.0, 0.0, 10.0],
                "time": 2e-7,
                "clock": {"reading": 1.0},
                "motion": {"kind": "orbit", "radius": 5.0, "beta": 0.8},
            },
            "body": [
                {
                    "name": "b",
                    "shape": "sphere",
                    "radius": 1.0,
                    "surface": {"blackbody": 5e3},
                    "motion": {"position": [0.0, 0.0, 10.0]},
                }
            ],
        }
    )
    r = probe(scene, "b", (0.0, 0.0, 0.0))
    assert r.camera_proper_time == pytest.approx(1.0 + 2e-7 * 0.6, rel=1e-15)


def test_one_clock_setting_equals_the_array_proper_time_for_every_kind():
    # proper_time_at (the per-body clock setting, one float) must give the bits of the
    # array form _proper_time for every motion kind; for uniform motion both are the
    # time dilation tau = (t - t0) / gamma (Einstein 1905, section 4).
    from relview.kinematics.hyperbolic import HyperbolicMotion
    from relview.kinematics.orbit import OrbitMotion
    from relview.kinematics.uniform import UniformMotion

    motions = [
        UniformMotion(beta=np.array([0.6, 0.0, 0.0]), position=np.zeros(3), time=2e-9),
        HyperbolicMotion(acceleration=np.array([0.0, 9e15, 0.0])),
        OrbitMotion(center=np.zeros(3), radius=3.0, beta=0.5, axis=np.array([0.0, 0.0, 1.0])),
    ]
    for motion in motions:
        for s in (-4.0, 0.0, 0.7, 12.5):
            assert motion.proper_time_at(s) == motion._proper_time(np.array([s]))[0][0]
    uniform = motions[0]
    assert uniform.proper_time_at(3.0) == pytest.approx((3.0 - C * 2e-9) * 0.8, rel=1e-15)
