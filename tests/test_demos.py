"""Every demo scene renders at a small size with each of its bodies seen, and the numbers
its comment names hold (Doppler ranges from the doppler layer, faces from rest positions).

Expected values are the demos' own claims, each derived in the comment beside the check
from a published formula; the scenes themselves are invented.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import relview
from relview.figures.sheets import render_panels
from relview.imaging.exposure import clipped_fraction, metered_pixels
from relview.renderer import lamp_pixels
from relview.scene.model import load_scene

SCENES = Path(__file__).resolve().parent.parent / "scenes"
DEMOS = sorted(p.stem for p in SCENES.glob("*.toml"))
SMALL = (96, 54)


def small_frame(name: str, resolution=SMALL):
    scene = load_scene(SCENES / f"{name}.toml")
    if scene.camera.projection == "panorama":
        # a full-sphere frame at 96 px wide is 3.75 deg a pixel: distant beacons fall
        # between pixel centres, so panoramas are checked at their default size
        resolution = None
    return scene, relview.render(scene, resolution=resolution, samples=1)


@pytest.mark.parametrize("name", DEMOS)
def test_every_body_of_every_demo_is_seen(name):
    scene, frame = small_frame(name)
    # the glowing spheres the reader adds for sphere lamps are lamps, not the scene's
    # bodies: a lamp may sit outside the view and still light what is in it
    lamp_glows = {getattr(lamp, "glow_body", -1) for lamp in getattr(scene, "lamps", [])}
    for i, body in enumerate(scene.bodies):
        if i in lamp_glows:
            continue
        assert (frame.layers["body"] == i).sum() >= 1, f"{name}: {body.name} not seen"


def exposure_figures(scene, frame) -> tuple[float, float]:
    """(clipped fraction, median luminance / white) of the lit pixels that are not lamps
    (self-luminous surfaces), or of the lamps when nothing else is lit: the pixels
    automatic exposure meters (relview.imaging.exposure.metered_pixels)."""
    lit = np.any(frame.layers["xyz"] > 0, axis=-1)
    lamps = lamp_pixels(scene, frame.layers["body"], frame.layers["rest_position"])
    pixels, _ = metered_pixels(lit, lamps)
    y = frame.layers["xyz"][..., 1][pixels] / frame.white
    return clipped_fraction(frame.image, pixels), float(np.median(y))


@pytest.mark.parametrize("name", DEMOS)
def test_every_demo_is_exposed_to_read(name):
    # our own standard for the demos: at most 1 % of the lit non-lamp pixels clip (the
    # highlight guard of automatic exposure) and their median is at least 5 % of white
    scene = load_scene(SCENES / f"{name}.toml")
    frame = relview.render(
        scene,
        resolution=(240, 135) if scene.camera.projection != "panorama" else (240, 120),
        samples=1,
    )
    clipped, median = exposure_figures(scene, frame)
    assert clipped <= 0.01 + 1e-9, f"{name}: {clipped:.2%} clipped"
    assert median >= 0.05, f"{name}: median {median:.2%} of white"


@pytest.mark.slow
@pytest.mark.parametrize("name", DEMOS)
def test_compare_sheet_of_every_demo_shows_the_main_body_in_every_panel(name):
    scene = load_scene(SCENES / f"{name}.toml")
    sheet = render_panels(scene, resolution=(96, 54))
    index = scene.body_index(sheet.main_body)
    for panel in sheet.panels:
        seen = (panel.frame.layers["body"] == index).sum()
        assert seen >= 4 and not panel.out_of_view, f"{name}: {panel.title}: {panel.out_of_view}"


def _doppler_of(scene, frame, body):
    d = frame.layers["doppler"][frame.layers["body"] == scene.body_index(body)]
    return float(d.min()), float(d.max())


def test_crate_crossing_is_turned_not_squashed():
    # Terrell (1959), Penrose (1959): seen abreast, a moving cube appears rotated, its
    # trailing face in view and its leading face hidden; light emitted at right angles
    # to the motion has the transverse Doppler factor D = 1/gamma (Rybicki & Lightman 4.11)
    scene, frame = small_frame("crate-crossing", (192, 108))
    crate = frame.layers["body"] == scene.body_index("crate")
    x, y = frame.layers["rest_position"][..., 0], frame.layers["rest_position"][..., 1]
    trailing = crate & (x < -0.999) & (np.abs(y) < 0.9)
    leading = crate & (x > 0.999) & (np.abs(y) < 0.9)
    assert trailing.sum() > 200 and leading.sum() == 0
    d0, d1 = _doppler_of(scene, frame, "crate")
    assert d0 == pytest.approx(0.8, abs=0.02) and d1 == pytest.approx(0.8, abs=0.02)


def test_sphere_flyby_doppler_range_and_round_outline():
    scene, frame = small_frame("sphere-flyby", (192, 108))
    d0, d1 = _doppler_of(scene, frame, "ball")
    assert d0 == pytest.approx(0.29, abs=0.02) and d1 == pytest.approx(0.66, abs=0.02)
    # Penrose (1959): the outline of a sphere stays circular; with a 90 deg pinhole near
    # the view's edge the projection stretches it, so only a rough aspect check here
    rows, cols = np.nonzero(frame.layers["body"] == 0)
    aspect = (np.ptp(cols) + 1) / (np.ptp(rows) + 1)
    assert 0.8 < aspect < 1.25


def test_rolling_wheel_doppler_range():
    scene, frame = small_frame("rolling-wheel", (160, 90))
    d0, d1 = _doppler_of(scene, frame, "wheel")
    assert d0 == pytest.approx(0.32, abs=0.04) and d1 == pytest.approx(1.08, abs=0.04)
    assert _doppler_of(scene, frame, "road") == pytest.approx((1.0, 1.0))


def test_microwave_headwind_temperatures():
    # a blackbody sky seen from a camera moving at beta is a blackbody at D T with
    # D = sqrt((1 + beta)/(1 - beta)) head-on, its inverse astern (Peebles & Wilkinson
    # 1968); T = 2.7255 K (Fixsen 2009)
    scene = load_scene(SCENES / "microwave-headwind.toml")
    frame = relview.render(scene, resolution=(96, 48))
    t = frame.layers["temperature"]
    head = math.sqrt(1.9 / 0.1)
    assert np.nanmax(t) == pytest.approx(2.7255 * head, rel=0.02)
    assert np.nanmin(t) == pytest.approx(2.7255 / head, rel=0.02)
    assert 2.7255 * head == pytest.approx(11.9, abs=0.05)  # the number in the comment


def test_lit_crate_crossing_doppler_in_and_out():
    # a lamp at rest, at unit direction d: its light reaches a body moving at beta along
    # x with D_in = gamma (1 + beta d_x) (the Doppler factor of a receiver, Rybicki &
    # Lightman 4.11); light leaving at right angles to the motion: D_out = 1/gamma
    scene, frame = small_frame("lit-crate-crossing", (192, 108))
    crate = frame.layers["body"] == scene.body_index("crate")
    d = np.array([-0.8, -0.5, 0.33]) / np.linalg.norm([-0.8, -0.5, 0.33])
    d_in = 1.25 * (1 + 0.6 * d[0])
    assert np.nanmax(np.abs(frame.layers["incident_doppler"][crate] - d_in)) < 1e-6
    assert round(d_in, 2) == 0.65 and round(d_in * 0.8, 2) == 0.52  # the comment's numbers
    total = frame.layers["total_doppler"][crate]
    assert np.nanmin(total) == pytest.approx(0.52, abs=0.02)
    assert np.nanmax(total) == pytest.approx(0.52, abs=0.02)
    # Terrell-Penrose: the trailing face in view, lit; the leading face hidden
    x = frame.layers["rest_position"][..., 0]
    trailing = crate & (x < -0.999)
    assert trailing.sum() > 100 and (crate & (x > 0.999)).sum() == 0
    assert np.all(frame.layers["xyz"][trailing][:, 1] > 0)


def test_orchard_cruise_aberration_and_doppler():
    # a camera at beta sees a source at scene angle theta from its velocity at cos
    # theta' = (cos theta + beta)/(1 + beta cos theta) (aberration, Rybicki & Lightman
    # 4.8): the post abeam of the camera (theta = 90 deg) at arccos(0.8) = 36.9 deg;
    # straight ahead D = sqrt((1 + beta)/(1 - beta)) = 3
    scene = load_scene(SCENES / "orchard-cruise.toml")
    probe = relview.probe(scene, "posts", [0.0, 6.0, 2.0])
    assert math.degrees(math.atan2(abs(probe.direction[1]), probe.direction[0])) == pytest.approx(
        math.degrees(math.acos(0.8)), abs=0.3
    )
    frame = relview.render(scene, resolution=(160, 90), samples=1)
    assert np.nanmax(frame.layers["doppler"]) == pytest.approx(3.0, abs=0.02)


def test_orchard_launch_reaches_the_cruise_speed():
    # hyperbolic motion: gamma(t) = sqrt(1 + (a t / c)^2) (Rindler, Relativity: Special,
    # General and Cosmological, 2006, sec. 3.8); at a = 3e15 m/s2, t = 133.33 ns: 0.8c,
    # so the view straight ahead shows D = sqrt(1.8/0.2) = 3
    scene = load_scene(SCENES / "orchard-launch.toml")
    c = 299_792_458.0
    u = 3.0e15 * scene.camera.time / c
    assert u / math.sqrt(1 + u * u) == pytest.approx(0.8, abs=1e-3)
    frame = relview.render(scene, resolution=(160, 90), samples=1)
    assert np.nanmax(frame.layers["doppler"]) == pytest.approx(3.0, abs=0.03)
