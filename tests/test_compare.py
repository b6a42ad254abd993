"""Comparison sheets and layer maps against Lorentz contraction, pinhole geometry,
Terrell's rotation and the transverse Doppler shift."""

import json
import math

import numpy as np
import pytest
from PIL import Image

from relview.cli import app as cli
from relview.errors import OutputError, UserError
from relview.figures import layer_maps
from relview.figures import sheets as compare
from relview.kinematics.lorentz import C
from relview.scene.model import Scene

BETA = 0.8
GAMMA = 5.0 / 3.0  # exact for beta = 0.8 (physics.md check value)
DIST = 1000.0  # m, camera to the track: far enough that perspective is negligible
LENGTH, DEPTH, HEIGHT = 1.0, 0.2, 0.2  # m, box along x (the motion), y (towards us), z
WIDTH_PX, HEIGHT_PX = 160, 36
#: metres per pixel chosen so the 1 m box at rest spans 100 pixels
M_PER_PX = 0.01
FOV_DEG = math.degrees(2.0 * math.atan(M_PER_PX * WIDTH_PX / (2.0 * DIST)))


def box_scene(beta=BETA, projection="pinhole", fov=FOV_DEG):
    camera = {"position": [0.0, -DIST, 0.0], "look_at": [0.0, 0.0, 0.0], "fov": fov}
    if projection != "pinhole":
        camera["projection"] = projection
    if projection == "panorama":
        del camera["fov"]
    return Scene.from_dict(
        {
            "scene": {"title": "test crate"},
            "render": {"resolution": [WIDTH_PX, HEIGHT_PX]},
            "camera": camera,
            "body": [
                {
                    "name": "crate",
                    "shape": "box",
                    "size": [LENGTH, DEPTH, HEIGHT],
                    "motion": {"beta": [beta, 0.0, 0.0], "position": [0.0, 0.0, 0.0]},
                    "surface": {"color": [0.8, 0.6, 0.3]},
                }
            ],
        }
    )


def width_px(frame, body=0) -> int:
    """Body pixels in the middle image row (the box's width across the view)."""
    mask = frame.layers["body"] == body
    return int(mask[HEIGHT_PX // 2].sum())


@pytest.fixture(scope="module")
def sheet_now():
    return compare.compare_sheet(
        box_scene(), time=0.0, panels=("rest", "measured", "photograph"), framing="scene"
    )


def test_measured_panel_is_lorentz_contracted(sheet_now):
    rest = width_px(sheet_now.panel("rest").frame)
    measured = width_px(sheet_now.panel("measured").frame)
    # the rest box spans L / (m per pixel) = 100 pixels (pinhole geometry, see below)
    assert abs(rest - LENGTH / M_PER_PX) <= 1
    # Lorentz-FitzGerald contraction: L = L0 / gamma = 0.6 L0 at beta = 0.8 (physics.md)
    assert abs(measured - LENGTH / GAMMA / M_PER_PX) <= 1
    assert measured / rest == pytest.approx(1.0 / GAMMA, abs=0.02)
    # the height across the motion is not contracted (Lorentz transformation, y' = y)
    col_rest = (sheet_now.panel("rest").frame.layers["body"][:, WIDTH_PX // 2] == 0).sum()
    col_meas = (sheet_now.panel("measured").frame.layers["body"][:, WIDTH_PX // 2] == 0).sum()
    assert col_rest == col_meas == pytest.approx(HEIGHT / M_PER_PX, abs=1)


def test_photograph_differs_and_shows_the_retarded_box(sheet_now):
    # At t = 0 the light reaching the camera left when the box was far behind: for a point
    # abreast at the exposure (w = camera - point, beta.w = 0) the retarded-time quadratic
    # (1 - b^2) tau^2 - 2 (beta.w) tau - w.w = 0 gives tau = gamma d, so the box is drawn
    # beta gamma d = 1333 m to the left, far outside this 1.6 m wide view.
    photo = sheet_now.panel("photograph").frame
    assert (photo.layers["body"] == 0).sum() == 0
    assert width_px(sheet_now.panel("measured").frame) > 50
    # Expose when the light from the centre left it abreast of the camera (emission at
    # x = 0, t = 0): the box is then seen at right angles at emission, and Terrell (1959,
    # Phys. Rev. 116, 1041) gives a rotated look: its side face L / gamma wide plus its
    # trailing face beta * depth wide.
    later = compare.compare_sheet(
        box_scene(), time=DIST / C, panels="photograph,measured", framing="scene"
    )
    seen = width_px(later.panel("photograph").frame)
    assert abs(seen - (LENGTH / GAMMA + BETA * DEPTH) / M_PER_PX) <= 1.5
    assert (later.panel("measured").frame.layers["body"] == 0).sum() == 0  # 800 m ahead now


def test_scale_bar_is_pinhole_geometry(sheet_now):
    cam = box_scene().camera
    # pinhole: an image plane at focal length f = W / (2 tan(fov/2)) pixels maps a length
    # L at depth d to f L / d pixels, so metres per pixel = 2 d tan(fov/2) / W
    expected = 2.0 * DIST * math.tan(math.radians(FOV_DEG) / 2.0) / WIDTH_PX
    assert compare.metres_per_pixel(cam, WIDTH_PX, DIST) == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(M_PER_PX, rel=1e-9)
    for p in sheet_now.panels:  # the box centre stays at depth d in every panel
        assert p.scale_distance_m == pytest.approx(DIST, rel=1e-9)
        assert p.metres_per_pixel == pytest.approx(expected, rel=1e-9)
    # the rendered rest box measured with the bar's scale: 1 m within a pixel
    rest = sheet_now.panel("rest")
    assert width_px(rest.frame) * rest.metres_per_pixel == pytest.approx(LENGTH, abs=M_PER_PX)


def test_scale_for_other_projections():
    # fisheye, equidistant: fov/2 spans W/2 pixels, so fov / W radians per pixel; the arc
    # at distance d is d * angle. Panorama: 2 pi / W radians per pixel on the horizon row.
    fish = box_scene(projection="fisheye", fov=120.0).camera
    assert compare.metres_per_pixel(fish, 200, 50.0) == pytest.approx(
        50.0 * math.radians(120.0) / 200
    )
    pano = box_scene(projection="panorama").camera
    assert compare.metres_per_pixel(pano, 360, 10.0) == pytest.approx(10.0 * 2 * math.pi / 360)
    assert math.isnan(compare.metres_per_pixel(pano, 360, -1.0))  # behind a pinhole: no bar


def test_nice_length_is_one_two_five():
    # 1-2-5 series of round bar lengths (common practice for scale bars)
    assert compare.nice_length(0.48) == pytest.approx(0.2)
    assert compare.nice_length(0.5) == pytest.approx(0.5)
    assert compare.nice_length(13.0) == pytest.approx(10.0)
    assert compare.nice_length(2.5e3) == pytest.approx(2e3)


def test_rest_scene_places_bodies_where_they_are():
    scene = box_scene()
    t = 2e-8
    rest = compare.rest_scene(scene, t)
    body = rest.bodies[0]
    # uniform motion: x(t) = x0 + beta c (t - t0) (definition of the worldline)
    assert np.allclose(body.motion.position, [BETA * C * t, 0, 0], rtol=1e-12)
    assert not np.any(body.motion.beta)
    assert not np.any(rest.camera.beta)
    assert rest.camera.time == t


def test_held_exposure_and_each():
    scene = box_scene()
    held = compare.render_panels(scene, 0.0, "rest,measured,beaming-only", framing="scene")
    whites = {p.frame.white for p in held.panels}
    assert len(whites) == 1 and held.white == whites.pop()
    # held exposure is fixed by rest-frame brightness, even when every panel is beamed
    beamed = compare.render_panels(scene, 0.0, "photograph,classical", framing="scene")
    assert beamed.white == pytest.approx(held.panel("rest").frame.white, rel=1e-12)
    each = compare.render_panels(
        scene, DIST / C, "photograph,beaming-only", exposure="each", framing="scene"
    )
    assert each.white is None
    assert all(p.exposure == "each" for p in each.panels)


def test_panel_definitions():
    P = compare.PANELS
    assert not P["measured"].effects.delay and P["measured"].effects.contraction
    assert not (P["measured"].effects.doppler or P["measured"].effects.beaming)
    assert all(vars(P["photograph"].effects).values())
    assert P["classical"].effects.delay and not P["classical"].effects.contraction
    for name, switch in (
        ("delay-only", "delay"),
        ("aberration-only", "aberration"),
        ("doppler-only", "doppler"),
        ("beaming-only", "beaming"),
    ):
        on = {k for k, v in vars(P[name].effects).items() if v}
        assert on == {"contraction", switch}
    assert compare.panel_kind("Delay only").name == "delay-only"
    with pytest.raises(UserError, match="did you mean 'measured'"):
        compare.parse_panels("rest,mesured")
    with pytest.raises(UserError, match="twice"):
        compare.parse_panels("rest,rest")


def test_sheet_files_and_provenance(tmp_path):
    scene = box_scene()
    png = compare.compare_sheet(
        scene, 0.0, "rest,measured", tmp_path / "s.png", resolution=(64, 36)
    )
    assert png.path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    text = Image.open(png.path).text
    assert text["scene_sha256"] == scene.source_hash
    assert "relview_version" in text
    side = json.loads(png.sidecar.read_text())
    assert [p["name"] for p in side["panels"]] == ["rest", "measured"]
    assert side["gamma"] == pytest.approx(GAMMA)
    pdf = compare.compare_sheet(scene, 0.0, "measured", tmp_path / "s.pdf", resolution=(64, 36))
    data = pdf.path.read_bytes()
    assert data[:5] == b"%PDF-"  # PDF header (ISO 32000-1, 7.5.2)
    assert scene.source_hash.encode() in data  # provenance in the document information
    svg = compare.compare_sheet(scene, 0.0, "measured", tmp_path / "s.svg", resolution=(64, 36))
    body = svg.path.read_text()
    assert "<svg" in body and scene.source_hash in body
    # an existing sheet is never replaced without overwrite
    again = compare.compare_sheet(scene, 0.0, "measured", tmp_path / "s.png", resolution=(64, 36))
    assert again.path.name == "s-1.png"
    with pytest.raises(OutputError, match="unknown figure type"):
        compare.compare_sheet(scene, 0.0, "measured", tmp_path / "s.jpg")


def test_doppler_map_shows_the_transverse_shift(tmp_path):
    # Seen at right angles at emission (n perpendicular to beta in S) D = 1 / gamma,
    # the transverse Doppler shift (physics.md check; Rybicki & Lightman eq. 4.11).
    scene = box_scene()
    out, side, values = layer_maps.layer_map(scene, "doppler", tmp_path / "d.png", DIST / C)
    centre = values[HEIGHT_PX // 2, WIDTH_PX // 2]
    assert centre == pytest.approx(1.0 / GAMMA, rel=1e-4)
    assert Image.open(out).text["layer"] == "doppler"
    assert json.loads(side.read_text())["scene_sha256"] == scene.source_hash
    # light delay in ns: the near face is d - depth/2 away, delay = distance / c
    _, _, delay = layer_maps.layer_map(scene, "delay", tmp_path / "t.svg", DIST / C)
    assert np.nanmin(delay) == pytest.approx((DIST - DEPTH / 2) / C * 1e9, rel=1e-6)
    with pytest.raises(UserError, match="unknown layer"):
        layer_maps.layer_map(scene, "speed", tmp_path / "x.png")


def test_compare_command(tmp_path, capsys):
    path = tmp_path / "crate.toml"
    path.write_text(f"""
[render]
resolution = [64, 36]
[camera]
position = [0.0, -{DIST}, 0.0]
look_at = [0.0, 0.0, 0.0]
fov = {FOV_DEG}
[[body]]
name = "crate"
shape = "box"
size = [{LENGTH}, {DEPTH}, {HEIGHT}]
[body.motion]
beta = [{BETA}, 0.0, 0.0]
[body.surface]
color = [0.8, 0.6, 0.3]
""")
    out = tmp_path / "sheet.png"
    code = cli.main(["compare", str(path), "-o", str(out), "--panels", "rest,measured", "--quiet"])
    assert code == 0
    assert out.exists() and (tmp_path / "sheet.png.json").exists()
    code = cli.main(
        [
            "compare",
            str(path),
            "--layer",
            "doppler",
            "--time",
            str(DIST / C),
            "-o",
            str(tmp_path / "map.pdf"),
            "--quiet",
        ]
    )
    assert code == 0 and (tmp_path / "map.pdf").read_bytes()[:5] == b"%PDF-"
    assert cli.main(["compare", str(path), "-o", str(tmp_path / "x.gif"), "--quiet"]) == 2
    assert cli.main(["compare", str(path), "--panels", "nope", "--quiet"]) == 2
    assert "unknown panel" in capsys.readouterr().err
    # effect switches would be silently ignored on a sheet: refused, pointing at --panels
    assert cli.main(["compare", str(path), "--no-doppler", "--quiet"]) == 2
    assert "--panels" in capsys.readouterr().err


def spinning_scene(base_beta=(0.0, 0.0, 0.0), omega=1.0e7):
    return Scene.from_dict(
        {
            "render": {"resolution": [64, 36]},
            "camera": {"position": [0.0, -20.0, 0.0], "look_at": [0.0, 0.0, 0.0], "fov": 60.0},
            "body": [
                {
                    "name": "top",
                    "shape": "box",
                    "size": [2.0, 0.5, 0.5],
                    "motion": {
                        "kind": "spin",
                        "axis": [0.0, 0.0, 1.0],
                        "angular_velocity": omega,
                        "base": {"kind": "uniform", "beta": list(base_beta)},
                    },
                    "surface": {"color": [0.5, 0.5, 0.5]},
                },
                {
                    "name": "probe",
                    "shape": "sphere",
                    "radius": 0.2,
                    "motion": {
                        "kind": "hyperbolic",
                        "acceleration": [1.0e16, 0.0, 0.0],
                        "position": [0.0, 0.0, 3.0],
                    },
                    "surface": {"color": [0.5, 0.5, 0.5]},
                },
            ],
        }
    )


def test_rest_scene_of_spinning_and_accelerated_bodies():
    omega, t = 1.0e7, 5.0e-8  # rad/s, s: 0.5 rad of turn
    # spin about z with its base at rest: the angle is omega t (definition of the spin
    # angle, docs/motion.md), read back through the Euler angles of the rest scene
    rest = compare.rest_scene(spinning_scene(omega=omega), t)
    assert rest.bodies[0].rotation == pytest.approx([0.0, 0.0, math.degrees(omega * t)], abs=1e-9)
    # on a base moving at beta = 0.6 the spin runs on the base's proper time, t / gamma
    # with gamma = 1.25 (time dilation, Einstein 1905)
    moving = compare.rest_scene(spinning_scene(base_beta=(0.6, 0.0, 0.0), omega=omega), t)
    assert moving.bodies[0].rotation[2] == pytest.approx(math.degrees(omega * t / 1.25), rel=1e-9)
    assert moving.bodies[0].motion.position == pytest.approx([0.6 * C * t, 0.0, 0.0])
    # hyperbolic motion from rest at t = 0: x(t) = x0 + sqrt(L^2 + (ct)^2) - L, L = c^2/a
    # (Rindler, Relativity: Special, General and Cosmological, 2006, section 3.8)
    L = C**2 / 1.0e16
    x = math.sqrt(L * L + (C * t) ** 2) - L
    assert moving.bodies[1].motion.position == pytest.approx([x, 0.0, 3.0], rel=1e-12)
    assert not np.any(moving.bodies[1].motion.beta)
