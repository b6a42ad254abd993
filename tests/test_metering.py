"""Metered automatic exposure (relview.imaging.exposure, render.metering).

Outside references: Reinhard, Stark, Shirley and Ferwerda, "Photographic Tone
Reproduction for Digital Images", SIGGRAPH 2002, eqs. 1-2 (log-average luminance
placed at the key a = 0.18, middle grey); the highlight guard of at most 1 % clipped
metered pixels is our own rule (common practice: highlight-weighted metering);
IEC 61966-2-1 (sRGB matrix: a D65 grey of luminance Y has all channels Y).
"""

from __future__ import annotations

import numpy as np
import pytest

from relview.errors import SceneError
from relview.imaging import exposure
from relview.renderer import lamp_pixels, render
from tests.conftest import dict_scene

# D65 white point x = 0.3127, y = 0.3290 (IEC 61966-2-1 / CIE 15) as XYZ with Y = 1
D65_XYZ = np.array([0.3127 / 0.3290, 1.0, (1.0 - 0.3127 - 0.3290) / 0.3290])


def grey_image(y: np.ndarray) -> np.ndarray:
    return D65_XYZ * np.asarray(y, float)[..., None]


# ------------------------------------------------------------------ the statistic


def test_key_places_log_average_at_middle_grey():
    # Reinhard et al. 2002 eq. 1: Lavg = exp(mean(ln L)); eq. 2 maps Lavg to a = 0.18.
    # Half the pixels at 1 cd/m2, half at 4: Lavg = 2, so W = 2 / 0.18; the guard (the
    # 99th-percentile order statistic, 4 cd/m2) is lower.
    y = np.array([1.0, 4.0] * 50)
    assert exposure.auto_white(y) == pytest.approx(2.0 / 0.18, rel=1e-12)
    assert exposure.METERING_KEY == 0.18


def test_guard_uses_the_brightest_channel():
    # A saturated red pixel clips in R before its luminance reaches white: linear sRGB
    # (50, 0, 0) has luminance 50 * 0.2126 = 10.63 (IEC 61966-2-1). 97 D65 greys at
    # 1 cd/m2 and 3 such reds (3 % > 1 %): the key gives 10.63**0.03 / 0.18 = 5.96; the
    # guard, on the brightest channel, lifts W to 50 so that R <= 1. On luminance alone
    # it would stop at 10.63 and the reds would clip.
    from relview.light.spectrum import linear_srgb_to_xyz

    red = np.asarray(linear_srgb_to_xyz(np.array([[50.0, 0.0, 0.0]])))[0]
    assert red[1] == pytest.approx(50.0 * 0.2126, rel=1e-3)
    img = grey_image(np.ones(100))
    img[:3] = red
    white = exposure.exposure_white(img.reshape(10, 10, 3), None, "auto")
    assert white == pytest.approx(50.0, rel=1e-6)
    assert exposure.clipped_fraction(exposure.expose(img, white)) == 0.0


def test_lamps_are_left_out_and_may_clip():
    # 96 % of the lit pixels a D65 grey of 10 cd/m2, 4 % a lamp at 1e6 cd/m2 (the case
    # of the issue: a lamp sphere covering about 4 % of the lit pixels).
    y = np.full((10, 10), 10.0)
    lamps = np.zeros((10, 10), bool)
    lamps[:2, :2] = True
    y[lamps] = 1e6
    img = grey_image(y)
    lit = np.ones((10, 10), bool)
    white = exposure.exposure_white(img, lit, "auto", lamps)
    assert white == pytest.approx(10.0 / 0.18, rel=1e-12)
    image = exposure.expose(img, white)
    assert exposure.clipped_fraction(image, lit & ~lamps) == 0.0
    assert exposure.clipped_fraction(image, lamps) == 1.0
    # without the lamp mask the lamp is metered and the guard lifts W to it: the grey
    # surface would sit 1e5 below white
    assert exposure.exposure_white(img, lit, "auto") == pytest.approx(1e6, rel=1e-12)


def test_lamps_only_are_metered_themselves():
    img = grey_image(np.full((4, 4), 300.0))
    lamps = np.ones((4, 4), bool)
    pixels, what = exposure.metered_pixels(None, lamps)
    assert what == "lamp" and pixels.all()
    assert exposure.exposure_white(img, None, "auto", lamps) == pytest.approx(300.0 / 0.18)


def test_lock_pools_non_lamp_pixels_over_frames():
    a = grey_image(np.full((3, 3), 10.0))
    b = grey_image(np.full((3, 3), 40.0))
    lamp_b = np.zeros((3, 3), bool)
    lamp_b[0, 0] = True
    b[0, 0] = D65_XYZ * 1e9
    lock = exposure.ExposureLock("auto")
    white = lock.lock_from([a, b], None, [None, lamp_b])
    # log-average of 9 pixels at 10 and 8 at 40 cd/m2, the lamp left out
    want = np.exp((9 * np.log(10.0) + 8 * np.log(40.0)) / 17) / 0.18
    assert white == pytest.approx(want, rel=1e-12)
    with pytest.raises(ValueError, match="lamp masks"):
        exposure.ExposureLock("auto").lock_from([a, b], None, [None])


def test_clipped_fraction_counts_channels_above_one():
    image = np.zeros((2, 2, 3))
    image[0, 0] = (1.5, 0.2, 0.2)  # one channel over
    image[0, 1] = (1.0, 1.0, 1.0)  # exactly white: not clipped
    assert exposure.clipped_fraction(image) == 0.25
    assert exposure.clipped_fraction(image, np.array([[True, False], [False, False]])) == 1.0
    assert exposure.clipped_fraction(image, np.zeros((2, 2), bool)) == 0.0


# ------------------------------------------------------------------ in a rendered scene

CAMERA = {"position": [0.0, 0.0, 0.0], "look_at": [0.0, 10.0, 0.0], "fov": 60.0}
WALL = {
    "name": "wall",
    "shape": "plane",
    "size": [30.0, 30.0],
    "rotation": [90.0, 0.0, 0.0],
    "motion": {"position": [0.0, 10.0, 0.0]},
    "surface": {"color": [0.5, 0.5, 0.5], "lamp": "D65", "luminance": 100.0},
}
BULB = {
    "name": "bulb",
    "shape": "sphere",
    "radius": 0.7,
    "motion": {"position": [0.0, 5.0, 0.0]},
    "surface": {"blackbody": 6000.0},
}


def lamp_scene(**render):
    return dict_scene(CAMERA, [WALL, BULB], render={"resolution": [64, 48], **render})


def test_render_meters_the_wall_not_the_lamp():
    scene = lamp_scene()
    frame = render(scene)
    body = frame.layers["body"]
    lamps = lamp_pixels(scene, body, frame.layers["rest_position"])
    assert np.array_equal(lamps, body == 1)  # the blackbody sphere, nothing else
    share = lamps.mean()
    assert 0.02 < share < 0.08  # the bulb covers a few % of the frame
    wall_y = frame.layers["xyz"][..., 1][body == 0]
    # the uniform wall sits at middle grey (Reinhard et al. 2002 key 0.18)
    assert np.median(wall_y) / frame.white == pytest.approx(0.18, rel=1e-6)
    meta = frame.metadata
    assert meta["metering"] == "frame: non-lamp pixels metered"
    assert float(meta["clipped_fraction"]) == 0.0
    assert float(meta["clipped_fraction_lamps"]) > 0.9  # a 6000 K lamp burns out


def test_metering_one_named_body_and_fixed_exposure():
    frame = render(lamp_scene(metering="body", metering_body="bulb"))
    # the named body is a lamp and nothing else is in its region: it is metered itself
    assert frame.metadata["metering"] == "body bulb: lamp pixels metered"
    bulb_y = frame.layers["xyz"][..., 1][frame.layers["body"] == 1]
    assert np.exp(np.mean(np.log(bulb_y))) / frame.white <= 0.18 * (1 + 1e-9)
    fixed = render(lamp_scene(exposure=50.0))
    assert fixed.white == 50.0 and fixed.metadata["metering"] == "none (fixed white)"


@pytest.mark.parametrize(
    "render_table, match",
    [
        (
            {"metering": "spot"},
            r"\[render\] metering.*did you mean|Choose one of: frame, bodies, body",
        ),
        ({"metering": "body"}, r"needs metering_body"),
        ({"metering": "body", "metering_body": "bulbb"}, r'metering_body.*did you mean "bulb"'),
        ({"metering_body": "bulb"}, r'goes with metering = "body"'),
        ({"metering": 3}, r"expected a string"),
    ],
)
def test_metering_keys_are_validated(render_table, match):
    with pytest.raises(SceneError, match=match):
        lamp_scene(**render_table)
