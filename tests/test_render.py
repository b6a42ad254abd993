"""End-to-end rendering: layers, effect switches, demo scenes, the command line."""

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from conftest import camera_scene, dict_scene, moving_body

import relview
from relview.cli.app import main
from relview.kinematics.lorentz import C
from relview.kinematics.uniform import UniformMotion
from relview.scene.parts import Effects, RenderSettings

ROOT = Path(__file__).resolve().parents[1]
SCENES = sorted((ROOT / "scenes").glob("*.toml"))


def two_body_scene(effects=Effects(), cam_beta=(0.3, 0.0, 0.0), res=(80, 45)):
    bodies = [
        moving_body("a", "box", [0.8, 0, 0], [0.5, 0, 0], size=[1.0, 0.6, 0.6], temperature=6000.0),
        moving_body(
            "b", "sphere", [-0.5, 0, 0.1], [-1.0, 1.0, 0.3], radius=0.4, temperature=3000.0
        ),
    ]
    return camera_scene(
        bodies,
        (0.0, -4.0, 0.5),
        (0.0, 0.0, 0.0),
        fov=80.0,
        beta=cam_beta,
        time=1e-9,
        resolution=res,
        effects=effects,
    )


def test_layers_are_consistent_with_null_rays_and_doppler_formula():
    scene = two_body_scene()
    f = relview.render(scene)
    lay = f.layers
    hit = lay["body"] >= 0
    assert hit.sum() > 100
    # emission events lie on the camera's past light cone: c (t_c - t_e) = |x_e - x_c|
    dist = np.linalg.norm(lay["emit_position"][hit] - scene.camera.position, axis=-1)
    assert C * (scene.camera.time - lay["emit_time"][hit]) == pytest.approx(dist, rel=1e-9)
    assert np.isnan(lay["doppler"][~hit]).all()
    assert (lay["xyz"][hit, 1] > 0).all()
    assert f.image.shape == (45, 80, 3)


def test_all_switches_off_equals_plain_render_of_the_same_instant():
    # With every effect off the picture must be the non-relativistic one: each body drawn
    # where it is at the camera time (Galilean, light instantaneous), rest-frame colour,
    # camera motion ignored. Compare with a scene of the same bodies at rest there.
    off = Effects(delay=False, contraction=False, aberration=False, doppler=False, beaming=False)
    moving = two_body_scene(off)
    t = moving.camera.time
    still = []
    for b in moving.bodies:
        m = b.motion
        pos = m.position + m.beta * C * (t - m.time)
        still.append(dataclasses.replace(b, motion=UniformMotion(position=pos)))
    plain = dataclasses.replace(
        moving,
        bodies=still,
        camera=dataclasses.replace(moving.camera, beta=np.zeros(3)),
        render=RenderSettings(resolution=(80, 45)),
    )
    a = relview.render(moving)
    b = relview.render(plain)
    assert np.array_equal(a.layers["body"], b.layers["body"])
    assert a.layers["xyz"] == pytest.approx(b.layers["xyz"], rel=1e-9, abs=1e-9)


@pytest.mark.parametrize("name", ["delay", "contraction", "aberration", "doppler", "beaming"])
def test_each_switch_changes_the_picture(name):
    full = relview.render(two_body_scene())
    part = relview.render(two_body_scene(Effects(**{name: False})))
    assert not np.allclose(full.layers["xyz"], part.layers["xyz"])


#: demos whose check-and-render takes tens of seconds (lit-rolling-wheel: shadows of an
#: accelerating wheel through snapshots per cluster of shading points): run in CI's slow step
SLOW_DEMOS = {"lit-rolling-wheel"}


@pytest.mark.parametrize(
    "path",
    [pytest.param(p, marks=pytest.mark.slow) if p.stem in SLOW_DEMOS else p for p in SCENES],
    ids=[p.stem for p in SCENES],
)
def test_demo_scene_checks_and_renders(path, capsys):
    assert main(["check", str(path)]) == 0
    scene = relview.load_scene(path)
    frame = relview.render(scene, resolution=(96, 54))
    assert np.isfinite(frame.image).all()
    assert (frame.layers["body"] >= 0).any()


def test_cli_render_writes_png_and_layers_without_overwriting(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    scene = ROOT / "scenes" / "sphere-flyby.toml"
    assert main(["render", str(scene), "--resolution", "64x36", "--layers", "--quiet"]) == 0
    first = tmp_path / "outputs" / "sphere-flyby.png"
    assert first.exists() and (tmp_path / "outputs" / "sphere-flyby.npz").exists()
    before = first.read_bytes()
    assert main(["render", str(scene), "--resolution", "64x36", "--quiet"]) == 0
    assert first.read_bytes() == before
    assert (tmp_path / "outputs" / "sphere-flyby-1.png").exists()
    npz = np.load(tmp_path / "outputs" / "sphere-flyby.npz")
    for key in ("xyz", "doppler", "emit_time", "emit_position", "rest_position", "body", "image"):
        assert key in npz.files


def test_cli_probe_json(capsys):
    import json

    scene = ROOT / "scenes" / "capsule-flyby.toml"
    assert main(["probe", str(scene), "--body", "capsule", "--point", "5,0,0", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(data) >= {"emit_time", "emit_position", "direction", "pixel", "visible", "doppler"}


def test_cli_user_errors_exit_2(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[camera]\nposition = [0, 0, 0]\nlook_at = [1, 0, 0]\nfvo = 3\n")
    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "fvo" in err and "fov" in err and "Traceback" not in err
    assert main(["render", str(bad), "--bogus"]) == 2


def test_camera_riding_uniform_motion_equals_camera_beta():
    a = dict_scene(
        {
            "position": [0, 0, 0],
            "direction": [1, 1, 0],
            "beta": [0.6, 0, 0],
            "time": 2e-8,
            "fov": 90.0,
        }
    )
    b = dict_scene(
        {
            "direction": [1, 1, 0],
            "time": 2e-8,
            "fov": 90.0,
            "motion": {"kind": "uniform", "beta": [0.6, 0, 0], "position": [0, 0, 0], "time": 2e-8},
        }
    )
    fa = relview.render(a, resolution=(48, 27))
    fb = relview.render(b, resolution=(48, 27))
    assert np.array_equal(fa.layers["body"], fb.layers["body"])
    assert fa.layers["xyz"] == pytest.approx(fb.layers["xyz"], rel=1e-9)


def test_accelerating_camera_aberrates_with_its_velocity_at_the_exposure():
    # Hyperbolic motion from rest (Rindler 2006, sec. 3.8): after proper acceleration a for
    # scene time t the velocity is beta = a t / sqrt(c^2 + a^2 t^2). A source at rest, seen at
    # 90 deg in S, appears at arccos(beta) from the direction of motion (Einstein 1905).
    a = 9.81e8  # m/s2
    t = 0.5  # s
    beta = a * t / np.sqrt(C**2 + (a * t) ** 2)
    sc = dict_scene(
        {
            "direction": [1, 0, 0],
            "time": t,
            "fov": 120.0,
            "motion": {
                "kind": "hyperbolic",
                "acceleration": [a, 0, 0],
                "position": [0, 0, 0],
                "time": 0.0,
            },
        }
    )
    x_cam = C**2 / a * (np.sqrt(1 + (a * t / C) ** 2) - 1)
    # a point-like source abeam of the camera's position at the exposure (90 deg in S)
    sc.bodies[0].motion.position = np.array([x_cam, 40.0, 0.0])
    r = relview.probe(sc, "star", [0.0, -0.5, 0.0])
    assert r.emit_position[0] == pytest.approx(x_cam, abs=1e-6)
    assert np.degrees(np.arccos(r.direction[0])) == pytest.approx(
        np.degrees(np.arccos(beta)), abs=1e-6
    )


def test_open_shutter_integrates_the_exposure_events():
    # An open shutter is the mean of instant pictures over the stratified exposure times.
    from relview.renderer import exposure_times

    cam = {"position": [0, -5, 0], "look_at": [0, 0, 0], "fov": 60.0}
    body = {
        "name": "b",
        "shape": "box",
        "size": [1, 1, 1],
        "motion": {"beta": [0.9, 0, 0], "position": [4.0, 0, 0]},
        "surface": {"blackbody": 6000.0},
    }
    sh = 4e-9
    blur = dict_scene(cam, [body], {"shutter": sh, "shutter_samples": 4, "exposure": 1e6})
    times = exposure_times(0.0, sh, 1, 4)
    assert len(times) == 4  # equally weighted strata (the nominal time is not among them)
    assert times.min() >= -sh / 2 and times.max() <= sh / 2
    f = relview.render(blur, resolution=(64, 36))
    inst = dict_scene(cam, [body], {"exposure": 1e6})
    mean = sum(relview.render(inst, ti, resolution=(64, 36)).layers["xyz"] for ti in times) / 4
    assert (mean[..., 1] > 0).any()
    assert f.layers["xyz"] == pytest.approx(mean, rel=1e-9, abs=1e-6)
    # the streak is wider than the instant picture
    assert (f.layers["xyz"][..., 1] > 0).sum() > (
        relview.render(inst, resolution=(64, 36)).layers["xyz"][..., 1] > 0
    ).sum()


def test_check_rejects_a_body_whose_points_would_reach_c(tmp_path, capsys):
    # A rigid body of extent e on a circular orbit of radius r at speed beta has points at
    # up to r + e from the centre; their speed reaches c first (message from relview.kinematics.motion).
    bad = tmp_path / "orbit.toml"
    bad.write_text(
        "[camera]\nposition = [0, -12, 0]\nlook_at = [0, 0, 0]\n"
        '[[body]]\nname = "big"\nshape = "box"\nsize = [2, 2, 2]\n'
        '[body.motion]\nkind = "orbit"\nradius = 1.0\nbeta = 0.9\n'
        "[body.surface]\nblackbody = 5000.0\n"
    )
    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "big" in err and "reach c" in err and "Traceback" not in err


def test_tone_setting_reaches_the_png(tmp_path):
    # Reinhard et al. 2002 eq. 4 compresses L -> L (1 + L/Lw^2)/(1 + L) (Lw = 4 here): a
    # surface exposed to twice white (L = 2) is clipped by "none" but shown at
    # 2 (1 + 2/16)/3 = 0.75 of full scale by "reinhard".
    from PIL import Image

    scene = dict_scene(
        {"position": [0, -3, 0], "look_at": [0, 40, 0], "fov": 20.0}, render={"tone": "reinhard"}
    )
    probe_frame = relview.render(scene, resolution=(16, 9))
    hit = probe_frame.layers["body"] >= 0
    assert hit.any()
    y = float(np.median(probe_frame.layers["xyz"][hit, 1]))
    frame = relview.render(scene, resolution=(16, 9), exposure=y / 2.0)
    assert frame.tone == "reinhard"
    toned = np.asarray(Image.open(frame.save(tmp_path / "t.png")))
    clipped = np.asarray(Image.open(frame.save(tmp_path / "c.png", tone="none")))
    assert (clipped[hit] == 255).any()
    assert toned[hit].max() < 255


def test_first_run_compile_notice(tmp_path, monkeypatch):
    # common practice: tell the user why the first run is slow (numba compiles once)
    import relview.cli.app as cli

    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    # the real cache sits beside the tracer's module (numba cache=True)
    import relview.geometry.trace as trace

    assert cli.kernel_cache_dir() == Path(trace.__file__).resolve().parent / "__pycache__"
    pkg = tmp_path / "relview"
    (pkg / "__pycache__").mkdir(parents=True)
    monkeypatch.setattr(cli, "kernel_cache_dir", lambda: pkg / "__pycache__")
    assert "compiling" in cli.compile_notice()
    (pkg / "__pycache__" / "trace._cast-96.py311.nbi").write_bytes(b"")
    assert cli.compile_notice() is None


def test_jittered_samples_keep_the_centre_layers_and_smooth_edges():
    # Sample 0 is the pixel centre, so the data layers do not depend on the sample count;
    # extra jittered samples only average the colour (edge pixels take partial values).
    scene = two_body_scene(res=(64, 36))
    one = relview.render(scene)
    four = relview.render(scene, samples=4)
    for key in ("body", "doppler", "emit_time", "rest_position"):
        assert np.array_equal(one.layers[key], four.layers[key], equal_nan=True)
    y1, y4 = one.layers["xyz"][..., 1], four.layers["xyz"][..., 1]
    inside = one.layers["body"] >= 0
    partial = (y4 > 0) & (y4 < 0.9 * y1.max()) & ~inside
    assert partial.any()  # antialiased silhouette pixels outside the centre-sampled shape
