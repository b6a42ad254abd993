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
    for i, body in enumerate(scene.bodies):
        assert (frame.layers["body"] == i).sum() >= 1, f"{name}: {body.name} not seen"


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
